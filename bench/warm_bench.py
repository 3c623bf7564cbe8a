"""Cold against warm `jigwright ask`: the same question, each time in a fresh process, first with no saved
warm states (the run saves them), then with them. Prints the CPU seconds side by side: the whole process
(imports, model load, routing, filling, the tool) and the part the answer record counts (model calls and
tool), the prompt tokens evaluated and loaded, and whether the replies are identical.

Needs a verified tool in the tool store for the question's family (`jigwright build ...`); the warm states
already in JIGWRIGHT_HOME/warm are moved aside for the cold run and put back afterwards. With `--handmade` it
runs instead in a fresh temporary JIGWRIGHT_HOME holding the hand-written tools of every demo family
(bench/handmade.py), so the router prompt lists all eight usage cards.

Run: JIGWRIGHT_THREADS=1 .venv/bin/python bench/warm_bench.py [--family departures] [--warm-runs 3] [--handmade]"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from runner import settings  # noqa: E402
from runner.store import ToolStore  # noqa: E402
from runner.tools import slug  # noqa: E402
from runner.warmstate import Shelf  # noqa: E402

JW = str(Path(sys.executable).with_name("jigwright"))


def children_cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def ask(question: str) -> dict:
    """One `jigwright ask --json` in a fresh process: its record and the process's own CPU seconds."""
    c0, w0 = children_cpu(), time.perf_counter()
    proc = subprocess.run([JW, "ask", question, "--json", "--fallback", "none", "--threads", "1"],
                          capture_output=True, text=True, cwd=ROOT)
    cpu, wall = children_cpu() - c0, time.perf_counter() - w0
    if proc.returncode != 0:
        sys.exit(f"jigwright ask failed (exit {proc.returncode}): {proc.stderr.strip()[-600:]}")
    rec = json.loads(proc.stdout)
    return {"record": rec, "process_cpu": cpu, "wall": wall}


def row(label: str, run: dict) -> str:
    rec = run["record"]
    t = rec["tokens"]
    evaluated = t["prompt"] - t["cached"]
    return (f"{label:<6} {run['process_cpu']:>9.2f} {rec['cpu']['model'] + rec['cpu']['tool']:>9.2f} "
            f"{run['wall']:>7.2f} {t['prompt']:>7} {evaluated:>7} {t['restored']:>8}  {rec['answer']!r}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--family", default="departures", help="samples/FAMILY/test.jsonl gives the question")
    ap.add_argument("--task", type=int, default=0, help="which line of test.jsonl (0-based)")
    ap.add_argument("--warm-runs", type=int, default=3)
    ap.add_argument("--handmade", action="store_true", help="a temporary home with bench/handmade.py's tools")
    args = ap.parse_args()
    if args.handmade:
        from handmade import handmade_tools

        models = settings.models_dir().resolve()
        home = Path(tempfile.mkdtemp(prefix="jw-warm-bench-"))
        (home / "models").symlink_to(models, target_is_directory=True)
        os.environ["JIGWRIGHT_HOME"] = str(home)
        with ToolStore() as store:
            for tool in handmade_tools():
                store.put(tool)
        try:
            bench(args)
        finally:
            shutil.rmtree(home, ignore_errors=True)
    else:
        bench(args)


def bench(args: argparse.Namespace) -> None:

    name = slug(args.family)
    with ToolStore() as store:
        verified = {t.name for t in store.tools(verified_only=True)}
    if name not in verified:
        sys.exit(f"no verified tool '{name}' in {settings.store_dir()}: run "
                 f"`jigwright build samples/{args.family}/examples.jsonl` first (verified: {sorted(verified) or 'none'})")
    lines = (ROOT / "samples" / args.family / "test.jsonl").read_text(encoding="utf-8").splitlines()
    task = json.loads(lines[args.task])

    warm_dir = settings.warm_dir()
    aside = warm_dir.with_name(warm_dir.name + ".aside")
    if aside.exists():
        sys.exit(f"{aside} exists (an interrupted bench?): put it back as {warm_dir} or remove it")
    if warm_dir.exists():
        os.replace(warm_dir, aside)
    try:
        cold = ask(task["question"])
        warm = [ask(task["question"]) for _ in range(args.warm_runs)]
    finally:
        if aside.exists():
            shutil.rmtree(warm_dir, ignore_errors=True)
            os.replace(aside, warm_dir)

    print(f"question {task['id']} (expected {task['answer']!r}), routed to {cold['record']['route']}; "
          f"tools in the store: {len(verified)}; threads 1")
    print(f"{'run':<6} {'process':>9} {'record':>9} {'wall':>7} {'prompt':>7} {'evalled':>7} {'restored':>8}  answer")
    print(f"{'':<6} {'CPU s':>9} {'CPU s':>9} {'s':>7} {'tokens':>7} {'tokens':>7} {'tokens':>8}")
    print(row("cold", cold))
    for i, w in enumerate(warm, 1):
        print(row(f"warm{i}", w))
    keys = ("answer", "route", "arguments", "status")
    same = all(all(w["record"][k] == cold["record"][k] for k in keys) for w in warm)
    best = min(w["process_cpu"] for w in warm)
    for path, head in sorted(Shelf().heads().items(), key=lambda kv: kv[1].label):
        print(f"state {head.label}: {head.key.n_tokens} tokens, {path.stat().st_size:,} bytes "
              f"({path.stat().st_size / head.key.n_tokens / 1024:.1f} KiB per token)")
    print(f"replies identical to the cold run ({', '.join(keys)}): {'yes' if same else 'NO'}")
    print(f"warm process CPU s: best {best:.2f}, worst {max(w['process_cpu'] for w in warm):.2f} "
          f"(target <= 5); cold/warm ratio {cold['process_cpu'] / best:.1f}x")


if __name__ == "__main__":
    main()
