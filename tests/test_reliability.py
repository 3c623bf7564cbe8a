"""Every failure is a record and nothing is lost (issue 12), with scripted model doubles and the real sandbox:
per-task isolation, the route journal, records that cannot be serialised, context budgeting and the router's
shortlist, resume by content, unreadable files, a damaged tool store, honest comparisons and cache keys.
Real-model checks of the same paths are in test_faults.py."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from doubles import ScriptedModel, is_fill
from runner import build as B
from runner import evaluate as E
from runner.errors import ContextOverflowError, InputError, ModelMissingError, OutputError, StoreError
from runner.execute import answers_match, fill_arguments, fill_start, forget_fill_misses, normalise
from runner.queue import AnswerRecord, AnswerWriter, QueueReader, Resumed, journal_path, read_answers
from runner.route import SHORTLIST_SIZE, fit_prompt, route
from runner.runloop import Engine, RunLoop, RunOptions, run
from runner.shortlist import margin, rank, shortlist
from runner.store import ToolStore
from runner.tools import Card, Demo
from bench.route_budget import generated_cards
from test_runloop import ADD, SHOUT, TOOLS, make_tool, scripted, write_queue

JW = str(Path(sys.executable).with_name("jigwright"))


@pytest.fixture(scope="module")
def sandbox():
    from runner.sandbox import Sandbox

    with Sandbox(pool_size=1) as sb:
        yield sb


def run_on(queue: Path, out: Path, model, sandbox, options: RunOptions | None = None, tools=TOOLS,
           journal: bool = True, fallback_model=None):
    from runner.queue import RouteJournal

    options = options or RunOptions(fallback="executor")
    resumed = read_answers(out)
    with AnswerWriter(out) as writer:
        engine = Engine(tools, model, sandbox, options, fallback_model)
        j = RouteJournal(journal_path(out) if journal and options.group else None, engine.router_key)
        loop = RunLoop(engine, writer, resumed, journal=j)
        report = run(loop, QueueReader(queue), follow=False, out=str(out), load_cpu_seconds=lambda: 0.0)
    return report, [json.loads(line) for line in out.read_text().splitlines()]


def latest(recs: list[dict]) -> dict[str, dict]:
    return {r["id"]: r for r in recs}


# ---- per-task isolation -------------------------------------------------------------------------------------

@pytest.mark.parametrize("group", [True, False])
def test_a_failing_fill_route_or_fallback_is_that_tasks_error_record(tmp_path, sandbox, group):
    q = write_queue(tmp_path / "q.jsonl", [{"id": "a", "question": "Add 2 and 3."},
                                           {"id": "boom-fill", "question": "Add 7 and 8 please."},
                                           {"id": "boom-route", "question": "Shout crash."},
                                           {"id": "boom-fall", "question": "Who mends the nets?"},
                                           {"id": "s", "question": "Shout gull."}])
    base = scripted(direct="Answer: Ada")

    def reply(messages, **kw):
        question = messages[-1]["content"]
        if question == "Shout crash." and kw["schema"] and "enum" in kw["schema"]:
            raise RuntimeError("router exploded")
        if question == "Add 7 and 8 please." and is_fill(messages):
            raise MemoryError("no room for the fill")
        if question == "Who mends the nets?" and not is_fill(messages) and not kw["schema"]:
            raise ValueError("fallback\nbroke")
        return base.replies(messages, **kw)

    report, recs = run_on(q, tmp_path / "out.jsonl", ScriptedModel("m", reply), sandbox,
                          RunOptions(fallback="executor", group=group))
    r = latest(recs)
    assert len(recs) == 5 and (r["a"]["answer"], r["s"]["answer"]) == (5, "GULL")
    assert (r["boom-fill"]["status"], r["boom-fill"]["error_kind"]) == ("error", "tool")
    assert "MemoryError: no room for the fill" in r["boom-fill"]["error"]
    assert (r["boom-route"]["error_kind"], r["boom-route"]["route"]) == ("route", "none")
    assert "RuntimeError: router exploded" in r["boom-route"]["error"]
    assert r["boom-fall"]["error_kind"] == "fallback" and "\n" not in r["boom-fall"]["error"]
    assert report.errors == 3 and report.error_kinds == {"fallback": 1, "route": 1, "tool": 1}
    # a rerun does not repeat finished tasks, error records included
    report, recs2 = run_on(q, tmp_path / "out.jsonl", scripted(), sandbox, RunOptions(fallback="executor", group=group))
    assert (report.tasks, report.skipped) == (0, 5) and len(recs2) == 5


def test_a_setup_error_stops_the_run_and_keeps_what_was_written(tmp_path, sandbox):
    q = write_queue(tmp_path / "q.jsonl", [{"id": "a", "question": "Add 2 and 3."},
                                           {"id": "n", "question": "Who mends the nets?"}])

    def no_builder():
        raise ModelMissingError("builder model file is missing: run `jigwright models fetch`")

    with pytest.raises(ModelMissingError):
        run_on(q, tmp_path / "out.jsonl", scripted(), sandbox, RunOptions(fallback="builder"),
               fallback_model=no_builder)
    recs = [AnswerRecord.model_validate_json(x) for x in (tmp_path / "out.jsonl").read_text().splitlines()]
    assert [r.id for r in recs] == ["a"]


def test_grouped_route_decisions_survive_an_interruption(tmp_path, sandbox):
    q = write_queue(tmp_path / "q.jsonl", [{"id": f"t{i}", "question": f"Add {i} and {i}."} for i in range(6)])
    out = tmp_path / "out.jsonl"
    base = scripted()
    routed: list[str] = []

    def reply(messages, **kw):
        if kw["schema"] and "enum" in kw["schema"]:
            routed.append(messages[-1]["content"])
            if len(routed) == 4:
                raise KeyboardInterrupt  # killed while routing the fourth task
        return base.replies(messages, **kw)

    report, recs = run_on(q, out, ScriptedModel("double", reply), sandbox)  # the same executor name: same router
    assert report.interrupted and recs == []
    assert len(journal_path(out).read_text().splitlines()) == 3  # three decisions kept
    second = scripted()
    report, recs = run_on(q, out, second, sandbox)
    assert report.tasks == 6 and len(second.routed()) == 3  # only the unrouted three are routed again
    assert {r["id"]: r["answer"] for r in recs} == {f"t{i}": 2 * i for i in range(6)}
    assert not journal_path(out).exists()  # removed once every routed task has its record


def test_a_journal_entry_is_not_used_for_an_edited_question_or_other_tools(tmp_path, sandbox):
    q = write_queue(tmp_path / "q.jsonl", [{"id": "a", "question": "Add 1 and 2."}])
    out = tmp_path / "out.jsonl"
    journal_path(out).write_text(json.dumps({"id": "a", "question": "x", "router": "other", "route": {
        "tool": "shout", "chosen": "shout"}}) + "\n{cut")
    model = scripted()
    _, recs = run_on(q, out, model, sandbox)
    assert recs[0]["route"] == "add" and len(model.routed()) == 1


def test_a_record_that_cannot_be_serialised_becomes_an_unwritable_error_record(tmp_path, sandbox):
    # a fallback reply holding a lone surrogate (a model backend could hand back such text) cannot be JSON
    q = write_queue(tmp_path / "q.jsonl", [{"id": "n", "question": "Who mends the nets?"},
                                           {"id": "a", "question": "Add 1 and 1."}])
    report, recs = run_on(q, tmp_path / "out.jsonl", scripted(direct="Answer: Ola\ud800"), sandbox)
    r = latest(recs)
    assert (r["n"]["status"], r["n"]["error_kind"]) == ("error", "unwritable")
    assert "the fallback record could not be written as JSON" in r["n"]["error"]
    assert r["n"]["question"] == "Who mends the nets?" and r["a"]["answer"] == 2
    assert report.error_kinds == {"unwritable": 1}


# ---- bad input lines ------------------------------------------------------------------------------------------

def test_lone_surrogates_and_invalid_bytes_are_bad_lines_and_the_queue_goes_on(tmp_path, sandbox):
    q = tmp_path / "q.jsonl"
    q.write_bytes(b'{"id": "a", "question": "Add 1 and 2."}\n'
                  b'{"id": "s", "question": "Shout \\ud800 now."}\n'
                  b'{"id": "\\udfff", "question": "Shout tide."}\n'
                  b'{"id": "b", "question": "Shout caf\xe9."}\n'
                  b'{"id": "c", "question": "Shout reef."}\n')
    report, recs = run_on(q, tmp_path / "out.jsonl", scripted(), sandbox)
    by_line = {r["line"]: r for r in recs}
    assert by_line[1]["answer"] == 3 and by_line[5]["answer"] == "REEF"
    assert by_line[2]["error_kind"] == "input" and "lone surrogate escape (\\ud800) at character 7" in by_line[2]["error"]
    assert by_line[3]["id"] == "line-3" and "'id' holds a lone surrogate" in by_line[3]["error"]
    at = b'{"id": "b", "question": "Shout caf\xe9."}'.index(b"\xe9") + 1
    assert by_line[4]["id"] == "line-4" and by_line[4]["error"] == f"not valid UTF-8: byte 0xe9 at byte {at} of the line"
    assert report.errors == 3 and report.error_kinds == {"input": 3}


@pytest.mark.parametrize("data,msg", [
    (b'{"question": "a?", "answer": 1}\n{"question": "b\xff?", "answer": 2}\n',
     r"fam\.jsonl:2: not valid UTF-8: byte 0xff at byte 16 of the line"),
    (b'{"question": "a?", "answer": 1}\n{"question": "b?", "answer": null}\n', r"fam\.jsonl: line 2 has an empty answer"),
    (b'{"question": "a?", "answer": 1}\n{"question": "b\\ud800?", "answer": 2}\n', r"fam\.jsonl:2: .*lone surrogate"),
])
def test_family_files_name_the_line_of_bad_bytes_null_answers_and_surrogates(tmp_path, data, msg):
    f = tmp_path / "fam.jsonl"
    f.write_bytes(data)
    with pytest.raises(InputError, match=msg):
        B.load_family(f)


# ---- context budgeting --------------------------------------------------------------------------------------

def test_a_question_too_long_for_the_context_is_a_too_long_record_without_a_model_call(tmp_path, sandbox):
    model = scripted()
    model.n_ctx = 400  # tokens are words in the double
    long_q = "Add " + " ".join(["and"] * 600) + " 1 and 2."
    q = write_queue(tmp_path / "q.jsonl", [{"id": "long", "question": long_q}, {"id": "a", "question": "Add 1 and 2."}])
    report, recs = run_on(q, tmp_path / "out.jsonl", model, sandbox)
    r = latest(recs)
    assert (r["long"]["status"], r["long"]["error_kind"]) == ("error", "too_long")
    assert "the question is about 605 tokens" in r["long"]["error"] and "400-token context" in r["long"]["error"]
    assert all(long_q not in c.last_user for c in model.calls) and r["a"]["answer"] == 3


def test_ask_calls_a_too_long_or_undecodable_question_an_input_error():
    from runner.runloop import Setup, ask

    model = scripted()
    model.n_ctx = 400
    setup = Setup(tools=TOOLS, executor=model, fallback_model=None)
    with pytest.raises(InputError, match=r"the question is about 1,003 tokens; .* 400-token context"):
        ask("Add " + "and " * 1000 + "2.", RunOptions(fallback="executor"), setup)
    with pytest.raises(InputError, match=r"not UTF-8 text \(byte 0xff at character 5\)"):
        ask("Add \udcff and 2.", RunOptions(fallback="executor"), setup)  # how argv holds a stray 0xff byte
    assert ask("Add 2 and 2.", RunOptions(fallback="executor"), setup).answer == 4


def test_a_fill_prompt_that_overflows_is_a_too_long_record(sandbox):
    from runner.route import Route
    from runner.runloop import _Work
    from runner.queue import Task

    # a tool whose demos are long: the question fits the direct prompt, but not the fill with the demos
    wordy = make_tool("add", ADD.code, ADD.card.schema_,
                      [("Add 1 and 2 " + "please " * 260, {"a": 1, "b": 2}), ("Add 3 and 4.", {"a": 3, "b": 4})])
    model = scripted()
    model.n_ctx = 300
    engine = Engine([wordy], model, sandbox, RunOptions(fallback="none"))
    work = _Work(Task(id="x", question="Add 5 and 6.", line=1), route=Route(tool="add", chosen="add"))
    rec = engine.complete(work)
    assert (rec.status, rec.error_kind) == ("error", "too_long")
    assert "answering with the tool failed: the prompt is" in rec.error and "300-token context of model 'double'" in rec.error


def test_two_hundred_cards_are_shortlisted_to_fit_and_the_router_still_routes(tmp_path, sandbox):
    cards = generated_cards(198) + [ADD.card, SHOUT.card]
    model = scripted()
    model.n_ctx = 1500
    for question, want in [("Add 40 and 2.", "add"), ("Shout anchor.", "shout"), ("Please weigh the ice in shed 13 for lot 91.", "weigh-ice-13")]:
        fitted = fit_prompt(model, cards, question)
        assert fitted.shortlisted and 1 <= len(fitted.cards) <= SHORTLIST_SIZE
        assert want in [c.name for c in fitted.cards]
        assert fitted.tokens is not None and fitted.tokens + 40 <= model.n_ctx
    r = route(model, cards, "Add 40 and 2.")
    assert r.tool == "add" and r.shortlist and "add" in r.shortlist
    # a question that shares no word with any card is none without a model call
    n = len(model.calls)
    r = route(model, cards, "Zzyzx?")
    assert r.tool == "none" and r.shortlist == [] and len(model.calls) == n


def test_shortlist_ranks_by_bm25_and_the_margin_says_how_clearly_one_leads():
    cards = generated_cards(20)
    ranked = rank(cards, "weigh the rope in shed 10")
    assert ranked[0].card.name == "weigh-rope-10" and ranked[0].score > ranked[1].score > 0
    assert margin(ranked) > 1 and margin(shortlist(cards, "weigh the rope in shed 10", 1)) == math.inf
    assert shortlist(cards, "zzz qqq", 5) == []
    # reference: rank_bm25's own BM25+ scores, less the part every card gets, give the same order
    from rank_bm25 import BM25Plus
    from runner.shortlist import card_text, words

    bm = BM25Plus([words(card_text(c)) for c in cards])
    raw = bm.get_scores(words("weigh the rope in shed 10"))
    assert [r.card.name for r in ranked[:5]] == [cards[i].name for i in np.argsort(-raw, kind="stable")[:5]]


def test_a_question_too_long_even_for_one_card_routes_to_none_and_falls_back(tmp_path, sandbox):
    model = scripted(direct="Answer: 3")
    model.n_ctx = 300
    cards = [ADD.card, SHOUT.card]
    with pytest.raises(ContextOverflowError):
        fit_prompt(model, cards + generated_cards(40), "Add " + "and " * 230 + "1 and 2.")
    # tools whose cards are long: the question fits a direct answer but not the router's prompt with one card
    model.n_ctx = 600
    long_tools = [make_tool(c.name, "def solve(x):\n    return x\n", c.schema_,
                            [(d.question + " lot" * 500, d.arguments) for d in c.demos]) for c in generated_cards(3)]
    q = write_queue(tmp_path / "q.jsonl", [{"id": "x", "question": "Please weigh the rope in shed 0, " + "and " * 100}])
    _, recs = run_on(q, tmp_path / "out.jsonl", model, sandbox, tools=long_tools)
    assert recs[0]["status"] == "fallback" and recs[0]["answer"] == "3"
    assert recs[0]["error"].startswith("too long for the router: the router's prompt needs")


# ---- resume by content ----------------------------------------------------------------------------------------

def test_an_edited_question_is_answered_again_and_the_newest_record_wins(tmp_path, sandbox):
    out = tmp_path / "out.jsonl"
    q = write_queue(tmp_path / "q.jsonl", [{"id": "a", "question": "Add 1 and 2."}, {"question": "Shout reef."}])
    run_on(q, out, scripted(), sandbox)
    # an edit, and a line inserted above the id-less task (its line-N id shifts)
    write_queue(q, [{"id": "a", "question": "Add 5 and 6."}, {"id": "new", "question": "Add 2 and 2."},
                    {"question": "Shout reef."}])
    report, recs = run_on(q, out, scripted(), sandbox)
    assert [r["id"] for r in recs] == ["a", "line-2", "a", "new", "line-3"]
    assert report.tasks == 3 and report.superseded == 1  # a's first answer
    newest = Resumed([AnswerRecord.model_validate(r) for r in recs]).latest
    assert (newest["a"].answer, newest["line-3"].answer) == (11, "REEF")
    assert Resumed([AnswerRecord.model_validate(r) for r in recs]).superseded() == 1


def test_retry_failed_answers_failed_tasks_again_and_keeps_the_old_records(tmp_path, sandbox):
    out = tmp_path / "out.jsonl"
    q = write_queue(tmp_path / "q.jsonl", [{"id": "a", "question": "Add 1 and 2."},
                                           {"id": "n", "question": "Who mends the nets?"}])
    _, recs = run_on(q, out, scripted(), sandbox, RunOptions(fallback="none"))
    assert latest(recs)["n"]["status"] == "failed"
    report, recs = run_on(q, out, scripted(), sandbox, RunOptions(fallback="none"))
    assert report.tasks == 0
    report, recs = run_on(q, out, scripted(direct="Answer: Ola"), sandbox,
                          RunOptions(fallback="executor", retry_failed=True))
    assert (report.tasks, report.skipped, report.superseded) == (1, 1, 1) and len(recs) == 3
    assert latest(recs)["n"]["answer"] == "Ola"


# ---- the answers file: writes that fail ---------------------------------------------------------------------

def test_a_write_that_fails_half_way_leaves_a_valid_file_and_a_clear_error(tmp_path, sandbox, monkeypatch):
    out = tmp_path / "out.jsonl"
    q = write_queue(tmp_path / "q.jsonl", [{"id": f"t{i}", "question": f"Add {i} and 1."} for i in range(5)])
    real_write = os.write
    calls = {"n": 0}

    def full_disk(fd, data):
        if os.readlink(f"/proc/self/fd/{fd}") == str(out):
            calls["n"] += 1
            if calls["n"] == 3:  # the third record: half of it lands, then the disk is full
                real_write(fd, data[: len(data) // 2])
                raise OSError(28, "No space left on device")
        return real_write(fd, data)

    monkeypatch.setattr(os, "write", full_disk)
    with pytest.raises(OutputError, match=r"out\.jsonl: cannot write the answer of 't2' \(No space left on device\); "
                                          r"the 2 records written before it are kept"):
        run_on(q, out, scripted(), sandbox, journal=False)
    monkeypatch.setattr(os, "write", real_write)
    lines = out.read_text().splitlines()
    assert [AnswerRecord.model_validate_json(x).id for x in lines] == ["t0", "t1"]  # no half record
    report, recs = run_on(q, out, scripted(), sandbox)
    assert report.tasks == 3 and sorted(r["id"] for r in recs) == [f"t{i}" for i in range(5)]


# ---- the tool store -----------------------------------------------------------------------------------------

def test_a_damaged_store_names_the_folder_and_answering_with_the_fallback_still_works(tmp_path, sandbox, monkeypatch,
                                                                                       bare_home):
    from runner import runloop
    from runner.settings import store_dir

    folder = store_dir()
    folder.mkdir(parents=True)
    (folder / "cache.db").write_bytes(b"this is not a database" * 100)
    with pytest.raises(StoreError, match=rf"the tool store at {folder} cannot be read .*mv {folder} {folder}\.damaged"):
        ToolStore()
    monkeypatch.setattr(runloop, "local_model", lambda role, name, threads, verbose=False: scripted(direct="Answer: 4"))
    options = RunOptions(fallback="executor")
    setup = runloop.local_setup(options)
    assert setup.tools == [] and "cannot be read" in setup.notes[0]
    q = write_queue(tmp_path / "q.jsonl", [{"id": "a", "question": "Add 2 and 2."}])
    report = runloop.run_queue(str(q), tmp_path / "out.jsonl", options, setup)
    assert report.by_fallback == 1
    with pytest.raises(StoreError):
        runloop.local_setup(RunOptions(fallback="none"))
    proc = subprocess.run([JW, "tools", "list"], capture_output=True, text=True, env={**os.environ})
    assert proc.returncode == 16 and proc.stderr.count("\n") <= 3 and "Traceback" not in proc.stderr
    assert str(folder) in " ".join(proc.stderr.split())


def test_a_stored_record_that_no_longer_validates_is_skipped_with_a_warning(tmp_path, bare_home):
    with ToolStore() as store:
        store.put(ADD)
        store.put(SHOUT)
        store._cache.set(f"key:{SHOUT.key}", json.dumps({"name": "shout", "code": 1}))
        assert [t.name for t in store.tools()] == ["add"]
        assert "skipped the stored record of tool 'shout' (key k-shout" in store.warnings[0] and "does not validate" in store.warnings[0]
    proc = subprocess.run([JW, "tools", "list"], capture_output=True, text=True, env={**os.environ, "COLUMNS": "80"})
    assert proc.returncode == 0 and "add" in proc.stdout and "warning" in proc.stderr
    with ToolStore() as store:
        store.remove("shout")  # a broken record can still be retired
        assert store.names() == ["add"]


# ---- honest comparisons ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("expected,got,same", [
    (123457, 123456.7, False),  # six significant digits are not enough
    (123457, 123457.0, True),
    (123457, "123457.", True),
    ("", None, False),
    (None, None, False),
    (0.1 + 0.2, 0.3, True),  # within 1e-9 relative
    (1.0, 1.0 + 2e-9, False),
    (2 ** 60, 2 ** 60 + 1, False),  # integers exactly, even beyond float precision
    ("Yes", True, True),
    (["Ana", "Bo"], ["ana", "bo"], True),
    (["Ana", "Bo"], ["Bo", "Ana"], False),
    (["Ana", "Bo"], "Ana, Bo", True),
    ("The Puffin.", "puffin", True),
])
def test_answers_compare_integers_and_text_exactly_and_floats_within_a_stated_tolerance(expected, got, same):
    assert answers_match(expected, got) is same


def test_float_tolerance_agrees_with_numpy_isclose():
    # reference: numpy.isclose with rtol=1e-9 and atol=0 (symmetric here because both sides are scaled alike)
    rng = np.random.default_rng(12)
    for _ in range(500):
        a = float(rng.uniform(-1e6, 1e6))
        b = a * (1 + float(rng.choice([-1, 1])) * float(rng.choice([1e-12, 5e-10, 2e-9, 1e-6])))
        assert answers_match(a, b) == bool(np.isclose(b, a, rtol=1e-9, atol=0)), (a, b)
    assert answers_match(1.0, 1.001, rel_tol=0.01) and not answers_match(1.0, 1.001)


def test_drafting_checks_record_what_the_tool_returned(tmp_path, sandbox):
    from test_build import FEES, builder_script, executor_script, run_build, shape_reply

    f = tmp_path / "fees.jsonl"
    f.write_text("".join(json.dumps({"id": f"f{i}", "question": q, "answer": a}) + "\n"
                         for i, (q, a, _) in enumerate(FEES)))
    family = B.load_family(f, name="slipway-fees", description="the slipway fee of one boat")
    floaty = "```python\ndef solve(boat, length, rate):\n    return float(length * rate)\n```"
    builder = ScriptedModel("builder", builder_script([shape_reply([a for _, _, a in FEES[:3]])], [floaty]))
    with ToolStore(tmp_path / "store") as store:
        tool, _ = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()))
    draft = [c for c in tool.checks if c.split == "draft"]
    assert [c.got for c in draft] == [36.0, 36.0, 35.0] and all(isinstance(c.got, float) for c in draft)
    assert [c.expected for c in draft] == [36, 36, 35]


# ---- cache keys -------------------------------------------------------------------------------------------------

def _fees_family(tmp_path):
    from test_build import FEES

    f = tmp_path / "fees.jsonl"
    f.write_text("".join(json.dumps({"id": f"f{i}", "question": q, "answer": a}) + "\n"
                         for i, (q, a, _) in enumerate(FEES)))
    return B.load_family(f, name="slipway-fees", description="the slipway fee of one boat")


def test_a_larger_budget_retries_a_build_the_budget_cut_short_and_a_verified_tool_is_reused_whatever_the_budget(
        tmp_path, sandbox):
    from test_build import FEES, GOOD, WRONG, builder_script, executor_script, run_build, shape_reply

    family = _fees_family(tmp_path)
    objects = [a for _, _, a in FEES[:3]]
    with ToolStore(tmp_path / "store") as store:
        costly = ScriptedModel("builder", builder_script([shape_reply(objects)] * 2, [WRONG] * 9, [WRONG] * 9),
                               cpu_per_completion_token=10.0)
        tool, report = run_build(family, sandbox, store, costly, ScriptedModel("e", executor_script()),
                                 budget_cpu_minutes=0.5)
        assert tool is None and "budget" in report.stopped
        # the same budget, or a smaller one: the remembered failure
        for budget in (0.5, 0.2):
            again, r2 = run_build(family, sandbox, store, ScriptedModel("b", []), ScriptedModel("e", []),
                                  budget_cpu_minutes=budget)
            assert again is None and r2.cache_hit
        # a larger budget builds again (and this time it verifies)
        good = ScriptedModel("builder", builder_script([shape_reply(objects)], [GOOD]))
        tool, r3 = run_build(family, sandbox, store, good, ScriptedModel("e", executor_script()),
                             budget_cpu_minutes=60)
        assert tool is not None and tool.verified and not r3.cache_hit and good.calls
        # a verified tool is reused under any budget, smaller too
        again, r4 = run_build(family, sandbox, store, ScriptedModel("b", []), ScriptedModel("e", []),
                              budget_cpu_minutes=0.1)
        assert r4.cache_hit and again.key == tool.key


def test_a_tool_of_an_older_runner_is_reused_only_if_it_still_verifies(tmp_path, sandbox, monkeypatch):
    from runner import fingerprint
    from test_build import FEES, GOOD, builder_script, executor_script, run_build, shape_reply

    family = _fees_family(tmp_path)
    objects = [a for _, _, a in FEES[:3]]
    with ToolStore(tmp_path / "store") as store:
        tool, _ = run_build(family, sandbox, store, ScriptedModel("b", builder_script([shape_reply(objects)], [GOOD])),
                            ScriptedModel("e", executor_script()))
        old_runner = tool.provenance.runner
        assert old_runner == fingerprint.code_fingerprint("build")
        # an upgraded runner: other code fingerprint, so another key
        monkeypatch.setattr(B, "code_fingerprint", lambda kind: "9.9.9+feedfacecafe")
        builder, executor = ScriptedModel("b", []), ScriptedModel("e", executor_script())
        again, report = run_build(family, sandbox, store, builder, executor)
        assert again.key != tool.key and again.verified and not builder.calls and len(executor.calls) == 2
        assert f"built by runner {old_runner}" in report.reused and again.provenance.runner == "9.9.9+feedfacecafe"
        # another upgrade under which the old tool no longer verifies (the executor now fills wrong): built afresh
        monkeypatch.setattr(B, "code_fingerprint", lambda kind: "9.9.10+0123456789ab")
        builder = ScriptedModel("b", builder_script([shape_reply(objects)] * 4, [GOOD] * 40, [GOOD] * 40))
        third, report = run_build(family, sandbox, store, builder, ScriptedModel("e", executor_script(wrong=True)))
        assert builder.calls and "no longer verifies (confirm 0.00)" in " ".join(report.failures)
        assert not report.verified


def test_tools_list_marks_tools_of_an_older_runner(bare_home):
    with ToolStore() as store:
        store.put(ADD)  # provenance.runner is "" (kept by no runner)
    proc = subprocess.run([JW, "tools", "list"], capture_output=True, text=True, env={**os.environ, "COLUMNS": "80"})
    assert proc.returncode == 0 and "add *" in proc.stdout and "built by an older runner (1)" in proc.stdout
    data = json.loads(subprocess.run([JW, "tools", "list", "--json"], capture_output=True, text=True).stdout)
    assert data[0]["older_runner"] is True


def test_eval_keys_hold_how_the_fill_starts_and_the_runner_code():
    card = ADD.card
    task = E.EvalTask(id="t", question="Add 1 and 2.", answer=3, line=1)
    knobs = lambda: {"fill_start": fill_start(card)}  # noqa: E731
    forget_fill_misses()
    before = E.result_key("split", "e", "f", task, "t", "c", knobs())
    missing = ScriptedModel("m", ['{"a": 1}', '{"a": 1, "b": 2}'])
    filled = fill_arguments(missing, card, "Add 1 and 2.", seed=0)
    assert filled.mode == "free, then schema" and fill_start(card) == "schema"
    after = E.result_key("split", "e", "f", task, "t", "c", knobs())
    assert before != after
    filled = fill_arguments(ScriptedModel("m", ['{"a": 1, "b": 2}']), card, "Add 1 and 2.", seed=0)
    assert filled.mode == "schema"


def test_the_pooled_eval_row_covers_only_families_with_a_tool():
    def scored(n, right, cpu):
        return [E.ScoredTask(id=str(i), answered=True, correct=i < right, model_cpu=cpu) for i in range(n)]

    rows = [E.make_row("fees", "split", "m", scored(4, 4, 5.0)), E.make_row("fees", "executor-direct", "m", scored(4, 1, 1.0)),
            E.make_row("dues", "split", "m", [E.ScoredTask(id=str(i), answered=False) for i in range(4)]),
            E.make_row("dues", "executor-direct", "m", scored(4, 2, 1.0))]
    builds = [E.BuildInfo(family="fees", key="k", tool="fees", verified=True, cpu_seconds=60),
              E.BuildInfo(family="dues", key="k2", tool=None, cpu_seconds=500)]
    pooled, note = E.pooled_rows(rows, ["split", "executor-direct"], builds)
    split = next(r for r in pooled if r.method == "split")
    assert (split.tasks, split.cpu_mean, split.build_cpu) == (4, 5.0, 60)
    assert next(r for r in pooled if r.method == "executor-direct").tasks == 4
    assert "left out: 1 without a tool (dues; 4 tasks per method" in note
