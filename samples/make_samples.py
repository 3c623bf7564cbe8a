"""Write the demo sample files (seeded, deterministic): `python -m samples.make_samples` from the repo root.

Per family: <family>/examples.jsonl (6 solved examples for building), <family>/test.jsonl (50 held-out tasks),
<family>/family.toml; plus queue.jsonl (a mixed demo queue with a few questions that fit no family) and
queue_expected.jsonl (the family and answer each queue task should get, null for none).
"""

from __future__ import annotations

import json
import random
from pathlib import Path

from samples.families import FAMILIES

SEED = "kelpwick-2025"
N_EXAMPLES = 6
N_TEST = 50
# families that get three queue tasks instead of two
QUEUE_THREE = {"departures", "berth_order", "crew_overlap", "working_days", "crate_handoffs"}
OFF_FAMILY = [
    "What colour is the harbour master's boat painted this year?",
    "How many containers did the Kittiwake unload last Tuesday?",
    "Can the Dunlin's skipper borrow the co-op's spare outboard motor on Sunday?",
]
SAMPLES_DIR = Path(__file__).resolve().parent


def _jsonl(rows: list[dict]) -> str:
    return "".join(json.dumps(r) + "\n" for r in rows)


def _toml(module) -> str:
    # JSON string escapes are valid TOML basic-string escapes
    return f"name = {json.dumps(module.NAME)}\ndescription = {json.dumps(module.DESCRIPTION)}\n"


def _draw(module, rng: random.Random, count: int, taken: set[str], balanced: bool = False) -> list[dict]:
    """`count` generated tasks whose questions are new to `taken` (which is updated); `balanced` keeps any one
    answer to at most half of them, so that yes/no families show both answers to the builder."""
    out: list[dict] = []
    while len(out) < count:
        task = module.generate(rng)
        if balanced and sum(t["answer"] == task["answer"] for t in out) >= count // 2:
            continue
        if task["question"] not in taken:
            taken.add(task["question"])
            out.append(task)
    return out


def render() -> dict[str, str]:
    """Relative path -> file content for every sample file."""
    files: dict[str, str] = {}
    queue_items: list[tuple[str, dict]] = []
    for name, module in FAMILIES.items():
        taken: set[str] = set()
        examples = _draw(module, random.Random(f"{SEED}:{name}:examples"), N_EXAMPLES, taken, balanced=True)
        tests = _draw(module, random.Random(f"{SEED}:{name}:test"), N_TEST, taken)
        queued = _draw(module, random.Random(f"{SEED}:{name}:queue"), 3 if name in QUEUE_THREE else 2, taken)
        files[f"{name}/examples.jsonl"] = _jsonl(
            [{"id": f"{name}-ex{i:02d}", "question": t["question"], "answer": t["answer"]}
             for i, t in enumerate(examples, 1)])
        files[f"{name}/test.jsonl"] = _jsonl(
            [{"id": f"{name}-t{i:02d}", "question": t["question"], "answer": t["answer"]}
             for i, t in enumerate(tests, 1)])
        files[f"{name}/family.toml"] = _toml(module)
        queue_items += [(name, t) for t in queued]
    queue_items += [(None, {"question": q, "answer": None}) for q in OFF_FAMILY]
    random.Random(f"{SEED}:queue-order").shuffle(queue_items)
    queue, expected = [], []
    for i, (name, task) in enumerate(queue_items, 1):
        qid = f"q{i:02d}"
        queue.append({"id": qid, "question": task["question"]})
        expected.append({"id": qid, "family": name, "answer": task["answer"]})
    files["queue.jsonl"] = _jsonl(queue)
    files["queue_expected.jsonl"] = _jsonl(expected)
    return files


def write(out_dir: Path = SAMPLES_DIR) -> list[Path]:
    written = []
    for rel, text in render().items():
        path = out_dir / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8", newline="\n")
        written.append(path)
    return written


def main() -> None:
    paths = write()
    print(f"wrote {len(paths)} files under {SAMPLES_DIR}")


if __name__ == "__main__":
    main()
