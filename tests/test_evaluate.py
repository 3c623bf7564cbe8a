"""`jigwright eval` with scripted model doubles and the real sandbox: the Wilson interval against an outside
reference, break-even arithmetic, per-method accuracy on a scripted case, resume after an interruption, the
split's unverified and missing tools, the output files, and input errors."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

from doubles import ScriptedModel, is_fill
from runner import build as B
from runner import evaluate as E
from runner.errors import InputError
from runner.llm import Reply
from runner.meter import Usage
from runner.sandbox import Limits, Sandbox
from runner.store import ToolStore
from runner.tools import Card, Demo, Provenance, Tool

JW = str(Path(sys.executable).with_name("jigwright"))
BSHA, ESHA = "b" * 64, "e" * 64

# A toy family for these tests only (invented): the slipway fee is length × rate.
EXAMPLES = [
    ("The Puffin is 12 metres long and uses the slipway at 3 coins per metre. What is the fee?", 12, 3),
    ("Slipway fee for the Gannet: 9 metres at 4 coins a metre?", 9, 4),
    ("The Tern, 7 metres, pays 5 coins per metre on the slipway. How much?", 7, 5),
    ("At 2 coins per metre, what does the 15 metre Skua pay for the slipway?", 15, 2),
    ("The Eider is 11 metres long; the slipway costs 6 coins per metre. Fee?", 11, 6),
]
TASKS = [(f"t{i}", f"The {boat} is {length} metres long; the slipway is {rate} coins per metre. Fee?", length, rate)
         for i, (boat, length, rate) in enumerate([("Auk", 10, 3), ("Brant", 8, 7), ("Coot", 13, 2),
                                                   ("Dunlin", 6, 9), ("Egret", 14, 5), ("Ferry", 5, 11)], 1)]
ANSWER = {q: length * rate for _, q, length, rate in TASKS}
ARGS = {q: {"boat": q.split()[1], "length": length, "rate": rate} for _, q, length, rate in TASKS}
ID = {q: tid for tid, q, _, _ in TASKS}
SCHEMA = {"type": "object", "properties": {"boat": {"type": "string"}, "length": {"type": "integer"},
                                           "rate": {"type": "integer"}},
          "required": ["boat", "length", "rate"], "additionalProperties": False}
GOOD = "def solve(boat, length, rate):\n    return length * rate\n"


def make_family(root: Path, name: str = "fees") -> Path:
    d = root / name
    d.mkdir(parents=True)
    (d / "examples.jsonl").write_text("".join(json.dumps({"id": f"ex{i}", "question": q, "answer": a * b}) + "\n"
                                              for i, (q, a, b) in enumerate(EXAMPLES, 1)))
    (d / "test.jsonl").write_text("".join(json.dumps({"id": tid, "question": q, "answer": length * rate}) + "\n"
                                          for tid, q, length, rate in TASKS))
    (d / "family.toml").write_text(f'name = "{name}"\ndescription = "the slipway fee of one boat"\n')
    return d


def put_tool(store: ToolStore, family_dir: Path, *, verified: bool = True, builder_cpu: float = 30.0,
             executor_cpu: float = 2.0) -> Tool:
    """Store the tool `jigwright build` would have made for this family, with its build report."""
    family = B.load_family(family_dir / "examples.jsonl")
    key = B.build_key(family, BSHA, ESHA, B.BuildSettings())
    report = B.BuildReport(family=family.name, tool=family.name, key=key, verified=verified,
                           held_out_score=1.0 if verified else 0.5, held_out=2, strategy="direct")
    report.steps["draft"].builder_cpu = builder_cpu
    report.steps["verify"].executor_cpu = executor_cpu
    card = Card(name=family.name, description=family.description, schema=SCHEMA,
                demos=[Demo(question=q, arguments={"boat": q.split()[1], "length": a, "rate": b})
                       for q, a, b in EXAMPLES[:3]])
    tool = Tool(key=key, name=family.name, description=family.description, code=GOOD, card=card, verified=verified,
                held_out_score=report.held_out_score, checks=[], report=report.model_dump(),
                provenance=Provenance(builder_model="builder", builder_sha256=BSHA, executor_model="executor",
                                      executor_sha256=ESHA, template_hashes={}, settings={}, family_file="",
                                      examples_sha256=""))
    store.put(tool)
    return tool


def executor_script(*, wrong_fill=(), bad_fill=(), direct_right=(), fail_on_call: int | None = None):
    """Fills arguments (schema given) or answers directly; task ids pick right, wrong or unusable replies."""
    calls = {"n": 0}

    def reply(messages, schema=None, **kw):
        calls["n"] += 1
        if fail_on_call is not None and calls["n"] == fail_on_call:
            raise RuntimeError("simulated interruption")
        q = messages[-1]["content"]
        tid = ID.get(q, "")
        if is_fill(messages):
            if tid in bad_fill:
                return "{not json"
            args = dict(ARGS[q])
            if tid in wrong_fill:
                args["rate"] += 1
            return json.dumps(args)
        return str(ANSWER[q] if tid in direct_right else ANSWER[q] + 1)

    return reply


def builder_script(*, direct_right=(), steps_right=(), steps_cut=()):
    def reply(messages, max_tokens, **kw):
        q = messages[-1]["content"]
        tid = ID.get(q, "")
        if "step by step" in messages[0]["content"]:
            assert max_tokens == E.STEPS_MAX_TOKENS
            if tid in steps_cut:
                return Reply(text="The boat is long. First multiply the", finish_reason="length",
                             usage=Usage(prompt_tokens=50, completion_tokens=max_tokens, cpu_seconds=4.0))
            value = ANSWER[q] if tid in steps_right else ANSWER[q] - 1
            return f"The fee is length times rate.\nAnswer: {value}"
        assert max_tokens == E.DIRECT_MAX_TOKENS
        return str(ANSWER[q] if tid in direct_right else ANSWER[q] + 2)

    return reply


@pytest.fixture(scope="module")
def sandbox():
    with Sandbox(pool_size=1, limits=Limits(cpu_seconds=1, wall_seconds=3)) as sb:
        yield sb


def setup_of(executor, builder) -> E.EvalSetup:
    return E.EvalSetup(builder=builder, executor=executor, builder_sha=BSHA, executor_sha=ESHA)


def run_eval(tmp_path, dirs, setup, sandbox, store, methods, n=6, cache="cache", out="out"):
    return E.evaluate(E.load_families(dirs), setup, methods=methods, n=n, seed=0, out_dir=tmp_path / out,
                      cache_dir=tmp_path / cache, sandbox=sandbox, store=store)


def row(report, method, family="fees"):
    return next(r for r in report.rows if r.method == method and r.family == family)


# ---- statistics --------------------------------------------------------------------------------------------

# Reference: statsmodels 0.15.0, proportion_confint(k, n, alpha=0.05, method="wilson") (scipy 1.17.1).
# The first four are also the worked examples of R. G. Newcombe, "Two-sided confidence intervals for the single
# proportion: comparison of seven methods", Statistics in Medicine 17 (1998) 857-872, Table II, method 3:
# 81/263 → 0.2553-0.3662, 15/148 → 0.0624-0.1605, 0/20 → 0-0.1611, 1/29 → 0.0061-0.1718.
STATSMODELS_WILSON = [
    (81, 263, 0.2552885198782742, 0.36620957698280004),
    (15, 148, 0.06238639953073628, 0.16048724172330803),
    (0, 20, 0.0, 0.1611251580528194),
    (1, 29, 0.006113214292762667, 0.17175521879320294),
    (20, 20, 0.8388748419471804, 0.9999999999999999),
    (7, 20, 0.18119182410108203, 0.5671457233147638),
    (13, 20, 0.43285427668523624, 0.818808175898918),
    (1, 1, 0.2065493143772374, 1.0),
    (0, 1, 0.0, 0.7934506856227627),
    (50, 100, 0.4038315303659956, 0.5961684696340044),
    (3, 7, 0.15821985525146964, 0.7495416354723428),
]


@pytest.mark.parametrize("k,n,lo,hi", STATSMODELS_WILSON)
def test_wilson_interval_matches_statsmodels(k, n, lo, hi):
    got_lo, got_hi = E.wilson_interval(k, n)
    assert got_lo == pytest.approx(lo, abs=1e-12) and got_hi == pytest.approx(hi, abs=1e-12)


def test_wilson_interval_matches_newcombe_to_four_places_and_knows_nothing_at_n_zero():
    for k, n, lo, hi in [(81, 263, 0.2553, 0.3662), (15, 148, 0.0624, 0.1605), (1, 29, 0.0061, 0.1718)]:
        got = E.wilson_interval(k, n)
        assert (round(got[0], 4), round(got[1], 4)) == (lo, hi)
    assert E.wilson_interval(0, 0) == (0.0, 1.0)


def test_wilson_interval_stays_within_zero_and_one():
    # unclamped, rounding gives e.g. -6.9e-18 for 0/27 and 1.0000000000000002 for 16/16
    for n in range(1, 120):
        for k in range(n + 1):
            lo, hi = E.wilson_interval(k, n)
            assert 0.0 <= lo <= k / n <= hi <= 1.0
            assert (lo == 0.0) == (k == 0) and (hi == 1.0) == (k == n)


def test_break_even_arithmetic():
    assert E.break_even(100.0, 0.5, 1.5) == 101  # 100 + 100·0.5 = 150 = 100·1.5 is not yet cheaper
    assert E.break_even(99.5, 0.5, 1.5) == 100
    assert E.break_even(0.0, 1.0, 2.0) == 1
    assert E.break_even(600.0, 0.2, 8.2) == 76  # 600/8 = 75 exactly: 75 is a tie, 76 is cheaper
    assert E.break_even(10.0, 2.0, 2.0) == "never"
    assert E.break_even(10.0, 3.0, 2.0) == "never"
    for build, s, d in [(0.3, 0.1, 0.2), (1234.5, 0.37, 2.91), (7.0, 0.001, 0.003)]:
        n = E.break_even(build, s, d)
        assert build + n * s < n * d and not build + (n - 1) * s < (n - 1) * d


def test_task_selection_is_a_seeded_prefix():
    tasks = [E.EvalTask(id=str(i), question=f"q{i}", answer=i, line=i) for i in range(50)]
    a = E.select_tasks(tasks, 20, 0)
    assert [t.id for t in a] == [t.id for t in E.select_tasks(tasks, 20, 0)]
    assert [t.id for t in E.select_tasks(tasks, 30, 0)][:20] == [t.id for t in a]
    assert [t.id for t in E.select_tasks(tasks, 20, 1)] != [t.id for t in a]
    assert [t.id for t in a] != [str(i) for i in range(20)]


# ---- the eval with doubles ----------------------------------------------------------------------------------

def test_per_method_accuracy_costs_and_break_even(tmp_path, sandbox):
    fam = make_family(tmp_path / "fams")
    executor = ScriptedModel("executor", executor_script(wrong_fill={"t5"}, bad_fill={"t6"},
                                                         direct_right={"t1", "t2"}))
    builder = ScriptedModel("builder", builder_script(direct_right={"t1", "t2", "t3"},
                                                      steps_right={"t1", "t2", "t3", "t4"}, steps_cut={"t5"}))
    with ToolStore(tmp_path / "store") as store:
        put_tool(store, fam)
        report = run_eval(tmp_path, [fam], setup_of(executor, builder), sandbox, store, list(E.METHODS))

    expected = {"split": (4, 1), "executor-direct": (2, 0), "builder-direct": (3, 0), "builder-steps": (4, 1)}
    for method, (k, unanswered) in expected.items():
        r = row(report, method)
        assert (r.tasks, r.correct, r.unanswered) == (6, k, unanswered), method
        assert r.accuracy == round(k / 6, 4)
        lo, hi = E.wilson_interval(k, 6)
        assert (r.ci_low, r.ci_high) == (round(lo, 4), round(hi, 4))
        assert r.cpu_mean > 0 and r.cpu_p95 >= r.cpu_mean * 0.5 and r.tokens_mean > 0
        assert {s.id for s in r.results} == {t[0] for t in TASKS}
        assert {s.id for s in r.results if s.correct} >= ({"t1", "t2"} if method != "split" else {"t1", "t4"})
        # CPU per right answer: every task's CPU over the right ones
        assert r.cpu_per_correct == pytest.approx(sum(s.cpu for s in r.results) / k, rel=1e-2)
        assert json.loads(report.model_dump_json())["rows"][0]["cpu_per_correct"] is not None

    split = row(report, "split")
    wrong = next(s for s in split.results if s.id == "t5")
    assert wrong.answered and wrong.answer == 14 * 6 and not wrong.correct and wrong.arguments["rate"] == 6
    assert all(s.tool_cpu > 0 for s in split.results if s.answered)  # the tool really ran in the sandbox
    assert next(s for s in split.results if s.id == "t6").error.startswith("attempt 2")
    assert not any(s.correct for s in row(report, "builder-steps").results if s.id == "t5")
    # the build cost is the stored report's CPU (a tool store hit: the builder was never asked to build)
    assert split.build_cpu == 32.0 and report.builds[0].cache_hit and report.builds[0].verified
    assert all("step by step" in c.system or "Reply with the answer only" in c.system for c in builder.calls)
    # six direct answers, five good fills, and t6's unusable fill: its first attempt asks freely, then under the
    # schema; its retry (and any later fill of this tool) goes straight to the schema
    assert len(builder.calls) == 12 and len(executor.calls) == 6 + 5 + 2 + 1
    for method in ("executor-direct", "builder-direct", "builder-steps"):
        assert split.break_even[method] == E.break_even(32.0, split.cpu_mean, row(report, method).cpu_mean)
    # the direct prompt: the five solved examples as earlier turns, answers only
    first = next(c for c in executor.calls if not is_fill(c.messages))
    assert [m["role"] for m in first.messages] == ["system"] + ["user", "assistant"] * 5 + ["user"]
    assert first.messages[2]["content"] == "36" and first.temperature == 0.0
    assert report.computed == 24 and report.reused == 0


def test_resume_after_interruption_computes_only_missing_tasks(tmp_path, sandbox):
    fam = make_family(tmp_path / "fams")
    methods = ["split", "executor-direct"]
    with ToolStore(tmp_path / "store") as store:
        put_tool(store, fam)
        clean = run_eval(tmp_path, [fam], setup_of(ScriptedModel("executor", executor_script(direct_right={"t2"})),
                                                   ScriptedModel("builder", [])),
                         sandbox, store, methods, cache="clean", out="clean-out")
        broken = ScriptedModel("executor", executor_script(direct_right={"t2"}, fail_on_call=4))
        with pytest.raises(RuntimeError, match="simulated interruption"):
            run_eval(tmp_path, [fam], setup_of(broken, ScriptedModel("builder", [])), sandbox, store, methods)
        done = [c.last_user for c in broken.calls[:3]]
        again = ScriptedModel("executor", executor_script(direct_right={"t2"}))
        resumed = run_eval(tmp_path, [fam], setup_of(again, ScriptedModel("builder", [])), sandbox, store, methods)
    assert len(again.calls) == 12 - 3
    split_questions = [c.last_user for c in again.calls if is_fill(c.messages)]
    assert len(split_questions) == 3 and not set(split_questions) & set(done)
    assert (resumed.computed, resumed.reused) == (9, 3)
    for method in methods:
        a, b = row(clean, method), row(resumed, method)
        assert (a.correct, a.accuracy, a.unanswered) == (b.correct, b.accuracy, b.unanswered)
        assert [(s.id, s.answer, s.correct) for s in a.results] == [(s.id, s.answer, s.correct) for s in b.results]
    # a third run computes nothing
    idle = ScriptedModel("executor", [])
    with ToolStore(tmp_path / "store") as store:
        third = run_eval(tmp_path, [fam], setup_of(idle, ScriptedModel("builder", [])), sandbox, store, methods)
    assert idle.calls == [] and (third.computed, third.reused) == (0, 12)


def test_a_rerun_after_a_fill_miss_reuses_every_split_result(tmp_path, sandbox):
    """t6's free fill misses, so the fills after it start under the schema and are cached under keys that say
    so; a rerun walks the same keys (the reused miss counts as if it ran) and computes nothing."""
    fam = make_family(tmp_path / "fams")
    with ToolStore(tmp_path / "store") as store:
        put_tool(store, fam)
        first = run_eval(tmp_path, [fam], setup_of(ScriptedModel("executor", executor_script(bad_fill={"t6"})),
                                                   ScriptedModel("builder", [])), sandbox, store, ["split"])
        idle = ScriptedModel("executor", [])
        again = run_eval(tmp_path, [fam], setup_of(idle, ScriptedModel("builder", [])), sandbox, store, ["split"],
                         out="again")
    fills = [s.fill for s in row(first, "split").results]
    t6 = [s.id for s in row(first, "split").results].index("t6")
    assert fills[t6][0] == "free, then schema" and t6 < 5 and fills[t6 + 1] == ["schema"]
    assert (first.computed, again.computed, again.reused) == (6, 0, 6) and idle.calls == []
    assert [s.model_dump() for s in row(again, "split").results] == [s.model_dump() for s in row(first, "split").results]


def test_unverified_tool_still_answers_and_is_flagged(tmp_path, sandbox):
    fam = make_family(tmp_path / "fams")
    executor = ScriptedModel("executor", executor_script())
    with ToolStore(tmp_path / "store") as store:
        put_tool(store, fam, verified=False)
        report = run_eval(tmp_path, [fam], setup_of(executor, ScriptedModel("builder", [])), sandbox, store,
                          ["split"], n=3)
    r = row(report, "split")
    assert r.correct == 3 and r.flagged and r.note.startswith("UNVERIFIED")
    assert not report.builds[0].verified and report.builds[0].tool == "fees"
    assert "UNVERIFIED" in (tmp_path / "out" / "eval.md").read_text()


def test_no_tool_fails_every_task_and_the_failed_build_is_not_repeated(tmp_path, sandbox):
    fam = make_family(tmp_path / "fams")
    builder = ScriptedModel("builder", lambda messages, **kw: "I cannot design that.")
    executor = ScriptedModel("executor", executor_script(direct_right={"t1"}))
    with ToolStore(tmp_path / "store") as store:
        report = run_eval(tmp_path, [fam], setup_of(executor, builder), sandbox, store,
                          ["split", "executor-direct"], n=4)
        shape_calls = len(builder.calls)
        settings = B.BuildSettings()  # each reply is sent back once with its problems
        assert shape_calls == settings.shape_samples * (1 + settings.shape_feedback)
        r = row(report, "split")
        assert (r.correct, r.unanswered) == (0, 4) and r.flagged and r.note.startswith("NO TOOL")
        assert r.break_even == {} and report.builds[0].tool is None
        again = run_eval(tmp_path, [fam], setup_of(executor, builder), sandbox, store, ["split"], n=4)
    assert len(builder.calls) == shape_calls and row(again, "split").note.startswith("NO TOOL")


def test_outputs_are_written(tmp_path, sandbox):
    fams = [make_family(tmp_path / "fams", "fees"), make_family(tmp_path / "fams", "dues")]
    executor = ScriptedModel("executor", executor_script(direct_right={"t1", "t3"}))
    with ToolStore(tmp_path / "store") as store:
        for f in fams:
            put_tool(store, f)
        report = run_eval(tmp_path, fams, setup_of(executor, ScriptedModel("builder", [])), sandbox, store,
                          ["split", "executor-direct"], n=4)
    out = tmp_path / "out"
    data = json.loads((out / "eval.json").read_text())
    assert data["families"] == ["fees", "dues"] and data["n"] == 4
    assert [(r["family"], r["method"]) for r in data["rows"]] == [
        ("fees", "split"), ("fees", "executor-direct"), ("dues", "split"), ("dues", "executor-direct"),
        (E.ALL, "split"), (E.ALL, "executor-direct")]
    pooled = row(report, "split", E.ALL)
    assert pooled.tasks == 8 and pooled.build_cpu == 64.0
    assert pooled.break_even["executor-direct"] == E.break_even(64.0, pooled.cpu_mean,
                                                                row(report, "executor-direct", E.ALL).cpu_mean)
    png, svg = (out / "eval.png").read_bytes(), (out / "eval.svg").read_bytes()
    assert png.startswith(b"\x89PNG") and len(png) > 5000
    assert b"<svg" in svg and b"dues" in svg and len(svg) > 5000
    md = (out / "eval.md").read_text()
    assert report.created[:10] in md and f"{report.machine.physical_cores} physical cores" in md
    assert report.machine.cpu_model in md
    assert "| family | method | model | accuracy | 95% CI |" in md and "| fees | split |" in md
    assert "break-even vs executor-direct" in md
    assert not list(out.glob(".*.tmp"))


# ---- input errors -----------------------------------------------------------------------------------------------

def test_family_dir_without_test_file_or_with_a_bad_line(tmp_path):
    fam = make_family(tmp_path)
    (fam / "test.jsonl").unlink()
    with pytest.raises(InputError, match=r"no test\.jsonl"):
        E.load_families([fam])
    lines = [json.dumps({"id": "a", "question": "q?", "answer": 1}), json.dumps({"id": "b", "question": "q2?"}),
             "{oops"]
    (fam / "test.jsonl").write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"test\.jsonl:2: missing 'answer'"):
        E.load_families([fam])
    (fam / "test.jsonl").write_text("\n".join([lines[0], lines[2]]) + "\n")
    with pytest.raises(InputError, match=r"test\.jsonl:2: not valid JSON"):
        E.load_families([fam])
    with pytest.raises(InputError, match="unknown method 'tool-direct'"):
        E.parse_methods(["split,tool-direct"])
    assert E.parse_methods(["builder-steps,split", "split"]) == ["builder-steps", "split"]


def test_cli_reports_a_bad_family_dir_in_one_line(tmp_path):
    fam = make_family(tmp_path)
    (fam / "test.jsonl").write_text(json.dumps({"id": "a", "question": "q?", "answer": 1}) + "\nnot json\n")
    proc = subprocess.run([JW, "eval", str(fam), "--n", "2", "--out", str(tmp_path / "o")], capture_output=True,
                          text=True, timeout=60, env={"JIGWRIGHT_HOME": str(tmp_path / "home"), "PATH": "/usr/bin:/bin"})
    assert proc.returncode == InputError.exit_code
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and f"{fam / 'test.jsonl'}:2: not valid JSON" in lines[0]
    assert not (tmp_path / "o").exists()


def test_split_note_names_open_contested_inputs():
    plain = E.BuildInfo(family="fees", key="k", tool="fees", verified=True)
    assert E.split_note(plain) == ("verified tool", False)
    open_cases = plain.model_copy(update={"contested": 3, "agreement": 0.875})
    note, flagged = E.split_note(open_cases)
    assert not flagged
    assert "3 contested input(s) open" in note and "88%" in note and "--ask" in note
    unverified = open_cases.model_copy(update={"verified": False, "held_out_score": 2 / 3})
    assert E.split_note(unverified)[1]  # an unverified tool is flagged whatever its probe found
