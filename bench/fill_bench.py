"""The executor's argument fill with and without the schema's grammar, per stored tool.

For each tool, the first N held-out questions of its family (samples/FAMILY/test.jsonl) are filled four times
over: all free, all under the grammar, then both again; the second round is reported (warm prefix cache, each
call after a different question, so neither way gets the other's prompt for free). Prints CPU seconds per fill
both ways, how many free replies are JSON that fits the schema, and how many equal the grammar's reply. This
is the measurement behind execute.fill_arguments asking free first and falling back to the grammar.

    .venv/bin/python bench/fill_bench.py departures manifest-order [--n 8] [--threads 1] [--json]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.execute import fill_messages, schema_problem, token_budget  # noqa: E402
from runner.runloop import local_model  # noqa: E402
from runner.store import ToolStore  # noqa: E402


def fits(card, text: str) -> bool:
    try:
        return schema_problem(card.schema_, json.loads(text)) is None
    except ValueError:
        return False


def measure(model, card, questions: list[str]) -> dict:
    rounds = []
    for _ in range(2):
        out = {}
        for mode in ("free", "grammar"):
            replies, cpu = [], 0.0
            for q in questions:
                r = model.chat(fill_messages(card, q), seed=0, temperature=0.0, max_tokens=token_budget(card),
                               schema=card.schema_ if mode == "grammar" else None)
                replies.append(r.text)
                cpu += r.usage.cpu_seconds
            out[mode] = (replies, cpu / len(questions))
        rounds.append(out)
    (free, free_cpu), (grammar, grammar_cpu) = rounds[1]["free"], rounds[1]["grammar"]
    return {"fills": len(questions), "free_cpu_per_fill": round(free_cpu, 2),
            "grammar_cpu_per_fill": round(grammar_cpu, 2),
            "free_replies_fitting_schema": sum(fits(card, t) for t in free),
            "free_replies_equal_to_grammar": sum(a == b for a, b in zip(free, grammar))}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("tools", nargs="+", help="tool names in the tool store (family folder = name with _ for -)")
    ap.add_argument("--n", type=int, default=8)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    model = local_model("executor", None, args.threads)
    results = {}
    with ToolStore() as store:
        for name in args.tools:
            tool = store.get(name)
            lines = (ROOT / "samples" / name.replace("-", "_") / "test.jsonl").read_text().splitlines()[: args.n]
            results[name] = measure(model, tool.card, [json.loads(line)["question"] for line in lines])
    if args.json:
        print(json.dumps(results, indent=2))
        return
    for name, r in results.items():
        print(f"{name}: {r['fills']} fills; CPU s per fill free {r['free_cpu_per_fill']}, under the grammar "
              f"{r['grammar_cpu_per_fill']} (ratio {r['grammar_cpu_per_fill'] / r['free_cpu_per_fill']:.2f}); "
              f"free replies fitting the schema {r['free_replies_fitting_schema']}/{r['fills']}, "
              f"equal to the grammar's {r['free_replies_equal_to_grammar']}/{r['fills']}")


if __name__ == "__main__":
    main()
