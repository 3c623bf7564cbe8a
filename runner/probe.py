"""Looking for what the examples miss: inputs on which candidate tools that all passed their examples disagree.

After drafting, every candidate that passed its drafting examples is run on extra argument objects: mutations of
the drafting examples' arguments (scaled and extreme numbers, reordered, shortened and lengthened lists, values
moved between list items) and instances of the argument schema drawn by hypothesis-jsonschema. An input on which
two passing candidates return different values is *contested*: the examples cannot tell which rule the family
means there, so a person is asked. Inputs on which a candidate fails are not contested (they may be outside the
family's domain). Where a drafting question's values can be swapped for the contested input's one for one, the
contested input is shown as a question in the family's own phrasing; otherwise as arguments.
"""

from __future__ import annotations

import copy
import json
import random
import re
import time
from pathlib import Path
from typing import Any, Callable, Iterator

from pydantic import BaseModel, Field

from .atomicfile import write_text

PROBE_SECONDS = 60.0  # wall-clock cap on running candidates over the probe inputs
MAX_INPUTS = 48


class Contest(BaseModel):
    """One contested input: the arguments, what each candidate returned, and the input as a question if it
    could be phrased like a drafting question."""

    arguments: dict[str, Any]
    answers: list[Any]  # one per candidate that returned a value, in candidate order (None: it failed)
    chosen: Any = None  # what the chosen tool returned
    question: str | None = None
    source: str = ""  # "mutation" or "schema"


class ProbeReport(BaseModel):
    candidates: int = 0  # passing candidates compared (distinct code)
    inputs: int = 0  # probe inputs run
    compared: int = 0  # inputs on which the chosen tool and at least one other candidate returned a value
    agreeing: int = 0  # of those, inputs on which every other candidate agreed with the chosen tool
    contested: list[Contest] = Field(default_factory=list)
    note: str = ""

    @property
    def agreement(self) -> float | None:
        return self.agreeing / self.compared if self.compared else None


# ---- probe inputs -------------------------------------------------------------------------------------------

def _leaves(obj: Any, path: tuple = ()) -> Iterator[tuple[tuple, Any]]:
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _leaves(v, path + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _leaves(v, path + (i,))
    else:
        yield path, obj


def _set(obj: Any, path: tuple, value: Any) -> Any:
    out = copy.deepcopy(obj)
    target = out
    for p in path[:-1]:
        target = target[p]
    target[path[-1]] = value
    return out


def _lists(obj: Any, path: tuple = ()) -> Iterator[tuple[tuple, list]]:
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _lists(v, path + (k,))
    elif isinstance(obj, list):
        yield path, obj
        for i, v in enumerate(obj):
            yield from _lists(v, path + (i,))


def mutations(objects: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Argument objects made from the drafting examples' own: each whole number scaled (x2, x3), moved by one,
    set to 0 and to the largest number seen; every number scaled at once; each list reversed, cut to its first
    item, emptied and lengthened by repeating its first item; a number field's values rotated among a list's
    items. Duplicates and the originals are left out."""
    ints = [v for o in objects for _, v in _leaves(o) if isinstance(v, int) and not isinstance(v, bool)]
    top = max(ints, default=10)
    seen = {json.dumps(o, sort_keys=True) for o in objects}
    out: list[dict[str, Any]] = []

    def add(candidate: dict[str, Any]) -> None:
        key = json.dumps(candidate, sort_keys=True)
        if key not in seen:
            seen.add(key)
            out.append(candidate)

    for obj in objects:
        leaves = [(p, v) for p, v in _leaves(obj) if isinstance(v, int) and not isinstance(v, bool)]
        for p, v in leaves:
            for w in (v * 3, v * 2, v + 1, v - 1 if v > 0 else v + 2, 0, top):
                add(_set(obj, p, w))
        for factor in (2, 3):
            scaled = obj
            for p, v in leaves:
                scaled = _set(scaled, p, v * factor)
            add(scaled)
        for p, items in _lists(obj):
            if not p:
                continue
            if len(items) >= 2:
                add(_set(obj, p, list(reversed(items))))
                add(_set(obj, p, items[:1]))
                if all(isinstance(it, dict) for it in items):
                    for key in items[0]:
                        values = [it.get(key) for it in items]
                        if all(isinstance(x, int) and not isinstance(x, bool) for x in values) and len(set(values)) > 1:
                            rotated = [dict(it, **{key: values[(i + 1) % len(values)]}) for i, it in enumerate(items)]
                            add(_set(obj, p, rotated))
            add(_set(obj, p, []))
            if items:
                add(_set(obj, p, items + [copy.deepcopy(items[0])]))
    return out


def bounded_schema(schema: dict[str, Any], objects: list[dict[str, Any]]) -> dict[str, Any]:
    """The argument schema with the ranges the examples suggest (whole numbers from 0, or from the smallest
    negative seen, to three times the largest seen; lists up to two items longer than the longest seen), so
    that drawn instances stay near the family's domain and tools finish on them."""
    ints = [v for o in objects for _, v in _leaves(o) if isinstance(v, (int, float)) and not isinstance(v, bool)]
    lo, hi = min([0, *ints]), max([10, *ints]) * 3
    longest = max([0, *(len(items) for o in objects for _, items in _lists(o))])

    def walk(node: Any) -> Any:
        if isinstance(node, dict):
            node = {k: walk(v) for k, v in node.items()}
            kind = node.get("type")
            if kind in ("integer", "number"):
                node.setdefault("minimum", lo)
                node.setdefault("maximum", hi)
            if kind == "array":
                node.setdefault("maxItems", longest + 2)
            if kind == "string" and "pattern" not in node and "enum" not in node:
                node.setdefault("maxLength", 12)
            return node
        if isinstance(node, list):
            return [walk(v) for v in node]
        return node

    return walk(schema)


def schema_instances(schema: dict[str, Any], objects: list[dict[str, Any]], n: int, seed: int = 0) -> list[dict]:
    """`n` argument objects drawn from the (bounded) schema by hypothesis-jsonschema, deterministically."""
    try:
        from hypothesis import HealthCheck, Phase, given, settings
        from hypothesis_jsonschema import from_schema
    except ImportError:  # an optional part: mutations alone still probe
        return []
    drawn: list[dict] = []

    @settings(max_examples=n, derandomize=True, database=None, phases=[Phase.generate], deadline=None,
              suppress_health_check=list(HealthCheck))
    @given(from_schema(bounded_schema(schema, objects)))
    def collect(value: Any) -> None:
        if isinstance(value, dict) and value not in drawn:
            drawn.append(value)

    try:
        collect()
    except Exception:  # a schema hypothesis-jsonschema cannot draw from: no schema instances, mutations remain
        return drawn
    random.Random(seed).shuffle(drawn)
    return drawn[:n]


def probe_inputs(schema: dict[str, Any], objects: list[dict[str, Any]], *, seed: int = 0,
                 limit: int = MAX_INPUTS) -> list[tuple[str, dict[str, Any]]]:
    """(source, arguments) pairs: mutations first (they stay closest to the family), then schema instances."""
    muts = mutations(objects)
    random.Random(seed).shuffle(muts)
    take = muts[: (limit * 2) // 3]
    drawn = schema_instances(schema, objects, limit - len(take), seed)
    return [("mutation", m) for m in take] + [("schema", d) for d in drawn]


# ---- running candidates -------------------------------------------------------------------------------------

Runner = Callable[[str, dict[str, Any]], tuple[bool, Any]]  # (code, arguments) -> (returned a value, value)


def _same(a: Any, b: Any) -> bool:
    return json.dumps(a, sort_keys=True) == json.dumps(b, sort_keys=True)


def compare(codes: list[str], inputs: list[tuple[str, dict[str, Any]]], run: Runner, *,
            seconds: float = PROBE_SECONDS) -> ProbeReport:
    """Run every candidate (codes[0] is the chosen tool) on every input; collect contested inputs and how often
    the others agree with the chosen tool. Stops when `seconds` of wall time are spent (the note says so)."""
    distinct: list[str] = []
    for c in codes:
        if c not in distinct:
            distinct.append(c)
    report = ProbeReport(candidates=len(distinct))
    if len(distinct) < 2:
        report.note = "one passing candidate: nothing to compare it with"
        return report
    start = time.monotonic()
    for source, args in inputs:
        if time.monotonic() - start > seconds:
            report.note = f"stopped after {seconds:g} s of probing"
            break
        report.inputs += 1
        results = [run(code, args) for code in distinct]
        values = [v if ok else None for ok, v in results]
        returned = [v for ok, v in results if ok]
        chosen_ok, chosen = results[0]
        if chosen_ok and len(returned) >= 2:
            report.compared += 1
            if all(_same(v, chosen) for v in returned):
                report.agreeing += 1
        if len(returned) >= 2 and any(not _same(v, returned[0]) for v in returned[1:]):
            report.contested.append(Contest(arguments=args, answers=values, chosen=chosen if chosen_ok else None,
                                            source=source))
    return report


# ---- contested inputs as questions --------------------------------------------------------------------------

def _same_shape(a: Any, b: Any) -> bool:
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same_shape(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same_shape(x, y) for x, y in zip(a, b))
    return type(a) is type(b) or (isinstance(a, (int, float)) and isinstance(b, (int, float)))


def phrase(arguments: dict[str, Any], demos: list[tuple[str, dict[str, Any]]]) -> str | None:
    """The contested arguments as a question in a drafting question's own words: a demo whose arguments have the
    same shape, and each of whose values is written exactly once in its question (as a whole word), gets each
    value replaced by the new one. None when no demo allows that."""
    for question, demo in demos:
        if not _same_shape(demo, arguments):
            continue
        old = dict(_leaves(demo))
        new = dict(_leaves(arguments))
        spans: list[tuple[int, int, str]] = []
        ok = True
        for path, value in old.items():
            text = str(value)
            hits = [m.span() for m in re.finditer(rf"(?<![\w.]){re.escape(text)}(?![\w]|\.\d)", question)]
            distinct_values = [str(v) for p, v in old.items() if str(v) == text]
            if len(hits) != 1 or len(distinct_values) != 1:
                if str(new[path]) == text:
                    continue  # unchanged value: no need to find it
                ok = False
                break
            spans.append((*hits[0], str(new[path])))
        if not ok:
            continue
        spans.sort()
        if any(a[1] > b[0] for a, b in zip(spans, spans[1:])):
            continue
        out, last = [], 0
        for a, b, text in spans:
            out += [question[last:a], text]
            last = b
        return "".join(out + [question[last:]])
    return None


def contested_lines(report: ProbeReport, family: str) -> list[dict[str, Any]]:
    """The contested inputs as family-file lines with empty answers for a person to fill in."""
    lines = []
    for i, c in enumerate(report.contested, 1):
        line: dict[str, Any] = {"id": f"{family}-contested-{i:02d}",
                                "question": c.question or f"(arguments) {json.dumps(c.arguments)}",
                                "answer": "", "candidate_answers": c.answers}
        if c.question is None:
            line["arguments"] = c.arguments
        lines.append(line)
    return lines


def contested_file(family_file: Path) -> Path:
    """Where a family's contested inputs are written: beside the family file, `<stem>.contested.jsonl`."""
    return family_file.with_name(f"{family_file.stem}.contested.jsonl")


def write_contested(contested: list[dict], family_name: str, family_file: Path) -> tuple[Path, list[dict]]:
    """Write a build report's contested inputs, with empty answers, beside the family file (whole or not at
    all). Returns the file and its lines."""
    found = ProbeReport(contested=[Contest.model_validate(c) for c in contested])
    lines = contested_lines(found, family_name)
    where = contested_file(family_file)
    write_text(where, "".join(json.dumps(x, ensure_ascii=False) + "\n" for x in lines))
    return where, lines


def add_examples(family_file: Path, added: list[dict]) -> None:
    """Append answered cases to a family file as examples (the file is rewritten whole or not at all)."""
    if not added:
        return
    old = family_file.read_text(encoding="utf-8")
    sep = "" if not old or old.endswith("\n") else "\n"
    write_text(family_file, old + sep + "".join(json.dumps(x, ensure_ascii=False) + "\n" for x in added))
