"""Tank litres: water and fuel tanks measured in centimetres, as upright cylinders or boxes; whole litres held."""

from __future__ import annotations

import math
import random
from fractions import Fraction

from samples.families._common import BOATS, pick

NAME = "tank_litres"
DESCRIPTION = (
    "A tank is either a cylinder (diameter and height given) or a box (length, width and height given), all "
    "measured inside in centimetres. Answer how many whole litres it holds: the volume in cubic centimetres "
    "divided by 1000, rounded down (take pi as 3.141592653589793)."
)


def solve(shape: str, dims: list[int]) -> int:
    if any(d <= 0 for d in dims):
        raise ValueError("dimensions must be positive")
    if shape == "box":
        length, width, height = dims
        return length * width * height // 1000
    if shape == "cylinder":
        diameter, height = dims
        return math.floor(Fraction(math.pi) * Fraction(diameter, 2) ** 2 * height / 1000)
    raise ValueError(f"shape must be box or cylinder, not {shape!r}")


_CYLINDER = [
    "The {boat}'s water tank is a cylinder {d} cm across and {h} cm tall. How many litres does it hold?",
    "Upright cylinder tank on the quay: diameter {d} cm, height {h} cm. Capacity in whole litres?",
    "How many litres fit in a cylinder {h} cm high with a {d} cm diameter? It's the new bait brine tank.",
    "Fuel bowser tank (a cylinder): {d} cm diameter, {h} cm deep inside. Litres, rounded down?",
]
_BOX = [
    "The {boat}'s fish-hold tank is a box {l} cm long, {w} cm wide and {h} cm deep. How many litres does it hold?",
    "The ice house melt-water tank is a box, {l} x {w} x {h} cm inside. Capacity in whole litres?",
    "How many litres fit in a box {h} cm high, {l} cm long and {w} cm wide? It's for the crab store.",
    "Bait store: a box, inside {l} by {w} cm and {h} cm deep. Litres, rounded down?",
]


def generate(rng: random.Random) -> dict:
    boat = rng.choice(BOATS)
    if rng.random() < 0.5:
        d, h = rng.randint(8, 40) * 5, rng.randint(6, 40) * 5
        params = {"shape": "cylinder", "dims": [d, h]}
        question = pick(rng, _CYLINDER).format(boat=boat, d=d, h=h)
    else:
        l, w, h = rng.randint(30, 250), rng.randint(20, 150), rng.randint(15, 120)
        params = {"shape": "box", "dims": [l, w, h]}
        question = pick(rng, _BOX).format(boat=boat, l=l, w=w, h=h)
    return {"question": question, "answer": solve(**params), "params": params}
