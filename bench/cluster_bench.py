"""Tasks per minute with 1 and 2 single-thread workers (`jigwright answer --workers N`), measured in one run.

Both runs answer the same first N tasks of samples/queue.jsonl with the hand-made tools of bench/handmade.py
(fallback: the executor), each on a fresh local Ray instance with one CPU per worker. Tasks per minute count
from the first task to the last (Ray's start and the model loads are printed apart). The load average of the
machine is printed before and after each run, and the cores the tasks kept busy (their CPU seconds over the
wall time): on a shared machine other work takes cores from the workers. From the
measured CPU seconds per task, it projects tasks per minute for a 16-core machine (16 one-thread workers)
and a 4-node cluster of such machines, both at the ideal rate (every core answering) and at the efficiency
measured here from 1 to 2 workers.

    .venv/bin/python bench/cluster_bench.py [--n 16] [--json]    (goal: 2 workers >= 1.8x 1 worker)
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))
os.environ["PYTHONPATH"] = os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH", "")) if p)

from handmade import handmade_tools  # noqa: E402

from runner.cluster import ClusterOptions, answer_on_workers  # noqa: E402
from runner.runloop import RunOptions  # noqa: E402


def one_run(workers: int, queue: Path, tmp: Path, tools: list) -> dict:
    out = tmp / f"answers-{workers}.jsonl"
    load_before = os.getloadavg()[0]
    t0 = time.perf_counter()
    report = answer_on_workers(str(queue), out, RunOptions(fallback="executor"),
                               ClusterOptions(workers=workers, threads=1), tools=tools)
    total_wall = time.perf_counter() - t0
    records = [json.loads(line) for line in out.read_text().splitlines()]
    per_worker: dict[str, int] = {}
    for r in records:
        per_worker[r["worker"] or "?"] = per_worker.get(r["worker"] or "?", 0) + 1
    return {"workers": workers, "tasks": report.tasks, "tasks_per_minute": report.tasks_per_minute,
            "answer_wall_seconds": report.wall_seconds, "start_wall_seconds": round(total_wall - report.wall_seconds, 1),
            "cpu_per_task": report.cpu_per_task["all"].mean if "all" in report.cpu_per_task else None,
            "cores_used": round(report.task_cpu_seconds / report.wall_seconds, 2) if report.wall_seconds else 0.0,
            "prompt_cache_share": report.savings.cached_share,
            "load_average_before": round(load_before, 2), "load_average_after": round(os.getloadavg()[0], 2),
            "tasks_per_worker": sorted(per_worker.values()),
            "answers": {r["id"]: (r["route"], r["answer"]) for r in records}}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=16, help="first N tasks of samples/queue.jsonl")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()

    tasks = [json.loads(line) for line in (ROOT / "samples" / "queue.jsonl").read_text().splitlines()][: args.n]
    tools = handmade_tools()
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        queue = tmp / "queue.jsonl"
        queue.write_text("".join(json.dumps({"id": t["id"], "question": t["question"]}) + "\n" for t in tasks))
        runs = []
        for workers in (1, 2):
            print(f"{workers} worker(s): answering {len(tasks)} tasks (load average "
                  f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs)…", file=sys.stderr, flush=True)
            runs.append(one_run(workers, queue, tmp, tools))
    one, two = runs
    speedup = two["tasks_per_minute"] / one["tasks_per_minute"] if one["tasks_per_minute"] else 0.0
    cpu = sum(r["cpu_per_task"] for r in runs) / 2
    efficiency = speedup / 2
    ideal = 60 / cpu
    result = {
        "runs": [{k: v for k, v in r.items() if k != "answers"} for r in runs],
        "same_answers": one["answers"] == two["answers"],
        "speedup": round(speedup, 2), "goal": 1.8, "cpu_per_task": round(cpu, 3),
        "projection_tasks_per_minute": {
            "one worker per core, ideal": round(ideal, 1),
            "16-core machine, ideal": round(16 * ideal, 1),
            "16-core machine, at measured efficiency": round(16 * ideal * efficiency, 1),
            "4 x 16-core nodes, ideal": round(64 * ideal, 1),
            "4 x 16-core nodes, at measured efficiency": round(64 * ideal * efficiency, 1),
        },
    }
    if args.json:
        print(json.dumps(result, indent=1))
        return
    for r in result["runs"]:
        print(f"{r['workers']} worker(s): {r['tasks']} tasks in {r['answer_wall_seconds']:.1f} s = "
              f"{r['tasks_per_minute']:.2f} tasks/min (start {r['start_wall_seconds']:.1f} s; tasks per worker "
              f"{r['tasks_per_worker']}; {r['cpu_per_task']:.2f} CPU s/task; {r['cores_used']:.2f} cores busy "
              f"answering; prompt cache {r['prompt_cache_share']:.0%}; load average {r['load_average_before']} "
              f"before, {r['load_average_after']} after)")
    print(f"speed-up with 2 workers: {speedup:.2f}x (goal >= 1.8x); same routes and answers: {result['same_answers']}")
    print(f"projection from {cpu:.2f} CPU s per task (one single-thread worker per core):")
    for k, v in result["projection_tasks_per_minute"].items():
        print(f"  {k}: {v} tasks/min")


if __name__ == "__main__":
    main()
