"""Write the demo sample files (seeded, deterministic): `python -m samples.make_samples` from the repo root.

Per family: <family>/examples.jsonl (9 solved examples for building: 3 to draft from, 3 to choose among
candidates, 3 to confirm), <family>/test.jsonl (50 held-out tasks that hold every boundary class the family's
generator names in CLASSES),
<family>/family.toml; plus queue.jsonl (a mixed demo queue with a few questions that fit no family) and
queue_expected.jsonl (the family and answer each queue task should get, null for none).
"""

from __future__ import annotations

import json
import random
from pathlib import Path

from samples.families import FAMILIES

SEED = "kelpwick-2025"
N_EXAMPLES = 9
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
    answer to at most half of them (rounded up), so that yes/no families show both answers to the builder."""
    out: list[dict] = []
    while len(out) < count:
        task = module.generate(rng)
        if balanced and sum(t["answer"] == task["answer"] for t in out) >= (count + 1) // 2:
            continue
        if task["question"] not in taken:
            taken.add(task["question"])
            out.append(task)
    return out


def _draw_covering(module, rng: random.Random, count: int, taken: set[str]) -> list[dict]:
    """`count` new tasks holding at least one task of every boundary class in `module.CLASSES` (each drawn
    by rejection from the generator itself), the rest drawn freely; shuffled so no class sits at the front."""
    out: list[dict] = []
    for name in sorted(module.CLASSES):
        if any(name in module.classes(t) for t in out):
            continue
        for _ in range(100_000):
            task = module.generate(rng)
            if task["question"] not in taken and name in module.classes(task):
                taken.add(task["question"])
                out.append(task)
                break
        else:
            raise RuntimeError(f"{module.NAME}: the generator never drew a task of class {name!r}")
    out += _draw(module, rng, count - len(out), taken)
    rng.shuffle(out)
    return out


def draw_all() -> dict[str, dict[str, list[dict]]]:
    """Family name -> {"examples", "test", "queue"} lists of generated tasks (question, answer, params)."""
    drawn = {}
    for name, module in FAMILIES.items():
        taken: set[str] = set()
        drawn[name] = {
            "examples": _draw(module, random.Random(f"{SEED}:{name}:examples"), N_EXAMPLES, taken, balanced=True),
            "test": _draw_covering(module, random.Random(f"{SEED}:{name}:test"), N_TEST, taken),
            "queue": _draw(module, random.Random(f"{SEED}:{name}:queue"), 3 if name in QUEUE_THREE else 2, taken),
        }
    return drawn


def render() -> dict[str, str]:
    """Relative path -> file content for every sample file."""
    files: dict[str, str] = {}
    queue_items: list[tuple[str, dict]] = []
    for name, drawn in draw_all().items():
        files[f"{name}/examples.jsonl"] = _jsonl(
            [{"id": f"{name}-ex{i:02d}", "question": t["question"], "answer": t["answer"]}
             for i, t in enumerate(drawn["examples"], 1)])
        files[f"{name}/test.jsonl"] = _jsonl(
            [{"id": f"{name}-t{i:02d}", "question": t["question"], "answer": t["answer"]}
             for i, t in enumerate(drawn["test"], 1)])
        files[f"{name}/family.toml"] = _toml(FAMILIES[name])
        queue_items += [(name, t) for t in drawn["queue"]]
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
