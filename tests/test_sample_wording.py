"""The demo samples keep to the co-op's own wording: no sentence shapes of public reasoning benchmarks or puzzle
collections, and not the retired scenario name."""

from __future__ import annotations

import hashlib
import random
import re
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # so `samples` imports without an install or PYTHONPATH
    sys.path.insert(0, str(ROOT))

from samples.extra.families import EXTRA_FAMILIES  # noqa: E402
from samples.families import FAMILIES  # noqa: E402

SAMPLES = ROOT / "samples"
# The retired scenario name, kept as its SHA-256 (lower case) so that the name itself appears nowhere in the
# repository; every word of every sample file is hashed and compared.
RETIRED_NAME_SHA256 = "350f03dffc40200d5ed3352175a4c88f9ccc3110e188a3cd8f5309a4ed56e2ce"


def has_retired_name(text: str) -> bool:
    return any(hashlib.sha256(w.encode()).hexdigest() == RETIRED_NAME_SHA256
               for w in set(re.findall(r"[a-z]+", text.lower())))

# Shapes the crate and berth questions used to borrow (object-tracking and ordering puzzles); none may come back.
BANNED = [
    r"\bat the (start|end|beginning) of\b",
    r"\bswap(s|ped|ping)?\b",
    r"\btrad(e|es|ed|ing)\b",
    r"\bpairs?\b",
    r"\bas the \w+ (progresses|goes on)\b",
    r"(^|\. )(first|finally), ",
    r"\b(directly|immediately|right|just) (to the )?(east|west|left|right) of\b",
    r"\bsomewhere (to the )?(east|west|left|right)\b",
    r"\bto the (left|right) of\b",
    r"\bnext to each other\b",
    r"\bfrom the (left|right)\b",
    r"\b(leftmost|rightmost|westernmost|easternmost)\b",
    r"\b(second|third|fourth) from the\b",
    r"\blogically consistent\b",
    r"\bin a fixed order\b",
]


def banned_hits(text: str) -> list[str]:
    return [p for p in BANNED if re.search(p, text, flags=re.IGNORECASE | re.MULTILINE)]


def test_the_ban_list_catches_the_old_shapes():
    # invented sentences in the retired styles, so a broken pattern cannot pass silently
    old = ["At the start of the shift Nell holds the tar crate.", "Then, in order: Nell and Jory swap crates.",
           "Pairs trade crates in this order: Nell and Jory.", "Right to the west of the Dunlin is the Curlew.",
           "The Curlew is directly east of the Dunlin.", "The Curlew is somewhere west of the Dunlin.",
           "The Curlew and the Dunlin are next to each other.", "Berth 1 is the westernmost."]
    assert all(banned_hits(s) for s in old)
    assert not banned_hits("The Curlew is the Dunlin's neighbour on the east side. Crates changed hands.")


@pytest.mark.parametrize("name", sorted({**FAMILIES, **EXTRA_FAMILIES}))
def test_generated_questions_avoid_banned_shapes(name):
    # 400 draws reach every template of every generator many times over (both collections)
    rng = random.Random(f"wording:{name}")
    for _ in range(400):
        question = {**FAMILIES, **EXTRA_FAMILIES}[name].generate(rng)["question"]
        assert not banned_hits(question), (banned_hits(question), question)


def test_committed_sample_files_avoid_banned_shapes_and_the_retired_name():
    files = [p for p in SAMPLES.rglob("*") if p.is_file() and "__pycache__" not in p.parts]
    assert any(p.suffix == ".jsonl" for p in files) and any(p.suffix == ".py" for p in files)
    for path in files:
        text = path.read_text(encoding="utf-8")
        assert not has_retired_name(text), path
        if path.suffix in (".jsonl", ".toml"):
            assert not banned_hits(text), (path, banned_hits(text))


def test_the_retired_name_check_catches_the_name():
    # the name rebuilt from its letters, so the check cannot pass silently
    name = "".join(chr(c) for c in (115, 97, 108, 116, 109, 97, 114, 115, 104))
    assert has_retired_name(f"The {name.title()} Harbour Co-op") and not has_retired_name("Kelpwick Quay")
