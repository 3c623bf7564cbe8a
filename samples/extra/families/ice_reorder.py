"""Ice reorder: the ice house's reorder point rule, ordering back up to the shelf limit in whole pallets."""

from __future__ import annotations

import math
import random

from samples.families._common import CREW, pick

NAME = "ice_reorder"
DESCRIPTION = (
    "The ice house reorders when the bags in stock are at or below the reorder point, which is the daily use "
    "times the delivery lead time in days plus the safety stock. Then it orders enough bags to bring the stock "
    "back up to at least the maximum (top-up) level, in whole pallets of 40 bags, rounding up; otherwise it orders nothing. "
    "Answer the number of bags to order (0 if none)."
)

PALLET = 40


def solve(stock: int, daily_use: int, lead_days: int, safety_stock: int, max_level: int) -> int:
    if min(stock, daily_use, lead_days, safety_stock, max_level) < 0:
        raise ValueError("counts are not negative")
    if stock > daily_use * lead_days + safety_stock:
        return 0
    return math.ceil(max(max_level - stock, 0) / PALLET) * PALLET


def case(task: dict) -> bool:
    """Which branch of the rule a task shows: an order or none."""
    return task["answer"] > 0


_FACTS = {
    "stock": ["{stock} bags in the ice house this morning", "stock count {stock} bags",
              "we have {stock} bags on the shelves"],
    "use": ["we go through {use} bags a day", "daily use is about {use} bags", "the boats take {use} bags a day"],
    "lead": ["the plant delivers {lead} after an order", "lead time {lead}", "an order takes {lead} to arrive"],
    "safety": ["safety stock is {safety} bags", "we keep {safety} bags in reserve", "reserve {safety}"],
    "max": ["we top up to {top} bags", "maximum level {top} bags", "the top-up level is {top} bags"],
}
_ASKS = ["How many bags should we order?", "Order quantity?", "What goes on today's ice order, in bags?",
         "Do we order, and how many bags?"]


def generate(rng: random.Random) -> dict:
    use, lead, safety = rng.randint(5, 60), rng.randint(1, 5), rng.choice(range(10, 130, 10))
    point = use * lead + safety
    top = point + rng.randint(2, 12) * 25
    stock = rng.randint(max(0, point - 60), point) if rng.random() < 0.65 else rng.randint(point + 1, top)
    values = {"stock": stock, "use": use, "lead": "1 day" if lead == 1 else f"{lead} days", "safety": safety,
              "top": top}
    keys = list(_FACTS)
    rng.shuffle(keys)
    facts = [pick(rng, _FACTS[k]).format(**values) for k in keys]
    who = rng.choice(CREW)
    form = rng.randrange(3)
    if form == 0:
        question = f"Ice house, {who}'s count: " + "; ".join(facts) + ". " + pick(rng, _ASKS)
    elif form == 1:
        question = pick(rng, _ASKS) + " " + ". ".join(f[0].upper() + f[1:] for f in facts) + "."
    else:
        question = f"Note from {who}: " + ", ".join(facts) + ". " + pick(rng, _ASKS)
    params = {"stock": stock, "daily_use": use, "lead_days": lead, "safety_stock": safety, "max_level": top}
    return {"question": question, "answer": solve(**params), "params": params}
