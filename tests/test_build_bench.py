"""bench/build_bench.py's tables: the before/after comparison reads a larger-budget run at the smaller budget."""

from __future__ import annotations

import importlib.util
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
spec = importlib.util.spec_from_file_location("build_bench", ROOT / "bench" / "build_bench.py")
bench = importlib.util.module_from_spec(spec)
spec.loader.exec_module(bench)


def result(name: str, verified_min: float | None) -> dict:
    return {"folder": f"samples/{name}", "verified": verified_min is not None,
            "verified_cpu": None if verified_min is None else verified_min * 60}


def test_compare_counts_a_build_only_if_it_verified_within_the_smaller_budget():
    split = {"a": "tuning", "b": "check", "c": "check"}
    before = [result("a", None), result("b", 12.0), result("c", 6.0)]  # a 16-minute run
    after = [result("a", 3.5), result("b", None)]  # c not run yet
    text = bench.compare(before, after, 8.0, split)
    rows = {line.split()[0]: line.split()[2:] for line in text.splitlines()[3:] if line and line.split()[0] in split}
    assert rows["a"] == ["no", "yes", "3.5"]
    assert rows["b"] == ["no", "no"]  # verified at 12 CPU min: not within 8
    assert rows["c"] == ["yes", "6.0", "not", "run"]
    assert "tuning  verified 0/1 before, 1/1 after" in text
    assert "check   verified 0/1 before, 0/1 after" in text  # only families run both times are counted
    assert max(len(line) for line in text.splitlines()) <= 80
