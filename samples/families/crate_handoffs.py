"""Crate hand-offs: crew members each sign out a crate, then hand crates over in logged exchanges; who has the
asked crate after the last one?"""

from __future__ import annotations

import random

from ._common import CRATES, CREW, pick

NAME = "crate_handoffs"
DESCRIPTION = (
    "Crew members each start with one crate, then two named crew members at a time exchange crates, in the order "
    "logged; "
    "answer the name of the crew member who has the asked crate after the last exchange."
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


# The stores book's opening line: (lead, one person's entry, joiner of entries, end).
_STARTS = [
    ("Signed out of the store this morning: ", "{p} the {c} crate", ", ", "."),
    ("Stores book: ", "the {c} crate to {p}", ", ", "."),
    ("Out on the quay first thing were the ", "{c} crate with {p}", ", the ", "."),
    ("", "{p} signed for the {c} crate", "; ", "."),
]
# The hand-offs, each a straight exchange of the two people's crates, in the order logged.
_HANDOFFS = [
    ("Crates then changed hands between ", "{a} and {b}", ", then between ", "."),
    ("Hand-offs logged since, each a straight exchange: ", "{a}/{b}", ", ", "."),
    ("After that, in this order, ", "{a} exchanged crates with {b}", "; ", "."),
    ("The day log shows these exchanges of crates, oldest first: ", "{a} with {b}", "; ", "."),
]
_ASKS = [
    "Whose hands is the {c} crate in now?",
    "Who is signed for the {c} crate after the last hand-off?",
    "Which of them should the storeman ask for the {c} crate now?",
    "Who has the {c} crate at this point?",
]
# the same request as a note put ahead of the log
_NOTES = [
    "The storeman is after the {c} crate.",
    "Query from the store: who has the {c} crate now?",
    "Note for the stores: find out who is carrying the {c} crate.",
]


def _listing(style: tuple[str, str, str, str], entries: list[str]) -> str:
    """lead + entries + end; a comma joiner puts "and" before the last entry ("a, b and c")."""
    lead, _, joiner, end = style
    if joiner.startswith(", ") and len(entries) > 1:
        return lead + joiner.join(entries[:-1]) + " and " + joiner[2:] + entries[-1] + end
    return lead + joiner.join(entries) + end


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
            if not swaps or set(pair) != set(swaps[-1]):  # the same pair twice running would undo itself
                swaps.append(pair)
        crate = rng.choice(crates)
        style = pick(rng, _STARTS)
        start = _listing(style, [style[1].format(p=p, c=c) for p, c in holdings.items()])
        style = pick(rng, _HANDOFFS)
        handoffs = _listing(style, [style[1].format(a=a, b=b) for a, b in swaps])
        if rng.random() < 0.3:
            parts = [pick(rng, _NOTES).format(c=crate), start, handoffs]
        else:
            parts = [start, handoffs, pick(rng, _ASKS).format(c=crate)]
        question = " ".join(parts)
        if len(question.split()) > 70:
            continue
        params = {"holdings": holdings, "swaps": swaps, "crate": crate}
        return {"question": question, "answer": solve(**params), "params": params}
