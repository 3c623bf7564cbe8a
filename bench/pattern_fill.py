"""Sentence patterns against the executor, side by side in one run: CPU per task with patterns off and on.

A queue of N tasks is drawn from the demo families' generators (seeded, families in turn), so phrasings recur
as they do on an operations desk. The run loop answers it twice in one process with the same executor (one
llama.cpp thread) and the hand-made tools of bench/handmade.py, both starting from saved warm states of the
router's and the tools' prompts (made first, not counted): first with `--no-patterns` (every fill by the
executor), then with patterns on, starting from an empty pattern book (so the first questions of each phrasing
are the executor's while patterns are learned and confirmed). Answers are checked against the generators'
answers (each family's reference solver). Prints CPU s per task (all, and by step: routing, filling, tool) for
both runs, the share of tasks filled by patterns, cross-checks, and wrong answers from pattern fills (the goal is
zero).

    PYTHONPATH=$PWD .venv/bin/python bench/pattern_fill.py [--n 200] [--families departures working_days] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import random
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from handmade import handmade_tools  # noqa: E402

from runner.execute import answers_match  # noqa: E402
from samples.families import FAMILIES  # noqa: E402


def draw_queue(n: int, families: list[str], seed: int) -> list[dict]:
    """N generated tasks, families in turn: {id, family, question, answer}."""
    rng = random.Random(f"pattern-fill-bench:{seed}")
    rows = []
    for i in range(n):
        family = families[i % len(families)]
        task = FAMILIES[family].generate(rng)
        rows.append({"id": f"{family}-{i:04d}", "family": family, "question": task["question"],
                     "answer": task["answer"]})
    return rows


def answer(queue: list[dict], model, tools, patterns: bool, folder: Path) -> tuple[list[dict], dict]:
    from runner.runloop import RunOptions, Setup, run_queue

    qfile = folder / f"queue-{patterns}.jsonl"
    qfile.write_text("".join(json.dumps({"id": r["id"], "question": r["question"]}) + "\n" for r in queue))
    out = folder / f"answers-{patterns}.jsonl"
    setup = Setup(tools=tools, executor=model, fallback_model=None)
    report = run_queue(str(qfile), out, RunOptions(fallback="none", patterns=patterns), setup)
    return [json.loads(l) for l in out.read_text().splitlines()], report.model_dump()


def summary(queue: list[dict], records: list[dict], report: dict) -> dict:
    want = {r["id"]: r["answer"] for r in queue}
    right = [answers_match(want[r["id"]], r["answer"]) for r in records]
    by_pattern = [r for r in records if r.get("filled_by") == "pattern"]
    return {
        "tasks": len(records),
        "cpu_per_task": report["cpu_per_task"].get("all", {}).get("mean", 0.0),
        "cpu_by_step": report["cpu_by_step"],
        "right": sum(right),
        "filled_by_pattern": len(by_pattern),
        "pattern_share": round(len(by_pattern) / max(len(records), 1), 3),
        "wrong_from_patterns": [r["id"] for r in by_pattern if not answers_match(want[r["id"]], r["answer"])],
        "cross_checks": report["pattern_checks"], "disagreements": report["pattern_disagreements"],
        "by_id": {r["id"]: {"route": r.get("route"), "arguments": r.get("arguments"), "answer": r.get("answer"),
                            "right": ok} for r, ok in zip(records, right)},
    }


def caused_by_patterns(off: dict, on: dict) -> list[str]:
    """Wrong pattern fills whose task the executor (patterns off) answered differently: the errors patterns
    add. A wrong pattern fill that repeats the executor's own route, arguments and answer is the executor's
    error (a misroute, a misread), which the pattern only copied."""
    out = []
    for tid in on["wrong_from_patterns"]:
        a, b = on["by_id"][tid], off["by_id"].get(tid, {})
        if (a["route"], a["arguments"], a["answer"]) != (b.get("route"), b.get("arguments"), b.get("answer")):
            out.append(tid)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=200, help="tasks in the generated queue")
    ap.add_argument("--families", nargs="*", default=sorted(FAMILIES), help="demo families to draw from")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--threads", type=int, default=1, help="llama.cpp threads (0: one per physical core)")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()

    queue = draw_queue(args.n, args.families, args.seed)
    with tempfile.TemporaryDirectory() as tmp:
        home = Path(tmp) / "home"
        home.mkdir()
        real_models = Path(os.environ.get("JIGWRIGHT_HOME", Path.home() / ".cache" / "jigwright")) / "models"
        (home / "models").symlink_to(real_models.resolve(), target_is_directory=True)
        os.environ["JIGWRIGHT_HOME"] = str(home)  # an empty pattern book and tool store for this run
        from runner.runloop import local_model

        model = local_model("executor", None, args.threads).load()
        # llama.cpp's first decode after loading is slow (buffers are set up); keep it out of both runs
        model.chat([{"role": "user", "content": "Hi"}], seed=0, temperature=0.0, max_tokens=1)
        tools = handmade_tools(args.families)
        # both runs start as `jigwright answer` does, from saved states of the router's and each tool's prompt
        # (made here, not counted), so neither pays for evaluating them first
        from runner import warmup

        warmup.prepare(model, [t.card for t in tools])
        results = {}
        for patterns in (False, True):
            print(f"answering {len(queue)} tasks with patterns {'on' if patterns else 'off'}", file=sys.stderr,
                  flush=True)
            records, report = answer(queue, model, tools, patterns, Path(tmp))
            results["on" if patterns else "off"] = summary(queue, records, report)
    off, on = results["off"], results["on"]
    on["caused_by_patterns"] = caused_by_patterns(off, on)
    result = {"tasks": len(queue), "families": args.families, "seed": args.seed, "off": off, "on": on,
              "cpu_ratio_on_to_off": round(on["cpu_per_task"] / off["cpu_per_task"], 3) if off["cpu_per_task"] else None}
    if args.json:
        print(json.dumps(result, indent=1))
        return
    print(f"{len(queue)} generated tasks from {len(args.families)} families (seed {args.seed}), one run")
    print(f"{'patterns':<9}{'CPU s/task':>11}{'routing':>9}{'filling':>9}{'tool':>8}{'right':>7}{'by pattern':>12}")
    for name, s in (("off", off), ("on", on)):
        st = s["cpu_by_step"]
        print(f"{name:<9}{s['cpu_per_task']:>11.2f}{st['routing']:>9.2f}{st['filling']:>9.2f}{st['tool']:>8.3f}"
              f"{s['right']:>7}{s['filled_by_pattern']:>7} {s['pattern_share']:>4.0%}")
    print(f"CPU per task, on/off: {result['cpu_ratio_on_to_off']}")
    print(f"cross-checks {on['cross_checks']}, disagreements {on['disagreements']}")
    wrong = on["wrong_from_patterns"]
    print(f"wrong answers among pattern fills: {len(wrong)}"
          + "".join(f"\n  {t}: route {on['by_id'][t]['route']}, arguments {json.dumps(on['by_id'][t]['arguments'])}, "
                    f"answer {on['by_id'][t]['answer']!r}" for t in wrong))
    caused = on["caused_by_patterns"]
    print(f"of them different from the executor's own fill with patterns off (errors patterns add): "
          f"{len(caused)} (goal 0)" + (f": {', '.join(caused)}" if caused else ""))


if __name__ == "__main__":
    main()
