"""Crate hand-offs: crew members each hold a crate, pairs swap in turn; who holds a given crate at the end?"""

from __future__ import annotations

import random

from ._common import CRATES, CREW, join_and, pick

NAME = "crate_handoffs"
DESCRIPTION = (
    "Crew members each start with one crate and named pairs swap crates in the order given; "
    "answer the name of the crew member who holds the asked crate after the last swap."
)


def solve(holdings: dict[str, str], swaps: list[list[str]], crate: str) -> str:
    """Replay the swaps on a person -> crate map and return who ends with `crate`."""
    held = dict(holdings)
    for a, b in swaps:
        if a == b or a not in held or b not in held:
            raise ValueError(f"bad swap {a!r} <-> {b!r}")
        held[a], held[b] = held[b], held[a]
    owners = [p for p, c in held.items() if c == crate]
    if len(owners) != 1:
        raise ValueError(f"crate {crate!r} is held by {len(owners)} people")
    return owners[0]


_STARTS = [
    ("At the start of the shift ", "{p} holds the {c} crate", "."),
    ("", "{p} has the {c} crate", "."),
    ("Crates at the start: ", "{p} the {c} crate", "."),
]
_SWAP_STYLES = [
    ("Then, in order: ", "{a} and {b} swap crates", "; ", "."),
    ("Swaps in order: ", "{a} with {b}", ", ", "."),
    ("Pairs trade crates in this order: ", "{a} and {b}", ", then ", "."),
]
_QUESTIONS = [
    "Who holds the {c} crate at the end?",
    "Who ends up with the {c} crate?",
    "Which crew member has the {c} crate after the last swap?",
]


def generate(rng: random.Random) -> dict:
    while True:
        n = rng.choice([3, 3, 4, 4, 5])
        people = rng.sample(CREW, n)
        crates = rng.sample(CRATES, n)
        holdings = dict(zip(people, crates))
        count = rng.randint(2, 6)
        swaps: list[list[str]] = []
        while len(swaps) < count:
            pair = rng.sample(people, 2)
            if not swaps or set(pair) != set(swaps[-1]):  # a pair swapping twice running would undo itself
                swaps.append(pair)
        crate = rng.choice(crates)
        lead, item, end = pick(rng, _STARTS)
        start = lead + join_and([item.format(p=p, c=c) for p, c in holdings.items()]) + end
        lead, item, sep, end = pick(rng, _SWAP_STYLES)
        swap_text = lead + sep.join(item.format(a=a, b=b) for a, b in swaps) + end
        question = " ".join([start, swap_text, pick(rng, _QUESTIONS).format(c=crate)])
        if len(question.split()) > 70:
            continue
        params = {"holdings": holdings, "swaps": swaps, "crate": crate}
        return {"question": question, "answer": solve(**params), "params": params}
