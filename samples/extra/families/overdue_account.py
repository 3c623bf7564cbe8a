"""Overdue account: an unpaid chandlery bill gathering monthly interest, compounded, rounded to the penny."""

from __future__ import annotations

import random
from decimal import ROUND_HALF_UP, Decimal

from samples.families._common import BOATS, CREW, pick

NAME = "overdue_account"
DESCRIPTION = (
    "An unpaid chandlery account gathers interest at the given percentage per month, compounded monthly, for "
    "the given number of whole months; answer the amount then owed in pounds, rounded to the nearest penny "
    "(half a penny rounds up), with two decimals, e.g. \"336.63\"."
)


def solve(balance: float, rate_percent: float, months: int) -> str:
    if balance < 0 or rate_percent < 0 or months < 0:
        raise ValueError("balance, rate and months are not negative")
    owed = Decimal(str(balance)) * (1 + Decimal(str(rate_percent)) / 100) ** months
    return str(owed.quantize(Decimal("0.01"), rounding=ROUND_HALF_UP))


def _money(balance: float) -> str:
    return f"£{balance:.2f}"


_QUESTIONS = [
    "The {boat}'s chandlery bill of {b} has gone {n} months unpaid at {r}% a month, compounded monthly. What "
    "is owed now?",
    "Account overdue: {b}, {n} months, interest {r}% per month compounding. Amount due to the penny?",
    "{crew} owes the chandlery {b} from {n} months back. With {r}% monthly interest compounded, how much "
    "should the statement show?",
    "Interest on late accounts is {r}% per month, compounded. The {boat} has owed {b} for {n} months. Total due?",
    "Statement run: {b} outstanding for {n} months on the {boat}'s account, {r}% a month compound. What do we "
    "ask for?",
]


def generate(rng: random.Random) -> dict:
    pence = rng.randint(20, 1800) * 5 if rng.random() < 0.6 else rng.randint(1000, 90000)
    balance = pence / 100
    rate = rng.choice([1, 1.25, 1.5, 1.5, 2, 2.5, 0.75, 3])
    months = rng.randint(2, 14)
    question = pick(rng, _QUESTIONS).format(b=_money(balance), n=months, r=rate, boat=rng.choice(BOATS),
                                            crew=rng.choice(CREW))
    params = {"balance": balance, "rate_percent": rate, "months": months}
    return {"question": question, "answer": solve(**params), "params": params}
