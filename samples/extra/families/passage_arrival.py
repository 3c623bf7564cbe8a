"""Passage arrival: leave one port at a local date and time, sail so long, arrive where clocks keep another
UTC offset; the local arrival time there, across midnights and month ends."""

from __future__ import annotations

import datetime as dt
import random
import re

from samples.families._common import BOATS, pick

from ._dates import read_date, write_date
from ._names import PORTS

NAME = "passage_arrival"
DESCRIPTION = (
    "A boat leaves a port at a local date (written with a month name) and time; that port keeps one UTC "
    "offset, the destination keeps another (both given as UTC+N or UTC-N hours). It is on passage for the "
    "given hours and minutes. Answer the local date and time of arrival at the destination as "
    "\"YYYY-MM-DD HH:MM\"."
)

_OFFSET = re.compile(r"^UTC([+-]\d{1,2})$")


def offset_hours(text: str) -> int:
    m = _OFFSET.match(text.strip())
    if not m:
        raise ValueError(f"not a UTC offset like UTC+1: {text!r}")
    return int(m.group(1))


def solve(depart_date: str, depart_time: str, from_offset: str, to_offset: str, hours: int, minutes: int) -> str:
    h, m = (int(x) for x in depart_time.split(":"))
    leave = dt.datetime.combine(read_date(depart_date), dt.time(h, m))
    shift = offset_hours(to_offset) - offset_hours(from_offset)
    arrive = leave + dt.timedelta(hours=hours + shift, minutes=minutes)
    return arrive.strftime("%Y-%m-%d %H:%M")


def case(task: dict) -> bool:
    """Whether the arrival falls in another month than the departure."""
    return read_date(task["params"]["depart_date"]).month != int(task["answer"][5:7])


def _offset_text(hours: int) -> str:
    return f"UTC{hours:+d}"


_QUESTIONS = [
    "The {boat} clears {a} ({fa}) at {t} on {d}, bound for {b} ({fb}). The passage takes {h} hours {m} "
    "minutes. What is the local time of arrival there?",
    "Passage plan: depart {a} {d} {t} local ({fa}); {h} h {m} min on passage; arrive {b}, which keeps {fb}. "
    "Local arrival date and time?",
    "If the {boat} sails from {a} at {t} local time on {d} and is {h} hours and {m} minutes at sea, what will "
    "the clocks in {b} read when she arrives? {a} keeps {fa}, {b} keeps {fb}.",
    "{b} keeps {fb} and {a} keeps {fa}. Our boat leaves {a} on {d} at {t} and needs {h} hours {m} minutes to "
    "get to {b}. When does she arrive, {b} time?",
]


def generate(rng: random.Random) -> dict:
    leave = dt.datetime(2025, 1, 1) + dt.timedelta(days=rng.randrange(3 * 365), minutes=5 * rng.randrange(288))
    if rng.random() < 0.5:  # near a month end, so that arrivals often cross into the next month
        last = (leave.replace(day=28) + dt.timedelta(days=4)).replace(day=1) - dt.timedelta(days=1)
        leave = leave.replace(day=last.day - rng.randint(0, 2))
    a, b = rng.sample(PORTS, 2)
    fa, fb = rng.sample([-5, -4, -3, -2, -1, 1, 2, 3], 2)
    hours, minutes = rng.randint(3, 80), rng.choice(range(5, 60, 5))
    params = {"depart_date": write_date(rng, leave.date()), "depart_time": leave.strftime("%H:%M"),
              "from_offset": _offset_text(fa), "to_offset": _offset_text(fb), "hours": hours, "minutes": minutes}
    question = pick(rng, _QUESTIONS).format(boat=rng.choice(BOATS), a=a, b=b, fa=params["from_offset"],
                                            fb=params["to_offset"], t=params["depart_time"],
                                            d=params["depart_date"], h=hours, m=minutes)
    return {"question": question, "answer": solve(**params), "params": params}
