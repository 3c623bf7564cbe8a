"""Licence expiry: a mooring licence from a date written with a month name, for so many months; its last day."""

from __future__ import annotations

import calendar
import datetime as dt
import random

from samples.families._common import BOATS, pick

from ._dates import read_date, write_date

NAME = "licence_expiry"
DESCRIPTION = (
    "A mooring licence starts on a date written with a month name and runs for a whole number of months. It "
    "expires on the same day of the month that many months later; when that month is too short for the day, "
    "on the last day of that month. Answer the expiry date as YYYY-MM-DD."
)


def solve(start: str, months: int) -> str:
    if months <= 0:
        raise ValueError("a licence runs for at least one month")
    first = read_date(start)
    index = first.year * 12 + first.month - 1 + months
    year, month = divmod(index, 12)
    month += 1
    day = min(first.day, calendar.monthrange(year, month)[1])
    return dt.date(year, month, day).isoformat()


def case(task: dict) -> bool:
    """Which branch of the rule a task shows: the start day kept, or cut back to a shorter month's last day."""
    return read_date(task["params"]["start"]).day == int(task["answer"][-2:])


_QUESTIONS = [
    "The {boat}'s mooring licence began on {d} and runs {n}. On what date does it expire?",
    "Licence for the {boat}: start {d}, term {n}. Expiry date?",
    "If a licence of {n} is taken out on {d}, when does it run out?",
    "Renewal note: the {boat} took a mooring for {n} from {d}. Give the expiry date.",
    "Swinging mooring let on {d} for {n}. Which day does the licence expire?",
]


def generate(rng: random.Random) -> dict:
    cut_back = rng.random() < 0.25  # a quarter of the tasks land on a month too short for the start day
    while True:
        year, month = rng.randint(2025, 2028), rng.randint(1, 12)
        top = calendar.monthrange(year, month)[1]
        day = rng.randint(top - 2, top) if cut_back or rng.random() < 0.3 else rng.randint(1, top)
        months = rng.choice([1, 2, 3, 3, 4, 6, 6, 9, 12, 12, 13, 18])
        params = {"start": write_date(rng, dt.date(year, month, day)), "months": months}
        answer = solve(**params)
        if not cut_back or int(answer[-2:]) != day:
            break
    term = "1 month" if months == 1 else f"{months} months"
    question = pick(rng, _QUESTIONS).format(boat=rng.choice(BOATS), d=params["start"], n=term)
    return {"question": question, "answer": answer, "params": params}
