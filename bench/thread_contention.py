"""llama.cpp threads on a busy machine: one executor reply with 1 and with 2 threads, first on an idle machine,
then while a busy process holds one core.

Prints CPU and wall seconds per reply for each case. This is the measurement behind the run loop's default of
one llama.cpp thread per model (`--threads 1`): with two threads, each waits at every layer for the other to
be scheduled, and on a shared machine that waiting is spent as CPU time.

    .venv/bin/python bench/thread_contention.py [--replies 3] [--json]
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.runloop import local_model  # noqa: E402

QUESTION = ("The Kelpwick Quay fuel berth sold 40 litres to the Petrel and 25 litres to the Auk. "
            "How many litres in all? Reply with the number only.")


def spin(stop_at: float) -> None:
    x = 0
    while time.time() < stop_at:
        x += 1


def replies(threads: int, n: int) -> dict:
    model = local_model("executor", None, threads)
    model.load()
    cpu = wall = 0.0
    for i in range(n):
        r = model.chat([{"role": "user", "content": QUESTION + " " * i}], seed=0, temperature=0.0, max_tokens=16)
        cpu += r.usage.cpu_seconds
        wall += r.usage.wall_seconds
    return {"threads": threads, "cpu_per_reply": round(cpu / n, 2), "wall_per_reply": round(wall / n, 2)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replies", type=int, default=3)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    results = []
    for busy in (False, True):
        for threads in (1, 2):
            spinner = None
            if busy:
                spinner = mp.Process(target=spin, args=(time.time() + 600,), daemon=True)
                spinner.start()
            try:
                results.append({"other_core_busy": busy, **replies(threads, args.replies)})
            finally:
                if spinner is not None:
                    spinner.terminate()
                    spinner.join()
    if args.json:
        print(json.dumps(results, indent=2))
        return
    for r in results:
        print(f"{'busy' if r['other_core_busy'] else 'idle'} machine, {r['threads']} thread(s): "
              f"{r['cpu_per_reply']} CPU s and {r['wall_per_reply']} wall s per reply")


if __name__ == "__main__":
    main()
