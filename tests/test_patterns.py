"""Sentence patterns learned from the executor's fills (runner/patterns.py, runner/patternstore.py) and the run
loop's zero-token path. Control flow runs on scripted doubles (tests/doubles.py); the real-model test at the end
answers a generated departures queue with patterns on and off and checks both against the family's reference
solver (samples/families/departures.py)."""

from __future__ import annotations

import json
import multiprocessing
import random
import re
import subprocess
from pathlib import Path

import pytest

from runner import patterns as P
from runner.patternstore import PatternStore
from runner.queue import Task
from runner.runloop import Engine, RunOptions, summarise
from runner.sandbox import Sandbox
from doubles import is_fill
from test_runloop import JW, TOOLS, by_id, real_tools, scripted, write_queue
from conftest import need_models

ADD_SCHEMA = TOOLS[0].schema_
BOAT = {"type": "object", "properties": {"name": {"type": "string"}, "start": {"type": "integer"},
                                         "period": {"type": "integer"}},
        "required": ["name", "start", "period"], "additionalProperties": False}
BOATS = {"type": "object", "properties": {"boats": {"type": "array", "items": BOAT}}, "required": ["boats"],
         "additionalProperties": False}
DATE = {"type": "string", "pattern": "^[0-9]{4}-[0-9]{2}-[0-9]{2}$"}
DAYS = {"type": "object", "properties": {"start": DATE, "end": DATE, "holidays": {"type": "array", "items": DATE}},
        "required": ["start", "end", "holidays"], "additionalProperties": False}
NEVER = 10 ** 9  # a cross-check rate that samples no task in these tests


@pytest.fixture(scope="module")
def sandbox():
    with Sandbox(pool_size=1) as sb:
        yield sb


def engine(tmp_path: Path, model, sandbox, every: int = NEVER, **opts) -> Engine:
    options = RunOptions(fallback="none", pattern_check_every=every, **opts)
    return Engine(TOOLS, model, sandbox, options, patterns=PatternStore(tmp_path / "patterns"))


def fills(model) -> int:
    return sum(is_fill(c.messages) for c in model.calls)


def ask(eng: Engine, tid: str, question: str):
    return eng.answer(Task(id=tid, question=question, line=1))


# ---- learning patterns from arguments (pure) ------------------------------------------------------------------

def test_a_repeated_sentence_becomes_an_item_pattern_and_reads_lists_of_any_length():
    q = ("Kelpwick timetable: Curlew: first departure at minute 4, then one every 6 minutes. "
         "Dunlin: first departure at minute 10, then one every 15 minutes. At what minute do they all leave?")
    args = {"boats": [{"name": "Curlew", "start": 4, "period": 6}, {"name": "Dunlin", "start": 10, "period": 15}]}
    pats = P.derive(q, args)
    assert [p.item_of for p in pats] == [["boats"], ["boats"], None]  # each boat's sentence adds an item
    assert [p.text for p in pats] == ["Kelpwick timetable: {text}: first departure at minute {int}, then one every "
                                      "{int} minutes.", "{text}: first departure at minute {int}, then one every "
                                      "{int} minutes.", "At what minute do they all leave?"]
    book = P.Book(tool="t")
    P.learn(book, q, args, BOATS)
    three = q.replace("At what", "Gannet: first departure at minute 7, then one every 9 minutes. At what")
    pred = P.predict(book, three, BOATS, learning=True)
    assert pred.arguments == {"boats": args["boats"] + [{"name": "Gannet", "start": 7, "period": 9}]}


def test_a_run_of_dates_is_one_list_slot_and_no_list_is_an_empty_list():
    q = "How many working days from 2025-04-01 to 2025-04-25? Co-op holidays: 2025-04-18, 2025-04-21 and 2025-04-22."
    args = {"start": "2025-04-01", "end": "2025-04-25", "holidays": ["2025-04-18", "2025-04-21", "2025-04-22"]}
    pats = P.derive(q, args)
    assert [p.text for p in pats] == ["How many working days from {date} to {date}?", "Co-op holidays: {dates}."]
    book = P.Book(tool="t")
    P.learn(book, q, args, DAYS)
    one = q.replace("2025-04-18, 2025-04-21 and 2025-04-22", "2025-04-03")
    assert P.predict(book, one, DAYS, learning=True).arguments["holidays"] == ["2025-04-03"]
    bad_date = q.replace("2025-04-21", "2025-02-30")  # a slot that does not parse: no prediction
    assert P.predict(book, bad_date, DAYS, learning=True).arguments is None
    none = "How many working days from 2025-04-01 to 2025-04-25? No co-op holidays apply."
    P.learn(book, none, {"start": "2025-04-01", "end": "2025-04-25", "holidays": []}, DAYS)
    assert P.predict(book, none.replace("04-25", "05-02"), DAYS, learning=True).arguments == \
        {"start": "2025-04-01", "end": "2025-05-02", "holidays": []}


@pytest.mark.parametrize("question, args, why", [
    ("Curlew leaves at minute 5 and every 5 minutes.", {"boats": [{"name": "Curlew", "start": 5, "period": 5}]},
     "more than once"),
    ("Curlew leaves at minute 5 and every 7 minutes.", {"boats": [{"name": "Curlew", "start": 5, "period": 8}]},
     "not in the question"),
    ("Curlew at 5 and Dunlin at 7, every 9 and 11 minutes.",
     {"boats": [{"name": "Curlew", "start": 5, "period": 9}, {"name": "Dunlin", "start": 7, "period": 11}]},
     "more than one list item"),
    ("Curlew: times 5, 7.", {"boats": [{"name": "Curlew", "times": [5, 7]}]}, "inside a list item"),
    ("Is it open? Yes.", {"open": True}, "not a value"),
])
def test_questions_of_shapes_not_learned_cleanly_are_left_to_the_executor(question, args, why):
    with pytest.raises(P.NotLearned, match=why):
        P.derive(question, args)


def test_the_cross_check_sample_is_one_in_n_and_the_same_every_run():
    ids = [f"task-{i}" for i in range(4000)]
    picked = [i for i in ids if P.check_due("book", i, 20)]
    assert picked == [i for i in ids if P.check_due("book", i, 20)]
    assert 150 <= len(picked) <= 250  # 1 in 20 of 4000 is 200; binomial spread well inside this band


# ---- the run loop's path ---------------------------------------------------------------------------------------

ADDS = [f"Add {a} and {b}." for a, b in ((3, 4), (12, 30), (7, 1), (40, 2), (9, 16), (25, 25), (8, 6))]


def test_patterns_are_used_only_after_two_questions_reproduced_the_executor(tmp_path, sandbox):
    model = scripted()
    eng = engine(tmp_path, model, sandbox)
    recs = []
    for i, q in enumerate(ADDS[:5]):
        before = fills(model)
        recs.append(ask(eng, f"a{i}", q))
        assert recs[-1].status == "tool"
        assert (fills(model) > before) == (recs[-1].filled_by == "executor")
    # learned on the 1st, confirmed on the 2nd and 3rd: the 4th and 5th need no model call to fill
    assert [r.filled_by for r in recs] == ["executor"] * 3 + ["pattern"] * 2
    assert [r.answer for r in recs] == [7, 42, 8, 42, 25]
    assert recs[3].arguments == {"a": 40, "b": 2} and recs[3].attempts == 0
    # the matcher's CPU is the pattern fill's filling step; the model's share is routing alone
    assert recs[3].cpu.fill > 0 and recs[3].cpu.model == pytest.approx(recs[3].cpu.route + recs[3].cpu.fill, abs=2e-4)
    book = eng.patterns.load(P.tool_key(TOOLS[0].code, TOOLS[0].entry, ADD_SCHEMA))
    (pat,) = book.patterns.values()
    assert pat.text == "Add {int} and {int}." and pat.confirmed == 2


def test_a_question_with_a_sentence_no_pattern_holds_goes_to_the_executor(tmp_path, sandbox):
    model = scripted()
    eng = engine(tmp_path, model, sandbox)
    for i, q in enumerate(ADDS[:3]):
        ask(eng, f"a{i}", q)
    rec = ask(eng, "odd", "Add 5 and 6. Be quick.")
    assert (rec.filled_by, rec.answer) == ("executor", 11)
    assert ask(eng, "again", "Add 50 and 6.").filled_by == "pattern"


def test_a_pattern_fill_that_the_tool_refuses_goes_to_the_executor(tmp_path, sandbox):
    model = scripted()
    eng = engine(tmp_path, model, sandbox)
    for i, q in enumerate(ADDS[:3]):
        ask(eng, f"a{i}", q)
    before = fills(model)
    rec = ask(eng, "neg", "Add -5 and 6.")  # `add` refuses negative numbers
    assert fills(model) > before and rec.filled_by is None and rec.status == "failed"


def test_a_cross_check_that_disagrees_retires_the_pattern(tmp_path, sandbox):
    state = {"swap": False}

    def fill(question, seed, temperature):
        if state["swap"] and question.startswith("Add"):
            a, b = map(int, re.findall(r"-?\d+", question)[:2])
            return json.dumps({"a": b, "b": a})
        return None

    model = scripted(fill_override=fill)
    eng = engine(tmp_path, model, sandbox, every=1)  # every pattern fill is checked
    for i, q in enumerate(ADDS[:3]):
        ask(eng, f"a{i}", q)
    agreed = ask(eng, "c1", ADDS[3])
    assert (agreed.filled_by, agreed.pattern_check) == ("executor", "agreed")
    state["swap"] = True  # the executor now reads "Add a and b" as b, a: the pattern disagrees
    before = fills(model)
    disagreed = ask(eng, "c2", ADDS[4])
    assert fills(model) > before
    assert (disagreed.filled_by, disagreed.pattern_check, disagreed.arguments) == ("executor", "disagreed",
                                                                                   {"a": 16, "b": 9})
    book = eng.patterns.load(P.tool_key(TOOLS[0].code, TOOLS[0].entry, ADD_SCHEMA))
    old = [p for p in book.patterns.values() if p.retired]
    assert len(old) == 1 and "executor" in old[0].why_retired
    state["swap"] = False
    later = ask(eng, "c3", ADDS[6])
    assert (later.filled_by, later.pattern_check) == ("executor", None)  # nothing usable: no check either
    report = summarise([agreed, disagreed, later], queue="q", out="o", skipped=0, wall_seconds=1.0,
                       process_cpu_seconds=1.0, load_cpu_seconds=0.0)
    assert (report.by_pattern, report.pattern_checks, report.pattern_disagreements) == (0, 2, 1)


def test_a_damaged_book_counts_as_empty_and_is_written_again(tmp_path, sandbox):
    model = scripted()
    eng = engine(tmp_path, model, sandbox)
    for i, q in enumerate(ADDS[:4]):
        ask(eng, f"a{i}", q)
    path = eng.patterns.path(P.tool_key(TOOLS[0].code, TOOLS[0].entry, ADD_SCHEMA))
    path.write_bytes(path.read_bytes()[:40])  # cut off, as a disk fault might leave it
    rec = ask(eng, "after", ADDS[4])
    assert rec.filled_by == "executor" and rec.answer == 25
    assert any("cannot be read" in n for n in eng.patterns.notes)
    assert P.Book.model_validate_json(path.read_bytes()).patterns  # learning started again in a whole file


def test_no_patterns_means_every_fill_is_the_executors_and_nothing_is_written(tmp_path, sandbox):
    model = scripted()
    eng = engine(tmp_path, model, sandbox, patterns=False)
    recs = [ask(eng, f"a{i}", q) for i, q in enumerate(ADDS[:5])]
    assert [r.filled_by for r in recs] == ["executor"] * 5 and fills(model) == 5
    assert not (tmp_path / "patterns").exists()


def _learn_in_process(folder: str, tool: str, start: int) -> None:
    store = PatternStore(Path(folder))
    for i in range(start, start + 15):
        store.update(tool, lambda b, i=i: P.learn(b, f"Add {i} and {i + 100}.", {"a": i, "b": i + 100}, ADD_SCHEMA))


def test_processes_learning_at_once_lose_no_change(tmp_path):
    store = PatternStore(tmp_path / "books")
    store.update("t", lambda b: P.learn(b, "Add 1 and 2.", {"a": 1, "b": 2}, ADD_SCHEMA))
    ctx = multiprocessing.get_context("fork")
    procs = [ctx.Process(target=_learn_in_process, args=(str(tmp_path / "books"), "t", s)) for s in (10, 30, 50)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
    assert [p.exitcode for p in procs] == [0, 0, 0]
    (pat,) = PatternStore(tmp_path / "books").load("t").patterns.values()
    assert pat.confirmed == 45  # every one of the 45 confirmations kept: no update was lost or torn


# ---- real models -------------------------------------------------------------------------------------------------

def _departures_queue(n: int) -> list[dict]:
    """Generated departures tasks (the family's own generator, seeded) written in one phrasing: boats on
    "NAME: first departure at minute S, then one every P minutes." lines, 2 to 4 of them."""
    from samples.families import departures

    rng = random.Random("patterns-real-test")
    rows = []
    while len(rows) < n:
        t = departures.generate(rng)
        q = t["question"]
        if q.startswith("Ferry office times") and q.count(": first departure at minute") == len(t["params"]["starts"]) \
                and "first minute when the quay" in q:
            rows.append({"id": f"dep-{len(rows)}", "question": q, "answer": t["answer"], "params": t["params"]})
    return rows


@pytest.mark.models
def test_real_pattern_fills_equal_the_executors_and_the_reference_solver(tmp_home, tmp_path):
    need_models()
    from runner.store import ToolStore
    from samples.families import departures

    with ToolStore() as store:
        store.put(real_tools()[0])  # the hand-made departures tool of test_runloop
    rows = _departures_queue(7)
    q = write_queue(tmp_path / "q.jsonl", [{"id": r["id"], "question": r["question"]} for r in rows])
    runs = {}
    for flag in ("--patterns", "--no-patterns"):
        out = tmp_path / f"answers{flag}.jsonl"
        proc = subprocess.run([JW, "answer", str(q), "--out", str(out), "--fallback", "none", "--json", flag],
                              capture_output=True, text=True, timeout=600)
        assert proc.returncode == 0, proc.stderr[-2000:]
        runs[flag] = (json.loads(proc.stdout), by_id([json.loads(l) for l in out.read_text().splitlines()]))
    report, with_patterns = runs["--patterns"]
    _, executor_only = runs["--no-patterns"]
    by_pattern = [r["id"] for r in rows if with_patterns[r["id"]]["filled_by"] == "pattern"]
    assert by_pattern and report["by_pattern"] == len(by_pattern), with_patterns
    for tid in by_pattern:
        row = next(r for r in rows if r["id"] == tid)
        assert with_patterns[tid]["arguments"] == executor_only[tid]["arguments"]
        assert with_patterns[tid]["answer"] == executor_only[tid]["answer"]
        # the reference: the family's own solver on the generator's parameters
        assert with_patterns[tid]["answer"] == departures.solve(**row["params"]) == row["answer"]
    assert all(executor_only[r["id"]]["filled_by"] == "executor" for r in rows if executor_only[r["id"]]["status"] == "tool")


def test_the_summary_screen_shows_the_share_filled_by_patterns_in_80_columns():
    from rich.console import Console

    from runner.cli import _print_report
    from runner.queue import AnswerRecord

    recs = [AnswerRecord(id=str(i), status="tool", tool_backed=True, filled_by="pattern" if i < 3 else "executor",
                         pattern_check="agreed" if i == 3 else None, cpu={"model": 0.1, "route": 0.1})
            for i in range(4)]
    report = summarise(recs, queue="q.jsonl", out="q.answers.jsonl", skipped=0, wall_seconds=1.0,
                       process_cpu_seconds=1.0, load_cpu_seconds=0.0)
    console = Console(width=80, record=True)
    _print_report(report, console)
    lines = console.export_text().splitlines()
    assert "filled by patterns 3 (75% of tasks); 1 cross-checked, 0 disagreed" in lines
    assert max(map(len, lines)) <= 80
