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
            # choosing the answer first makes the congruences consistent by construction
            target = rng.randrange(10, min(span, 2000))
            starts = [target % p for p in periods]
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
