"""Manifest order: the yard office sorts cargo labels by prefix, then by number; which label is at position k?"""

from __future__ import annotations

import random

from ._common import BOATS, ordinal, pick

NAME = "manifest_order"
DESCRIPTION = (
    "Cargo labels look like PREFIX-NUMBER (e.g. NET-12); the yard office sorts them by prefix alphabetically, "
    "then by number from low to high; answer the label at the asked position (1 = first)."
)

PREFIXES = ["NET", "ROPE", "TAR", "BAIT", "ICE", "SALT", "CORK", "FLOAT", "CHAIN", "BUOY", "CRAB", "KELP", "LINE",
            "OAR", "TWINE"]


def sort_key(label: str) -> tuple[str, int]:
    prefix, _, number = label.strip().rpartition("-")
    return prefix, int(number)


def solve(labels: list[str], position: int) -> str:
    ordered = sorted(labels, key=sort_key)
    if not 1 <= position <= len(ordered):
        raise ValueError(f"position {position} outside 1..{len(ordered)}")
    return ordered[position - 1]


_QUESTIONS = [
    "Cargo labels: {labels}. In yard office order, which label is {ord}?",
    "Sort these labels the yard office way: {labels}. Which label comes in position {k}?",
    "The {boat} manifest lists {labels}. Sorted by prefix alphabetically and then by number, which label is {ord}?",
    "In the yard office's order, what is label number {k} among {labels}?",
    "Today's pile of labels: {labels}. The office files them by prefix in alphabetical order, then by number, "
    "smallest first. Which one is filed {ord}?",
]


def generate(rng: random.Random) -> dict:
    n = rng.randint(4, 7)
    prefixes = rng.sample(PREFIXES, 1 if rng.random() < 0.08 else rng.randint(2, min(4, n - 1)))
    labels: set[str] = set()
    while len(labels) < n:
        top = rng.choice([9, 30, 150])
        labels.add(f"{rng.choice(prefixes)}-{rng.randint(1, top)}")
    listed = list(labels)
    listed.sort()
    rng.shuffle(listed)
    position = rng.randint(1, n)
    question = pick(rng, _QUESTIONS).format(labels=", ".join(listed), ord=ordinal(position), k=position,
                                            boat=rng.choice(BOATS))
    params = {"labels": listed, "position": position}
    return {"question": question, "answer": solve(**params), "params": params}


CLASSES = {
    "first_position": "the first label is asked",
    "last_position": "the last label is asked",
    "one_prefix": "every label has the same prefix",
    "numbers_differ_from_text_order": "sorting the numbers as text would put the asked label elsewhere",
}


def classes(task: dict) -> set[str]:
    """The boundary classes of one generated task (see CLASSES)."""
    params, answer = task["params"], task["answer"]
    labels, k = params["labels"], params["position"]
    found = set()
    if k == 1:
        found.add("first_position")
    if k == len(labels):
        found.add("last_position")
    if len({lab.split("-")[0] for lab in labels}) == 1:
        found.add("one_prefix")
    if sorted(labels)[k - 1] != answer:
        found.add("numbers_differ_from_text_order")
    return found
