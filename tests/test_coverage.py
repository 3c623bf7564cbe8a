"""The demo families' generators cover the domain their descriptions state, not a corner of it.

Each generator names its boundary classes (CLASSES, with classes(task) telling which a task falls in). Over a
few thousand draws every class must occur, and the committed test.jsonl must hold every class, so that an
eval score speaks for the whole described rule (late first departures, equal values, single items, the
largest sizes drawn, remainders of 10, weekend holidays, …)."""

from __future__ import annotations

import json
import random
from pathlib import Path

import pytest

from samples import make_samples
from samples.families import FAMILIES

SAMPLES = Path(__file__).resolve().parent.parent / "samples"


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_the_generator_draws_every_boundary_class(name):
    module = FAMILIES[name]
    assert module.CLASSES, f"{name} names no boundary classes"
    rng = random.Random(f"coverage:{name}")
    seen: set[str] = set()
    for _ in range(3000):
        seen |= module.classes(module.generate(rng))
    assert set(module.CLASSES) <= seen, f"{name}: never drawn: {sorted(set(module.CLASSES) - seen)}"
    assert seen <= set(module.CLASSES), f"{name}: classes() names classes not in CLASSES"


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_the_committed_test_tasks_hold_every_boundary_class(name):
    module = FAMILIES[name]
    drawn = make_samples.draw_all()[name]["test"]
    committed = [json.loads(x) for x in (SAMPLES / name / "test.jsonl").read_text(encoding="utf-8").splitlines()]
    assert [t["question"] for t in drawn] == [t["question"] for t in committed]  # the same tasks, with params
    held = set().union(*(module.classes(t) for t in drawn))
    assert held == set(module.CLASSES), f"{name}: test.jsonl lacks {sorted(set(module.CLASSES) - held)}"


def test_a_late_first_departure_counts_from_the_first_departure():
    # Worked by hand: the Godwit leaves at 8, 11, 14, …; the Tern at 2, 8, 14, …; both first at minute 8.
    # A rule that compared remainders only would say 2, before the Godwit has left at all.
    departures = FAMILIES["departures"]
    assert departures.solve(starts=[8, 2], periods=[3, 6]) == 8
    assert "late_first_departure" in departures.classes({"params": {"starts": [8, 2], "periods": [3, 6]}, "answer": 8})


def test_iso6346_remainder_10_gives_check_digit_0():
    # Reference: python-stdnum's iso6346 module computes the check digit as the weighted sum mod 11, mod 10.
    iso6346 = pytest.importorskip("stdnum.iso6346")
    codes = FAMILIES["container_codes"]
    rng = random.Random("remainder-10")
    found = 0
    for _ in range(2000):
        code = codes.random_code10(rng)
        if codes.weighted_remainder(code) == 10:
            found += 1
            assert codes.solve(code) == 0 == int(iso6346.calc_check_digit(code))
    assert found > 50
