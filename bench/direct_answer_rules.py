"""Old and new rule for direct answers, replayed over recorded fallback replies.

The old rule recorded the answer part of a direct reply as it stood (after the last "Answer:", else the last
line); the new one (runner/answerform.py) cuts that down to what the question asks for. This script reads an
answers file whose fallback records keep the model's full reply (`reply`), applies both rules to each reply,
scores both against the expected answers, and prints how many answers the new rule changes and how many turn
right or wrong. No model is loaded: the replies are the recorded ones.

The recorded file in bench/data/ came from one run with the real default models and an empty tool store (so
every question falls back), made with:

    JIGWRIGHT_THREADS=1 JIGWRIGHT_HOME=$(mktemp -d) jigwright answer samples/queue.jsonl \\
        --out bench/data/fallback-executor-replies.jsonl --fallback executor --expected samples/queue_expected.jsonl

(with `ln -s ~/.cache/jigwright/models $JIGWRIGHT_HOME/models` so the fetched models are found); the builder's
replies the same way with `--fallback builder`. A reply that ran out of tokens before its answer is a failure
under either rule and is not counted.

    .venv/bin/python bench/direct_answer_rules.py [ANSWERS.jsonl ...] [--expected FILE] [--show]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.answerform import answer_part, direct_answer  # noqa: E402
from runner.execute import answers_match, normalise  # noqa: E402


def read_jsonl(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines() if line.strip()]


def compare(records: list[dict], expected: dict[str, dict]) -> dict:
    """Both rules over every fallback record with a reply; counts, and the rows that differ."""
    rows = []
    for r in records:
        if r.get("status") != "fallback" or not r.get("reply"):
            continue
        old, new = answer_part(r["reply"]), direct_answer(r["question"], r["reply"])
        exp = expected.get(r["id"], {}).get("answer")
        # "changed": a different answer, not only the same one in another form ('14' → 14, 'Yes.' → 'yes')
        rows.append({"id": r["id"], "expected": exp, "old": old, "new": new,
                     "changed": normalise(old) != normalise(new), "retyped": old != new,
                     "old_right": exp is not None and answers_match(exp, old),
                     "new_right": exp is not None and answers_match(exp, new)})
    scored = [x for x in rows if x["expected"] is not None]
    return {
        "fallback_answers": len(rows),
        "changed": sum(x["changed"] for x in rows),
        "same_answer_new_form": sum(x["retyped"] and not x["changed"] for x in rows),
        "with_expected_answer": len(scored),
        "right_old_rule": sum(x["old_right"] for x in scored),
        "right_new_rule": sum(x["new_right"] for x in scored),
        "wrong_to_right": sum(x["new_right"] and not x["old_right"] for x in scored),
        "right_to_wrong": sum(x["old_right"] and not x["new_right"] for x in scored),
        "rows": rows,
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("answers", nargs="*", type=Path,
                    default=sorted((ROOT / "bench/data").glob("fallback-*-replies.jsonl")))
    ap.add_argument("--expected", type=Path, default=ROOT / "samples/queue_expected.jsonl")
    ap.add_argument("--queue", type=Path, default=ROOT / "samples/queue.jsonl",
                    help="The queue the replies answered (checked: the recorded questions must be its questions).")
    ap.add_argument("--show", action="store_true", help="Print every answer the new rule changes.")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    expected = {e["id"]: e for e in read_jsonl(args.expected)}
    results = {}
    questions = {t["id"]: t["question"] for t in read_jsonl(args.queue)}
    for path in args.answers:
        records = read_jsonl(path)
        stale = [r["id"] for r in records if r.get("question") != questions.get(r["id"])]
        if stale:
            sys.exit(f"{path}: the questions of {', '.join(stale[:5])} differ from {args.queue}: the replies were "
                     "recorded on another version of the queue; record them again (see this script's docstring)")
        res = compare(records, expected)
        results[str(path)] = res
        if args.json:
            continue
        print(f"{path.resolve().relative_to(ROOT) if path.resolve().is_relative_to(ROOT) else path}:")
        print(f"  fallback answers with a recorded reply: {res['fallback_answers']}; "
              f"changed by the new rule: {res['changed']} (and {res['same_answer_new_form']} the same answer "
              f"in another form, such as '14' → 14)")
        print(f"  right against {args.expected.name} ({res['with_expected_answer']} with an expected answer): "
              f"old rule {res['right_old_rule']}, new rule {res['right_new_rule']}; "
              f"wrong→right {res['wrong_to_right']}, right→wrong {res['right_to_wrong']}")
        if args.show:
            for x in res["rows"]:
                if x["changed"]:
                    mark = ("no expected answer" if x["expected"] is None
                            else f"expected {x['expected']!r}: " + ("right" if x["new_right"] else "wrong"))
                    print(f"    {x['id']}: {x['old']!r} → {x['new']!r} ({mark})")
    if args.json:
        print(json.dumps({k: {kk: vv for kk, vv in v.items() if kk != "rows"} for k, v in results.items()}, indent=1))


if __name__ == "__main__":
    main()
