"""Working days: yard working days between two dates, both counted, without weekends and co-op holidays."""

from __future__ import annotations

import datetime as dt
import random

from ._common import BOATS, join_and, pick

NAME = "working_days"
DESCRIPTION = (
    "Count the yard working days from a start date to an end date, both dates included (YYYY-MM-DD), "
    "leaving out Saturdays, Sundays and the co-op holidays listed in the question; answer an integer."
)


def solve(start: str, end: str, holidays: list[str]) -> int:
    first, last = dt.date.fromisoformat(start), dt.date.fromisoformat(end)
    if last < first:
        raise ValueError("end date before start date")
    off = {dt.date.fromisoformat(h) for h in holidays}
    days = (first + dt.timedelta(days=i) for i in range((last - first).days + 1))
    return sum(1 for d in days if d.weekday() < 5 and d not in off)


def _holiday_text(rng: random.Random, holidays: list[str]) -> str:
    if not holidays:
        return pick(rng, ["No co-op holidays apply.", "No co-op holidays fall in between."])
    noun = "holiday" if len(holidays) == 1 else "holidays"
    return pick(rng, [
        f"The yard is also shut on the co-op {noun} {join_and(holidays)}.",
        f"Co-op {noun}: {', '.join(holidays)}.",
        f"The co-op closes the yard on {join_and(holidays)}.",
    ])


def generate(rng: random.Random) -> dict:
    first = dt.date(2024, 1, 1) + dt.timedelta(days=rng.randrange(4 * 365))
    last = first + dt.timedelta(days=rng.choice([0, 1, 2]) if rng.random() < 0.12 else rng.randint(0, 45))
    span = (last - first).days
    holidays = set()
    for _ in range(rng.choice([0, 1, 1, 2, 2, 3])):
        holidays.add(first + dt.timedelta(days=rng.randint(-3, span + 3)))  # a few fall outside the range
    hols = [h.isoformat() for h in sorted(holidays)]
    if rng.random() < 0.3:
        rng.shuffle(hols)
    s, e = first.isoformat(), last.isoformat()
    form = rng.randrange(4)
    if form == 0:
        question = (f"How many yard working days are there from {s} to {e}, counting both days? "
                    f"Weekends are off. " + _holiday_text(rng, hols))
    elif form == 1:
        question = (f"Saturdays and Sundays are off. {_holiday_text(rng, hols)} "
                    f"How many working days are there from {s} through {e} inclusive?")
    elif form == 2:
        question = (f"Slipway note: the {rng.choice(BOATS)} is booked in from {s} until {e}, and both days count. "
                    f"The yard works Monday to Friday. {_holiday_text(rng, hols)} "
                    f"How many working days does the booking cover?")
    else:
        question = (f"The {rng.choice(BOATS)} is in the yard from {s} to {e}, both days included. "
                    f"Not counting weekends or co-op holidays, how many working days is that? "
                    + _holiday_text(rng, hols))
    params = {"start": s, "end": e, "holidays": hols}
    return {"question": question, "answer": solve(**params), "params": params}


CLASSES = {
    "single_day": "the start and end date are the same day",
    "no_working_day": "the answer is 0",
    "starts_on_weekend": "the start date is a Saturday or Sunday",
    "holiday_on_weekend": "a listed holiday falls on a weekend inside the range (it must not count twice)",
    "holiday_outside_range": "a listed holiday lies outside the range",
    "crosses_month_end": "the range runs into another month",
    "crosses_year_end": "the range runs into another year",
}


def classes(task: dict) -> set[str]:
    """The boundary classes of one generated task (see CLASSES)."""
    params, answer = task["params"], task["answer"]
    first, last = dt.date.fromisoformat(params["start"]), dt.date.fromisoformat(params["end"])
    hols = [dt.date.fromisoformat(h) for h in params["holidays"]]
    found = set()
    if first == last:
        found.add("single_day")
    if answer == 0:
        found.add("no_working_day")
    if first.weekday() >= 5:
        found.add("starts_on_weekend")
    if any(first <= h <= last and h.weekday() >= 5 for h in hols):
        found.add("holiday_on_weekend")
    if any(not first <= h <= last for h in hols):
        found.add("holiday_outside_range")
    if (first.year, first.month) != (last.year, last.month):
        found.add("crosses_month_end")
    if first.year != last.year:
        found.add("crosses_year_end")
    return found
