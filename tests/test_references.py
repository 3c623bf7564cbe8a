"""Reference solvers of the demo families checked against outside sources, and the sample files against
their generators."""

from __future__ import annotations

import datetime as dt
import json
import math
import random
import re
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # so `samples` imports without an install or PYTHONPATH
    sys.path.insert(0, str(ROOT))

from samples import make_samples  # noqa: E402
from samples.extra.families import EXTRA_FAMILIES  # noqa: E402
from samples.families import (  # noqa: E402
    FAMILIES,
    berth_order,
    container_codes,
    container_valid,
    crate_handoffs,
    crew_overlap,
    departures,
    manifest_order,
    working_days,
)

CASES = 150
ALL_FAMILIES = {**FAMILIES, **EXTRA_FAMILIES}
NUMBER_WORDS = {w: i for i, w in enumerate(
    "zero one two three four five six seven eight nine ten eleven twelve".split())}


def generated(module, count: int = CASES, seed: int = 0) -> list[dict]:
    rng = random.Random(f"refcheck:{module.NAME}:{seed}")
    return [module.generate(rng) for _ in range(count)]


# --- departures ------------------------------------------------------------------------------------------

def test_departures_match_sympy_crt_on_generated_cases():
    # Source: sympy.ntheory.modular.solve_congruence (SymPy's Chinese-remainder solver, which also handles
    # moduli that are not coprime). It gives the least residue x and the modulus L; a boat does not leave
    # before its first departure, so the answer is the first x + k*L that is at least every start.
    from sympy.ntheory.modular import solve_congruence

    for task in generated(departures):
        starts, periods = task["params"]["starts"], task["params"]["periods"]
        x, lcm = solve_congruence(*zip(starts, periods))
        while x < max(starts):
            x += lcm
        assert task["answer"] == x < 2000


def test_departures_match_sympy_crt_on_arbitrary_starts():
    # Source: sympy.ntheory.modular.crt (check=True returns None when the congruences are inconsistent).
    from sympy.ntheory.modular import crt

    rng = random.Random(11)
    for _ in range(300):
        n = rng.randint(2, 4)
        periods = [rng.randint(2, 20) for _ in range(n)]
        starts = [rng.randint(0, 60) for _ in range(n)]  # starts may exceed periods here
        found = crt(periods, starts)
        if found is None:
            with pytest.raises(ValueError):
                departures.solve(starts, periods)
            continue
        # for moduli that share factors crt reports a solution modulo their product, not their lcm
        lcm = math.lcm(*periods)
        x = int(found[0]) % lcm
        while x < max(starts):
            x += lcm
        assert departures.solve(starts, periods) == x


# --- container codes -------------------------------------------------------------------------------------

def test_container_check_digit_worked_example():
    from stdnum import iso6346

    # ISO 6346 Annex A worked example CSQU3054383: the value is recalled from memory, not copied from the
    # standard, so it is cross-checked here with python-stdnum's stdnum.iso6346.
    assert container_codes.solve("CSQU305438") == 3
    assert iso6346.calc_check_digit("CSQU305438") == "3"
    assert iso6346.is_valid("CSQU3054383")
    assert container_valid.solve("CSQU3054383") == "yes"
    assert container_valid.solve("CSQU3054384") == "no"


def test_container_codes_match_stdnum():
    # Source: python-stdnum, stdnum.iso6346.calc_check_digit.
    from stdnum import iso6346

    for task in generated(container_codes):
        assert task["answer"] == int(iso6346.calc_check_digit(task["params"]["code"]))
    rng = random.Random(5)
    for _ in range(500):  # arbitrary codes too, including those whose remainder is 10
        code = "".join(rng.choice("ABCDEFGHIJKLMNOPQRSTUVWXYZ") for _ in range(3)) + rng.choice("UJZ")
        code += "".join(rng.choice("0123456789") for _ in range(6))
        assert container_codes.solve(code) == int(iso6346.calc_check_digit(code))


def test_container_valid_matches_stdnum():
    # Source: python-stdnum, stdnum.iso6346.is_valid.
    from stdnum import iso6346

    answers = set()
    for task in generated(container_valid):
        code = task["params"]["code"]
        assert task["answer"] == ("yes" if iso6346.is_valid(code) else "no")
        answers.add(task["answer"])
    assert answers == {"yes", "no"}


# --- working days ----------------------------------------------------------------------------------------

def _numpy_working_days(start: str, end: str, holidays: list[str]) -> int:
    import numpy as np

    # numpy counts [begin, end): one day past the end makes both dates count
    stop = (dt.date.fromisoformat(end) + dt.timedelta(days=1)).isoformat()
    return int(np.busday_count(start, stop, weekmask="1111100", holidays=holidays))


def test_working_days_match_numpy_busday_count():
    # Source: numpy.busday_count with holidays= (NumPy's business-day calendar).
    for task in generated(working_days):
        assert task["answer"] == _numpy_working_days(**task["params"])
    rng = random.Random(3)
    for _ in range(300):
        first = dt.date(2020, 1, 1) + dt.timedelta(days=rng.randrange(3000))
        last = first + dt.timedelta(days=rng.randint(0, 400))
        hols = [(first + dt.timedelta(days=rng.randint(-5, 405))).isoformat() for _ in range(rng.randint(0, 6))]
        params = {"start": first.isoformat(), "end": last.isoformat(), "holidays": hols}
        assert working_days.solve(**params) == _numpy_working_days(**params)


# --- crew overlap ----------------------------------------------------------------------------------------

def _portion_earliest(day_start: str, day_end: str, busy: dict, minutes: int) -> str | None:
    import portion as P

    m = crew_overlap.to_minutes
    taken = P.empty()
    for ivs in busy.values():
        for a, b in ivs:
            taken |= P.closedopen(m(a), m(b))
    free = P.closedopen(m(day_start), m(day_end)) - taken
    for atom in free:  # atomic intervals in ascending order
        if atom.upper - atom.lower >= minutes:
            return crew_overlap.to_hhmm(atom.lower)
    return None


def test_crew_overlap_matches_portion_intervals():
    # Source: portion (PyPI), an interval-arithmetic library: free time = working day minus the union of the
    # half-open busy intervals; the first atomic free interval long enough gives the answer.
    for task in generated(crew_overlap):
        assert task["answer"] == _portion_earliest(**task["params"])
    rng = random.Random(9)
    for _ in range(300):  # arbitrary, possibly overlapping intervals, some with no slot at all
        busy = {}
        for name in ("A", "B", "C")[: rng.randint(1, 3)]:
            busy[name] = []
            for _ in range(rng.randint(0, 4)):
                a = rng.randint(8 * 60, 17 * 60)
                busy[name].append([crew_overlap.to_hhmm(a), crew_overlap.to_hhmm(a + rng.randint(5, 180))])
        params = {"day_start": "08:00", "day_end": "18:00", "busy": busy, "minutes": rng.choice([15, 30, 60, 120])}
        expected = _portion_earliest(**params)
        if expected is None:
            with pytest.raises(ValueError):
                crew_overlap.solve(**params)
        else:
            assert crew_overlap.solve(**params) == expected


# --- berth order -----------------------------------------------------------------------------------------

def _constraint_answers(boats: list[str], clues: list[dict], berth: int) -> set[str]:
    # python-constraint2 installs the import name `constraint`
    from constraint import AllDifferentConstraint, FunctionConstraint, Problem

    relation = {  # written afresh here, not taken from the module under test
        "directly_east": lambda x, y: x == y + 1,
        "directly_west": lambda x, y: x + 1 == y,
        "east_of": lambda x, y: x > y,
        "west_of": lambda x, y: x < y,
        "next_to": lambda x, y: abs(x - y) == 1,
    }
    problem = Problem()
    problem.addVariables(boats, list(range(1, len(boats) + 1)))
    problem.addConstraint(AllDifferentConstraint())
    for clue in clues:
        if clue["kind"] in relation:
            problem.addConstraint(FunctionConstraint(relation[clue["kind"]]), [clue["a"], clue["b"]])
        elif clue["kind"] == "at":
            problem.addConstraint(FunctionConstraint(lambda x, k=clue["berth"]: x == k), [clue["a"]])
        elif clue["kind"] == "not_at":
            problem.addConstraint(FunctionConstraint(lambda x, k=clue["berth"]: x != k), [clue["a"]])
        else:
            raise AssertionError(clue)
    return {b for sol in problem.getSolutions() for b, place in sol.items() if place == berth}


def test_berth_order_matches_constraint_solver():
    # Source: python-constraint2 (PyPI), a general finite-domain constraint solver: every arrangement that
    # meets the clues must put the same boat at the asked berth, and that boat is the answer.
    for task in generated(berth_order, count=100):
        assert _constraint_answers(**task["params"]) == {task["answer"]}


# --- crate hand-offs -------------------------------------------------------------------------------------

def test_crate_handoffs_match_sympy_permutations():
    # Common practice, as no outside reference solves this puzzle: each swap is a transposition of the
    # crew members, and the hand-offs compose into one permutation. Source for the composition:
    # sympy.combinatorics.Permutation, where p*q applies p first, then q.
    from sympy.combinatorics import Permutation

    for task in generated(crate_handoffs):
        holdings, swaps, crate = (task["params"][k] for k in ("holdings", "swaps", "crate"))
        people = list(holdings)
        index = {p: i for i, p in enumerate(people)}
        total = Permutation(list(range(len(people))))
        for a, b in swaps:
            total = total * Permutation([[index[a], index[b]]], size=len(people))
        start = next(i for i, p in enumerate(people) if holdings[p] == crate)
        assert task["answer"] == people[total(start)]


# --- manifest order --------------------------------------------------------------------------------------

def test_manifest_order_matches_natsort():
    # Common practice: the yard office's rule (prefix alphabetically, then number numerically) is the usual
    # "natural sort". Source: natsort (PyPI), natsort.natsorted with its default (unsigned integer) algorithm.
    from natsort import natsorted

    for task in generated(manifest_order):
        labels, position = task["params"]["labels"], task["params"]["position"]
        assert task["answer"] == natsorted(labels)[position - 1]
        assert natsorted(labels) == sorted(labels, key=manifest_order.sort_key)


# --- generators --------------------------------------------------------------------------------------------

def _leaves(value, key=None, top=True):
    """(key, leaf) for every scalar leaf inside one parameter's value, and the keys of a parameter that is a
    mapping (names such as crew members); records inside lists have field names as keys, not data."""
    if isinstance(value, dict):
        for k, v in value.items():
            if top:
                yield key, k
            yield from _leaves(v, k, False)
    elif isinstance(value, list):
        for v in value:
            yield from _leaves(v, key, False)
    else:
        yield key, value


@pytest.mark.parametrize("name", sorted(ALL_FAMILIES))
def test_generator_is_deterministic(name):
    module = ALL_FAMILIES[name]
    assert generated(module, 20, seed=4) == generated(module, 20, seed=4)
    assert generated(module, 20, seed=4) != generated(module, 20, seed=5)


@pytest.mark.parametrize("name", sorted(ALL_FAMILIES))
def test_generated_tasks_are_consistent(name):
    module = ALL_FAMILIES[name]
    assert module.NAME == name and module.DESCRIPTION and "\n" not in module.DESCRIPTION
    tasks = generated(module, 200, seed=1)
    for task in tasks:
        question, params = task["question"], task["params"]
        assert type(task["answer"]) in (int, str)
        assert task["answer"] == module.solve(**params)
        assert json.loads(json.dumps(params)) == params
        assert len(question.split()) <= 75
        # numbers as written: thousands separators dropped, small counts also as words
        numbers = set(re.findall(r"\d+", re.sub(r"(?<=\d),(?=\d{3})", "", question)))
        numbers |= {str(NUMBER_WORDS[w]) for w in re.findall(r"[a-z]+", question) if w in NUMBER_WORDS}
        for key, leaf in (pair for name, value in params.items() for pair in _leaves(value, name)):
            if isinstance(leaf, bool) or key == "kind":
                continue
            if isinstance(leaf, int):
                assert str(leaf) in numbers, (leaf, question)
            else:
                assert str(leaf) in question, (leaf, question)
    assert len({t["question"] for t in tasks}) > 150  # varied, not a handful of repeats


# --- committed sample files --------------------------------------------------------------------------------

SAMPLES = ROOT / "samples"


def _read_jsonl(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines()]


def test_committed_files_match_the_generator():
    # both collections; split.toml is a record that may be edited by hand, so it is checked on its own
    rendered = {rel: text for rel, text in make_samples.render_all().items() if rel != "split.toml"}
    assert rendered == {rel: text for rel, text in make_samples.render_all().items() if rel != "split.toml"}
    for rel, text in rendered.items():
        assert (SAMPLES / rel).read_bytes() == text.encode("utf-8"), f"{rel} is stale: run python -m samples.make_samples"


def test_committed_files_parse_and_fit_together():
    seen: set[str] = set()
    for name, module in FAMILIES.items():
        meta = tomllib.loads((SAMPLES / name / "family.toml").read_text(encoding="utf-8"))
        assert meta == {"name": module.NAME, "description": module.DESCRIPTION}
        examples = _read_jsonl(SAMPLES / name / "examples.jsonl")
        tests = _read_jsonl(SAMPLES / name / "test.jsonl")
        assert len(examples) == make_samples.N_EXAMPLES == 9 and len(tests) == make_samples.N_TEST
        for row in examples + tests:
            assert set(row) == {"id", "question", "answer"} and type(row["answer"]) in (int, str)
        questions = [r["question"] for r in examples + tests]
        assert len(set(questions)) == len(questions)
        ids = [r["id"] for r in examples + tests]
        assert len(set(ids)) == len(ids)
        seen |= set(questions)
    queue = _read_jsonl(SAMPLES / "queue.jsonl")
    expected = _read_jsonl(SAMPLES / "queue_expected.jsonl")
    assert [q["id"] for q in queue] == [e["id"] for e in expected]
    assert all(set(q) == {"id", "question"} for q in queue)
    assert all(set(e) == {"id", "family", "answer"} for e in expected)
    assert not {q["question"] for q in queue} & seen
    per_family = {name: 0 for name in FAMILIES}
    for row in expected:
        if row["family"] is None:
            assert row["answer"] is None
        else:
            per_family[row["family"]] += 1
            assert type(row["answer"]) in (int, str)
    assert all(2 <= n <= 3 for n in per_family.values())
    assert sum(e["family"] is None for e in expected) == 3
