"""Build every family in the given folders from a fresh tool store, with fixed seeds, and report per family
whether its tool verified, its choose and confirm scores, CPU minutes, candidates per step, the step where the
best attempt failed, and how the verified tool does on the family's test tasks; then the verified share per half
(samples/split.toml) and the verified share against the CPU budget.

    python bench/build_bench.py samples samples/extra --budget 16 --jobs 2 --out bench-out/builds.json
    python bench/build_bench.py --render bench-out/builds.json          # the tables again, from the JSON

The budget curve comes from one run at the largest budget: sampling is seeded, so the build under a smaller
budget is a prefix of the same run, and a family counts as verified at budget B when its build first verified
within B CPU minutes. Each build runs in its own process with one llama.cpp thread (`--jobs` of them at once),
in a JIGWRIGHT_HOME of its own under /tmp whose models folder links to yours.
"""

from __future__ import annotations

import argparse
import concurrent.futures as cf
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
import tomllib
from datetime import datetime, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CURVE = (4, 8, 16)
# The four changes made from the tuning half's traces on 2026-12-02 (off by default in BuildSettings: the check
# half did not gain); `--changes` measures the process with them on.
CHANGES = {"shape_feedback": 1, "choose_repairs": 1, "reading_notes": True, "rule_in_code": True}


def family_dirs(folders: list[Path]) -> list[Path]:
    """Each folder that holds examples.jsonl, or the folders directly inside it that do (sorted)."""
    out: list[Path] = []
    for folder in folders:
        if (folder / "examples.jsonl").exists():
            out.append(folder)
        else:
            out.extend(sorted(p.parent for p in folder.glob("*/examples.jsonl")))
    return out


def halves(split_file: Path) -> dict[str, str]:
    if not split_file.exists():
        return {}
    data = tomllib.loads(split_file.read_text(encoding="utf-8"))
    return {name: half for half in ("tuning", "check") for name in data.get(half, [])}


# ---- one build (runs in a child process) -------------------------------------------------------------------

def one(folder: Path, budget: float, seed: int, test_n: int, trace: Path | None, changes: bool = False) -> dict:
    """Build one family in this process (JIGWRIGHT_HOME is set by the parent) and answer up to `test_n` of its
    test tasks with the tool the way the run loop does (executor fill, one retry, sandbox; no routing)."""
    sys.path.insert(0, str(ROOT))
    from runner import build as B
    from runner.execute import answer_with_tool, answers_match
    from runner.llm import open_model
    from runner.sandbox import Sandbox
    from runner.store import ToolStore

    family = B.load_family(folder / "examples.jsonl")
    settings = B.BuildSettings(seed=seed, budget_cpu_minutes=budget, **(CHANGES if changes else {}))
    builder, executor = open_model("builder"), open_model("executor")
    fh = open(trace, "w", encoding="utf-8") if trace else None

    def tracer(record: dict) -> None:
        if fh:
            fh.write(json.dumps(record, ensure_ascii=False, default=str) + "\n")
            fh.flush()

    wall = time.monotonic()
    with ToolStore() as store, Sandbox() as sandbox:
        tool, report = B.build(family, builder=builder, executor=executor, sandbox=sandbox, store=store,
                               settings=settings, builder_sha=builder.spec.sha256, executor_sha=executor.spec.sha256,
                               force=True, trace=tracer)
        wall = time.monotonic() - wall
        test = {"n": 0, "right": 0, "cpu": 0.0}
        if tool is not None and tool.verified and test_n:
            tasks = B.parse_solved(str(folder / "test.jsonl"),
                                   (folder / "test.jsonl").read_text(encoding="utf-8").splitlines())[:test_n]
            for task in tasks:
                got = answer_with_tool(executor, tool, task.question, sandbox, seed=seed)
                test["n"] += 1
                test["right"] += bool(got.ok and answers_match(task.answer, got.value))
                test["cpu"] += got.usage.cpu_seconds + got.tool_cpu_seconds
    if fh:
        fh.close()
    data = report.summary()
    data.update(folder=str(folder), wall=wall, test=test, code=tool.code if tool else "")
    return data


# ---- the parent: many builds, then the tables ----------------------------------------------------------------

def run_child(folder: Path, args: argparse.Namespace, models: Path) -> dict:
    home = Path(tempfile.mkdtemp(prefix=f"jw-bench-{folder.name}-"))
    (home / "models").symlink_to(models, target_is_directory=True)
    env = dict(os.environ, JIGWRIGHT_HOME=str(home), JIGWRIGHT_THREADS=str(args.threads), PYTHONPATH=str(ROOT))
    trace = Path(args.traces) / f"{folder.name}.jsonl" if args.traces else None
    cmd = [sys.executable, str(Path(__file__).resolve()), "--one", str(folder), "--budget", str(args.budget),
           "--seed", str(args.seed), "--test-n", str(args.test_n)] + (["--trace", str(trace)] if trace else []) \
        + (["--changes"] if args.changes else [])
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=ROOT)
    lines = [l for l in proc.stdout.splitlines() if l.startswith("{")]
    if proc.returncode != 0 or not lines:
        return {"folder": str(folder), "family": folder.name, "error": (proc.stderr.strip().splitlines() or ["?"])[-1]}
    return json.loads(lines[-1])


def candidates(r: dict) -> str:
    s = r.get("steps", {})
    return "/".join(str(s.get(k, {}).get("tried", 0)) for k in ("shape", "draft", "repair", "verify"))


def render(results: list[dict], meta: dict, split: dict[str, str]) -> str:
    """Per-family table, shares per half and the budget curve, as plain text that fits 80 columns."""
    lines = [f"Builds: {meta.get('date', '?')}, {meta.get('machine', '?')}, seed {meta.get('seed')},",
             f"budget {meta.get('budget'):g} CPU min per build, {meta.get('jobs')} build(s) at once, "
             f"{meta.get('threads', 1)} thread(s) each.",
             "cand = candidates tried per step: shape/draft/repair/verify. choose, confirm:",
             "the kept candidate's scores on those parts. failed = where the best attempt",
             "failed. test = test tasks right / asked, the tool used as the run loop uses it",
             "(fill, one retry, sandbox; no routing).", ""]
    head = f"{'family':<18} {'half':<6} {'ok':<3} {'choose':>6} {'confirm':>7} {'CPU min':>7} {'cand':>11} " \
           f"{'failed':<8} {'test':>6}"
    lines += [head, "-" * len(head)]
    for r in sorted(results, key=lambda r: (split.get(Path(r["folder"]).name, "~"), r["folder"])):
        name = Path(r["folder"]).name
        if "error" in r:
            lines.append(f"{name[:18]:<18} {split.get(name, '-'):<6} ERR  {r['error'][:50]}")
            continue
        t = r.get("test", {})
        test = f"{t['right']}/{t['n']}" if t.get("n") else "-"
        lines.append(f"{name[:18]:<18} {split.get(name, '-'):<6} {'yes' if r['verified'] else 'no':<3} "
                     f"{r['choose_score']:>6.2f} {r['held_out_score']:>7.2f} {r['total_cpu'] / 60:>7.1f} "
                     f"{candidates(r):>11} {r.get('failed_at') or '-':<8} {test:>6}")
    lines.append("")
    for half in ("tuning", "check", None):
        rs = [r for r in results if "error" not in r and (half is None or split.get(Path(r["folder"]).name) == half)]
        if not rs:
            continue
        ok = sum(r["verified"] for r in rs)
        tests = [r["test"] for r in rs if r["verified"] and r["test"].get("n")]
        good = sum(1 for t in tests if t["right"] >= 0.95 * t["n"])
        lines.append(f"{half or 'all':<7} verified {ok}/{len(rs)} ({ok / len(rs):.0%}); right on >= 95% of "
                     f"test tasks: {good}/{len(tests)}")
    spent: dict[str, float] = {}
    for r in results:
        for step, s in r.get("steps", {}).items():
            spent[step] = spent.get(step, 0.0) + s.get("builder_cpu", 0.0) + s.get("executor_cpu", 0.0)
    total = sum(spent.values())
    if total:
        lines.append(f"CPU by step over all builds ({total / 60:.0f} min): " + ", ".join(
            f"{step} {cpu / total:.0%}" for step, cpu in spent.items() if cpu / total >= 0.005))
    lines += ["", "Verified share against the CPU budget per build, from the one run above:",
              "sampling is seeded, so a smaller budget is a prefix of the same run; a build",
              "counts at B when it first verified within B CPU minutes."]
    top = float(meta.get("budget") or max(CURVE))
    head = f"{'half':<7}" + "".join(f"{f'<= {b:g} min':>12}" for b in CURVE if b <= top)
    lines += [head]
    for half in ("tuning", "check", None):
        rs = [r for r in results if "error" not in r and (half is None or split.get(Path(r["folder"]).name) == half)]
        if not rs:
            continue
        row = f"{half or 'all':<7}"
        for b in (b for b in CURVE if b <= top):
            n = sum(1 for r in rs if r["verified"] and r.get("verified_cpu") is not None
                    and r["verified_cpu"] <= b * 60)
            row += f"{f'{n}/{len(rs)}':>12}"
        lines.append(row)
    return "\n".join(lines)


def verified_within(r: dict, minutes: float) -> bool:
    return bool(r.get("verified") and r.get("verified_cpu") is not None and r["verified_cpu"] <= minutes * 60)


def compare(before: list[dict], after: list[dict], minutes: float, split: dict[str, str]) -> str:
    """Per family and per half: verified within `minutes` CPU minutes before and after (a run with a larger
    budget is read at `minutes`: seeded sampling makes the smaller budget a prefix of it)."""
    old = {Path(r["folder"]).name: r for r in before if "error" not in r}
    new = {Path(r["folder"]).name: r for r in after if "error" not in r}

    def cell(r: dict | None) -> str:
        if r is None:
            return "not run"
        return f"yes {r['verified_cpu'] / 60:.1f}" if verified_within(r, minutes) else "no"

    head = f"{'family':<18} {'half':<7} {'before':>10} {'after':>10}"
    lines = [f"Before and after: verified within {minutes:g} CPU min (CPU min when it verified)", head,
             "-" * len(head)]
    names = sorted(set(old) | set(new), key=lambda n: (split.get(n, "~"), n))
    for name in names:
        lines.append(f"{name[:18]:<18} {split.get(name, '-'):<7} {cell(old.get(name)):>10} {cell(new.get(name)):>10}")
    lines.append("")
    for half in ("tuning", "check"):
        both = [n for n in names if split.get(n) == half and n in old and n in new]
        if both:
            b = sum(verified_within(old[n], minutes) for n in both)
            a = sum(verified_within(new[n], minutes) for n in both)
            lines.append(f"{half:<7} verified {b}/{len(both)} before, {a}/{len(both)} after "
                         f"(families run both times)")
    return "\n".join(lines)


def read_results(files: list[Path]) -> tuple[list[dict], dict]:
    results: list[dict] = []
    meta: dict = {}
    for f in files:
        try:
            data = json.loads(f.read_text())
        except (OSError, ValueError) as exc:
            sys.exit(f"build_bench: cannot read results from {f}: {exc}")
        results += data["results"]
        meta = meta or data["meta"]
    return results, meta


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("folders", nargs="*", type=Path, help="family folders, or folders of family folders")
    ap.add_argument("--budget", type=float, default=16.0, help="CPU minutes per build (default 16)")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--jobs", type=int, default=1, help="builds at once, each its own process")
    ap.add_argument("--threads", type=int, default=1, help="llama.cpp threads per build (default 1)")
    ap.add_argument("--test-n", type=int, default=30, help="test tasks answered with each verified tool")
    ap.add_argument("--split", type=Path, default=ROOT / "samples" / "split.toml")
    ap.add_argument("--out", type=Path, help="write results as JSON here (after every build)")
    ap.add_argument("--resume", action="store_true", help="keep results already in --out and build the rest")
    ap.add_argument("--traces", help="write each build's trace (JSONL) into this folder")
    ap.add_argument("--first", choices=("check", "tuning"), help="build that half's families first")
    ap.add_argument("--render", type=Path, nargs="+", help="print the tables from JSON results files (their results "
                    "together) and stop")
    ap.add_argument("--before", type=Path, nargs="+", help="with --render: results of an earlier process, "
                    "compared family by family at the smaller of the two budgets")
    ap.add_argument("--changes", action="store_true", help="build with the tuning-half changes of 2026-12-02 on "
                    "(shape feedback, choose repairs, reading notes, the rule in the code skeleton)")
    ap.add_argument("--one", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--trace", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args()
    split = halves(args.split)
    if args.one:
        print(json.dumps(one(args.one, args.budget, args.seed, args.test_n, args.trace, args.changes), default=str))
        return
    if args.render:
        results, meta = read_results(args.render)
        print(render(results, meta, split))
        if args.before:
            old, old_meta = read_results(args.before)
            print()
            print(compare(old, results, min(float(meta["budget"]), float(old_meta["budget"])), split))
        return
    folders = family_dirs(args.folders)
    if not folders:
        sys.exit("build_bench: no family folders (folders holding examples.jsonl) under " +
                 " ".join(map(str, args.folders)) + "; give samples or samples/extra")
    sys.path.insert(0, str(ROOT))
    from runner import settings as S
    models = S.home() / "models"
    if not models.exists():
        sys.exit(f"build_bench: {models} is missing: run `jigwright models fetch` first")
    meta = {"date": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
            "machine": f"{platform.machine()}, {os.cpu_count()} cores", "budget": args.budget, "seed": args.seed,
            "jobs": args.jobs, "threads": args.threads, "test_n": args.test_n, "changes": args.changes}
    results: list[dict] = []
    if args.resume and args.out and args.out.exists():
        results = [r for r in json.loads(args.out.read_text())["results"] if "error" not in r]
    done = {r["folder"] for r in results}
    todo = [f for f in folders if str(f) not in done]
    if args.first:
        todo.sort(key=lambda f: split.get(f.name) != args.first)  # stable: folder order within each group
    if args.traces:
        Path(args.traces).mkdir(parents=True, exist_ok=True)
    print(f"{len(todo)} build(s) to run, {args.jobs} at once, budget {args.budget:g} CPU min each", flush=True)
    with cf.ThreadPoolExecutor(max_workers=args.jobs) as pool:
        futures = {pool.submit(run_child, f, args, models): f for f in todo}
        for i, fut in enumerate(cf.as_completed(futures), 1):
            r = fut.result()
            results.append(r)
            verdict = r.get("error") or (f"verified at {r['verified_cpu'] / 60:.1f} CPU min" if r["verified"]
                                         else f"not verified ({r.get('failed_at')}), {r['total_cpu'] / 60:.1f} CPU min")
            print(f"[{i}/{len(todo)}] {futures[fut].name}: {verdict}", flush=True)
            if args.out:
                args.out.parent.mkdir(parents=True, exist_ok=True)
                tmp = args.out.with_suffix(".tmp")
                tmp.write_text(json.dumps({"meta": meta, "results": results}, indent=1, default=str))
                tmp.replace(args.out)
    print()
    print(render(results, meta, split))


if __name__ == "__main__":
    main()
