"""Berth order: boats on berths 1..n (west to east), notes about where they lie; which boat is on berth k?"""

from __future__ import annotations

import itertools
import random

from ._common import BOATS, COUNT_WORDS, join_and, pick

NAME = "berth_order"
DESCRIPTION = (
    "Boats are moored one per berth at berths 1..n numbered from west to east; from clues about their "
    "places, answer the name of the boat at the asked berth (the name without 'the')."
)

# kind -> test on the berth numbers; pair clues compare boat a with boat b, place clues put boat a at a berth
PAIR_KINDS = {
    "directly_east": lambda a, b: a == b + 1,
    "directly_west": lambda a, b: a == b - 1,
    "east_of": lambda a, b: a > b,
    "west_of": lambda a, b: a < b,
    "next_to": lambda a, b: abs(a - b) == 1,
}
PLACE_KINDS = {
    "at": lambda a, k: a == k,
    "not_at": lambda a, k: a != k,
}


def holds(clue: dict, place: dict[str, int]) -> bool:
    kind = clue["kind"]
    if kind in PAIR_KINDS:
        return PAIR_KINDS[kind](place[clue["a"]], place[clue["b"]])
    if kind in PLACE_KINDS:
        return PLACE_KINDS[kind](place[clue["a"]], clue["berth"])
    raise ValueError(f"unknown clue kind {kind!r}")


def arrangements(boats: list[str], clues: list[dict]) -> list[tuple[str, ...]]:
    """Every west-to-east order of the boats that satisfies all clues (brute force)."""
    found = []
    for order in itertools.permutations(boats):
        place = {b: i + 1 for i, b in enumerate(order)}
        if all(holds(c, place) for c in clues):
            found.append(order)
    return found


def solve(boats: list[str], clues: list[dict], berth: int) -> str:
    """The boat at `berth`; raises ValueError when the clues leave it open or contradict each other."""
    names = {order[berth - 1] for order in arrangements(boats, clues)}
    if len(names) != 1:
        raise ValueError(f"clues allow {len(names)} boats at berth {berth}")
    return names.pop()


# Berths are numbered from the west end of the quay, so "east" means a higher berth number.
_PHRASES = {
    "at": ["The {a} took berth {k}.", "Berth {k} went to the {a}.", "The {a} is tied up on berth {k}."],
    "not_at": ["The {a} is not on berth {k}.", "Whoever has berth {k}, it is not the {a}.",
               "Berth {k} was not given to the {a}."],
    "directly_east": ["The {a} is the eastern neighbour of the {b}.",
                      "The {a} and the {b} lie side by side, with the {a} to the east.",
                      "The {a} has the berth numbered one above that of the {b}."],
    "directly_west": ["The {a} is the western neighbour of the {b}.",
                      "The {a} and the {b} lie side by side, with the {a} to the west.",
                      "The {a} has the berth numbered one below that of the {b}."],
    "east_of": ["The {a} has a higher berth number than the {b}.",
                "Walking the quay from the west end you pass the {b} before the {a}.",
                "The {b} lies on the western side of the {a}, not necessarily alongside."],
    "west_of": ["The {a} has a lower berth number than the {b}.",
                "Walking the quay from the west end you pass the {a} before the {b}.",
                "The {b} lies on the eastern side of the {a}, not necessarily alongside."],
    "next_to": ["The {a} and the {b} are on neighbouring berths.",
                "The {a} lies alongside the {b}, on one side or other.", "The {a} and the {b} share a fender."],
}
_INTROS = [
    "Note for the berthing master: the {list} are in tonight, one to a berth on berths 1 to {n}, "
    "berth 1 at the west end.",
    "Berth sheet, berths 1-{n} counted from the west: the {list}, one boat each, order not yet written up.",
    "{N} boats tied up overnight on berths 1 to {n} (numbered west to east): the {list}.",
    "Quay log. Berths 1 to {n} run from the west end eastwards and hold the {list}.",
]
_ASKS = ["Which boat is on berth {k}?", "Who has berth {k}?", "What should the sheet show for berth {k}?",
         "Please confirm the boat on berth {k}."]
# the same request as a note put ahead of the facts
_NOTES = ["Berth {k} is still blank on the berth sheet: which boat is it?",
          "Query from the harbour office: who is on berth {k}?"]


def _true_clues(order: list[str], berth: int) -> list[dict]:
    place = {b: i + 1 for i, b in enumerate(order)}
    pool = []
    for a, b in itertools.permutations(order, 2):
        for kind in PAIR_KINDS:
            if kind == "next_to" and a > b:
                continue
            clue = {"kind": kind, "a": a, "b": b}
            if holds(clue, place):
                pool.append(clue)
    for a in order:
        for k in range(1, len(order) + 1):
            if k == berth:  # a clue naming the asked berth would give the answer away
                continue
            for kind in PLACE_KINDS:
                clue = {"kind": kind, "a": a, "berth": k}
                if holds(clue, place):
                    pool.append(clue)
    return pool


def _phrase(rng: random.Random, clue: dict) -> str:
    return pick(rng, _PHRASES[clue["kind"]]).format(a=clue["a"], b=clue.get("b"), k=clue.get("berth"))


def generate(rng: random.Random) -> dict:
    while True:
        n = rng.choice([3, 4, 4, 5])
        boats = rng.sample(BOATS, n)
        order = boats[:]
        rng.shuffle(order)
        berth = rng.randint(1, n)
        pool = _true_clues(order, berth)
        rng.shuffle(pool)
        clues: list[dict] = []
        for clue in pool:
            clues.append(clue)
            if len({o[berth - 1] for o in arrangements(boats, clues)}) == 1:
                break
        for clue in clues[:]:  # drop clues the answer does not need
            rest = [c for c in clues if c is not clue]
            if len({o[berth - 1] for o in arrangements(boats, rest)}) == 1:
                clues = rest
        rng.shuffle(clues)
        listed = boats[:]
        rng.shuffle(listed)
        intro = pick(rng, _INTROS).format(N=COUNT_WORDS[n].capitalize(), n=n, list=join_and(listed))
        facts = [_phrase(rng, c) for c in clues]
        if rng.random() < 0.3:
            parts = [pick(rng, _NOTES).format(k=berth), intro] + facts
        else:
            parts = [intro] + facts + [pick(rng, _ASKS).format(k=berth)]
        question = " ".join(parts)
        if len(question.split()) <= 70:
            params = {"boats": listed, "clues": clues, "berth": berth}
            return {"question": question, "answer": solve(**params), "params": params}


CLASSES = {
    "first_berth_asked": "berth 1 is asked",
    "last_berth_asked": "the last berth is asked",
    "three_boats": "the fewest boats (3)",
    "five_boats": "the most boats the generator draws (5)",
    **{f"clue_{kind}": f"a clue of the kind {kind}" for kind in (*PAIR_KINDS, *PLACE_KINDS)},
}


def classes(task: dict) -> set[str]:
    """The boundary classes of one generated task (see CLASSES)."""
    params, answer = task["params"], task["answer"]
    n, k = len(params["boats"]), params["berth"]
    found = {f"clue_{c['kind']}" for c in params["clues"]}
    if k == 1:
        found.add("first_berth_asked")
    if k == n:
        found.add("last_berth_asked")
    if n == 3:
        found.add("three_boats")
    if n == 5:
        found.add("five_boats")
    return found
