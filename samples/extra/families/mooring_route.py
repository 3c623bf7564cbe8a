"""Mooring route: channel legs between named moorings; the shortest way from one to another, in cables."""

from __future__ import annotations

import heapq
import random

from samples.families._common import pick

from ._names import MOORINGS

NAME = "mooring_route"
DESCRIPTION = (
    "The harbour chart gives channel legs between named moorings with their lengths in cables; any leg can be "
    "run either way and the number of legs varies. Answer the length in cables (an integer) of the shortest "
    "way from the first named mooring to the second."
)


def solve(legs: list[list], start: str, end: str) -> int:
    """Dijkstra over the legs, each an undirected edge [place, place, cables]."""
    near: dict[str, list[tuple[str, int]]] = {}
    for a, b, cables in legs:
        near.setdefault(a, []).append((b, cables))
        near.setdefault(b, []).append((a, cables))
    best = {start: 0}
    todo = [(0, start)]
    while todo:
        dist, here = heapq.heappop(todo)
        if here == end:
            return dist
        if dist > best.get(here, dist):
            continue
        for there, cables in near.get(here, []):
            if dist + cables < best.get(there, dist + cables + 1):
                best[there] = dist + cables
                heapq.heappush(todo, (dist + cables, there))
    raise ValueError(f"no way from {start} to {end}")


_LEGS = [
    lambda a, b, d: f"{a} to {b} {_cables(d)}",
    lambda a, b, d: f"{a}-{b}: {_cables(d)}",
    lambda a, b, d: f"from {a} to {b} is {_cables(d)}",
]


def _cables(d: int) -> str:
    return "1 cable" if d == 1 else f"{d} cables"


_QUESTIONS = [
    ("Chart legs: ", "{legs}. What is the shortest run from {s} to {e}, in cables?"),
    ("The tender has to get from {s} to {e}. ", "Legs: {legs}. How many cables is the shortest way?"),
    ("", "{legs}. Shortest distance {s} to {e}?"),
    ("Pilot's notes. ", "{legs}. Fewest cables from {s} to {e}?"),
]


def generate(rng: random.Random) -> dict:
    while True:
        places = rng.sample(MOORINGS, rng.randint(4, 6))
        order = places[:]
        rng.shuffle(order)
        pairs = {tuple(sorted((order[i], order[i + 1]))) for i in range(len(order) - 1)}  # connected
        while len(pairs) < min(len(places) + rng.randint(0, 3), len(places) * (len(places) - 1) // 2):
            pairs.add(tuple(sorted(rng.sample(places, 2))))
        legs = [[a, b, rng.randint(1, 12)] for a, b in sorted(pairs)]
        rng.shuffle(legs)
        legs = [leg if rng.random() < 0.5 else [leg[1], leg[0], leg[2]] for leg in legs]
        start, end = rng.sample(places, 2)
        direct = [leg[2] for leg in legs if {leg[0], leg[1]} == {start, end}]
        answer = solve(legs, start, end)
        if direct and direct[0] == answer and rng.random() < 0.7:
            continue  # mostly ask where the direct leg, if any, is not the shortest way
        form = rng.choice(_LEGS)
        text = "; ".join(form(a, b, d) for a, b, d in legs)
        lead, rest = pick(rng, _QUESTIONS)
        if not lead or lead.endswith(". "):  # the list of legs starts a sentence
            text = text[0].upper() + text[1:]
        question = (lead + rest).format(legs=text, s=start, e=end)
        if len(question.split()) <= 75:
            params = {"legs": legs, "start": start, "end": end}
            return {"question": question, "answer": answer, "params": params}
