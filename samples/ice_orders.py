"""A kind of question the demo families do not cover, for trying `jigwright suggest`: how many crates of ice a
landing needs (one crate per so many kilograms of fish, a part crate counts as a whole one). Seeded, with its
reference answer; not one of the demo families.

    python samples/ice_orders.py 10 --seed 7 > ice.jsonl     # JSONL lines: id, question, answer
"""

from __future__ import annotations

import argparse
import json
import math
import random

BOATS = ["Merrow", "Bladderwrack", "Sea Pink", "Oarweed", "Limpet", "Cowrie", "Periwinkle", "Kelp Hen"]
FISH = ["hake", "pollack", "mackerel", "ling", "gurnard", "monkfish", "bass", "bream"]
WORDINGS = [
    "The {boat} is landing {kg} kg of {fish}; the ice house packs one crate of ice for every {per} kg, part crates "
    "rounded up. How many crates should they send down?",
    "Ice order for the {boat}: {kg} kg of {fish} coming ashore, one crate of ice per {per} kg (a part crate counts "
    "as a crate). Crates needed?",
    "How many crates of ice does a landing of {kg} kg of {fish} off the {boat} take, at one crate to each {per} kg "
    "and a whole crate for any part left over?",
    "Ice house note: {per} kg of fish to a crate, always round up. The {boat} has {kg} kg of {fish} on the quay. "
    "How many crates?",
    "{kg} kg of {fish} on the {boat}. At a crate of ice per {per} kg, rounding any part crate up, how many crates "
    "does the ice house load?",
]


def crates(kg: int, per: int) -> int:
    """The reference answer: whole crates covering kg at per kilograms each."""
    return math.ceil(kg / per)


def generate(n: int, seed: int = 0) -> list[dict]:
    rng = random.Random(seed)
    rows = []
    for i in range(n):
        per = rng.choice([20, 25, 30, 40, 50])
        kg = rng.randrange(60, 900)
        text = WORDINGS[i % len(WORDINGS)].format(boat=rng.choice(BOATS), fish=rng.choice(FISH), kg=kg, per=per)
        rows.append({"id": f"ice-{i + 1:02d}", "question": text, "answer": crates(kg, per)})
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description="Questions of one kind no demo family covers (ice orders).")
    ap.add_argument("n", type=int)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    for row in generate(args.n, args.seed):
        print(json.dumps(row))


if __name__ == "__main__":
    main()
