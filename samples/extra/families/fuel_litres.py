"""Fuel litres: a fuel docket in imperial gallons becomes the whole litres the co-op pump bills."""

from __future__ import annotations

import math
import random
from decimal import Decimal

from samples.families._common import BOATS, CREW, pick

NAME = "fuel_litres"
DESCRIPTION = (
    "Fuel dockets give diesel in imperial gallons (1 imperial gallon = 4.54609 litres); the co-op pump bills "
    "whole litres and rounds any part of a litre up; answer the litres billed (an integer)."
)

LITRES_PER_GALLON = Decimal("4.54609")


def solve(gallons: float) -> int:
    if gallons <= 0:
        raise ValueError("gallons must be positive")
    return math.ceil(Decimal(str(gallons)) * LITRES_PER_GALLON)


_QUESTIONS = [
    "Docket for the {boat}: {g} gallons of red diesel taken on at the quay pump. How many litres go on the bill?",
    "The {boat} filled up with {g} imperial gallons this morning. The pump bills whole litres, part litres "
    "rounded up. How many litres do we bill?",
    "Fuel berth log, {boat}: {g} gal. Litres to charge?",
    "How many litres should the office charge the {boat} for {g} gallons of diesel?",
    "{crew} put {g} gallons into the {boat}'s tanks. What goes on the fuel sheet in litres?",
    "Old-style docket from {crew}: {g} gallons, {boat}. Convert to billed litres, please.",
]


def generate(rng: random.Random) -> dict:
    whole = rng.randint(3, 240)
    gallons = whole + rng.choice([0, 0, 0, 0.5, 0.25, 0.75])
    gallons = int(gallons) if gallons == int(gallons) else gallons
    question = pick(rng, _QUESTIONS).format(g=gallons, boat=rng.choice(BOATS), crew=rng.choice(CREW))
    params = {"gallons": gallons}
    return {"question": question, "answer": solve(**params), "params": params}
