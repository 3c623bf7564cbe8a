"""Berth dues: the visitor tariff charges each metre of length at the rate of the band that metre falls in."""

from __future__ import annotations

import math
import random
from decimal import Decimal

from samples.families._common import pick

from ._names import VISITORS

NAME = "berth_dues"
DESCRIPTION = (
    "Visitor berth dues per night go by the boat's length in whole metres (a part metre counts as a whole "
    "metre): metres 1 to 8 cost £2.40 each, metres 9 to 12 cost £3.10 each, and every metre over 12 costs "
    "£3.90; multiply the nightly dues by the nights stayed; answer pounds with two decimals, e.g. \"61.20\"."
)

# (top metre of the band, pence per metre in it); the last band has no top
BANDS = [(8, 240), (12, 310), (None, 390)]


def nightly_pence(metres: int) -> int:
    pence, below = 0, 0
    for top, rate in BANDS:
        upto = metres if top is None else min(metres, top)
        if upto > below:
            pence += (upto - below) * rate
        if top is None or metres <= top:
            break
        below = top
    return pence


def solve(length_m: float, nights: int) -> str:
    if length_m <= 0 or nights <= 0:
        raise ValueError("length and nights must be positive")
    metres = math.ceil(Decimal(str(length_m)))
    pence = nightly_pence(metres) * nights
    return f"{pence // 100}.{pence % 100:02d}"


def case(task: dict) -> int:
    """How many bands of the tariff the boat's length reaches."""
    metres = math.ceil(Decimal(str(task["params"]["length_m"])))
    return sum(1 for top, _ in BANDS[:-1] if metres > top) + 1


_QUESTIONS = [
    "The {boat}, {L} m overall, wants a visitor berth for {n}. What are the dues?",
    "Visitor in: {boat}, LOA {L} m, staying {n}. Dues to collect?",
    "How much does a {L} metre boat pay for {n} on the visitor pontoon?",
    "{n} for the visiting yacht {boat} ({L} m). Work out the berth dues.",
    "Harbour office note: {boat} ({L} metres) is booked in for {n}. What do we charge?",
]


def generate(rng: random.Random) -> dict:
    length = round(rng.uniform(5.0, 21.0), 1)
    if rng.random() < 0.2:
        length = float(round(length))
    length = int(length) if length == int(length) else length
    nights = rng.choice([1, 1, 2, 2, 3, 4, 5, 7, 10, 14])
    stay = "1 night" if nights == 1 else f"{nights} nights"
    question = pick(rng, _QUESTIONS).format(boat=rng.choice(VISITORS), L=length, n=stay)
    question = question[0].upper() + question[1:]
    params = {"length_m": length, "nights": nights}
    return {"question": question, "answer": solve(**params), "params": params}
