"""Cheque words: the co-op writes the pounds on a cheque in words, British style."""

from __future__ import annotations

import random

from samples.families._common import BOATS, CREW, pick

from ._names import VISITORS

NAME = "cheque_words"
DESCRIPTION = (
    "Write a whole number of pounds (1 to 999999) in words the way the co-op writes cheques: British style, "
    "lower case, hyphens in twenty-one to ninety-nine, \"and\" before a last part under a hundred (one hundred "
    "and five, one thousand and five), and a comma after \"thousand\" when hundreds follow (one thousand, two "
    "hundred). Answer the words only, without \"pounds\"."
)

ONES = ["zero", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten", "eleven", "twelve",
        "thirteen", "fourteen", "fifteen", "sixteen", "seventeen", "eighteen", "nineteen"]
TENS = ["", "", "twenty", "thirty", "forty", "fifty", "sixty", "seventy", "eighty", "ninety"]


def _under_hundred(n: int) -> str:
    if n < 20:
        return ONES[n]
    tens, ones = divmod(n, 10)
    return TENS[tens] + (f"-{ONES[ones]}" if ones else "")


def _under_thousand(n: int) -> str:
    hundreds, rest = divmod(n, 100)
    if not hundreds:
        return _under_hundred(rest)
    return f"{ONES[hundreds]} hundred" + (f" and {_under_hundred(rest)}" if rest else "")


def solve(pounds: int) -> str:
    if not 1 <= pounds <= 999_999:
        raise ValueError(f"{pounds} outside 1..999999")
    thousands, rest = divmod(pounds, 1000)
    if not thousands:
        return _under_thousand(rest)
    words = f"{_under_thousand(thousands)} thousand"
    if rest >= 100:
        return f"{words}, {_under_thousand(rest)}"
    return f"{words} and {_under_hundred(rest)}" if rest else words


def _figure(rng: random.Random, pounds: int) -> str:
    return f"£{pounds:,}" if rng.random() < 0.6 else f"£{pounds}"


_QUESTIONS = [
    "Cheque to {crew} for {p}. What goes on the words line?",
    "Write {p} in words for the cheque to the {visitor} crew.",
    "Paying the boatyard {p} for the {boat}'s refit. How do we write the amount in words?",
    "Words line for a cheque of {p}, please (no 'pounds').",
    "{crew} needs the amount {p} spelled out on the co-op cheque. Words?",
]


def generate(rng: random.Random) -> dict:
    size = rng.choice([2, 3, 3, 4, 4, 5, 5, 6])
    pounds = rng.randint(10 ** (size - 1), 10 ** size - 1)
    if rng.random() < 0.3:  # round figures and small tails, where the 'and' and the comma matter most
        pounds = pounds - pounds % rng.choice([10, 100, 1000]) + rng.choice([0, 0, 5, 12, 40])
        pounds = max(1, min(pounds, 999_999))
    question = pick(rng, _QUESTIONS).format(p=_figure(rng, pounds), crew=rng.choice(CREW), boat=rng.choice(BOATS),
                                            visitor=rng.choice(VISITORS))
    params = {"pounds": pounds}
    return {"question": question, "answer": solve(**params), "params": params}
