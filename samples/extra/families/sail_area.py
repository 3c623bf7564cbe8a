"""Sail area: a triangular sail's three edges from the sailmaker's sheet; its area by Heron's formula."""

from __future__ import annotations

import random
from decimal import ROUND_HALF_UP, Decimal

from samples.families._common import BOATS, pick

NAME = "sail_area"
DESCRIPTION = (
    "A triangular sail is measured along its three edges, luff, leech and foot, in metres; its area is found "
    "from the three sides by Heron's formula (s = half the sum of the sides, area = square root of "
    "s(s-a)(s-b)(s-c)). Answer square metres rounded to two decimals (half up), as text such as \"12.34\"."
)


def solve(luff: float, leech: float, foot: float) -> str:
    a, b, c = (Decimal(str(x)) for x in (luff, leech, foot))
    s = (a + b + c) / 2
    product = s * (s - a) * (s - b) * (s - c)
    if product <= 0:
        raise ValueError("those three edges do not make a triangle")
    return str(product.sqrt().quantize(Decimal("0.01"), rounding=ROUND_HALF_UP))


_EDGES = {
    "luff": ["luff {v} m", "the luff is {v} m", "luff {v} metres"],
    "leech": ["leech {v} m", "the leech is {v} m", "leech {v} metres"],
    "foot": ["foot {v} m", "the foot is {v} m", "foot {v} metres"],
}
_QUESTIONS = [
    "Sailmaker's sheet for the {boat}'s {sail}: {edges}. What is its area in square metres?",
    "The {boat} wants a new {sail}; {edges}. Sail area, to two decimals?",
    "How many square metres is a {sail} with {edges}?",
    "New {sail} for the {boat}. Measured: {edges}. Area please (m², 2 d.p.).",
]


def generate(rng: random.Random) -> dict:
    while True:
        luff = round(rng.uniform(4.0, 14.0), 1)
        foot = round(rng.uniform(1.8, 6.0), 1)
        leech = round(rng.uniform(luff * 0.85, luff * 1.05), 1)
        if leech + foot > luff + 0.5 and luff + foot > leech + 0.5:
            break
    values = {"luff": luff, "leech": leech, "foot": foot}
    names = list(values)
    rng.shuffle(names)
    edges = [pick(rng, _EDGES[n]).format(v=values[n]) for n in names]
    question = pick(rng, _QUESTIONS).format(boat=rng.choice(BOATS), sail=pick(rng, ["mainsail", "jib", "mizzen"]),
                                            edges=", ".join(edges[:-1]) + " and " + edges[-1])
    return {"question": question, "answer": solve(**values), "params": values}
