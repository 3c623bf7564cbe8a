"""Sentence patterns learned from the executor's own fills: a path that fills a tool's arguments without a model.

Questions of one family repeat their phrasings; only the values change. After the executor fills a question's
arguments (and they passed the schema check, the fit check and the tool run), each sentence of the question
becomes a pattern: its text with the spans the arguments copied (numbers, dates, clock times, names) replaced by
typed slots, each slot mapped to the argument path it fills. A later question whose every sentence matches a
pattern gets its arguments assembled from the slots.

Lists are handled in two clean shapes only: a run of values in one sentence joined by ", " or " and " that is a
whole list of scalars (a list slot), and a sentence that holds every value of one list item and nothing else (an
item pattern: each sentence that matches it adds one item, in sentence order). Anything else (two items in one
sentence, an item spread over sentences, lists inside list items, a value the question states twice, a value
the question does not state) is not learned, and such questions stay with the executor.

Guards, all here and pure: a pattern is used only once it has reproduced the executor's arguments on
`CONFIRMATIONS` questions; whenever a pattern's values disagree with the executor's (while learning, or on a
sampled cross-check) it is retired for good. The book of one tool is a pydantic record; `patternstore.py` keeps
it on disk."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import re
from dataclasses import dataclass, field
from typing import Any, Literal

from pydantic import BaseModel, Field

from .guess import shape

CONFIRMATIONS = 2  # questions on which a pattern must have reproduced the executor's arguments before use
MAX_PATTERNS = 2000  # per tool; past it the oldest patterns not yet confirmed are dropped
SEPARATORS = (", and ", ", ", " and ")  # between the items of a list slot

Kind = Literal["int", "number", "date", "time", "text"]
_KIND_RX = {"int": r"-?\d+", "number": r"-?\d+(?:\.\d+)?", "date": r"\d{4}-\d{2}-\d{2}", "time": r"\d{1,2}:\d{2}"}
_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")
_TIME = re.compile(r"\d{1,2}:\d{2}")
_NUMBER_AT = re.compile(r"(?<![\w.:-])-?\d+(?:\.\d+)?(?![\w:-]|\.\d)")


class Slot(BaseModel):
    """One typed hole of a pattern and where its value goes: `path` from the arguments (or, in an item pattern,
    from the list item; [] for an item that is the value itself). `many`: a list of such values (a list slot)."""

    kind: Kind
    path: list[str]
    many: bool = False
    shape: str | None = None  # the regex of a text slot's value (character classes of the learned value)


class Pattern(BaseModel):
    """A sentence with typed slots; `item_of` names the list a matching sentence adds one item to."""

    id: str
    text: str  # the sentence as a person reads it: "The {text} leaves at minute {int} ..."
    regex: str
    slots: list[Slot]
    item_of: list[str] | None = None
    confirmed: int = 0
    retired: bool = False
    why_retired: str | None = None

    def usable(self, learning: bool) -> bool:
        return not self.retired and (learning or self.confirmed >= CONFIRMATIONS)


class Book(BaseModel):
    """The patterns of one tool (the file holds exactly this)."""

    version: Literal[1] = 1
    tool: str
    patterns: dict[str, Pattern] = Field(default_factory=dict)


def tool_key(code: str, entry: str, schema: dict[str, Any]) -> str:
    """Which book a tool uses: its code, entry and argument schema, so an edited or rebuilt tool starts fresh."""
    payload = json.dumps({"code": code, "entry": entry, "schema": schema}, sort_keys=True, ensure_ascii=False)
    return hashlib.sha256(payload.encode()).hexdigest()[:32]


def sentences(question: str) -> list[str]:
    """The question's sentences, spacing normalised: split after . ? or ! followed by a space."""
    text = " ".join(question.split())
    return [s for s in re.split(r"(?<=[.?!])\s+", text) if s]


# ---- slots: their text, their values --------------------------------------------------------------------------

def _item_rx(slot: Slot) -> str:
    return slot.shape if slot.kind == "text" and slot.shape else _KIND_RX[slot.kind]


def _slot_rx(slot: Slot) -> str:
    one = f"(?:{_item_rx(slot)})"
    if not slot.many:
        return f"({one})"
    sep = "|".join(re.escape(s) for s in SEPARATORS)
    return f"({one}(?:(?:{sep}){one})*)"


def _parse_one(kind: Kind, text: str) -> Any:
    """A slot's text as the value the executor would copy; ValueError when it does not parse."""
    if kind == "int":
        return int(text)
    if kind == "number":
        return float(text) if "." in text else int(text)
    if kind == "date":
        dt.date.fromisoformat(text)
    elif kind == "time":
        h, m = map(int, text.split(":"))
        if not (0 <= h < 24 and 0 <= m < 60):
            raise ValueError(f"{text} is not a clock time")
    return text


def _split_many(slot: Slot, text: str) -> list[str]:
    item = re.compile(_item_rx(slot))
    out, pos = [], 0
    while True:
        m = item.match(text, pos)
        if m is None or m.end() == pos:
            raise ValueError(f"cannot split {text!r} into items")
        out.append(m.group())
        pos = m.end()
        if pos == len(text):
            return out
        sep = next((s for s in SEPARATORS if text.startswith(s, pos)), None)
        if sep is None:
            raise ValueError(f"cannot split {text!r} into items")
        pos += len(sep)


def slot_value(slot: Slot, text: str) -> Any:
    if slot.many:
        return [_parse_one(slot.kind, t) for t in _split_many(slot, text)]
    return _parse_one(slot.kind, text)


def _kind_of(value: Any) -> Kind | None:
    if isinstance(value, bool) or value is None:
        return None
    if isinstance(value, int):
        return "int"
    if isinstance(value, float):
        return "number"
    if isinstance(value, str) and value.strip() == value and value:
        return "date" if _DATE.fullmatch(value) else "time" if _TIME.fullmatch(value) else "text"
    return None


# ---- reading a sentence with a pattern ---------------------------------------------------------------------

@dataclass
class Reading:
    """What one pattern reads from one sentence: values by path (or one list item)."""

    pattern: Pattern
    values: list[tuple[tuple, Any]]  # (path, value); paths inside the item for item patterns

    @property
    def key(self) -> str:
        return json.dumps([self.pattern.item_of, [[list(p), v] for p, v in self.values]], sort_keys=True)


def read(pattern: Pattern, sentence: str) -> Reading | None:
    """The values `pattern` reads from `sentence`, or None when it does not match or a slot does not parse."""
    m = re.fullmatch(pattern.regex, sentence)
    if m is None:
        return None
    try:
        values = [(tuple(s.path), slot_value(s, g)) for s, g in zip(pattern.slots, m.groups())]
    except ValueError:
        return None
    return Reading(pattern, values)


@dataclass
class Prediction:
    """Arguments assembled from patterns, or why there are none (`miss`)."""

    arguments: dict[str, Any] | None
    readings: list[Reading] = field(default_factory=list)
    miss: str | None = None

    @property
    def used(self) -> list[str]:
        return sorted({r.pattern.id for r in self.readings})


def _put(target: dict[str, Any], path: tuple, value: Any) -> bool:
    """Set a value at a path of keys; False when something is there already."""
    for key in path[:-1]:
        nxt = target.setdefault(key, {})
        if not isinstance(nxt, dict):
            return False
        target = nxt
    if path[-1] in target:
        return False
    target[path[-1]] = value
    return True


def _empty_lists(schema: dict[str, Any], target: dict[str, Any]) -> None:
    """Required lists no sentence filled are empty ("No co-op holidays apply." holds no value)."""
    for key in schema.get("required", []):
        sub = schema.get("properties", {}).get(key, {})
        if key not in target and sub.get("type") == "array":
            target[key] = []
        elif isinstance(target.get(key), dict) and sub.get("type") == "object":
            _empty_lists(sub, target[key])


def predict(book: Book, question: str, schema: dict[str, Any], *, learning: bool = False) -> Prediction:
    """Arguments for `question` from the book's usable patterns (all not retired when `learning`, else only
    confirmed ones): every sentence must be read by a pattern, and patterns that read one sentence differently
    make it a miss."""
    usable = [p for p in book.patterns.values() if p.usable(learning)]
    readings: list[Reading] = []
    for n, sentence in enumerate(sentences(question), 1):
        found = [r for r in (read(p, sentence) for p in usable) if r is not None]
        if not found:
            return Prediction(None, readings, f"sentence {n} has no pattern")
        if len({r.key for r in found}) > 1:
            return Prediction(None, readings, f"patterns read sentence {n} differently")
        readings.append(max(found, key=lambda r: r.pattern.confirmed))
    arguments: dict[str, Any] = {}
    items: dict[tuple, list[Any]] = {}
    for r in readings:
        if r.pattern.item_of is None:
            if not all(_put(arguments, p, v) for p, v in r.values):
                return Prediction(None, readings, "two sentences fill the same argument")
            continue
        if len(r.values) == 1 and r.values[0][0] == ():
            item: Any = r.values[0][1]
        else:
            item = {}
            for p, v in r.values:
                _put(item, p, v)
        items.setdefault(tuple(r.pattern.item_of), []).append(item)
    for path, listed in items.items():
        if not _put(arguments, path, listed):
            return Prediction(None, readings, "a list is filled both whole and item by item")
    _empty_lists(schema, arguments)
    return Prediction(arguments, readings)


# ---- learning a question's patterns from its arguments ----------------------------------------------------

def leaves(value: Any, path: tuple = ()) -> list[tuple[tuple, Any]]:
    """(path, scalar) pairs of an argument object in order; list indices are ints in the path."""
    if isinstance(value, dict):
        return [leaf for k, v in value.items() for leaf in leaves(v, path + (k,))]
    if isinstance(value, list):
        return [leaf for i, v in enumerate(value) for leaf in leaves(v, path + (i,))]
    return [(path, value)]


def _occurrences(question: str, value: Any, kind: Kind) -> list[tuple[int, int]]:
    """Where the question states `value` as a whole token."""
    if kind in ("int", "number"):
        return [(m.start(), m.end()) for m in _NUMBER_AT.finditer(question)
                if float(m.group()) == float(value) and (kind == "number" or "." not in m.group())]
    spans = []
    for m in re.finditer(re.escape(value), question):
        before = question[m.start() - 1] if m.start() else " "
        after = question[m.end()] if m.end() < len(question) else " "
        bad = "_" if kind == "text" else "_-:"  # a date or clock time is not part of a longer one
        if not (before.isalnum() or before in bad) and not (after.isalnum() or after in bad):
            spans.append((m.start(), m.end()))
    return spans


class NotLearned(ValueError):
    """Why a question's patterns cannot be learned from its arguments (it stays with the executor)."""


@dataclass
class _Leaf:
    path: tuple
    value: Any
    kind: Kind
    span: tuple[int, int] | None = None

    @property
    def index_at(self) -> int | None:
        at = [i for i, k in enumerate(self.path) if isinstance(k, int)]
        if len(at) > 1:
            raise NotLearned("a list inside a list item")
        return at[0] if at else None

    @property
    def item(self) -> tuple | None:
        """The list item this value belongs to: (list path, index), or None."""
        i = self.index_at
        return None if i is None else (self.path[:i], self.path[i])


def _place(question: str, bounds: list[tuple[int, int]], found: list[_Leaf]) -> None:
    """Give every value the one span of the question it was copied from, or raise NotLearned."""
    sentence_of = lambda span: next(i for i, (a, b) in enumerate(bounds) if a <= span[0] < b)  # noqa: E731
    spans = {id(lf): _occurrences(question, lf.value, lf.kind) for lf in found}
    taken: set[tuple[int, int]] = set()
    for lf in found:
        if not spans[id(lf)]:
            raise NotLearned(f"{'/'.join(map(str, lf.path))}: the value {lf.value!r} is not in the question")
        if len(spans[id(lf)]) == 1:
            lf.span = spans[id(lf)][0]
    # a value stated more than once is placed by its list item's sentence, if that leaves one place
    home: dict[tuple, set[int]] = {}
    for lf in found:
        if lf.span is not None and lf.item is not None:
            home.setdefault(lf.item, set()).add(sentence_of(lf.span))
    for lf in found:
        if lf.span is not None:
            continue
        where = home.get(lf.item) if lf.item is not None else None
        options = [s for s in spans[id(lf)] if where and len(where) == 1 and sentence_of(s) in where]
        if len(options) != 1:
            raise NotLearned(f"{'/'.join(map(str, lf.path))}: the value {lf.value!r} is stated more than once")
        lf.span = options[0]
    for lf in found:
        if lf.span in taken:
            raise NotLearned(f"two arguments copy the same words ({lf.value!r})")
        taken.add(lf.span)


def _pattern(sentence: str, start: int, parts: list[tuple[tuple[int, int], Slot]], item_of: list[str] | None) -> Pattern:
    text, rx, pos = "", "", 0
    for (a, b), slot in sorted(parts, key=lambda p: p[0][0]):
        a, b = a - start, b - start
        text += sentence[pos:a] + "{" + slot.kind + ("s" if slot.many else "") + "}"
        rx += re.escape(sentence[pos:a]) + _slot_rx(slot)
        pos = b
    text += sentence[pos:]
    rx += re.escape(sentence[pos:])
    slots = [s for _, s in sorted(parts, key=lambda p: p[0][0])]
    ident = hashlib.sha256(json.dumps([rx, [s.model_dump() for s in slots], item_of]).encode()).hexdigest()[:20]
    return Pattern(id=ident, text=text, regex=rx, slots=slots, item_of=item_of)


def _slot(lf: _Leaf, path: tuple, many: bool = False, shapes: list[str] | None = None) -> Slot:
    shape_rx = None
    if lf.kind == "text":
        rx = sorted(set(shapes or [shape(lf.value).pattern]))
        shape_rx = rx[0] if len(rx) == 1 else "(?:" + "|".join(rx) + ")"
    return Slot(kind=lf.kind, path=[str(k) for k in path], many=many, shape=shape_rx)


def derive(question: str, arguments: dict[str, Any]) -> list[Pattern]:
    """One pattern per sentence of `question`, read off the arguments the executor filled for it; NotLearned
    when the question is not of a shape learned cleanly (see the module's docstring)."""
    text = " ".join(question.split())
    sents = sentences(question)
    bounds, pos = [], 0
    for s in sents:
        a = text.index(s, pos)
        bounds.append((a, a + len(s)))
        pos = a + len(s)
    found: list[_Leaf] = []
    for path, value in leaves(arguments):
        kind = _kind_of(value)
        if kind is None:
            raise NotLearned(f"{'/'.join(map(str, path)) or '(top)'}: {value!r} is not a value a question states")
        found.append(_Leaf(path, value, kind))
    for lf in found:
        lf.index_at  # noqa: B018 (raises NotLearned for a list inside a list item)
    _place(text, bounds, found)
    by_sentence: dict[int, list[_Leaf]] = {}
    for lf in found:
        assert lf.span is not None
        n = next(i for i, (a, b) in enumerate(bounds) if a <= lf.span[0] < b)
        if lf.span[1] > bounds[n][1]:
            raise NotLearned(f"{lf.value!r} runs over a sentence's end")
        by_sentence.setdefault(n, []).append(lf)
    lists = {lf.item[0] for lf in found if lf.item is not None}
    item_sentences: dict[tuple, list[tuple[int, int]]] = {}  # list path -> (sentence, index) in sentence order
    patterns = []
    for n, s in enumerate(sents):
        here = by_sentence.get(n, [])
        parts: list[tuple[tuple[int, int], Slot]] = []
        item_of = None
        whole = {lst for lst in lists if _whole_list_here(lst, here, found, text)}
        in_items = {lf.item for lf in here if lf.item is not None and lf.item[0] not in whole}
        if in_items:
            if len(in_items) > 1 or any(lf.item is None for lf in here) or whole:
                raise NotLearned(f"sentence {n + 1} holds more than one list item, or an item beside other values")
            (lst, index), = in_items
            if [lf for lf in found if lf.item == (lst, index)] != here:
                raise NotLearned(f"sentence {n + 1} holds part of a list item")
            item_sentences.setdefault(lst, []).append((n, index))
            item_of = [str(k) for k in lst]
            parts = [(lf.span, _slot(lf, lf.path[len(lst) + 1:])) for lf in here]
        else:
            for lst in whole:
                run = [lf for lf in here if lf.item is not None and lf.item[0] == lst]
                span = (run[0].span[0], run[-1].span[1])
                parts.append((span, _slot(run[0], lst, many=True,
                                          shapes=[shape(lf.value).pattern for lf in run])))
            parts += [(lf.span, _slot(lf, lf.path)) for lf in here if lf.item is None]
        patterns.append(_pattern(s, bounds[n][0], parts, item_of))
    for lst, seen in item_sentences.items():
        if [i for _, i in seen] != list(range(len(seen))) or \
                len(seen) != len({lf.item for lf in found if lf.item is not None and lf.item[0] == lst}):
            raise NotLearned("list items are not one per sentence in the question's order")
    return patterns


def _whole_list_here(lst: tuple, here: list[_Leaf], found: list[_Leaf], text: str) -> bool:
    """Whether sentence values `here` hold the whole list `lst` of scalars as one run joined by separators."""
    run = [lf for lf in found if lf.item is not None and lf.item[0] == lst]
    if not run or any(len(lf.path) != len(lst) + 1 for lf in run) or any(lf not in here for lf in run):
        return False
    ordered = sorted(run, key=lambda lf: lf.span)
    if ordered != run:
        return False
    return all(text[a.span[1]:b.span[0]] in SEPARATORS for a, b in zip(run, run[1:]))


# ---- what the executor's fill tells the book ----------------------------------------------------------------

class Lesson(BaseModel):
    """What one executor fill changed: patterns added, confirmed and retired (ids), or why nothing was learned."""

    added: list[str] = Field(default_factory=list)
    confirmed: list[str] = Field(default_factory=list)
    retired: list[str] = Field(default_factory=list)
    not_learned: str | None = None


def retire(book: Book, ids: list[str], why: str, lesson: Lesson) -> None:
    for i in ids:
        p = book.patterns.get(i)
        if p is not None and not p.retired:
            p.retired, p.why_retired = True, why
            lesson.retired.append(i)


def _disagreeing(prediction: Prediction, arguments: dict[str, Any]) -> list[str]:
    """Patterns of a prediction whose values differ from `arguments` (all of them if none alone does)."""
    wrong: set[str] = set()
    counters: dict[tuple, int] = {}
    for r in prediction.readings:
        prefix: tuple = ()
        if r.pattern.item_of is not None:
            lst = tuple(r.pattern.item_of)
            prefix = lst + (counters.get(lst, 0),)
            counters[lst] = prefix[-1] + 1
        for path, value in r.values:
            got: Any = arguments
            for k in prefix + path:
                try:
                    got = got[k]
                except (KeyError, IndexError, TypeError):
                    got = _MISSING
                    break
            if got is _MISSING or got != value:
                wrong.add(r.pattern.id)
    return sorted(wrong) or prediction.used


_MISSING = object()


def learn(book: Book, question: str, arguments: dict[str, Any], schema: dict[str, Any]) -> Lesson:
    """Fold one checked executor fill into the book: patterns that read its sentences as the executor did are
    confirmed (once per question), ones that read them otherwise are retired, and new sentences are added."""
    lesson = Lesson()
    try:
        derived = derive(question, arguments)
    except NotLearned as exc:
        lesson.not_learned = str(exc)
        derived = None
    if derived is None:  # judge the patterns that read the whole question, if any do
        pred = predict(book, question, schema, learning=True)
        if pred.arguments is not None:
            if pred.arguments == arguments:
                _confirm(book, pred.used, lesson)
            else:
                retire(book, _disagreeing(pred, arguments), "read a question differently from the executor", lesson)
        return lesson
    sents = sentences(question)
    usable = [p for p in book.patterns.values() if p.usable(learning=True)]
    agreeing: set[str] = set()
    for sentence, d in zip(sents, derived):
        want = read(d, sentence)
        assert want is not None, "a derived pattern reads its own sentence"
        matched = False
        for p in usable:
            got = read(p, sentence)
            if got is None:
                continue
            if got.key == want.key:
                agreeing.add(p.id)
                matched = True
            else:
                retire(book, [p.id], "read a sentence differently from the executor", lesson)
        known = book.patterns.get(d.id)
        if not matched and known is None:
            book.patterns[d.id] = d
            lesson.added.append(d.id)
    _confirm(book, sorted(agreeing), lesson)
    _trim(book)
    return lesson


def _confirm(book: Book, ids: list[str], lesson: Lesson) -> None:
    for i in ids:
        p = book.patterns[i]
        if not p.retired:
            p.confirmed += 1
            lesson.confirmed.append(i)


def _trim(book: Book) -> None:
    extra = len(book.patterns) - MAX_PATTERNS
    if extra > 0:
        for i in [i for i, p in book.patterns.items() if p.confirmed == 0 and not p.retired][:extra]:
            del book.patterns[i]


def check_due(tool: str, task_id: str, every: int) -> bool:
    """Whether a pattern fill of this task is cross-checked by the executor: 1 in `every`, decided by a hash of
    the tool's book and the task id, so a rerun checks the same tasks."""
    if every <= 1:
        return True
    digest = hashlib.sha256(f"{tool}\n{task_id}".encode("utf-8", "surrogatepass")).digest()
    return int.from_bytes(digest[:8], "big") % every == 0


__all__ = ["Book", "Pattern", "Slot", "Prediction", "Lesson", "NotLearned", "CONFIRMATIONS", "tool_key",
           "sentences", "derive", "predict", "learn", "retire", "check_due", "read"]
