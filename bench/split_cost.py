"""The split's CPU per task against builder-direct's, side by side in one run, before and after forced fills.

For each family, the eval's task selection (`--seed 0` shuffle of test.jsonl, first N) is answered three ways in
one process with one llama.cpp thread per model: the split with sampled fills (free, then the grammar: how fills
were made before forced spans), the split with forced fills (what `fill_arguments` does now), and the builder
answering directly (the eval's builder-direct prompt). The split goes straight to the family's tool with one
retry, as `jigwright eval` does. Each way first answers one question of examples.jsonl, not counted, so each
starts with its prompt prefix (the tool's demos, the builder's few-shot examples) in llama.cpp's cache: the
figures are the steady cost per task of a queue. Prints accuracy, mean CPU s per task (filling and tool for the split) and the
ratio of the split's CPU to builder-direct's.

    PYTHONPATH=$PWD .venv/bin/python bench/split_cost.py departures working_days manifest_order [--n 20] \\
        [--handmade] [--json]

Tools come from the tool store (the verified tools `jigwright build` made), or with `--handmade` from
bench/handmade.py.
"""

from __future__ import annotations

import argparse
import functools
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner import evaluate, execute  # noqa: E402
from runner.execute import answers_match  # noqa: E402
from runner.runloop import RunOptions, local_model  # noqa: E402
from runner.sandbox import Sandbox  # noqa: E402
from runner.store import ToolStore  # noqa: E402

FORCED_FILL = execute.fill_arguments


def split_way(executor, tool, tasks, warm_up, sandbox, forced: bool) -> list[dict]:
    execute.forget_fill_misses()
    execute.fill_arguments = functools.partial(FORCED_FILL, forced=forced)  # what answer_with_tool calls
    try:
        evaluate.answer_split(executor, tool, warm_up, sandbox, RunOptions(fallback="none"))
        out = []
        for t in tasks:
            r = evaluate.answer_split(executor, tool, t, sandbox, RunOptions(fallback="none"))
            out.append({"arguments": r.arguments, "right": r.answered and answers_match(t.answer, r.answer),
                        "fill": r.model_cpu,
                        "tool": r.tool_cpu, "generated": r.completion_tokens, "forced": r.forced_tokens})
        return out
    finally:
        execute.fill_arguments = FORCED_FILL


def summary(rows: list[dict]) -> dict:
    n = len(rows)
    out = {"right": sum(r["right"] for r in rows), "tasks": n,
           "cpu_per_task": round(sum(r.get("fill", 0) + r.get("tool", 0) + r.get("cpu", 0) for r in rows) / n, 3)}
    if "fill" in rows[0]:
        out.update(fill=round(sum(r["fill"] for r in rows) / n, 3), tool=round(sum(r["tool"] for r in rows) / n, 3),
                   generated=round(sum(r["generated"] for r in rows) / n, 1),
                   forced=round(sum(r["forced"] for r in rows) / n, 1))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("families", nargs="+", help="family folders under samples/ (e.g. departures)")
    ap.add_argument("--n", type=int, default=20)
    ap.add_argument("--handmade", action="store_true")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    executor = local_model("executor", None, 1)
    builder = local_model("builder", None, 1)
    results = {}
    with Sandbox(pool_size=1) as sandbox, ToolStore() as store:
        for name in args.families:
            fam = evaluate.load_family_dir(ROOT / "samples" / name)
            tasks = evaluate.select_tasks(fam.tasks, args.n, 0)
            if args.handmade:
                from bench.handmade import handmade_tool

                tool = handmade_tool(name)
            else:
                tool = store.get(name.replace("_", "-"))
            ex = fam.family.examples[0]
            warm_up = evaluate.EvalTask(id="warm-up", question=ex.question, answer=ex.answer, line=0)
            sampled = split_way(executor, tool, tasks, warm_up, sandbox, False)
            forced = split_way(executor, tool, tasks, warm_up, sandbox, True)
            res = {"split, sampled fills": summary(sampled), "split, forced fills": summary(forced)}
            res["split, forced fills"]["same_arguments_as_sampled"] = sum(
                a["arguments"] == b["arguments"] for a, b in zip(sampled, forced))
            evaluate.answer_direct(builder, evaluate.DIRECT["builder-direct"], fam.family, warm_up)
            direct = []
            for t in tasks:
                r = evaluate.answer_direct(builder, evaluate.DIRECT["builder-direct"], fam.family, t)
                direct.append({"right": r.answered and answers_match(t.answer, r.answer), "cpu": r.cpu_seconds})
            res["builder-direct"] = summary(direct)
            base = res["builder-direct"]["cpu_per_task"]
            for k in ("split, sampled fills", "split, forced fills"):
                res[k]["ratio_to_builder_direct"] = round(res[k]["cpu_per_task"] / base, 3) if base else None
            results[name] = res
    if args.json:
        print(json.dumps(results, indent=2))
        return
    for name, res in results.items():
        print(f"{name}:")
        for k, r in res.items():
            extra = (f" (filling {r['fill']}, tool {r['tool']}; tokens generated {r['generated']}, forced "
                     f"{r['forced']}); {r['ratio_to_builder_direct']}x builder-direct") if "fill" in r else ""
            if "same_arguments_as_sampled" in r:
                extra += f"; arguments equal to the sampled fills' {r['same_arguments_as_sampled']}/{r['tasks']}"
            print(f"  {k:22} right {r['right']}/{r['tasks']}, CPU s/task {r['cpu_per_task']}{extra}")


if __name__ == "__main__":
    main()
