"""Crew overlap: busy intervals of a few crew members; the earliest common free slot of a given length."""

from __future__ import annotations

import random

from ._common import CREW, pick

NAME = "crew_overlap"
DESCRIPTION = (
    "Given the working day and each crew member's busy intervals (HH:MM-HH:MM, busy from the first time up to "
    "the second), answer the earliest start time (\"HH:MM\") of a slot of at least the asked number of minutes "
    "inside the working day when everyone is free."
)


def to_minutes(hhmm: str) -> int:
    h, m = hhmm.strip().split(":")
    return int(h) * 60 + int(m)


def to_hhmm(minutes: int) -> str:
    return f"{minutes // 60:02d}:{minutes % 60:02d}"


def solve(day_start: str, day_end: str, busy: dict[str, list[list[str]]], minutes: int) -> str:
    """Walk the merged busy intervals in time order and return the first gap that is long enough."""
    spans = sorted((to_minutes(a), to_minutes(b)) for ivs in busy.values() for a, b in ivs)
    t, end = to_minutes(day_start), to_minutes(day_end)
    for a, b in spans:
        if a - t >= minutes and t + minutes <= end:
            return to_hhmm(t)
        t = max(t, b)
    if end - t >= minutes:
        return to_hhmm(t)
    raise ValueError("no common free slot")


_DAYS = [
    "The working day runs from {s} to {e}.",
    "Yard hours are {s}-{e}.",
    "Between {s} and {e} the crew are on shift.",
    "Quay shift today: {s} until {e}.",
]
_PEOPLE = [
    ("{p} is busy ", "{a}-{b}", "."),
    ("{p}: ", "{a} to {b}", "."),
    ("{p} has jobs from ", "{a} to {b}", "."),
    ("{p} is tied up ", "{a} until {b}", "."),
]
_QUESTIONS = [
    "What is the earliest time all of them are free together for at least {n} minutes?",
    "When can the earliest {n}-minute meeting of everyone start?",
    "Find the earliest start of a common free slot of {n} minutes.",
    "At what time does the first shared gap of {n} minutes or more begin?",
    "The harbour master wants them all together for {n} minutes: what is the earliest they can start?",
]


def _busy_for(rng: random.Random, start: int, end: int, step: int) -> list[list[str]]:
    count = rng.randint(1, 3)
    cuts = sorted(rng.sample(range(start // step, end // step + 1), 2 * count))
    return [[to_hhmm(cuts[i] * step), to_hhmm(cuts[i + 1] * step)] for i in range(0, 2 * count, 2)]


def generate(rng: random.Random) -> dict:
    while True:
        start = rng.choice([7 * 60, 7 * 60 + 30, 8 * 60, 8 * 60, 8 * 60 + 30, 9 * 60])
        end = start + 60 * rng.choice([8, 9, 10])
        step = rng.choice([15, 15, 5, 10])
        people = rng.sample(CREW, rng.choice([2, 3, 3, 4]))
        busy = {p: _busy_for(rng, start, end, step) for p in people}
        minutes = rng.choice([15, 20, 30, 45, 60, 90, 120])
        params = {"day_start": to_hhmm(start), "day_end": to_hhmm(end), "busy": busy, "minutes": minutes}
        try:
            answer = solve(**params)
        except ValueError:
            continue
        if answer == params["day_start"] and rng.random() < 0.85:
            continue
        parts = [pick(rng, _DAYS).format(s=params["day_start"], e=params["day_end"])]
        lead, item, end_mark = pick(rng, _PEOPLE)
        for p, ivs in busy.items():
            parts.append(lead.format(p=p) + " and ".join(item.format(a=a, b=b) for a, b in ivs) + end_mark)
        parts.append(pick(rng, _QUESTIONS).format(n=minutes))
        question = " ".join(parts)
        if len(question.split()) <= 70:
            return {"question": question, "answer": answer, "params": params}


CLASSES = {
    "answer_is_day_start": "everyone is free at the start of the day",
    "slot_ends_at_day_end": "the only long enough slot ends exactly when the day ends",
    "back_to_back_busy": "one busy interval ends exactly when another begins",
    "overlapping_busy": "busy intervals of different people overlap",
    "exact_fit": "the slot found is exactly the asked length",
    "one_busy_interval_each": "every crew member has a single busy interval",
}


def classes(task: dict) -> set[str]:
    """The boundary classes of one generated task (see CLASSES)."""
    params, answer = task["params"], task["answer"]
    start, end, minutes = to_minutes(answer), to_minutes(params["day_end"]), params["minutes"]
    spans = sorted((to_minutes(a), to_minutes(b)) for ivs in params["busy"].values() for a, b in ivs)
    found = set()
    if answer == params["day_start"]:
        found.add("answer_is_day_start")
    if start + minutes == end:
        found.add("slot_ends_at_day_end")
    if any(b == c for (_, b) in spans for (c, _) in spans):
        found.add("back_to_back_busy")
    if any(a < d and c < b for i, (a, b) in enumerate(spans) for (c, d) in spans[i + 1:]):
        found.add("overlapping_busy")
    following = [a for a, _ in spans if a >= start + minutes] + [end]
    if min(following) == start + minutes:
        found.add("exact_fit")
    if all(len(ivs) == 1 for ivs in params["busy"].values()):
        found.add("one_busy_interval_each")
    return found
