"""Pure checks on proposed tool arguments: one shape for all examples, every stated datum copied, no answer
leaked; and the JSON Schema inferred from argument objects."""

from __future__ import annotations

import json
import keyword
import re
from typing import Any

_NUM = re.compile(r"-?\d+(?:\.\d+)?")
_STOP = {
    "a", "an", "the", "which", "what", "when", "where", "who", "whose", "how", "is", "are", "was", "does", "do",
    "did", "if", "at", "on", "in", "of", "each", "every", "all", "find", "give", "after", "before", "then", "from",
    "to", "between", "and", "or", "with", "by", "for", "it", "its", "they", "their", "there", "this", "that",
    "these", "those", "starting", "counting", "excluding", "including", "not", "no", "yes", "as", "we", "our",
    "us", "you", "your", "please", "tell", "me", "list", "sort", "put", "order", "first", "last", "next", "one",
    "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten", "today", "tomorrow", "monday", "tuesday",
    "wednesday", "thursday", "friday", "saturday", "sunday", "january", "february", "march", "april", "may",
    "june", "july", "august", "september", "october", "november", "december", "iso", "here", "now", "can",
    "should", "would", "will", "has", "have", "had", "be", "been", "being", "so", "but", "also", "only",
    "mondays", "tuesdays", "wednesdays", "thursdays", "fridays", "saturdays", "sundays", "weekends", "minutes",
}

HARD = ("expected ", "every argument object", "do not share one shape", "the answer appears", "most numbers")


def is_hard(problem: str) -> bool:
    """Problems that rule a proposal out; the rest (a datum not copied, copied twice) only rank it lower,
    since questions may carry details the answer does not depend on, and held-out verification decides."""
    return any(h in problem for h in HARD)


def number_list(text: str) -> list[float]:
    """Every number written in the text, in order, repeats kept ('08:30' gives 8 and 30)."""
    out = []
    for m in _NUM.finditer(text):
        tok = m.group(0)
        if tok.startswith("-") and (m.start() == 0 or text[m.start() - 1].isalnum() or text[m.start() - 1] in "-:"):
            tok = tok[1:]
        out.append(float(tok))
    return out


def numbers_in(text: str) -> set[float]:
    """Every number written in the text (so '08:30' gives 8 and 30, '2026-03-02' gives 2026, 3 and 2)."""
    return set(number_list(text))


def _arg_numbers(value: Any) -> list[float]:
    """Numbers in an argument object's values (keys are names, not data)."""
    if isinstance(value, bool) or value is None:
        return []
    if isinstance(value, (int, float)):
        return [float(value)]
    if isinstance(value, str):
        return number_list(value)
    if isinstance(value, list):
        return [n for v in value for n in _arg_numbers(v)]
    if isinstance(value, dict):
        return [n for v in value.values() for n in _arg_numbers(v)]
    return []


def invented_numbers(question: str, arguments: Any) -> list[float]:
    """Numbers in an argument object that the question does not state (sorted, each once)."""
    return sorted(set(_arg_numbers(arguments)) - numbers_in(question))


def _flatten(value: Any) -> str:
    return json.dumps(value, ensure_ascii=False)


def key_tokens(question: str) -> set[str]:
    """Names, codes and quoted strings a question states: capitalised words that are not sentence openers
    or common words, tokens mixing letters and digits, and anything in quotes."""
    tokens: set[str] = set()
    for m in re.finditer(r"[\"“']([^\"”']{1,40})[\"”']", question):
        if " " not in m.group(1).strip() or len(m.group(1)) < 25:
            tokens.add(m.group(1).strip())
    for m in re.finditer(r"\b[A-Za-z][A-Za-z0-9]*(?:-[A-Za-z0-9]+)*\b", question):
        word = m.group(0)
        if word.lower() in _STOP:
            continue
        before = question[: m.start()].rstrip()
        sentence_start = not before or before[-1] in ".?!:"
        mixed = bool(re.search(r"\d", word)) and bool(re.search(r"[A-Za-z]", word))
        if mixed or (word[0].isupper() and not sentence_start) or (word.isupper() and len(word) > 1):
            tokens.add(word)
    return tokens


def _token_present(token: str, args_text: str, args_numbers: set[float]) -> bool:
    low = args_text.lower()
    if token.lower() in low:
        return True
    parts = re.findall(r"[A-Za-z]+|\d+", token)
    return bool(parts) and all((p.lower() in low) if p.isalpha() else (float(p) in args_numbers) for p in parts)


def shape_of(value: Any) -> Any:
    """The structure of a JSON value with the data left out; int and float both count as number. Objects in
    one list may differ in keys (clues of several kinds, say): the list's item shape is their union."""
    if isinstance(value, bool):
        return "boolean"
    if isinstance(value, (int, float)):
        return "number"
    if isinstance(value, str):
        return "string"
    if value is None:
        return "null"
    if isinstance(value, list):
        item: Any = None
        for v in value:
            sh = shape_of(v)
            item = sh if item is None else _merge(item, sh, loose=True)
            if item is None:
                return ["mixed"]
        return [item] if item is not None else []
    if isinstance(value, dict):
        return {k: shape_of(v) for k, v in value.items()}
    return "unknown"


def _merge(a: Any, b: Any, loose: bool = False) -> Any | None:
    """Two shapes as one (an empty list takes the other's item shape; with `loose`, objects take the union of
    their keys); None when they differ."""
    if a == b:
        return a
    if isinstance(a, list) and isinstance(b, list):
        if not a or not b:
            return a or b
        if a == ["mixed"] or b == ["mixed"]:
            return None
        m = _merge(a[0], b[0], loose=True)
        return None if m is None else [m]
    if isinstance(a, dict) and isinstance(b, dict) and (loose or a.keys() == b.keys()):
        out = {}
        for k in list(a) + [k for k in b if k not in a]:
            if k in a and k in b:
                m = _merge(a[k], b[k], loose)
                if m is None:
                    return None
                out[k] = m
            else:
                out[k] = a.get(k, b.get(k))
        return out
    return None


def common_shape(objects: list[Any]) -> Any | None:
    """The one shape all argument objects share (same top-level keys), or None when they differ."""
    if not objects:
        return None
    shape = shape_of(objects[0])
    for obj in objects[1:]:
        shape = _merge(shape, shape_of(obj))
        if shape is None:
            return None
    return shape


_PATTERNS = [(r"^\d{4}-\d{2}-\d{2}$", "^[0-9]{4}-[0-9]{2}-[0-9]{2}$"), (r"^\d{1,2}:\d{2}$", "^[0-9]{1,2}:[0-9]{2}$")]


def _collect(values: list[Any], path: tuple) -> list[Any]:
    out = values
    for step in path:
        nxt = []
        for v in out:
            if step == "[]":
                nxt.extend(v if isinstance(v, list) else [])
            elif isinstance(v, dict) and step in v:
                nxt.append(v[step])
        out = nxt
    return out


def infer_schema(objects: list[dict[str, Any]]) -> dict[str, Any]:
    """A strict JSON Schema (all keys required, nothing extra) that every argument object satisfies;
    integers stay integers, and strings that all look like dates or times get that pattern."""
    shape = common_shape(objects)
    if not isinstance(shape, dict):
        raise ValueError("argument objects do not share one object shape")

    def build(sh: Any, path: tuple) -> dict[str, Any]:
        if isinstance(sh, dict):
            present = [v for v in _collect(objects, path) if isinstance(v, dict)]
            required = [k for k in sh if all(k in v for v in present)]
            return {"type": "object", "properties": {k: build(v, path + (k,)) for k, v in sh.items()},
                    "required": required, "additionalProperties": False}
        if isinstance(sh, list):
            return {"type": "array", "items": build(sh[0], path + ("[]",)) if sh else {"type": "string"}}
        vals = _collect(objects, path)
        if sh == "number":
            return {"type": "integer"} if all(isinstance(v, int) for v in vals) else {"type": "number"}
        if sh == "string":
            for rx, pattern in _PATTERNS:
                if vals and all(re.match(rx, v) for v in vals):
                    return {"type": "string", "pattern": pattern}
            return {"type": "string"}
        return {"type": sh}

    return build(shape, ())


def shape_problems(questions: list[str], answers: list[Any], objects: list[Any]) -> list[str]:
    """Everything wrong with a proposed set of argument objects (empty when they pass)."""
    problems: list[str] = []
    if len(objects) != len(questions):
        return [f"expected {len(questions)} argument objects, got {len(objects)}"]
    if not all(isinstance(o, dict) and o for o in objects):
        return ["every argument object must be a non-empty JSON object"]
    if common_shape(objects) is None:
        problems.append("the argument objects do not share one shape (same keys, same types)")
    stated = sum(len(numbers_in(q)) for q in questions)
    left_out = sum(len(numbers_in(q) - numbers_in(_flatten(o))) for q, o in zip(questions, objects))
    if stated >= 4 and left_out * 2 > stated:  # a summary of the questions, not a copy of their data
        problems.append(f"most numbers the questions state are missing ({left_out} of {stated})")
    # a name written in every question alike (a place, an office) is the setting, not data
    setting = set.intersection(*(key_tokens(q) for q in questions)) if len(questions) > 1 else set()
    for i, (q, ans, obj) in enumerate(zip(questions, answers, objects), 1):
        text = _flatten(obj)
        arg_nums = numbers_in(text)
        missing_n = sorted(numbers_in(q) - arg_nums)
        if missing_n:
            problems.append(f"question {i}: numbers {', '.join(f'{n:g}' for n in missing_n)} are missing")
        tokens = key_tokens(q) - setting
        missing_t = sorted(t for t in tokens if not _token_present(t, text, arg_nums))
        if missing_t:
            problems.append(f"question {i}: {', '.join(missing_t)} missing")
        stated = {t: (_mentions(t, q), _mentions(t, text)) for t in tokens}  # (in the question, copied)
        short = sorted(t for t, (n_q, n_a) in stated.items() if t not in missing_t and n_a < n_q)
        if short:  # a name the question states in several facts (a swap, a clue) must be copied for each
            problems.append(f"question {i}: {', '.join(short)} stated more often than copied")
        extra = sorted(t for t, (n_q, n_a) in stated.items() if n_a > n_q)
        if extra:  # e.g. an "asked" field that repeats one of the items when the question asks about all
            problems.append(f"question {i}: {', '.join(extra)} copied more often than stated")
        q_counts: dict[float, int] = {}
        for n in number_list(q):
            q_counts[n] = q_counts.get(n, 0) + 1
        a_counts: dict[float, int] = {}
        for n in _arg_numbers(obj):
            a_counts[n] = a_counts.get(n, 0) + 1
        leaked = _leaks(q, ans, text, arg_nums)
        invented = [n for n in invented_numbers(q, obj)
                    if not (leaked and isinstance(ans, (int, float)) and n == float(ans))]
        if invented:
            problems.append(f"question {i}: numbers {', '.join(f'{n:g}' for n in invented)} are not in the question")
        doubled = sorted(n for n, c in a_counts.items() if n in q_counts and c > q_counts[n])
        if doubled:
            problems.append(f"question {i}: numbers {', '.join(f'{n:g}' for n in doubled)} are copied more often "
                            f"than the question states them")
        if leaked:
            problems.append(f"question {i}: the answer appears in the arguments")
    return problems


def value_paths(value: Any, path: str = "") -> Any:
    """(path, value) for every value inside an argument object; list items share the path `key[]`."""
    yield path, value
    if isinstance(value, dict):
        for k, v in value.items():
            yield from value_paths(v, f"{path}.{k}" if path else k)
    elif isinstance(value, list):
        for v in value:
            yield from value_paths(v, f"{path}[]")


def answer_paths(objects: list[Any], answers: list[Any]) -> list[str]:
    """Where a text answer is found among the arguments in every example (e.g. `crew[].name`: the answer is
    one of the crew's names); places that list each value once (the items themselves, not events about them)
    first, then shortest first. Empty when answers are not texts or no place fits every example."""
    common: set[str] | None = None
    for obj, ans in zip(objects, answers):
        if not isinstance(ans, str) or len(ans.strip()) < 2:
            return []
        want = ans.strip().lower()
        found = {p for p, v in value_paths(obj) if p and isinstance(v, str) and v.strip().lower() == want}
        common = found if common is None else common & found

    def repeats(path: str) -> bool:
        for obj in objects:
            values = [str(v).strip().lower() for p, v in value_paths(obj) if p == path]
            if len(values) != len(set(values)):
                return True
        return False

    return sorted(common or (), key=lambda p: (repeats(p), len(p), p))


def _mentions(token: str, text: str) -> int:
    """How often a name or code occurs in a text as a whole word, in any case."""
    return len(re.findall(rf"(?<![A-Za-z0-9]){re.escape(token)}(?![A-Za-z0-9])", text, re.IGNORECASE))


def _leaks(question: str, answer: Any, args_text: str, arg_nums: set[float]) -> bool:
    if isinstance(answer, bool) or answer is None:
        return False
    if isinstance(answer, (int, float)):
        return float(answer) in arg_nums and float(answer) not in numbers_in(question)
    text = str(answer).strip()
    if text.lower() in {"yes", "no", "true", "false"}:
        said = re.search(rf"\b{text.lower()}\b", question.lower())
        return not said and f'"{text.lower()}"' in args_text.lower()
    if len(text) < 2:
        return False
    if re.fullmatch(r"-?\d+(\.\d+)?", text):
        return _leaks(question, float(text), args_text, arg_nums)
    return text.lower() in args_text.lower() and text.lower() not in question.lower()


def _join(pieces: Any) -> dict[str, Any] | None:
    """Pieces of one argument object (dicts with disjoint keys) as one object; None if they are not that."""
    if not isinstance(pieces, list) or not pieces or not all(isinstance(p, dict) for p in pieces):
        return None
    out: dict[str, Any] = {}
    for p in pieces:
        if out.keys() & p.keys():
            return None
        out.update(p)
    return out


def merge_pieces(n_questions: int, objects: list[Any]) -> list[Any]:
    """Join argument objects written in pieces: small builders sometimes give one question's data as several
    one-field objects, nested in a list or one after another, instead of one object. Joined only when that is
    unambiguous (a list of pieces per question; or the same run of keys repeated once per question)."""
    if len(objects) == n_questions and all(isinstance(o, list) for o in objects):
        joined = [_join(o) for o in objects]
        return joined if all(j is not None for j in joined) else objects
    if n_questions and len(objects) > n_questions and len(objects) % n_questions == 0 \
            and all(isinstance(o, dict) for o in objects):
        k = len(objects) // n_questions
        groups = [objects[i * k:(i + 1) * k] for i in range(n_questions)]
        if len({tuple(tuple(sorted(p)) for p in g) for g in groups}) == 1:
            joined = [_join(g) for g in groups]
            if all(j is not None for j in joined):
                return joined
    return objects


def prune_extras(questions: list[str], answers: list[Any], objects: list[Any]) -> list[Any]:
    """Drop top-level fields whose removal leaves fewer problems (a value copied twice, a number invented):
    small builders often add one such field to an otherwise right design, and dropping it is mechanical."""
    if not all(isinstance(o, dict) for o in objects) or len(objects) != len(questions):
        return objects
    best, best_n = objects, len(shape_problems(questions, answers, objects))
    while best_n:
        for key in list(best[0]):
            trial = [{k: v for k, v in o.items() if k != key} for o in best]
            if not all(trial):
                continue
            n = len(shape_problems(questions, answers, trial))
            if n < best_n:
                best, best_n = trial, n
                break
        else:
            break
    return best


def _unify_level(objects: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Rename keys so that objects name one field alike: an object whose keys differ from the most common key
    set only in names, each odd key matching exactly one missing key by the shape of its value, takes the
    common names (order kept as in the common set)."""
    counts: dict[tuple, int] = {}
    for o in objects:
        counts[tuple(sorted(o))] = counts.get(tuple(sorted(o)), 0) + 1
    common = max(counts, key=lambda k: (counts[k], -len(k)))
    if counts[common] < 2:  # no key set shared: the first object's names, if every match is unambiguous
        common = tuple(sorted(objects[0]))
    model = next(o for o in objects if tuple(sorted(o)) == common)
    out = []
    for o in objects:
        odd = [k for k in o if k not in common]
        missing = [k for k in model if k not in o]
        if not odd or len(odd) != len(missing) or len(o) != len(model):
            out.append(o)
            continue
        rename: dict[str, str] = {}
        for k in odd:
            fits = [m for m in missing if m not in rename.values()
                    and _merge(shape_of(o[k]), shape_of(model[m]), loose=True) is not None]
            if len(fits) != 1:
                rename = {}
                break
            rename[k] = fits[0]
        if not rename:
            out.append(o)
            continue
        renamed = {rename.get(k, k): v for k, v in o.items()}
        out.append({k: renamed[k] for k in model})
    return out


def unify_keys(objects: list[Any]) -> list[Any]:
    """Mechanical repair: the same field named differently in different questions (one question's list under
    one word, the next under another) gets one name; also for the objects inside lists. Only where the match is
    unambiguous; anything else is left for the shape checks to judge."""
    if len(objects) < 2 or not all(isinstance(o, dict) and o for o in objects):
        return objects
    objects = _unify_level(objects)
    keys = {k for o in objects for k in o}
    for key in keys:
        items = [(i, j) for i, o in enumerate(objects) if isinstance(o.get(key), list)
                 for j, it in enumerate(o[key]) if isinstance(it, dict) and it]
        if len(items) < 2:
            continue
        fixed = _unify_level([objects[i][key][j] for i, j in items])
        objects = [dict(o) for o in objects]
        for (i, j), it in zip(items, fixed):
            objects[i][key] = list(objects[i][key])
            objects[i][key][j] = it
    return objects


def parameter_name(key: str, taken: set[str]) -> str:
    """A top-level key as a Python parameter name: snake_case word characters, never a keyword, never starting
    with a digit or an underscore (the screen refuses those), and not one already taken."""
    name = re.sub(r"\W+", "_", str(key).strip().lower()).strip("_") or "value"
    if name[0].isdigit():
        name = "n_" + name
    if keyword.iskeyword(name) or keyword.issoftkeyword(name):
        name += "_value"
    base, i = name, 2
    while name in taken:
        name, i = f"{base}_{i}", i + 1
    return name


def parameter_keys(objects: list[Any]) -> list[Any]:
    """Mechanical repair: every top-level key becomes a valid Python parameter name (`solve(**arguments)`), the
    same renaming in every object. A tuning-half design keyed the unreadable digit under "?" and another under
    " scratched": every draft then failed with a syntax or argument error before it computed anything."""
    if not all(isinstance(o, dict) for o in objects):
        return objects
    keys: list[str] = []
    for o in objects:
        keys += [k for k in o if k not in keys]
    def valid(k: str) -> bool:
        return k.isidentifier() and not keyword.iskeyword(k) and not k.startswith("_")

    if all(valid(k) for k in keys):
        return objects
    taken = {k for k in keys if valid(k)}  # valid names stay as they are
    rename = {k: k for k in taken}
    for k in keys:
        if k not in rename:
            rename[k] = parameter_name(k, taken)
            taken.add(rename[k])
    return [{rename[k]: v for k, v in o.items()} for o in objects]
