"""Write the sample files (seeded, deterministic): `python -m samples.make_samples` from the repo root.

Demo collection, per family: <family>/examples.jsonl (9 solved examples for building: 3 to draft from, 3 to
choose among candidates, 3 to confirm), <family>/test.jsonl (50 held-out tasks that hold every boundary class
the family's generator names in CLASSES), <family>/family.toml; plus queue.jsonl (a mixed demo queue with a few questions that fit no
family) and queue_expected.jsonl (the family and answer each queue task should get, null for none).

Second collection (kinds unlike the demo ones, not built by `make demo`), per family:
extra/<family>/examples.jsonl (9 solved examples: 3 to draft from, 3 to choose with, 3 to confirm with),
extra/<family>/test.jsonl (30 held-out tasks), extra/<family>/family.toml.

split.toml: every family of both collections in the tuning half or the check half (see `render_split`). It is a
record, not an output: written only when missing, then edited by hand when a family moves or is added.
"""

from __future__ import annotations

import json
import random
from pathlib import Path

from samples.extra.families import EXTRA_FAMILIES
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

EXTRA_SEED = "kelpwick-extra-2026"
EXTRA_EXAMPLES = 9  # in file order: 3 draft, 3 choose, 3 confirm
EXTRA_TEST = 30
SPLIT_SEED = "kelpwick-split-2026"


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


def _rows(name: str, tag: str, tasks: list[dict]) -> str:
    return _jsonl([{"id": f"{name}-{tag}{i:02d}", "question": t["question"], "answer": t["answer"]}
                   for i, t in enumerate(tasks, 1)])


def _draw_thirds(module, rng: random.Random, taken: set[str]) -> list[dict]:
    """The examples in three parts (draft, choose, confirm), each drawn by `_draw`; where a family names the
    cases of its rule (`case(task)`, e.g. order or no order, or yes and no), each part shows at least two."""
    out: list[dict] = []
    part = EXTRA_EXAMPLES // 3
    while len(out) < EXTRA_EXAMPLES:
        seen = set(taken)
        tasks = _draw(module, rng, part, seen)
        if hasattr(module, "case") and len({module.case(t) for t in tasks}) < 2:
            continue
        taken |= seen
        out += tasks
    return out


def render_extra() -> dict[str, str]:
    """Relative path -> file content for the second collection (under extra/)."""
    files: dict[str, str] = {}
    for name, module in EXTRA_FAMILIES.items():
        taken: set[str] = set()
        examples = _draw_thirds(module, random.Random(f"{EXTRA_SEED}:{name}:examples"), taken)
        tests = _draw(module, random.Random(f"{EXTRA_SEED}:{name}:test"), EXTRA_TEST, taken)
        files[f"extra/{name}/examples.jsonl"] = _rows(name, "ex", examples)
        files[f"extra/{name}/test.jsonl"] = _rows(name, "t", tests)
        files[f"extra/{name}/family.toml"] = _toml(module)
    return files


# Kinds of question the builder has failed on before (issue 11), two families each; the two go to different
# halves, so that a change for such a kind is both tuned on and checked.
SPREAD = [("dates with month names", ("licence_expiry", "passage_arrival")),
          ("a varying number of items", ("landing_tally", "mooring_route"))]


def split() -> dict[str, list[str]]:
    """The tuning and check halves. Per collection, the sorted names are shuffled with a fixed seed and dealt one
    by one to the half holding fewer of that collection so far (tuning on a tie); dealing one family of a SPREAD
    kind puts the other in the other half at once. Nobody picks which family goes where."""
    halves: dict[str, list[str]] = {"tuning": [], "check": []}
    partner = {a: b for _, pair in SPREAD for a, b in (pair, pair[::-1])}
    for collection, names in (("demo", FAMILIES), ("extra", EXTRA_FAMILIES)):
        order = sorted(names)
        random.Random(f"{SPLIT_SEED}:{collection}").shuffle(order)
        dealt: dict[str, list[str]] = {"tuning": [], "check": []}
        for name in order:
            if any(name in members for members in dealt.values()):
                continue  # held for its half when its partner was dealt
            half = "tuning" if len(dealt["tuning"]) <= len(dealt["check"]) else "check"
            dealt[half].append(name)
            if partner.get(name) in names:
                dealt["check" if half == "tuning" else "tuning"].append(partner[name])
        for half in halves:
            halves[half] += sorted(dealt[half])
    return halves


def render_split() -> str:
    halves = split()
    spread = "; ".join(f"{label}: {' and '.join(two)}" for label, two in SPREAD)
    lines = [
        "# Which families prompts and the build process may be tuned on, and which only measure them (issue 11).",
        "# Written by `python -m samples.make_samples` before the builder was changed for the second collection.",
        "# Rule: per collection (demo: samples/<family>/, second: samples/extra/<family>/), the family names are",
        f"# sorted, shuffled with random.Random(\"{SPLIT_SEED}:<collection>\"), and dealt one by one to the half",
        "# holding fewer of that collection so far (tuning on a tie); of the two families of each kind below (kinds",
        "# the builder has failed on before), dealing one puts the other in the other half at once. Nobody picked",
        "# which family goes where.",
        f"# Kinds: {spread}.",
        "# Change prompts and process only from tuning families' traces and report both halves; whoever reads a",
        "# check family's trace moves it to tuning and adds a new check family.",
        "# This file is the record: make_samples writes it only when it is missing. Edit it by hand for a move or",
        "# a new family, and say so below.",
        "# Moves and additions since it was written: none.",
    ]
    for half, names in halves.items():
        lines.append(f"{half} = [")
        lines += [f"    {json.dumps(n)}," for n in names]
        lines.append("]")
    return "\n".join(lines) + "\n"


def render_all() -> dict[str, str]:
    """Both collections and the split."""
    return {**render(), **render_extra(), "split.toml": render_split()}


def write(out_dir: Path = SAMPLES_DIR) -> list[Path]:
    written = []
    for rel, text in render_all().items():
        path = out_dir / rel
        if rel == "split.toml" and path.exists():
            continue  # the split is a record once written
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8", newline="\n")
        written.append(path)
    return written


def main() -> None:
    paths = write()
    print(f"wrote {len(paths)} files under {SAMPLES_DIR}")


if __name__ == "__main__":
    main()
