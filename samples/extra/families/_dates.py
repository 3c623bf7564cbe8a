"""Dates written the way the harbour office writes them (month names, several orders) and read back."""

from __future__ import annotations

import datetime as dt
import random
import re

MONTHS = ["January", "February", "March", "April", "May", "June", "July", "August", "September", "October",
          "November", "December"]
WEEKDAYS = ["Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday"]
_MONTH_NUMBER = {m[:3].lower(): i for i, m in enumerate(MONTHS, 1)}


def suffixed(day: int) -> str:
    """1 -> '1st', 22 -> '22nd', 13 -> '13th'."""
    if 10 <= day % 100 <= 20:
        return f"{day}th"
    return f"{day}{ {1: 'st', 2: 'nd', 3: 'rd'}.get(day % 10, 'th') }"


def write_date(rng: random.Random, date: dt.date) -> str:
    """One of several office spellings of a date, always with the month as a word."""
    month, short = MONTHS[date.month - 1], MONTHS[date.month - 1][:3]
    forms = [
        f"{date.day} {month} {date.year}",
        f"{month} {date.day}, {date.year}",
        f"{suffixed(date.day)} {month} {date.year}",
        f"{suffixed(date.day)} of {month} {date.year}",
        f"{date.day} {short} {date.year}",
        f"{WEEKDAYS[date.weekday()]} {date.day} {month} {date.year}",
    ]
    return forms[rng.randrange(len(forms))]


def read_date(text: str) -> dt.date:
    """The date in any form `write_date` makes: a day number, a month word (full or first three letters) and a
    four-digit year, in any order; a weekday name is ignored."""
    words = re.findall(r"[A-Za-z]+|\d+", text)
    year = [int(w) for w in words if w.isdigit() and len(w) == 4]
    day = [int(w) for w in words if w.isdigit() and len(w) <= 2]
    months = [_MONTH_NUMBER[w[:3].lower()] for w in words
              if w.isalpha() and w[:3].lower() in _MONTH_NUMBER and w.lower() not in ("st", "nd", "rd", "th")]
    if len(year) != 1 or len(day) != 1 or len(months) != 1:
        raise ValueError(f"not a date with a month name: {text!r}")
    return dt.date(year[0], months[0], day[0])
