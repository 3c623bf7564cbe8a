"""Does one honest line of `hints` make a demo family verify? Builds each family in bench/hints.toml twice
(without and with its hint) under a CPU budget and prints a table. Slow: each build may use the whole budget.

    JIGWRIGHT_THREADS=1 python bench/hints_table.py --budget-cpu-min 6 --out hints-results.jsonl [--only without]

Results are appended to --out (one JSON line per build) and the table is printed from all lines there, so the
two halves can run at different times. Builds go into the tool store of JIGWRIGHT_HOME (with --force)."""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def build_once(family: str, hint: str | None, budget: float) -> dict:
    """One build of samples/FAMILY in a copy whose family.toml has the hint added (or not)."""
    with tempfile.TemporaryDirectory(prefix=f"hints-{family}-") as tmp:
        folder = Path(tmp) / family
        shutil.copytree(ROOT / "samples" / family, folder)
        if hint:
            with open(folder / "family.toml", "a", encoding="utf-8") as fh:
                fh.write(f"hints = [{json.dumps(hint)}]\n")
        cmd = [sys.executable, "-c", "from runner.cli import main; main()", "build", str(folder / "examples.jsonl"), "--budget-cpu-min",
               str(budget), "--force", "--json"]
        env = {**os.environ, "PYTHONPATH": str(ROOT)}
        proc = subprocess.run(cmd, cwd=ROOT, env=env, capture_output=True, text=True)
    try:
        report = json.loads(proc.stdout)
    except ValueError:
        report = {"verified": False, "error": proc.stderr.strip().splitlines()[-1:] or ["no report"]}
    return {"family": family, "hint": bool(hint), "budget": budget, "verified": report.get("verified", False),
            "held_out_score": report.get("held_out_score", 0.0), "held_out": report.get("held_out", 0),
            "total_cpu": report.get("total_cpu", 0.0), "stopped": report.get("stopped", ""),
            "strategy": report.get("strategy", "")}


def table(rows: list[dict]) -> str:
    lines = ["| family | hint | verified | held-out | CPU min | stopped |", "|---|---|---|---|---|---|"]
    for r in rows:
        right = round(r["held_out_score"] * r["held_out"])
        lines.append(f"| {r['family']} | {'with' if r['hint'] else 'without'} | {'yes' if r['verified'] else 'no'} "
                     f"| {right}/{r['held_out']} | {r['total_cpu'] / 60:.1f} | {r['stopped'] or '-'} |")
    return "\n".join(lines)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--budget-cpu-min", type=float, default=6.0)
    ap.add_argument("--out", type=Path, default=Path("hints-results.jsonl"))
    ap.add_argument("--only", choices=["without", "with"], default=None)
    ap.add_argument("--families", nargs="*", default=None)
    args = ap.parse_args()
    hints = tomllib.loads((ROOT / "bench" / "hints.toml").read_text(encoding="utf-8"))
    for family in args.families or list(hints):
        for with_hint in (False, True):
            if args.only and args.only != ("with" if with_hint else "without"):
                continue
            print(f"building {family} {'with' if with_hint else 'without'} its hint …", file=sys.stderr, flush=True)
            row = build_once(family, hints[family] if with_hint else None, args.budget_cpu_min)
            with open(args.out, "a", encoding="utf-8") as fh:
                fh.write(json.dumps(row) + "\n")
            print(json.dumps(row), file=sys.stderr, flush=True)
    rows = [json.loads(line) for line in args.out.read_text(encoding="utf-8").splitlines() if line.strip()]
    print(table(rows))


if __name__ == "__main__":
    main()
