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
        count = rng.randint(1, 6)
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


CLASSES = {
    "asked_crate_never_moved": "no exchange touches the asked crate's first holder's crate",
    "asked_crate_back_home": "the asked crate moved but ends with whoever started with it",
    "one_exchange": "a single exchange",
    "someone_never_exchanges": "a crew member takes part in no exchange",
    "five_crew": "the most crew the generator draws (5)",
    "same_pair_again_later": "one pair exchanges twice, not in a row",
}


def classes(task: dict) -> set[str]:
    """The boundary classes of one generated task (see CLASSES)."""
    params, answer = task["params"], task["answer"]
    holdings, swaps, crate = params["holdings"], params["swaps"], params["crate"]
    first = next(p for p, c in holdings.items() if c == crate)
    found = set()
    held, moved = dict(holdings), False
    for a, b in swaps:
        moved |= crate in (held[a], held[b])
        held[a], held[b] = held[b], held[a]
    if not moved:
        found.add("asked_crate_never_moved")
    elif answer == first:
        found.add("asked_crate_back_home")
    if len(swaps) == 1:
        found.add("one_exchange")
    if set(holdings) - {p for s in swaps for p in s}:
        found.add("someone_never_exchanges")
    if len(holdings) == 5:
        found.add("five_crew")
    pairs = [frozenset(s) for s in swaps]
    if len(set(pairs)) < len(pairs):
        found.add("same_pair_again_later")
    return found
