"""How the run loop's fit check (runner.runloop.Engine.misfit) judges real fills, with no model call:

1. every split task of an eval report (eval-out/eval.json) answered with its own family's verified tool: a
   fill the check calls a misfit there would be a right route thrown away;
2. a run's answers file scored against its expected families (samples/queue_expected.jsonl): tasks routed to
   a tool of another family, and how many of them the check sent on to the fallback.

    .venv/bin/python bench/fit_check.py [--eval eval-out/eval.json] [--answers answers.jsonl]
        [--expected samples/queue_expected.jsonl]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.runloop import Engine  # noqa: E402
from runner.store import ToolStore  # noqa: E402
from runner.tools import slug  # noqa: E402


def on_eval(path: Path, store: ToolStore) -> None:
    report = json.loads(path.read_text())
    for build in report["builds"]:
        if not build["verified"]:
            continue
        tool = store.by_key(build["key"])
        folder = ROOT / "samples" / build["family"].replace("-", "_") / "test.jsonl"
        questions = {t["id"]: t["question"] for t in map(json.loads, folder.read_text().splitlines())}
        row = next(r for r in report["rows"] if r["method"] == "split" and r["family"] == build["family"])
        filled = [s for s in row["results"] if s.get("arguments") is not None]
        misfits = [s["id"] for s in filled if Engine.misfit(tool, questions[s["id"]], s["arguments"])]
        print(f"eval, {build['family']}: {len(misfits)} of {len(filled)} fills for its own verified tool judged "
              f"a misfit {misfits or ''}".rstrip())


def on_answers(answers: Path, expected: Path) -> None:
    family = {e["id"]: e.get("family") for e in map(json.loads, expected.read_text().splitlines())}
    wrong = caught = right_rejected = 0
    for rec in map(json.loads, answers.read_text().splitlines()):
        route = rec.get("route")
        if not route or route == "none" or rec["id"] not in family:
            continue
        misfit = "does not fit" in (rec.get("error") or "")
        if family[rec["id"]] is None or slug(family[rec["id"]]) != route:
            wrong += 1
            caught += misfit
        else:
            right_rejected += misfit
    print(f"run, {answers.name}: {caught} of {wrong} tasks routed to a tool of another family sent to the "
          f"fallback by the fit check; {right_rejected} rightly routed tasks sent there")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--eval", type=Path, default=ROOT / "eval-out" / "eval.json")
    ap.add_argument("--answers", type=Path)
    ap.add_argument("--expected", type=Path, default=ROOT / "samples" / "queue_expected.jsonl")
    args = ap.parse_args()
    with ToolStore() as store:
        on_eval(args.eval, store)
    if args.answers:
        on_answers(args.answers, args.expected)


if __name__ == "__main__":
    main()
