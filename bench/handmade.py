"""Tools "exported by hand" for developing and measuring the run loop before the builder has built any:
for each demo family, a hand-written `solve` with arguments shaped the way the builder shapes them (lists of
objects, all keys required), its JSON Schema, and a usage card whose demos are the family's first solved
examples with hand-derived arguments (from the seeded generator's parameters)."""

from __future__ import annotations

import hashlib
import random
import re
import sys
from pathlib import Path
from typing import Any, Callable

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from runner.tools import Card, Demo, Provenance, Tool  # noqa: E402
from samples import make_samples  # noqa: E402
from samples.families import FAMILIES  # noqa: E402

STR = {"type": "string"}
INT = {"type": "integer"}
DATE = {"type": "string", "pattern": "^[0-9]{4}-[0-9]{2}-[0-9]{2}$"}
TIME = {"type": "string", "pattern": "^[0-9]{1,2}:[0-9]{2}$"}


def obj(**props: Any) -> dict[str, Any]:
    return {"type": "object", "properties": props, "required": list(props), "additionalProperties": False}


def arr(items: dict[str, Any]) -> dict[str, Any]:
    return {"type": "array", "items": items}


# Tool code runs as self-contained text in the sandbox, so the two check-digit tools each carry this part.
ISO6346_CHECK_DIGIT = '''
import string

def check_digit(code10):
    values, v = {}, 10
    for letter in string.ascii_uppercase:
        if v % 11 == 0:
            v += 1
        values[letter] = v
        v += 1
    total = sum((values[c] if c.isalpha() else int(c)) * 2 ** i for i, c in enumerate(code10))
    return total % 11 % 10

'''

CODE = {
    "departures": '''
def solve(boats):
    starts = [b["start"] for b in boats]
    periods = [b["period"] for b in boats]
    t = max(starts)
    while True:
        if all(t >= s and (t - s) % p == 0 for s, p in zip(starts, periods)):
            return t
        t += 1
''',
    "working_days": '''
import datetime as dt

def solve(start, end, holidays):
    first, last = dt.date.fromisoformat(start), dt.date.fromisoformat(end)
    off = {dt.date.fromisoformat(h) for h in holidays}
    days = (first + dt.timedelta(days=i) for i in range((last - first).days + 1))
    return sum(1 for d in days if d.weekday() < 5 and d not in off)
''',
    "container_codes": ISO6346_CHECK_DIGIT + '''
def solve(code):
    return check_digit(code.strip().upper()[:10])
''',
    "container_valid": ISO6346_CHECK_DIGIT + '''
def solve(code):
    code = code.strip().upper()
    return "yes" if len(code) == 11 and str(check_digit(code[:10])) == code[10] else "no"
''',
    "berth_order": '''
from itertools import permutations

def solve(boats, clues, berth):
    tests = {
        "directly_east": lambda p, c: p[c["a"]] == p[c["b"]] + 1,
        "directly_west": lambda p, c: p[c["a"]] == p[c["b"]] - 1,
        "east_of": lambda p, c: p[c["a"]] > p[c["b"]],
        "west_of": lambda p, c: p[c["a"]] < p[c["b"]],
        "next_to": lambda p, c: abs(p[c["a"]] - p[c["b"]]) == 1,
        "at": lambda p, c: p[c["a"]] == c["berth"],
        "not_at": lambda p, c: p[c["a"]] != c["berth"],
    }
    for order in permutations(boats):
        place = {b: i + 1 for i, b in enumerate(order)}
        if all(tests[c["kind"]](place, c) for c in clues):
            return order[berth - 1]
''',
    "crate_handoffs": '''
def solve(holdings, swaps, crate):
    held = {h["person"]: h["crate"] for h in holdings}
    for s in swaps:
        a, b = s["a"], s["b"]
        held[a], held[b] = held[b], held[a]
    for person, c in held.items():
        if c == crate:
            return person
''',
    "crew_overlap": '''
def solve(day_start, day_end, people, minutes):
    def m(t):
        h, mm = t.split(":")
        return int(h) * 60 + int(mm)
    spans = sorted((m(b["start"]), m(b["end"])) for p in people for b in p["busy"])
    t, end = m(day_start), m(day_end)
    for a, b in spans:
        if a - t >= minutes and t + minutes <= end:
            break
        t = max(t, b)
    return f"{t // 60:02d}:{t % 60:02d}"
''',
    "manifest_order": '''
def solve(labels, position):
    def key(label):
        prefix, _, number = label.rpartition("-")
        return prefix, int(number)
    return sorted(labels, key=key)[position - 1]
''',
}

KINDS = ["directly_east", "directly_west", "east_of", "west_of", "next_to", "at", "not_at"]

SCHEMA = {
    "departures": obj(boats=arr(obj(name=STR, start=INT, period=INT))),
    "working_days": obj(start=DATE, end=DATE, holidays=arr(DATE)),
    "container_codes": obj(code=STR),
    "container_valid": obj(code=STR),
    "berth_order": obj(boats=arr(STR), clues=arr(obj(kind={"type": "string", "enum": KINDS}, a=STR, b=STR,
                                                      berth=INT)), berth=INT),
    "crate_handoffs": obj(holdings=arr(obj(person=STR, crate=STR)), swaps=arr(obj(a=STR, b=STR)), crate=STR),
    "crew_overlap": obj(day_start=TIME, day_end=TIME, people=arr(obj(name=STR, busy=arr(obj(start=TIME, end=TIME)))),
                        minutes=INT),
    "manifest_order": obj(labels=arr(STR), position=INT),
}


def _departures(p: dict, q: str) -> dict:
    # boat names in the order the question gives them
    found = re.findall(r"(?:The )?([A-Z][a-z]+)(?::| (?:leaves|departs|sails))", q)
    found = [n for n in found if n not in ("Kelpwick", "Quay", "Minutes", "The")]
    return {"boats": [{"name": n, "start": s, "period": per} for n, s, per in zip(found, p["starts"], p["periods"])]}


ARGS: dict[str, Callable[[dict, str], dict]] = {
    "departures": _departures,
    "working_days": lambda p, q: p,
    "container_codes": lambda p, q: p,
    "container_valid": lambda p, q: p,
    "berth_order": lambda p, q: {"boats": p["boats"], "berth": p["berth"], "clues": [
        {"kind": c["kind"], "a": c["a"], "b": c.get("b", ""), "berth": c.get("berth", 0)} for c in p["clues"]]},
    "crate_handoffs": lambda p, q: {"holdings": [{"person": k, "crate": v} for k, v in p["holdings"].items()],
                                    "swaps": [{"a": a, "b": b} for a, b in p["swaps"]], "crate": p["crate"]},
    "crew_overlap": lambda p, q: {"day_start": p["day_start"], "day_end": p["day_end"], "minutes": p["minutes"],
                                  "people": [{"name": k, "busy": [{"start": a, "end": b} for a, b in v]}
                                             for k, v in p["busy"].items()]},
    "manifest_order": lambda p, q: p,
}
ORDER = {"departures": ["boats"], "working_days": ["start", "end", "holidays"], "container_codes": ["code"],
         "container_valid": ["code"], "berth_order": ["boats", "clues", "berth"],
         "crate_handoffs": ["holdings", "swaps", "crate"], "crew_overlap": ["day_start", "day_end", "people", "minutes"],
         "manifest_order": ["labels", "position"]}


def solved_examples(family: str) -> list[dict]:
    """The family's examples.jsonl tasks again, with the generator's parameters (same seed, same order)."""
    module = FAMILIES[family]
    return make_samples._draw(module, random.Random(f"{make_samples.SEED}:{family}:examples"),
                              make_samples.N_EXAMPLES, set(), balanced=True)


def tool_name(family: str) -> str:
    return family.replace("_", "-")


def handmade_tool(family: str, n_demos: int = 2) -> Tool:
    """A verified-looking Tool for `family` (verification is by the reference solver, not a build)."""
    module = FAMILIES[family]
    demos = []
    for ex in solved_examples(family)[:n_demos]:
        args = ARGS[family](ex["params"], ex["question"])
        demos.append(Demo(question=ex["question"], arguments={k: args[k] for k in ORDER[family]}))
    name = tool_name(family)
    card = Card(name=name, description=module.DESCRIPTION, schema=SCHEMA[family], demos=demos)
    code = CODE[family].strip() + "\n"
    return Tool(key=hashlib.sha256(code.encode()).hexdigest()[:16], name=name, description=module.DESCRIPTION,
                code=code, card=card, verified=True, held_out_score=1.0, checks=[],
                provenance=Provenance(builder_model="by hand", builder_sha256="", executor_model="", executor_sha256="",
                                      template_hashes={}, settings={}, family_file=f"samples/{family}",
                                      examples_sha256="", strategy="by hand"))


def handmade_tools(families: list[str] | None = None, n_demos: int = 2) -> list[Tool]:
    return [handmade_tool(f, n_demos) for f in (families or list(FAMILIES))]
