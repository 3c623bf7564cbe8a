"""Landing tally: the day's landing book, one entry per boat and species; the total boxes of one species."""

from __future__ import annotations

import random

from samples.families._common import BOATS, pick

from ._names import SPECIES

NAME = "landing_tally"
DESCRIPTION = (
    "The landing book lists how many boxes each boat landed of each species; a boat may appear more than "
    "once and the number of entries varies. Answer the total number of boxes of the asked species (an integer)."
)

NUMBER_WORDS = ["zero", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten", "eleven",
                "twelve"]


def solve(landings: list[dict], species: str) -> int:
    return sum(entry["boxes"] for entry in landings if entry["species"] == species)


def _count(rng: random.Random, n: int, words: bool) -> str:
    return NUMBER_WORDS[n] if words and n < len(NUMBER_WORDS) and rng.random() < 0.5 else str(n)


def _boxes(n: int) -> str:
    return "box" if n == 1 else "boxes"


def _entries(rng: random.Random, landings: list[dict]) -> str:
    style = rng.randrange(3)
    if style == 0:
        return "; ".join(f"{e['boat']} {e['boxes']} {e['species']}" for e in landings) + "."
    if style == 1:
        return " ".join(f"{e['boat']} landed {_count(rng, e['boxes'], True)} {_boxes(e['boxes'])} of {e['species']}."
                        for e in landings)
    return ", ".join(f"{e['species']} {e['boxes']} ({e['boat']})" for e in landings) + "."


_QUESTIONS = [
    ("Landing book, today: ", "{entries} How many boxes of {s} came in altogether?"),
    ("", "{entries} What is the day's {s} tally in boxes?"),
    ("Total {s} boxes, please. ", "The book shows: {entries}"),
    ("Quay slips so far: ", "{entries} Boxes of {s} in all?"),
    ("For the {s} buyer: how many boxes were landed? ", "Entries: {entries}"),
]


def generate(rng: random.Random) -> dict:
    while True:
        kinds = rng.sample(SPECIES, rng.randint(2, 4))
        boats = rng.sample(BOATS, rng.randint(2, 5))
        landings = [{"boat": rng.choice(boats), "boxes": rng.randint(1, 40), "species": rng.choice(kinds)}
                    for _ in range(rng.randint(3, 9))]
        asked = rng.choice([e["species"] for e in landings])
        lead, rest = pick(rng, _QUESTIONS)
        question = (lead + rest).format(entries=_entries(rng, landings), s=asked)
        if len(question.split()) <= 75:
            params = {"landings": landings, "species": asked}
            return {"question": question, "answer": solve(**params), "params": params}
