"""The builder pipeline's control flow and failure paths, with a scripted stand-in for both models and the real
sandbox; plus family-file errors and export. The real-model build is in test_build_real.py."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from doubles import ScriptedModel
from runner import build as B
from runner.errors import InputError
from runner.sandbox import Limits, Sandbox
from runner.store import ToolStore, export

# A toy family for control-flow tests only (invented; the demo families live in samples/).
FEES = [
    ("The Puffin is 12 metres long and uses the slipway at 3 coins per metre. What is the fee?", 36,
     {"boat": "Puffin", "length": 12, "rate": 3}),
    ("Slipway fee for the Gannet: 9 metres at 4 coins a metre?", 36, {"boat": "Gannet", "length": 9, "rate": 4}),
    ("The Tern, 7 metres, pays 5 coins per metre on the slipway. How much?", 35,
     {"boat": "Tern", "length": 7, "rate": 5}),
    ("At 2 coins per metre, what does the 15 metre Skua pay for the slipway?", 30,
     {"boat": "Skua", "length": 15, "rate": 2}),
    ("The Eider is 11 metres long; the slipway costs 6 coins per metre. Fee?", 66,
     {"boat": "Eider", "length": 11, "rate": 6}),
]
GOOD = "```python\ndef solve(boat, length, rate):\n    return length * rate\n```"
WRONG = "```python\ndef solve(boat, length, rate):\n    return length + rate\n```"
LOOPS = "```python\ndef solve(boat, length, rate):\n    while True:\n        pass\n```"


@pytest.fixture
def family(tmp_path) -> B.Family:
    f = tmp_path / "fees.jsonl"
    f.write_text("".join(json.dumps({"id": f"f{i}", "question": q, "answer": a}) + "\n"
                         for i, (q, a, _) in enumerate(FEES)))
    return B.load_family(f, name="slipway-fees", description="the slipway fee of one boat")


@pytest.fixture(scope="module")
def sandbox():
    with Sandbox(pool_size=1, limits=Limits(cpu_seconds=1, wall_seconds=3)) as sb:
        yield sb


def shape_reply(objects) -> str:
    return json.dumps({"arguments": objects})


def builder_script(shapes: list[str], drafts: list[str], repairs: list[str] | None = None):
    shapes, drafts, repairs = list(shapes), list(drafts), list(repairs or [])

    def reply(messages, **kw):
        last = messages[-1]["content"]
        if messages[0]["content"].startswith("You design the arguments"):
            if last.startswith("The checks found") and not shapes:
                return messages[-2]["content"]  # told the problems, it repeats itself
            return shapes.pop(0)
        if last.startswith("That function is wrong"):
            return repairs.pop(0)
        return drafts.pop(0)

    return reply


def executor_script(wrong: bool = False):
    table = {q: args for q, _, args in FEES}

    def reply(messages, **kw):
        args = dict(table[messages[-1]["content"]])
        if wrong:
            args["rate"] += 1
        return json.dumps(args)

    return reply


def run_build(family, sandbox, store, builder, executor, **settings):
    s = B.BuildSettings(**{"draft_samples": 1, "shape_samples": 2, **settings})
    return B.build(family, builder=builder, executor=executor, sandbox=sandbox, store=store, settings=s,
                   builder_sha="b" * 64, executor_sha="e" * 64)


def test_happy_path_stores_verified_tool_and_second_build_is_cache_hit(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    builder = ScriptedModel("builder", builder_script([shape_reply(objects)], [GOOD]))
    executor = ScriptedModel("executor", executor_script())
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, executor)
        assert tool is not None and tool.verified and report.verified
        assert report.held_out_score == 1.0 and report.held_out == 2
        assert [c.ok for c in tool.checks] == [True] * 5
        assert tool.card.schema_["properties"]["length"] == {"type": "integer"}
        assert [d.question for d in tool.card.demos] == [q for q, _, _ in FEES[:3]]
        assert report.steps["shape"].passed == 1 and report.steps["draft"].passed == 1
        assert report.builder_cpu > 0 and report.executor_cpu > 0
        n_calls = len(builder.calls) + len(executor.calls)
        again, report2 = run_build(family, sandbox, store, builder, executor)
        assert report2.cache_hit and again is not None and again.key == tool.key
        assert len(builder.calls) + len(executor.calls) == n_calls
        assert store.get("slipway-fees").verified


def test_shape_checks_reject_leaks_and_mixed_shapes(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    leaked = [dict(o, boat={"name": o["boat"], "fee": a}) for o, (_, a, _) in zip(objects, FEES)]
    mixed = [objects[0], {"boat": "Gannet", "length": {"metres": 9}, "rate": 4}, objects[2]]
    builder = ScriptedModel("builder", builder_script([shape_reply(leaked), shape_reply(mixed)], []))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                 shape_feedback=0)
        assert tool is None and not report.verified
        assert report.steps["shape"].tried == 2 and report.steps["shape"].passed == 0
        text = " ".join(report.failures)
        assert "answer appears in the arguments" in text and "do not share one shape" in text
        assert store.names() == []
        calls = len(builder.calls)
        again, report2 = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                   shape_feedback=0)
        assert again is None and report2.cache_hit and not report2.verified and len(builder.calls) == calls
        assert report2.failures == report.failures


def test_soft_shape_problems_rank_lower_but_are_still_tried(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    dropped = [{k: v for k, v in o.items() if k != "boat"} for o in objects]
    drafted = []

    def script(messages, **kw):
        if messages[0]["content"].startswith("You design the arguments"):
            return shape_reply(dropped) if kw["seed"] == 1 else shape_reply(objects)
        drafted.append(messages[-1]["content"])
        return GOOD

    builder = ScriptedModel("builder", script)
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                 strategies=["direct"], shape_feedback=0)
    assert report.steps["shape"].tried == 2 and report.steps["shape"].passed == 1
    assert any("Puffin missing" in f for f in report.failures)
    assert tool is not None and tool.verified
    assert '"boat"' in drafted[0]  # the proposal without problems was drafted first, though sampled second

    only_soft = ScriptedModel("builder", builder_script([shape_reply(dropped)] * 2, [GOOD.replace("boat, ", "")]))
    with ToolStore(tmp_path / "store2") as store:
        tool, report = run_build(family, sandbox, store, only_soft, ScriptedModel("executor", executor_script()),
                                 strategies=["direct"], shape_feedback=0)
    assert report.steps["shape"].passed == 0
    assert tool is not None and "boat" not in tool.card.schema_["properties"]


def test_a_design_with_problems_goes_back_with_them_and_the_answer_is_checked_again(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    dropped = [{k: v for k, v in o.items() if k != "boat"} for o in objects]
    told = []

    def script(messages, **kw):
        if messages[0]["content"].startswith("You design the arguments"):
            if messages[-1]["content"].startswith("The checks found"):
                told.append((messages[-2]["content"], messages[-1]["content"]))
                return shape_reply(objects)
            return shape_reply(dropped)
        return GOOD

    builder = ScriptedModel("builder", script)
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                 strategies=["direct"], shape_samples=1, shape_feedback=1)
    assert len(told) == 1 and told[0][0] == shape_reply(dropped)  # its own reply, then the problems found in it
    assert "- question 1: puffin missing" in told[0][1].lower() and "for all 3 questions" in told[0][1]
    assert report.steps["shape"].tried == 2 and report.steps["shape"].passed == 1
    assert tool is not None and tool.verified and "boat" in tool.card.schema_["properties"]


def test_answers_from_a_small_set_are_spread_over_the_parts():
    def ex(i, answer):
        return B.Example(id=f"e{i}", question=f"q{i}", answer=answer)

    yes_no = [ex(i, a) for i, a in enumerate(["no", "no", "no", "yes", "Yes", "no", "no", "yes", "yes"])]
    draft, choose, confirm, note = B.split_examples(yes_no, 3, 3)
    assert [e.id for e in draft] == ["e0", "e1", "e3"]  # a "no" and a "yes" among the drafting examples
    assert [e.id for e in choose] == ["e2", "e4", "e5"] and [e.id for e in confirm] == ["e6", "e7", "e8"]
    assert note == ""
    numbers = [ex(i, a) for i, a in enumerate([36, 36, 35, 30, 66, 12, 8, 9, 10])]  # a repeat here is chance
    draft, choose, confirm, _ = B.split_examples(numbers, 3, 3)
    assert [e.id for e in draft + choose + confirm] == [f"e{i}" for i in range(9)]


def test_failing_draft_goes_to_repair_with_exact_feedback(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    builder = ScriptedModel("builder", builder_script([shape_reply(objects)], [WRONG, WRONG, WRONG, WRONG], [GOOD]))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                 strategies=["direct"])
    assert tool is not None and tool.verified
    assert report.steps["repair"].tried == 1 and report.steps["repair"].passed == 1
    repair_prompt = builder.calls[-1].messages[-1]["content"]
    # every drafting example that failed is listed, not only the first
    assert "must return 36 but returned 15" in repair_prompt
    assert "must return 36 but returned 13" in repair_prompt and "must return 35 but returned 12" in repair_prompt


def test_timeouts_are_reported_and_nothing_verifies(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    builder = ScriptedModel("builder", builder_script([shape_reply(objects)], [LOOPS], [LOOPS]))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                 strategies=["direct"], shape_samples=1)
    assert not report.verified
    assert any("ran too long" in f for f in report.failures)
    # the closest attempt is kept unverified (for `tools edit`), with its drafting checks as they ran
    assert tool is not None and not tool.verified and tool.held_out_score == 0.0
    assert [c.split for c in tool.checks][:3] == ["draft"] * 3 and not any(c.ok for c in tool.checks)
    assert {c.split for c in tool.checks[3:]} <= {"choose", "confirm"} and len(tool.checks) > 3
    assert all("limit" in (c.error or "") for c in tool.checks[:3]), [c.error for c in tool.checks]
    assert all((c.error or "").startswith("not checked") for c in tool.checks[3:])


def test_wrong_executor_arguments_fail_verification_and_do_not_replace_a_verified_tool(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    with ToolStore(tmp_path / "store") as store:
        good, _ = run_build(family, sandbox, store, ScriptedModel("builder", builder_script([shape_reply(objects)], [GOOD])),
                            ScriptedModel("executor", executor_script()))
        bad, report = run_build(family, sandbox, store,
                                ScriptedModel("builder", builder_script([shape_reply(objects)] * 2, [GOOD] * 4)),
                                ScriptedModel("executor", executor_script(wrong=True)), seed=5,
                                strategies=["direct"])
        assert bad is not None and not bad.verified and report.held_out_score == 0.0
        assert store.get("slipway-fees").key == good.key


def test_budget_stops_sampling(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    builder = ScriptedModel("builder", builder_script([shape_reply(objects)] * 2, [WRONG] * 9, [WRONG] * 9),
                            cpu_per_completion_token=10.0)
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                 budget_cpu_minutes=0.5)
    assert tool is None and "budget" in report.stopped
    assert len(builder.calls) <= 2


@pytest.mark.parametrize("text,msg", [
    ('{"question": "a?", "answer": 1}\nnot json\n', r"fam.jsonl:2: not valid JSON"),
    ('{"question": "a?", "answer": 1}\n{"question": "b?"}\n', r"fam.jsonl:2: missing 'answer'"),
    ('{"id": "x", "question": "a?", "answer": 1}\n{"id": "x", "question": "b?", "answer": 2}\n',
     r"fam.jsonl:2: duplicate id 'x'"),
    ('{"question": "a?", "answer": 1}\n', r"at least 2 solved examples"),
])
def test_family_file_errors_name_the_line(tmp_path, text, msg):
    f = tmp_path / "fam.jsonl"
    f.write_text(text)
    with pytest.raises(InputError, match=msg):
        B.load_family(f)


def test_extract_code_takes_python_blocks():
    assert B.extract_code("Here:\n```python\ndef solve():\n    return 1\n```\nDone") == "def solve():\n    return 1\n"
    assert "def solve" in B.extract_code("```python\ndef solve():\n    return 1\n")


def test_exported_module_and_tests_pass_in_a_fresh_interpreter(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    with ToolStore(tmp_path / "store") as store:
        tool, _ = run_build(family, sandbox, store, ScriptedModel("builder", builder_script([shape_reply(objects)], [GOOD])),
                            ScriptedModel("executor", executor_script()))
    out = tmp_path / "exported"
    files = export(tool, out)
    assert sorted(p.name for p in files) == ["slipway_fees.py", "test_slipway_fees.py"]
    assert "runner" not in (out / "slipway_fees.py").read_text()
    proc = subprocess.run([sys.executable, "-I", "-m", "pytest", "-q", "-p", "no:cacheprovider", str(out)],
                          capture_output=True, text=True, cwd=out)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "5 passed" in proc.stdout


def test_missing_allowed_imports_are_added_and_present_ones_left_alone():
    fixed = B.add_missing_imports("def solve(x):\n    return math.gcd(x, 4) + len(list(permutations([x])))\n")
    assert fixed.startswith("import math\nfrom itertools import permutations\n")
    ns: dict = {}
    exec(fixed, ns)
    assert ns["solve"](6) == 3
    same = "import datetime\n\ndef solve(d):\n    return datetime.date(2026, 1, d).isoformat()\n"
    assert B.add_missing_imports(same) == same


def test_module_used_as_class_is_mended():
    code = "import datetime\n\ndef solve(d):\n    return datetime.strptime(d, '%Y-%m-%d').day\n"
    ns: dict = {}
    exec(B.add_missing_imports(code), ns)
    assert ns["solve"]("2026-12-01") == 1


def test_strategies_fit_the_data():
    objs = [{"items": ["a", "b"], "k": 1}]
    assert B.applicable_strategies(list(B.STRATEGIES), objs, [3]) == ["direct", "search", "simulate"]
    assert B.applicable_strategies(list(B.STRATEGIES), objs, ["Gull"]) == ["direct", "simulate", "permute"]
    # a text answer found at one place in the arguments adds choose
    assert B.applicable_strategies(list(B.STRATEGIES), [{"items": ["Gull", "Tern"]}], ["Tern"]) == \
        ["direct", "choose", "simulate", "permute"]
    assert B.applicable_strategies(list(B.STRATEGIES), [{"code": "X"}], ["yes"]) == ["direct"]


def test_an_arguments_reply_with_stray_brackets_is_read_as_its_pieces():
    # the bracket slip seen from the 1.5B builder: the list closes after the first question's pieces
    text = ('{"arguments": [{"crew": ["Nell"]}, {"asked": "tar"}], {"crew": ["Jory"]}, {"asked": "salt"}]}')
    pieces = B.parse_arguments_reply(text)
    assert pieces == [{"crew": ["Nell"]}, {"asked": "tar"}, {"crew": ["Jory"]}, {"asked": "salt"}]
    from runner.shapecheck import merge_pieces
    assert merge_pieces(2, pieces) == [{"crew": ["Nell"], "asked": "tar"}, {"crew": ["Jory"], "asked": "salt"}]
    assert B.parse_arguments_reply('```json\n{"arguments": [{"a": 1}]}\n```') == [{"a": 1}]
    assert B.parse_arguments_reply('{"other": 1}') is None and B.parse_arguments_reply("no JSON") is None


# A second toy family (invented) whose answer is a name found in the arguments: the choose strategy.
SWAPS = [
    ("Nell has the tar crate and Jory the rope crate. Later Nell and Jory exchange. Who has the tar crate?", "Jory",
     {"crew": [{"name": "Nell", "crate": "tar"}, {"name": "Jory", "crate": "rope"}],
      "swaps": [{"a": "Nell", "b": "Jory"}], "asked_crate": "tar"}),
    ("Piran holds the net crate, Cadan the salt crate. No exchanges logged. Who has the salt crate?", "Cadan",
     {"crew": [{"name": "Piran", "crate": "net"}, {"name": "Cadan", "crate": "salt"}], "swaps": [],
      "asked_crate": "salt"}),
    ("Tegen has the bait crate, Elowen the chain crate. Later Tegen and Elowen exchange. Who has the chain crate?",
     "Tegen", {"crew": [{"name": "Tegen", "crate": "bait"}, {"name": "Elowen", "crate": "chain"}],
               "swaps": [{"a": "Tegen", "b": "Elowen"}], "asked_crate": "chain"}),
    ("Morwenna has the paint crate, Senara the twine crate. Later Senara and Morwenna exchange. Who has the paint crate?",
     "Senara", {"crew": [{"name": "Morwenna", "crate": "paint"}, {"name": "Senara", "crate": "twine"}],
                "swaps": [{"a": "Senara", "b": "Morwenna"}], "asked_crate": "paint"}),
]
HOLDS = ("```python\ndef holds(x, crew, swaps, asked_crate):\n    state = {c['name']: c['crate'] for c in crew}\n"
         "    for s in swaps:\n        state[s['a']], state[s['b']] = state[s['b']], state[s['a']]\n"
         "    return state[x] == asked_crate\n```")


def write_family(tmp_path, name: str, rows, prefix: str, description: str) -> B.Family:
    """A family file of (question, answer, arguments) rows, ids prefix0, prefix1, ..."""
    f = tmp_path / f"{name}.jsonl"
    f.write_text("".join(json.dumps({"id": f"{prefix}{i}", "question": q, "answer": a}) + "\n"
                         for i, (q, a, _) in enumerate(rows)))
    return B.load_family(f, name=name, description=description)


def test_choose_strategy_tries_each_candidate_from_the_answers_place(sandbox, tmp_path):
    family = write_family(tmp_path, "crate-swaps", SWAPS, "s", "who holds the asked crate after the swaps")
    objects = [a for _, _, a in SWAPS[:3]]
    table = {q: args for q, _, args in SWAPS}
    builder = ScriptedModel("builder", builder_script([shape_reply(objects)], [HOLDS]))
    executor = ScriptedModel("executor", lambda messages, **kw: json.dumps(table[messages[-1]["content"]]))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, executor, strategies=["choose"])
    assert tool is not None and tool.verified and report.strategy == "choose"
    prompt = builder.calls[-1].messages[-1]["content"]
    assert "one of the `crew[].name` values" in prompt and "def holds(x, crew, swaps, asked_crate)" in prompt
    assert sandbox.run(tool.code, SWAPS[3][2]).value == "Senara"


# Nine invented slipway questions: 3 to draft from, 3 to choose with, 3 to confirm with (the file order).
NINE = FEES[:3] + [
    ("The Smew, 8 metres, pays 2 coins a metre on the slipway. Fee?", 16, {"boat": "Smew", "length": 8, "rate": 2}),
    ("Slipway for the Auk: 10 metres at 3 coins per metre?", 30, {"boat": "Auk", "length": 10, "rate": 3}),
    ("At 4 coins per metre, what does the 6 metre Scaup pay for the slipway?", 24, {"boat": "Scaup", "length": 6, "rate": 4}),
    ("The Fulmar is 14 metres long; the slipway costs 3 coins per metre. Fee?", 42, {"boat": "Fulmar", "length": 14, "rate": 3}),
    ("Slipway fee for the Petrel: 16 metres at 2 coins a metre?", 32, {"boat": "Petrel", "length": 16, "rate": 2}),
    ("The Shag, 13 metres, pays 5 coins per metre on the slipway. How much?", 65, {"boat": "Shag", "length": 13, "rate": 5}),
]
# right on every draft and choose example (lengths up to 12), wrong on the confirm examples (13 and more)
SHORT_ONLY = "```python\ndef solve(boat, length, rate):\n    return length * rate if length <= 12 else 0\n```"


def nine_family(tmp_path) -> B.Family:
    return write_family(tmp_path, "slipway-nine", NINE, "n", "the slipway fee of one boat")


def nine_executor():
    table = {q: args for q, _, args in NINE}
    return ScriptedModel("executor", lambda messages, **kw: json.dumps(table[messages[-1]["content"]]))


def test_nine_examples_draft_choose_confirm_and_only_a_confirmed_candidate_is_verified(sandbox, tmp_path):
    family = nine_family(tmp_path)
    objects = [a for _, _, a in NINE[:3]]
    with ToolStore(tmp_path / "store") as store:
        builder = ScriptedModel("builder", builder_script([shape_reply(objects)], [SHORT_ONLY, GOOD]))
        tool, report = run_build(family, sandbox, store, builder, nine_executor(), strategies=["direct"],
                                 draft_samples=2, shape_samples=1)
        assert report.roles == {"draft": ["n0", "n1", "n2"], "choose": ["n3", "n4", "n5"],
                                "confirm": ["n6", "n7", "n8"]}
        assert report.check_note == ""
        # both pass drafting and choosing; only GOOD passes the confirm examples
        assert report.chosen == 2 and report.confirmed == 1
        assert tool is not None and tool.verified and "length * rate\n" in tool.code
        assert [c.split for c in tool.checks] == ["draft"] * 3 + ["choose"] * 3 + ["confirm"] * 3
        assert report.held_out == 3 and report.held_out_score == 1.0 and report.choose_score == 1.0

        only_short = ScriptedModel("builder", builder_script([shape_reply(objects)], [SHORT_ONLY]))
        tool, report = run_build(family, sandbox, store, only_short, nine_executor(), strategies=["direct"],
                                 shape_samples=1, seed=3)
        assert tool is not None and not tool.verified and not report.verified
        assert report.failed_at == "confirm" and report.choose_score == 1.0 and report.held_out_score == 0.0


def test_with_fewer_examples_the_report_says_the_check_is_weaker(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    builder = ScriptedModel("builder", builder_script([shape_reply(objects)], [GOOD]))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()))
    assert tool.verified and "weaker check" in report.check_note
    assert report.roles["choose"] == report.roles["confirm"] == ["f3", "f4"]


def test_with_a_budget_the_build_samples_on_after_a_round_finds_nothing(family, sandbox, tmp_path):
    """The known failure: every shape of the first round was unusable and the build stopped with most of
    its budget left. Now more rounds follow: more shapes, and more drafts for designs found earlier."""
    objects = [a for _, _, a in FEES[:3]]
    mixed = [objects[0], {"boat": "Gannet", "length": {"metres": 9}, "rate": 4}, objects[2]]
    shapes = [shape_reply(mixed)] * 2 + [shape_reply(objects)] + [shape_reply(mixed)] * 20
    builder = ScriptedModel("builder", builder_script(shapes, [WRONG] + [GOOD] * 9, [WRONG] * 9))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, ScriptedModel("executor", executor_script()),
                                 strategies=["direct"], budget_cpu_minutes=100, shape_feedback=0)
    assert tool is not None and tool.verified
    # round 1: two unusable shapes; round 2: a good shape whose draft fails, repaired in vain; round 3: the
    # design found in round 2 gets new drafts (after that round's new shape samples), and one verifies
    assert report.rounds == 3 and report.steps["shape"].tried == 6
    assert report.steps["draft"].tried == 2 and report.steps["repair"].tried == 1
    assert report.verified_cpu is not None and report.verified_cpu == report.total_cpu

    never = ScriptedModel("builder", builder_script([shape_reply(mixed)] * 99, []), cpu_per_completion_token=1.0)
    with ToolStore(tmp_path / "store2") as store:
        tool, report = run_build(family, sandbox, store, never, ScriptedModel("executor", executor_script()),
                                 budget_cpu_minutes=3.0, shape_feedback=0)
    assert tool is None and "budget" in report.stopped and report.failed_at == "shape"
    assert report.steps["shape"].tried > 2 and report.rounds > 1


# Questions with number words and month-name dates (invented), to check the declared conversions end to end.
LEASES = [
    ("The Petrel's mooring runs from 29th December 2026 for four months. Months left at the start?", 4,
     {"boat": "Petrel", "start": "29th December 2026", "months": "four"}),
    ("Mooring for the Auk: from Saturday 30 January 2027, twelve months.", 12,
     {"boat": "Auk", "start": "Saturday 30 January 2027", "months": "twelve"}),
    ("From March 3, 2027 the Tern moors for 6 months.", 6, {"boat": "Tern", "start": "March 3, 2027", "months": 6}),
    ("The Smew moors from 1st of May 2026 for eleven months.", 11,
     {"boat": "Smew", "start": "1st of May 2026", "months": "eleven"}),
    ("The Skua moors from 2 June 2026 for 9 months.", 9, {"boat": "Skua", "start": "2 June 2026", "months": 9}),
]
MONTHS_CODE = ("```python\nimport datetime\n\ndef solve(boat, start, months):\n"
               "    datetime.date.fromisoformat(start)\n    return months + 0\n```")


def test_number_words_and_month_dates_are_converted_by_declaration(sandbox, tmp_path):
    family = write_family(tmp_path, "leases", LEASES, "l", "the months of a mooring")
    table = {q: args for q, _, args in LEASES}
    builder = ScriptedModel("builder", builder_script([shape_reply([a for _, _, a in LEASES[:3]])], [MONTHS_CODE]))
    executor = ScriptedModel("executor", lambda messages, **kw: json.dumps(table[messages[-1]["content"]]))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, builder, executor, strategies=["direct"])
    assert tool is not None and tool.verified, report.failures
    draft_prompt = builder.calls[-1].messages[-1]["content"]
    # the builder drafts from converted values; the executor's demos keep them as written
    assert '"start":"2026-12-29"' in draft_prompt.replace(" ", "") and '"months":4' in draft_prompt.replace(" ", "")
    assert tool.card.demos[0].arguments["months"] == "four"
    assert tool.card.schema_["properties"]["months"]["type"] == ["integer", "string"]
    assert sandbox.run(tool.code, {"boat": "X", "start": "5th of July 2026", "months": "seven"}).value == 7


def test_review_names_which_examples_played_which_part():
    from runner.cli import example_roles

    text = example_roles({"roles": {"draft": ["a", "b"], "choose": ["c"], "confirm": ["d"]}, "check_note": ""})
    assert text == "examples — draft: a, b; choose: c; confirm: d"
    assert "weaker" in example_roles({"roles": {}, "check_note": "weaker check: ..."})


def test_a_forgotten_datetime_import_is_added_as_the_code_uses_it():
    # seen from the 1.5B builder: `datetime.strptime` with no import at all
    code = "def solve(d):\n    return datetime.strptime(d, '%Y-%m-%d').day\n"
    ns: dict = {}
    exec(B.add_missing_imports(code), ns)
    assert ns["solve"]("2026-12-01") == 1


def test_a_failure_under_a_small_budget_is_not_reused_for_a_larger_one(family, sandbox, tmp_path):
    objects = [a for _, _, a in FEES[:3]]
    with ToolStore(tmp_path / "store") as store:
        small = ScriptedModel("builder", builder_script([shape_reply(objects)] * 99, [WRONG] * 99, [WRONG] * 99),
                              cpu_per_completion_token=5.0)
        tool, report = run_build(family, sandbox, store, small, ScriptedModel("executor", executor_script()),
                                 strategies=["direct"], budget_cpu_minutes=0.5)
        assert tool is None and not report.cache_hit
        again, report2 = run_build(family, sandbox, store, small, ScriptedModel("executor", executor_script()),
                                   strategies=["direct"], budget_cpu_minutes=0.5)
        assert report2.cache_hit
        larger = ScriptedModel("builder", builder_script([shape_reply(objects)] * 99, [GOOD] * 99))
        tool, report3 = run_build(family, sandbox, store, larger, ScriptedModel("executor", executor_script()),
                                  strategies=["direct"], budget_cpu_minutes=5)
        assert not report3.cache_hit and tool is not None and tool.verified


def test_a_candidate_that_misses_choose_examples_is_repaired_with_them_but_never_with_confirm_ones(sandbox, tmp_path):
    rows = [(f"Slipway fee for the {boat}: {length} metres at {rate} coins a metre?", length * rate,
             {"boat": boat, "length": length, "rate": rate})
            for boat, length, rate in [("Puffin", 12, 3), ("Gannet", 9, 4), ("Tern", 7, 5), ("Skua", 15, 2),
                                       ("Eider", 11, 6), ("Shag", 20, 2), ("Merlin", 8, 7), ("Dunlin", 18, 3),
                                       ("Knot", 25, 4)]]
    f = tmp_path / "fees9.jsonl"
    f.write_text("".join(json.dumps({"id": f"g{i}", "question": q, "answer": a}) + "\n"
                         for i, (q, a, _) in enumerate(rows)))
    family = B.load_family(f, name="slipway-fees", description="the slipway fee of one boat")
    short = "```python\ndef solve(boat, length, rate):\n    return length * rate if length <= 12 else 0\n```"
    told = []

    def script(messages, **kw):
        if messages[0]["content"].startswith("You design the arguments"):
            return shape_reply([a for _, _, a in rows[:3]])
        if messages[-1]["content"].startswith("That function is wrong"):
            told.append(messages[-1]["content"])
            return GOOD
        return short

    table = {q: a for q, _, a in rows}
    executor = ScriptedModel("executor", lambda messages, **kw: json.dumps(table[messages[-1]["content"]]))
    with ToolStore(tmp_path / "store") as store:
        tool, report = run_build(family, sandbox, store, ScriptedModel("builder", script), executor,
                                 strategies=["direct"], shape_samples=1, choose_repairs=1)
    assert tool is not None and tool.verified and "length * rate\n" in tool.code
    assert len(told) == 1 and "other questions of the same kind" in told[0]
    assert "Skua" in told[0] and "Shag" in told[0]  # choose examples (g3-g5) the short draft gets wrong
    assert not any(boat in told[0] for boat in ("Merlin", "Dunlin", "Knot"))  # confirm examples never
    assert report.roles["confirm"] == ["g6", "g7", "g8"] and report.steps["repair"].tried == 1
