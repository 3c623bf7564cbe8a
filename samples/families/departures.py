"""Departure coincidence: boats leave at minute s and then every p minutes; when do all leave together?"""

from __future__ import annotations

import math
import random

from ._common import BOATS, COUNT_WORDS, pick

NAME = "departures"
DESCRIPTION = (
    "Each boat first leaves at a given minute and then again every fixed number of minutes; "
    "answer the first minute (an integer) at which all the boats leave together."
)


def solve(starts: list[int], periods: list[int]) -> int:
    """First minute t >= every start with t = start + k*period for each boat (k >= 0)."""
    if len(starts) != len(periods) or not starts:
        raise ValueError("need one start and one period per boat")
    if any(p <= 0 for p in periods) or any(s < 0 for s in starts):
        raise ValueError("periods must be positive and starts non-negative")
    i = max(range(len(periods)), key=periods.__getitem__)
    latest = max(starts)
    horizon = latest + math.lcm(*periods) + periods[i]
    t = starts[i]
    while t < latest:
        t += periods[i]
    while t <= horizon:
        if all(t >= s and (t - s) % p == 0 for s, p in zip(starts, periods)):
            return t
        t += periods[i]
    raise ValueError("the boats never leave together")


_BOAT_LINES = [
    "The {b} leaves at minute {s} and then every {p} minutes.",
    "The {b} departs every {p} minutes, first at minute {s}.",
    "{b}: first departure at minute {s}, then one every {p} minutes.",
    "The {b} sails at minute {s} and again every {p} minutes after that.",
    "{b}: casts off at minute {s}, then every {p} minutes through the day.",
]
_INTROS = ["", "Minutes count from the opening of the harbour. ", "Kelpwick timetable: ",
           "Ferry office times, in minutes after the quay opens. "]
_QUESTIONS = [
    "At what minute do all {n} boats first leave together?",
    "What is the first minute at which they all depart at the same time?",
    "When is the earliest minute at which every one of these boats leaves together?",
    "Which minute is the first when all of them sail at once?",
    "The harbour office wants the first minute when the quay sees all {n} casting off at the same time.",
]


def generate(rng: random.Random) -> dict:
    while True:
        n = rng.choice([2, 2, 3, 3, 4])
        top = {2: 45, 3: 30, 4: 20}[n]
        while True:
            periods = rng.sample(range(3, top + 1), n)
            span = math.lcm(*periods)
            if 20 <= span <= 2000:
                break
        while True:
            # choosing a common departure first makes the congruences consistent by construction; a boat's
            # first departure is any earlier departure of it (not only the remainder), so first departures
            # later than the smallest common remainder occur as the description allows
            target = rng.randrange(10, min(span, 2000))
            if rng.random() < 0.5:
                starts = [target % p for p in periods]
            else:
                if rng.random() < 0.5 and span <= 1000:
                    target += span  # then a first departure after `target - span` makes the answer the later one
                starts = [target - p * rng.randint(0, target // p) for p in periods]
            if rng.random() < 0.04:
                starts = [starts[0]] * n if len(set(periods)) == n else starts
            if len(set(starts)) > 1 or rng.random() < 0.1:
                break
        boats = rng.sample(BOATS, n)
        if rng.random() < 0.7:
            line = pick(rng, _BOAT_LINES)
            lines = [line.format(b=b, s=s, p=p) for b, s, p in zip(boats, starts, periods)]
        else:
            lines = [pick(rng, _BOAT_LINES).format(b=b, s=s, p=p) for b, s, p in zip(boats, starts, periods)]
        ask = pick(rng, _QUESTIONS).replace("all {n}", "both" if n == 2 else f"all {COUNT_WORDS[n]}")
        intro, body = pick(rng, _INTROS), " ".join(lines)
        if intro.endswith(": ") and body.startswith("The "):
            body = "the " + body[4:]
        question = intro + body + " " + ask
        if len(question.split()) > 70:
            continue
        params = {"starts": starts, "periods": periods}
        return {"question": question, "answer": solve(**params), "params": params}


CLASSES = {
    "late_first_departure": "a boat first leaves after the earliest minute the repeat periods alone would give",
    "same_first_minute": "all boats first leave at the same minute, which is the answer",
    "first_at_minute_0": "a boat first leaves at minute 0",
    "answer_is_a_first_departure": "the answer is some boat's first departure",
    "two_boats": "the fewest boats (2)",
    "four_boats": "the most boats the generator draws (4)",
}


def classes(task: dict) -> set[str]:
    """The boundary classes of one task (see CLASSES)."""
    params, answer = task["params"], task["answer"]
    starts, periods = params["starts"], params["periods"]
    remainder_only = next(t for t in range(0, math.lcm(*periods) + 1)
                          if all((t - s) % p == 0 for s, p in zip(starts, periods)))
    found = {"two_boats"} if len(starts) == 2 else {"four_boats"} if len(starts) == 4 else set()
    if answer != remainder_only:
        found.add("late_first_departure")
    if len(set(starts)) == 1:
        found.add("same_first_minute")
    if 0 in starts:
        found.add("first_at_minute_0")
    if answer in starts:
        found.add("answer_is_a_first_departure")
    return found
