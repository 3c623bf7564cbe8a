"""Regatta ranking: evening-series places race by race; the boat at a given overall position after tie-breaks."""

from __future__ import annotations

import random

from samples.families._common import BOATS, ordinal, pick

NAME = "regatta_ranking"
DESCRIPTION = (
    "In the co-op's evening series every boat scores its finishing place in each race as points (1 for first) "
    "and the lowest total ranks first. A tie on total goes to the boat with more first places, then more "
    "second places, and so on; if still tied, to the boat that placed better in the last race. Answer the "
    "boat at the asked overall position (1 = winner)."
)


def rank_key(places: list[int], boats: int) -> tuple:
    counts = tuple(-places.count(k) for k in range(1, boats + 1))
    return (sum(places), *counts, places[-1])


def solve(results: dict[str, list[int]], position: int) -> str:
    order = sorted(results, key=lambda b: rank_key(results[b], len(results)))
    if not 1 <= position <= len(order):
        raise ValueError(f"position {position} outside 1..{len(order)}")
    return order[position - 1]


_LINES = [
    lambda b, p: f"{b} " + "-".join(map(str, p)),
    lambda b, p: f"{b}: " + ", ".join(map(str, p)),
    lambda b, p: f"{b} placed " + ", ".join(map(str, p)),
]
_QUESTIONS = [
    ("Evening series, places race by race: ", "{lines}. Which boat is {ord} overall?"),
    ("", "{lines}. Those are the places in {n} races. Who comes {ord} in the series?"),
    ("Series results so far, by race: ", "{lines}. With the co-op's tie-breaks, which boat places {ord}?"),
    ("Who is {ord} on points? ", "Places in each race: {lines}."),
]


def generate(rng: random.Random) -> dict:
    while True:
        boats = rng.sample(BOATS, rng.randint(3, 6))
        races = rng.randint(2, 5)
        columns = [rng.sample(range(1, len(boats) + 1), len(boats)) for _ in range(races)]
        results = {b: [col[i] for col in columns] for i, b in enumerate(boats)}
        totals = [sum(p) for p in results.values()]
        position = rng.randint(1, len(boats))
        target = solve(results, position)
        if totals.count(sum(results[target])) == 1 and rng.random() < 0.6:
            continue  # mostly ask about a place where a tie had to be broken
        form = rng.choice(_LINES)
        lines = "; ".join(form(b, p) for b, p in results.items())
        lead, rest = pick(rng, _QUESTIONS)
        question = (lead + rest).format(lines=lines, n=races, ord=ordinal(position))
        if len(question.split()) <= 75:
            params = {"results": results, "position": position}
            return {"question": question, "answer": target, "params": params}
