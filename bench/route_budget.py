"""The router's context budget with many tools, measured with the real executor:

1. how many tokens a 51,000-character question takes (the fault tests' long question);
2. the demo queue (samples/queue.jsonl) routed with two hand-made tools (departures, working days) among
   generated cards, against the two alone: the largest router prompt, and routes right (a question of another
   family is right when routed to none).

    .venv/bin/python bench/route_budget.py [--cards 200]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from runner.tools import Card, Demo  # noqa: E402

SUBJECTS = ["rope", "paint", "fuel", "ice", "bait", "sail", "net", "crate", "oar", "lamp"]
VERBS = ["count", "weigh", "price", "order", "date", "measure", "sort", "check", "rate", "list"]


def generated_cards(n: int) -> list[Card]:
    """n usage cards of invented kinds (a verb and a shed's stock), each with two demo questions, for
    measuring the router's budget only: they are not tools anyone would build."""
    cards = []
    for i in range(n):
        s, v = SUBJECTS[i % 10], VERBS[(i // 10) % 10]
        cards.append(Card(name=f"{v}-{s}-{i}", description=f"{v} the {s} stock of shed {i}",
                          schema={"type": "object", "properties": {"x": {"type": "integer"}}},
                          demos=[Demo(question=f"Please {v} the {s} in shed {i} for lot {i * 7}.", arguments={"x": i}),
                                 Demo(question=f"How do we {v} {s} at shed {i}?", arguments={"x": i})]))
    return cards


def main() -> None:
    from bench.handmade import handmade_tools
    from runner import models, settings
    from runner.execute import direct_messages
    from runner.llm import LocalModel
    from runner.route import route
    from runner.tools import slug

    ap = argparse.ArgumentParser()
    ap.add_argument("--cards", type=int, default=200)
    args = ap.parse_args()
    executor = LocalModel(models.for_role(settings.load_registry(), "executor"), n_threads=1)
    long_q = "The Gannet sails every 7 minutes. " * 1500
    print(f"a {len(long_q):,}-character question: {executor.prompt_tokens([{'role': 'user', 'content': long_q}]):,} "
          f"tokens alone, {executor.prompt_tokens(direct_messages(long_q)):,} in the direct-answer prompt")
    tools = handmade_tools(["departures", "working_days"])
    names = {t.name for t in tools}
    queue = [json.loads(line) for line in (ROOT / "samples" / "queue.jsonl").read_text().splitlines()]
    expected = {e["id"]: e for e in map(json.loads, (ROOT / "samples" / "queue_expected.jsonl").read_text().splitlines())}
    for label, cards in ((f"{args.cards} cards", generated_cards(args.cards - len(tools)) + [t.card for t in tools]),
                         ("2 cards", [t.card for t in tools])):
        right = tool_right = tool_qs = 0
        largest = 0
        for q in queue:
            family = expected[q["id"]]["family"]
            want = slug(family) if family and slug(family) in names else "none"
            r = route(executor, cards, q["question"])
            right += r.tool == want
            tool_qs += want != "none"
            tool_right += want != "none" and r.tool == want
            largest = max(largest, r.prompt_tokens or 0)
        print(f"{label}: {right}/{len(queue)} routes right ({tool_right}/{tool_qs} of the tools' own questions); "
              f"largest router prompt {largest:,} tokens of {executor.n_ctx:,}")


if __name__ == "__main__":
    main()
