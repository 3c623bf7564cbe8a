"""Pilot book ISBN: the chandlery's old 10-character ISBNs rewritten as 13-digit ISBNs for the till."""

from __future__ import annotations

import random

from samples.families._common import pick

from ._names import PORTS

NAME = "pilot_isbn"
DESCRIPTION = (
    "Older pilot books in the chandlery carry a 10-character ISBN (hyphens optional, the last character may "
    "be X); the till needs the 13-digit ISBN: put 978 before the first nine digits and add a new check digit "
    "(weights 1,3,1,3,... over those 12 digits; check digit = (10 - sum mod 10) mod 10). Answer the 13 "
    "digits without hyphens."
)


def ean_check(twelve: str) -> int:
    total = sum(int(c) * (3 if i % 2 else 1) for i, c in enumerate(twelve))
    return (10 - total % 10) % 10


def solve(isbn10: str) -> str:
    chars = [c for c in isbn10.upper() if c.isdigit() or c == "X"]
    if len(chars) != 10 or "X" in chars[:9]:
        raise ValueError(f"not a 10-character ISBN: {isbn10!r}")
    twelve = "978" + "".join(chars[:9])
    return twelve + str(ean_check(twelve))


def isbn10_check(nine: str) -> str:
    value = sum((10 - i) * int(c) for i, c in enumerate(nine)) % 11
    check = (11 - value) % 11
    return "X" if check == 10 else str(check)


def _hyphenated(rng: random.Random, nine: str, check: str) -> str:
    if rng.random() < 0.35:
        return nine + check
    group = rng.choice([1, 1, 2])
    publisher = rng.randint(2, 5)
    return f"{nine[:group]}-{nine[group:group + publisher]}-{nine[group + publisher:]}-{check}"


def case(task: dict) -> bool:
    """Whether the old ISBN ends in X (a check value of 10)."""
    return task["params"]["isbn10"].upper().endswith("X")


_QUESTIONS = [
    "Pilot book on the shelf with old ISBN {i}. What 13-digit number do we key into the till?",
    "Convert ISBN {i} to its 13-digit form for the stock sheet.",
    "The {port} pilot, ISBN {i}: what is its ISBN-13?",
    "Stock card shows {i} (the 10-digit kind). Give the 13-digit ISBN, no hyphens.",
    "A customer wants the tide atlas for {port}, listed as ISBN {i}. Which ISBN-13 should the order carry?",
]


def generate(rng: random.Random) -> dict:
    nine = rng.choice("0189") + "".join(str(rng.randrange(10)) for _ in range(8))
    check = isbn10_check(nine)
    if check != "X" and rng.random() < 0.15:  # show the X form more often than chance (1 in 11) would
        with_x = [nine[:8] + str(last) for last in range(10) if isbn10_check(nine[:8] + str(last)) == "X"]
        if with_x:
            nine, check = with_x[0], "X"
    isbn10 = _hyphenated(rng, nine, check)
    question = pick(rng, _QUESTIONS).format(i=isbn10, port=rng.choice(PORTS))
    params = {"isbn10": isbn10}
    return {"question": question, "answer": solve(**params), "params": params}
