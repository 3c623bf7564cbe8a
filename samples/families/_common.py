"""Invented names and small wording helpers shared by the family generators."""

from __future__ import annotations

import random

BOATS = [
    "Kittiwake", "Dunlin", "Sandpiper", "Curlew", "Godwit", "Shearwater", "Samphire", "Marram",
    "Turnstone", "Sanderling", "Gannet", "Fulmar", "Saltwort", "Whimbrel", "Eelgrass", "Thrift",
]
CREW = [
    "Bram", "Tamsin", "Idris", "Morwenna", "Jory", "Nell", "Piran", "Elowen",
    "Cadan", "Senara", "Tegen", "Hesketh", "Ottilie", "Wenna", "Loveday", "Jago",
]
CRATES = ["rope", "tar", "bait", "ice", "salt", "flare", "net", "chain", "cork", "paint", "twine", "grease"]
COUNT_WORDS = {2: "two", 3: "three", 4: "four", 5: "five", 6: "six", 7: "seven"}


def join_and(items: list[str]) -> str:
    """'a', 'a and b', 'a, b and c'."""
    if len(items) == 1:
        return items[0]
    return ", ".join(items[:-1]) + " and " + items[-1]


def ordinal(k: int) -> str:
    """1 -> '1st', 2 -> '2nd', 11 -> '11th'."""
    if 10 <= k % 100 <= 20:
        return f"{k}th"
    suffix = {1: "st", 2: "nd", 3: "rd"}.get(k % 10, "th")
    return f"{k}{suffix}"


def pick(rng: random.Random, options: list[str]) -> str:
    return options[rng.randrange(len(options))]
