"""Tasks per minute with 1 and 2 single-thread workers, measured in one run: `jigwright answer --workers N`
(the default) or `jigwright eval --workers N` (`--job eval`).

answer: both runs answer the same first N tasks of samples/queue.jsonl with the hand-made tools of
bench/handmade.py (fallback: the executor), each on a fresh local Ray instance with one CPU per worker. Tasks
per minute count from the first task to the last (Ray's start and the model loads are printed apart). The load
average of the machine is printed before and after each run, and the cores the tasks kept busy (their CPU
seconds over the wall time): on a shared machine other work takes cores from the workers. From the
measured CPU seconds per task, it projects tasks per minute for a 16-core machine (16 one-thread workers)
and a 4-node cluster of such machines, both at the ideal rate (every core answering) and at the efficiency
measured here from 1 to 2 workers.

eval: both runs evaluate the same families and methods on the first N test tasks (seed 0), each with a fresh
result cache, in a throw-away JIGWRIGHT_HOME (its models/ is this home's) whose tool store holds the hand-made
tools under the keys of the builds `jigwright eval` looks for, so nothing is built. Tasks per minute count
from the first eval job sent to the last one back; the results of the two runs are compared.

    .venv/bin/python bench/cluster_bench.py [--n 16] [--json]    (goal: 2 workers >= 1.8x 1 worker)
    .venv/bin/python bench/cluster_bench.py --job eval [--families departures,working_days] [--methods
        split,executor-direct] [--n 8] [--json]
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

from runner import settings  # noqa: E402
from runner.cluster import ClusterOptions, answer_on_workers  # noqa: E402
from runner.runloop import RunOptions  # noqa: E402


REAL_MODELS = (settings.home() / "models").resolve()


def one_run(workers: int, queue: Path, tmp: Path, tools: list) -> dict:
    out = tmp / f"answers-{workers}.jsonl"
    # each run in a JIGWRIGHT_HOME of its own (the models linked in), with patterns off: neither run may reuse the
    # warm states or pattern books the other one made, so both do the same model work
    home = tmp / f"home-{workers}"
    home.mkdir()
    (home / "models").symlink_to(REAL_MODELS, target_is_directory=True)
    os.environ["JIGWRIGHT_HOME"] = str(home)
    load_before = os.getloadavg()[0]
    t0 = time.perf_counter()
    report = answer_on_workers(str(queue), out, RunOptions(fallback="executor", patterns=False),
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


class _Clock:
    """The eval's progress as times: from the first eval job sent to the last one back."""

    def __init__(self) -> None:
        self.start: float | None = None
        self.last: float | None = None

    def phase(self, name: str, total: int | None) -> None:
        if name.startswith("evaluating"):
            self.start = self.last = time.perf_counter()

    def advance(self, record: object = None) -> None:
        if self.start is not None:
            self.last = time.perf_counter()

    def message(self, text: str) -> None:
        print(f"  {text}", file=sys.stderr, flush=True)


def keyed_handmade_tools(families: list) -> None:
    """The hand-made tool of each family in this home's tool store, under the key of the build `jigwright eval`
    looks for (default build settings, the registry's models), so the eval finds it and builds nothing."""
    from handmade import handmade_tool

    from runner import build as B
    from runner import models, settings
    from runner.store import ToolStore

    reg = settings.load_registry()
    shas = (models.for_role(reg, "builder").sha256, models.for_role(reg, "executor").sha256)
    with ToolStore() as store:
        for fam in families:
            key = B.build_key(fam.family, *shas, B.BuildSettings())
            report = B.BuildReport(family=fam.name, tool=fam.name, key=key, verified=True, held_out_score=1.0,
                                   strategy="by hand")
            tool = handmade_tool(fam.path.name)
            store.put(tool.model_copy(update={"key": key, "report": report.model_dump()}))


def one_eval(workers: int, families: list, methods: list[str], n: int, tmp: Path) -> dict:
    from runner.cluster import eval_on_workers

    clock = _Clock()
    load_before = os.getloadavg()[0]
    t0 = time.perf_counter()
    report = eval_on_workers(families, ClusterOptions(workers=workers, threads=1,
                                                      worker_env={"JIGWRIGHT_HOME": os.environ["JIGWRIGHT_HOME"]}),
                             methods=methods, n=n, seed=0, out_dir=tmp / f"out-{workers}",
                             cache_dir=tmp / f"cache-{workers}", progress=clock)
    total_wall = time.perf_counter() - t0
    rows = [r for r in report.rows if r.family in report.families]
    tasks = sum(r.tasks for r in rows)
    wall = (clock.last - clock.start) if clock.start is not None and clock.last is not None else total_wall
    cpu = sum(r.cpu_mean * r.tasks for r in rows)
    return {"workers": workers, "tasks": tasks, "computed": report.computed,
            "tasks_per_minute": round(60 * report.computed / wall, 2) if wall else 0.0,
            "eval_wall_seconds": round(wall, 1), "start_wall_seconds": round(total_wall - wall, 1),
            "cpu_per_task": round(cpu / tasks, 3) if tasks else None,
            "cores_used": round(cpu / wall, 2) if wall else 0.0,
            "model_load_cpu_seconds": report.model_load_cpu_seconds,
            "load_average_before": round(load_before, 2), "load_average_after": round(os.getloadavg()[0], 2),
            "rows": {f"{r.family} {r.method}": f"{r.correct}/{r.tasks}" for r in rows},
            "answers": [(r.family, r.method, [(s.id, s.answer, s.correct) for s in r.results]) for r in rows]}


def eval_main(args: argparse.Namespace) -> None:
    from runner import evaluate, settings

    real_models = settings.home() / "models"
    families = evaluate.load_families([ROOT / "samples" / f.strip() for f in args.families.split(",") if f.strip()])
    methods = evaluate.parse_methods([args.methods])
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        home = tmp / "home"
        home.mkdir()
        if real_models.exists():
            (home / "models").symlink_to(real_models, target_is_directory=True)
        os.environ["JIGWRIGHT_HOME"] = str(home)
        keyed_handmade_tools(families)
        runs = []
        for workers in (1, 2):
            print(f"{workers} worker(s): eval of {', '.join(f.name for f in families)} ({', '.join(methods)}), "
                  f"{args.n} tasks each (load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs)…",
                  file=sys.stderr, flush=True)
            runs.append(one_eval(workers, families, methods, args.n, tmp))
    one, two = runs
    speedup = two["tasks_per_minute"] / one["tasks_per_minute"] if one["tasks_per_minute"] else 0.0
    result = {"job": "eval", "runs": [{k: v for k, v in r.items() if k != "answers"} for r in runs],
              "same_results": one["answers"] == two["answers"], "speedup": round(speedup, 2), "goal": 1.8}
    if args.json:
        print(json.dumps(result, indent=1))
        return
    for r in result["runs"]:
        print(f"{r['workers']} worker(s): {r['computed']} task results in {r['eval_wall_seconds']:.1f} s = "
              f"{r['tasks_per_minute']:.2f} tasks/min (start {r['start_wall_seconds']:.1f} s, model loads "
              f"{r['model_load_cpu_seconds']:.1f} CPU s; {r['cpu_per_task']} CPU s/task; {r['cores_used']:.2f} cores "
              f"busy; load average {r['load_average_before']} before, {r['load_average_after']} after)")
    print(f"speed-up with 2 workers: {speedup:.2f}x (goal >= 1.8x); same answers and scores: {result['same_results']}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--job", choices=("answer", "eval"), default="answer")
    ap.add_argument("--n", type=int, default=None,
                    help="answer: first N tasks of samples/queue.jsonl (16); eval: tasks per family (8)")
    ap.add_argument("--families", default="departures,working_days", help="eval: demo family folders")
    ap.add_argument("--methods", default="split,executor-direct", help="eval: methods, comma-separated")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    if args.job == "eval":
        args.n = args.n or 8
        eval_main(args)
        return
    args.n = args.n or 16
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
