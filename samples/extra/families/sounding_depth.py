"""Sounding depth: depths from the old harbour book in fathoms and feet, wanted in metres to one decimal."""

from __future__ import annotations

import random
from decimal import ROUND_HALF_UP, Decimal

from samples.families._common import BOATS, pick

from ._names import PLACES

NAME = "sounding_depth"
DESCRIPTION = (
    "Soundings in the old harbour book are written in fathoms and feet (1 fathom = 6 feet, 1 foot = 0.3048 "
    "metre exactly); answer the depth in metres rounded to one decimal place, as text such as \"7.3\"."
)

METRES_PER_FOOT = Decimal("0.3048")


def solve(fathoms: int, feet: int) -> str:
    if fathoms < 0 or feet < 0:
        raise ValueError("depths are not negative")
    metres = (6 * fathoms + feet) * METRES_PER_FOOT
    return str(metres.quantize(Decimal("0.1"), rounding=ROUND_HALF_UP))


def _depth(rng: random.Random, fathoms: int, feet: int) -> str:
    fm = "fathom" if fathoms == 1 else "fathoms"
    ft = "foot" if feet == 1 else "feet"
    return pick(rng, [f"{fathoms} {fm} {feet} {ft}", f"{fathoms} {fm} and {feet} {ft}", f"{fathoms} fm {feet} ft"])


_QUESTIONS = [
    "The old harbour book gives {d} at the {place}. What is that in metres, to one decimal place?",
    "Sounding at the {place}: {d}. Convert to metres (one decimal).",
    "The {boat} wants the depth at the {place} in metres. The book says {d}.",
    "How many metres is {d}? Round to a tenth of a metre.",
    "Old chart note for the {place} reads {d}; the new board needs metres to 0.1.",
]


def generate(rng: random.Random) -> dict:
    fathoms, feet = rng.randint(1, 14), rng.randint(1, 5)
    question = pick(rng, _QUESTIONS).format(d=_depth(rng, fathoms, feet), place=rng.choice(PLACES),
                                            boat=rng.choice(BOATS))
    params = {"fathoms": fathoms, "feet": feet}
    return {"question": question, "answer": solve(**params), "params": params}
