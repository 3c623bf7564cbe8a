"""Berth order: boats at berths 1..n (west to east), clues about their places; which boat is at berth k?"""

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


_PHRASES = {
    "at": ["The {a} is at berth {k}.", "The {a} is moored at berth {k}.", "Berth {k} holds the {a}."],
    "not_at": ["The {a} is not at berth {k}.", "Berth {k} does not hold the {a}."],
    "directly_east": ["The {a} is directly east of the {b}.", "The {a} is moored immediately east of the {b}.",
                      "Right to the east of the {b} is the {a}."],
    "directly_west": ["The {a} is directly west of the {b}.", "The {a} is moored immediately west of the {b}.",
                      "Right to the west of the {b} is the {a}."],
    "east_of": ["The {a} is somewhere east of the {b}.", "The {a} lies further east than the {b}."],
    "west_of": ["The {a} is somewhere west of the {b}.", "The {a} lies further west than the {b}."],
    "next_to": ["The {a} and the {b} are next to each other.", "The {a} is moored beside the {b}."],
}
_INTROS = [
    "{N} boats, the {list}, are moored at berths 1 to {n}, numbered from west to east.",
    "Berths 1 to {n} run west to east and hold the {list}, one boat each.",
    "The {list} occupy berths 1 to {n}, one each; berth 1 is the westernmost.",
]
_QUESTIONS = ["Which boat is at berth {k}?", "Who is moored at berth {k}?", "Name the boat at berth {k}."]


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
        question = " ".join([intro] + [_phrase(rng, c) for c in clues] + [pick(rng, _QUESTIONS).format(k=berth)])
        if len(question.split()) <= 70:
            params = {"boats": listed, "clues": clues, "berth": berth}
            return {"question": question, "answer": solve(**params), "params": params}
