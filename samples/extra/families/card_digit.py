"""Card digit: one unreadable digit of a co-op membership card number, restored by its Luhn check."""

from __future__ import annotations

import random

from samples.families._common import CREW, pick

NAME = "card_digit"
DESCRIPTION = (
    "Co-op membership card numbers carry a Luhn check (counting back from the last digit, which stays as it "
    "is, double every second digit, take 9 off any double above 9; the sum of all digits must end in 0). One "
    "digit of the card number is unreadable and written as ?; answer the digit (0-9) that makes the number "
    "pass the check."
)


def luhn_sum(digits: str) -> int:
    total = 0
    for i, ch in enumerate(reversed(digits)):
        d = int(ch)
        if i % 2 == 1:
            d = d * 2 - 9 if d > 4 else d * 2
        total += d
    return total % 10


def solve(card: str) -> int:
    digits = "".join(ch for ch in card if ch.isdigit() or ch == "?")
    if digits.count("?") != 1:
        raise ValueError(f"need exactly one '?' in {card!r}")
    fits = [d for d in range(10) if luhn_sum(digits.replace("?", str(d))) == 0]
    return fits[0]


def _grouped(rng: random.Random, digits: str) -> str:
    style = rng.randrange(3)
    if style == 0:
        return digits
    sep = " " if style == 1 else "-"
    return sep.join(digits[i:i + 4] for i in range(0, len(digits), 4))


_QUESTIONS = [
    "Member card {c} came back from the wash with one digit gone (the ?). Which digit was it?",
    "A membership card reads {c}; the ? is scratched off. What digit belongs there?",
    "Fill in the missing digit of card number {c}.",
    "{crew} phoned in card {c} but the line crackled at the ?. Which digit makes the card valid?",
    "Fuel account card {c} is worn at one place. What digit is under the ?",
]


def generate(rng: random.Random) -> dict:
    length = rng.choice([12, 13, 14, 15, 16])
    body = "".join(str(rng.randrange(10)) for _ in range(length - 1))
    body = str(rng.randint(1, 9)) + body[1:]
    check = next(d for d in range(10) if luhn_sum(body + str(d)) == 0)
    digits = body + str(check)
    gone = rng.randrange(length)
    card = _grouped(rng, digits[:gone] + "?" + digits[gone + 1:])
    question = pick(rng, _QUESTIONS).format(c=card, crew=rng.choice(CREW))
    params = {"card": card}
    return {"question": question, "answer": solve(**params), "params": params}
