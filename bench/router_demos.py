"""How much the router's demo questions matter: route the demo queue with 0, 1 and 2 demo questions per tool.

The cards are made from the demo families themselves (name and description from family.toml, demo questions
from the first lines of examples.jsonl), so no build is needed; every family counts as having a tool. A queue
question is routed right when the router picks its family's card, or `none` for a question of no family.
This is the measurement behind route.demos_per_tool keeping two demos per tool while the prompt is small.

    .venv/bin/python bench/router_demos.py [--demos 0 1 2] [--threads 1] [--json]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.build import load_family  # noqa: E402
from runner.route import NONE, router_messages, router_names, router_schema, stable_cards  # noqa: E402
from runner.runloop import local_model  # noqa: E402
from runner.tools import Card, Demo  # noqa: E402


def family_cards() -> tuple[list[Card], dict[str, str]]:
    """One card per demo family, and family folder name -> card name."""
    cards, names = [], {}
    for examples in sorted((ROOT / "samples").glob("*/examples.jsonl")):
        fam = load_family(examples)
        cards.append(Card(name=fam.name, description=fam.description, schema={"type": "object"},
                          demos=[Demo(question=e.question, arguments={}) for e in fam.examples[:2]]))
        names[examples.parent.name] = fam.name
    return stable_cards(cards), names


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--demos", type=int, nargs="+", default=[0, 1, 2])
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    cards, names = family_cards()
    queue = [json.loads(x) for x in (ROOT / "samples/queue.jsonl").read_text().splitlines() if x.strip()]
    expected = {r["id"]: r for r in map(json.loads, (ROOT / "samples/queue_expected.jsonl").read_text().splitlines())}
    model = local_model("executor", None, args.threads)
    allowed = router_names(cards)
    results = {}
    for k in args.demos:
        right, cpu, prompt_tokens = 0, 0.0, 0
        for task in queue:
            reply = model.chat(router_messages(cards, task["question"], k), seed=0, temperature=0.0,
                               max_tokens=max(map(len, allowed)) + 8, schema=router_schema(cards))
            try:
                chosen = json.loads(reply.text)
            except ValueError:
                chosen = reply.text.strip()
            family = expected[task["id"]].get("family")
            right += chosen == (names.get(family, NONE) if family else NONE)
            cpu += reply.usage.cpu_seconds
            prompt_tokens = reply.usage.prompt_tokens
        results[k] = {"right": right, "tasks": len(queue), "cpu_seconds": round(cpu, 1),
                      "prompt_tokens": prompt_tokens}
    if args.json:
        print(json.dumps(results, indent=2))
        return
    for k, r in results.items():
        print(f"{k} demo question(s) per tool: routed {r['right']}/{r['tasks']} right; prompt {r['prompt_tokens']} "
              f"tokens; {r['cpu_seconds']} CPU s for the queue")


if __name__ == "__main__":
    main()
