"""Looking for disagreement among candidates that all passed their examples (runner/probe.py)."""

from __future__ import annotations

import json
import re

import jsonschema
import pytest

from runner import probe
from runner.sandbox import Limits, Sandbox
from runner.shapecheck import infer_schema
from samples.families import departures

# Two departures tools that both pass every drafting example below: one checks each boat's first departure,
# the other compares remainders only (the slip a small builder makes).
RIGHT = """
def solve(boats):
    t = max(b['start'] for b in boats)
    while True:
        if all(t >= b['start'] and (t - b['start']) % b['period'] == 0 for b in boats):
            return t
        t += 1
"""
REMAINDERS_ONLY = """
def solve(boats):
    t = 0
    while True:
        if all((t - b['start']) % b['period'] == 0 for b in boats):
            return t
        t += 1
"""
# Drafting examples from the generator's old corner: every first departure is the answer's remainder.
DRAFT = [
    ("The Sandpiper leaves at minute 2 and then every 6 minutes. The Curlew leaves at minute 0 and then every "
     "8 minutes. At what minute do both boats first leave together?",
     {"boats": [{"name": "Sandpiper", "start": 2, "period": 6}, {"name": "Curlew", "start": 0, "period": 8}]}),
    ("The Thrift sails at minute 4 and again every 17 minutes after that. The Samphire sails at minute 0 and "
     "again every 4 minutes after that. Which minute is the first when both sail at once?",
     {"boats": [{"name": "Thrift", "start": 4, "period": 17}, {"name": "Samphire", "start": 0, "period": 4}]}),
]


def reference(args):
    return departures.solve([b["start"] for b in args["boats"]], [b["period"] for b in args["boats"]])


@pytest.fixture(scope="module")
def sandbox():
    with Sandbox(pool_size=1, limits=Limits(cpu_seconds=1, wall_seconds=3)) as sb:
        yield sb


def runner(sandbox):
    def run(code, args):
        r = sandbox.run(code, args, limits=Limits(cpu_seconds=0.5, wall_seconds=2))
        return r.ok, r.value
    return run


def test_both_candidates_pass_the_drafting_examples(sandbox):
    for _, args in DRAFT:
        assert sandbox.run(RIGHT, args).value == sandbox.run(REMAINDERS_ONLY, args).value == reference(args)


def test_mutations_keep_the_shape_and_leave_out_the_originals():
    objects = [a for _, a in DRAFT]
    muts = probe.mutations(objects)
    assert muts and all(json.dumps(m, sort_keys=True) not in {json.dumps(o, sort_keys=True) for o in objects}
                        for m in muts)
    schema = infer_schema(objects)
    # every mutation that keeps at least one boat still fits the argument schema (checked with jsonschema)
    for m in muts:
        if m["boats"]:
            jsonschema.validate(m, schema)
    assert any(len(m["boats"]) == 1 for m in muts) and any(len(m["boats"]) == 3 for m in muts)
    assert any(m["boats"][0]["start"] == 6 for m in muts if m["boats"])  # a start scaled x3


def test_schema_instances_fit_the_schema_and_stay_in_range():
    objects = [a for _, a in DRAFT]
    schema = infer_schema(objects)
    drawn = probe.schema_instances(schema, objects, 10)
    assert drawn, "hypothesis-jsonschema drew nothing"
    for d in drawn:
        jsonschema.validate(d, schema)  # reference: the jsonschema package
        assert all(0 <= b["start"] <= 51 and 0 <= b["period"] <= 51 for b in d["boats"])
    assert probe.schema_instances(schema, objects, 10) == drawn  # deterministic


def test_the_remainder_slip_is_contested_with_a_late_first_departure(sandbox):
    objects = [a for _, a in DRAFT]
    inputs = probe.probe_inputs(infer_schema(objects), objects, seed=0)
    report = probe.compare([RIGHT, REMAINDERS_ONLY], inputs, runner(sandbox), seconds=120)
    assert report.candidates == 2 and report.inputs == len(inputs)
    assert report.contested, "no contested input found"
    assert report.agreement is not None and report.agreement < 1
    for c in report.contested:
        # the right tool agrees with the reference solver; the slip answers before a boat has first left
        assert c.answers[0] == reference(c.arguments) and c.answers[1] < c.answers[0]
        assert c.answers[1] < max(b["start"] for b in c.arguments["boats"])


def test_a_contested_input_is_phrased_like_a_drafting_question():
    new = {"boats": [{"name": "Sandpiper", "start": 6, "period": 6}, {"name": "Curlew", "start": 16, "period": 8}]}
    q = probe.phrase(new, DRAFT)
    assert q == ("The Sandpiper leaves at minute 6 and then every 6 minutes. The Curlew leaves at minute 16 and then "
                 "every 8 minutes. At what minute do both boats first leave together?")
    three = {"boats": DRAFT[0][1]["boats"] + DRAFT[0][1]["boats"][:1]}
    assert probe.phrase(three, DRAFT) is None  # no demo has three boats: shown as arguments instead


def test_one_candidate_has_nothing_to_compare(sandbox):
    report = probe.compare([RIGHT, RIGHT], [("mutation", DRAFT[0][1])], runner(sandbox))
    assert report.candidates == 1 and report.inputs == 0 and "one passing candidate" in report.note
    lines = probe.contested_lines(probe.ProbeReport(contested=[probe.Contest(arguments={"a": 1}, answers=[1, 2])]),
                                  "toy")
    assert lines[0]["answer"] == "" and lines[0]["arguments"] == {"a": 1} and re.match(r"toy-contested-01", lines[0]["id"])


def test_a_build_reports_the_contested_late_departure(sandbox, tmp_path):
    """End to end with scripted models: the remainder slip is drafted first and verifies on examples from the
    old corner; the probe finds the inputs where the right candidate disagrees, phrased as questions."""
    from runner import build as B
    from runner.store import ToolStore
    from tests.doubles import ScriptedModel

    names = ["Curlew", "Dunlin", "Godwit", "Tern", "Gannet", "Fulmar", "Smew", "Eider", "Auk", "Petrel"]
    lines, table = [], {}
    for i, (p1, p2, t) in enumerate([(6, 8, 20), (4, 17, 30), (5, 7, 12), (3, 10, 13), (9, 4, 21), (6, 11, 27),
                                     (7, 3, 16), (8, 5, 33), (10, 7, 24)]):
        a, b = names[i], names[i + 1]
        args = {"boats": [{"name": a, "start": t % p1, "period": p1}, {"name": b, "start": t % p2, "period": p2}]}
        q = (f"The {a} leaves at minute {t % p1} and then every {p1} minutes. The {b} leaves at minute {t % p2} and "
             f"then every {p2} minutes. At what minute do both boats first leave together?")
        lines.append({"id": f"d{i}", "question": q, "answer": reference(args)})
        table[q] = args
    f = tmp_path / "departures.jsonl"
    f.write_text("".join(json.dumps(x) + "\n" for x in lines))
    family = B.load_family(f, name="toy-departures", description="first minute all boats leave together")
    shape = json.dumps({"arguments": [table[x["question"]] for x in lines[:3]]})
    drafts = [f"```python\n{REMAINDERS_ONLY.strip()}\n```", f"```python\n{RIGHT.strip()}\n```"]

    def builder_reply(messages, **kw):
        return shape if messages[0]["content"].startswith("You design the arguments") else drafts.pop(0)

    executor = ScriptedModel("executor", lambda messages, **kw: json.dumps(table[messages[-1]["content"]]))
    with ToolStore(tmp_path / "store") as store:
        tool, report = B.build(family, builder=ScriptedModel("builder", builder_reply), executor=executor,
                               sandbox=sandbox, store=store, builder_sha="b" * 64, executor_sha="e" * 64,
                               settings=B.BuildSettings(draft_samples=2, shape_samples=1, strategies=["direct"]))
    assert report.verified and tool is not None
    assert report.contested, report.probe_note
    assert report.agreement is not None and report.agreement < 1
    phrased = [c for c in report.contested if c["question"]]
    assert phrased, "no contested input could be phrased like a drafting question"
    for c in phrased:
        args = c["arguments"]
        assert reference(args) in c["answers"] and c["chosen"] != reference(args)
        assert all(str(b["start"]) in c["question"] for b in args["boats"])
