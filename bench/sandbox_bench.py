"""Overhead of one sandboxed tool call: warm (pre-started worker) and cold (`run_once`).

Run from the repository root: `python bench/sandbox_bench.py [--warm N] [--cold N]`.
The goal is a warm median under 20 ms on a 2-core machine.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from runner.sandbox import Sandbox, isolation_layers, run_once  # noqa: E402

TRIVIAL = "def solve(x):\n    return x + 1\n"
GOAL_MS = 20.0


def percentile(samples: list[float], fraction: float) -> float:
    ordered = sorted(samples)
    return ordered[min(len(ordered) - 1, round(fraction * (len(ordered) - 1)))]


def timed(call, count: int) -> tuple[list[float], list[float], list[float]]:
    """Milliseconds per call as the caller sees it, the child's fork-to-reap wall time, and the child's CPU time
    (the last barely depends on how busy the machine is)."""
    total, child, cpu = [], [], []
    for i in range(count):
        started = time.perf_counter()
        result = call(i)
        total.append((time.perf_counter() - started) * 1000)
        child.append(result.wall_seconds * 1000)
        cpu.append(result.cpu_seconds * 1000)
        if not result.ok or result.value != i + 1:
            raise SystemExit(f"call failed: {result.message}")
    return total, child, cpu


def report(label: str, samples: list[float]) -> float:
    median = statistics.median(samples)
    print(f"{label:<28} n={len(samples):<4} median {median:7.2f} ms   p95 {percentile(samples, 0.95):7.2f} ms")
    return median


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--warm", type=int, default=200)
    parser.add_argument("--cold", type=int, default=20)
    options = parser.parse_args()
    for layer in isolation_layers():
        print(f"{layer.name:<15} {'held' if layer.active else 'MISSING'}: {layer.mode}")
    with Sandbox() as sandbox:
        timed(lambda i: sandbox.run(TRIVIAL, {"x": i}), 10)
        total, child, cpu = timed(lambda i: sandbox.run(TRIVIAL, {"x": i}), options.warm)
        warm = report("warm Sandbox.run", total)
        report("  of which fork..reap", child)
        report("  child CPU time", cpu)
    total, child, _ = timed(lambda i: run_once(TRIVIAL, {"x": i}), options.cold)
    report("cold run_once", total)
    print(f"warm median / {GOAL_MS:g} ms goal = {warm / GOAL_MS:.2f}")
    print(f"load average when done: {' '.join(f'{x:.1f}' for x in os.getloadavg())} on {os.cpu_count()} CPUs")


if __name__ == "__main__":
    main()
