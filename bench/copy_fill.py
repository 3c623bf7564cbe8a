"""Copied strings: the executor's greedy fill with and without plain strings held to whole-word pieces of the
question (`execute.fill_schema`), on hand-made tools (bench/handmade.py) and each family's test tasks.

For each family, the first N questions of samples/FAMILY/test.jsonl are filled both ways (forced path, one
warm-up fill first, not counted), the hand-made tool runs on each fill in the sandbox, and the answer is
compared with the family's. Prints per family and in all: answers right each way, fills whose strings are not
pieces of their question (a misspelt code or name), which places are held, and CPU seconds per fill.

    PYTHONPATH=$PWD .venv/bin/python bench/copy_fill.py container_valid container_codes manifest_order \\
        departures working_days [--n 30] [--threads 1] [--out FILE.json]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from bench.handmade import handmade_tool  # noqa: E402
from runner import forced  # noqa: E402
from runner.execute import answers_match, fill_arguments, forget_fill_misses  # noqa: E402
from runner.runloop import local_model  # noqa: E402
from runner.sandbox import Sandbox  # noqa: E402
from runner.shapecheck import value_paths  # noqa: E402

WAYS = ("free strings", "copied strings")


def misspelt(arguments, question: str) -> bool:
    """A plain string value of the fill that is not a whole-word piece of the question."""
    return any(isinstance(v, str) and v and not forced.copyable(v, question) for _, v in value_paths(arguments or {}))


def run_family(model, sandbox, family: str, n: int) -> dict:
    tool = handmade_tool(family)
    folder = ROOT / "samples" / family
    tasks = [json.loads(line) for line in (folder / "test.jsonl").read_text().splitlines()[:n]]
    warm_up = json.loads((folder / "examples.jsonl").read_text().splitlines()[0])["question"]
    held = sorted(forced.copied_paths(tool.card.schema_, [(d.question, d.arguments) for d in tool.card.demos]))
    out: dict = {"tasks": len(tasks), "held_places": held}
    for way in WAYS:
        copy = way == "copied strings"
        forget_fill_misses()
        fill_arguments(model, tool.card, warm_up, seed=0, copy=copy)
        right = spelt_wrong = 0
        cpu = 0.0
        wrong = []
        for t in tasks:
            f = fill_arguments(model, tool.card, t["question"], seed=0, copy=copy)
            cpu += f.usage.cpu_seconds
            got = None
            if f.arguments is not None:
                result = sandbox.run(tool.code, f.arguments, entry=tool.entry)
                got = result.value if result.status == "ok" else None
            ok = got is not None and answers_match(t["answer"], got)
            right += ok
            spelt_wrong += misspelt(f.arguments, t["question"])
            if not ok:
                wrong.append({"id": t.get("id"), "arguments": f.arguments, "got": got, "expected": t["answer"]})
        out[way] = {"right": right, "misspelt_fills": spelt_wrong, "cpu_per_fill": round(cpu / max(len(tasks), 1), 2),
                    "wrong": wrong}
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("families", nargs="+")
    ap.add_argument("--n", type=int, default=30)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--out", type=Path)
    args = ap.parse_args()
    model = local_model("executor", None, args.threads)
    results = {}
    with Sandbox(pool_size=1) as sandbox:
        for family in args.families:
            results[family] = run_family(model, sandbox, family, args.n)
            r = results[family]
            print(f"{family}: {r['tasks']} tasks; held: {', '.join(r['held_places']) or 'none'}", flush=True)
            for way in WAYS:
                w = r[way]
                print(f"  {way:15} right {w['right']}/{r['tasks']}  misspelt fills {w['misspelt_fills']}  "
                      f"CPU s/fill {w['cpu_per_fill']:.2f}", flush=True)
    tasks = sum(r["tasks"] for r in results.values())
    for way in WAYS:
        right = sum(r[way]["right"] for r in results.values())
        bad = sum(r[way]["misspelt_fills"] for r in results.values())
        print(f"all {way:15} right {right}/{tasks}  misspelt fills {bad}")
    if args.out:
        args.out.write_text(json.dumps(results, indent=2) + "\n")


if __name__ == "__main__":
    main()
