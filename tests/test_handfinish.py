"""Tools finished by hand (`tools edit`, `tools adopt`): the checks they go through, with a scripted executor
for the control flow and failure paths, and end to end with the real executor on a demo family."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from stdnum import iso6346  # python-stdnum: the reference for ISO 6346 check digits

from conftest import ROOT, need_models
from doubles import ScriptedModel, is_fill
from runner import build as B
from runner import handfinish as H
from runner.errors import InputError
from runner.sandbox import Limits, Sandbox
from runner.store import ToolStore

# A toy family for control-flow tests only (invented wording): mooring dues are length x nights x rate.
DUES = [
    ("The Dunlin, 8 metres, stays 3 nights at 2 coins per metre-night. Dues?", 48,
     {"length": 8, "nights": 3, "rate": 2}),
    ("Mooring dues for the Shag: 10 metres, 2 nights, 3 coins per metre-night.", 60,
     {"length": 10, "nights": 2, "rate": 3}),
    ("What do we charge the 6 metre Curlew for 5 nights at 1 coin per metre-night?", 30,
     {"length": 6, "nights": 5, "rate": 1}),
    ("The Whimbrel (12 metres) is in for 1 night at 4 coins per metre-night. How much?", 48,
     {"length": 12, "nights": 1, "rate": 4}),
    ("Dues for 4 nights, 9 metres, 2 coins per metre-night: the Knot.", 72,
     {"length": 9, "nights": 4, "rate": 2}),
]
RIGHT = "def solve(length, nights, rate):\n    return length * nights * rate\n"
WRONG = "def solve(length, nights, rate):\n    return length * nights + rate\n"


def family_file(tmp_path: Path, with_arguments: int = 3, name: str = "mooring-dues") -> Path:
    folder = tmp_path / name
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "family.toml").write_text(f'name = "{name}"\ndescription = "mooring dues of one boat"\n')
    lines = []
    for i, (q, a, args) in enumerate(DUES):
        row = {"id": f"d{i}", "question": q, "answer": a}
        if i < with_arguments:
            row["arguments"] = args
        lines.append(json.dumps(row))
    path = folder / "examples.jsonl"
    path.write_text("\n".join(lines) + "\n")
    return path


def executor(wrong: bool = False) -> ScriptedModel:
    table = {q: args for q, _, args in DUES}

    def reply(messages, **kw):
        assert is_fill(messages)
        args = dict(table[messages[-1]["content"]])
        if wrong:
            args["nights"] += 1
        return json.dumps(args)

    return ScriptedModel("executor", reply)


@pytest.fixture(scope="module")
def sandbox():
    with Sandbox(pool_size=1, limits=Limits(cpu_seconds=1, wall_seconds=3)) as sb:
        yield sb


def check(work, code, sandbox, store, origin="written by hand", model=None, **kw):
    return H.check_by_hand(work, code, origin, executor=model or executor(), sandbox=sandbox, store=store,
                           executor_sha="e" * 64, **kw)


def test_adopt_infers_the_schema_and_stores_a_verified_tool(tmp_path, sandbox):
    work = H.work_from_family(family_file(tmp_path), None, None, None)
    assert [e.id for e in work.drafting] == ["d0", "d1", "d2"] and [e.id for e in work.held_out] == ["d3", "d4"]
    assert work.schema_["properties"]["nights"] == {"type": "integer"}
    model = executor()
    with ToolStore(tmp_path / "store") as store:
        tool, report = check(work, RIGHT, sandbox, store, model=model)
        assert report.verified and tool.verified and report.replaced
        assert (report.drafting_ok, report.held_out_ok) == (3, 2)
        stored = store.get("mooring-dues")
        assert stored.key == tool.key and stored.provenance.origin == "written by hand"
        assert stored.provenance.strategy == "by hand" and stored.provenance.executor_sha256 == "e" * 64
        # the usage card is made as for built tools: the drafting questions and their arguments are its demos
        assert [(d.question, d.arguments) for d in stored.card.demos] == [(q, a) for q, _, a in DUES[:3]]
    # the held-out examples were filled by the executor with that card, one call each
    assert [c.last_user for c in model.calls] == [q for q, _, _ in DUES[3:]]


def test_a_wrong_tool_is_stored_unverified_and_does_not_displace_a_verified_one(tmp_path, sandbox):
    work = H.work_from_family(family_file(tmp_path), None, None, None)
    with ToolStore(tmp_path / "store") as store:
        good, _ = check(work, RIGHT, sandbox, store)
        bad, report = check(work, WRONG, sandbox, store)
        assert not report.verified and not bad.verified and not report.replaced
        assert report.drafting_ok == 0 and report.held_out_ok == 0
        assert store.get("mooring-dues").key == good.key  # the verified tool keeps its name
        assert store.by_key(bad.key) is not None  # the attempt is kept, under its own key
        # right code, but the executor misreads the questions: the held-out examples fail end to end
        _, misread = check(work, RIGHT + "\n", sandbox, store, model=executor(wrong=True))
        assert misread.drafting_ok == 3 and misread.held_out_ok == 0 and not misread.verified


def test_the_static_screen_refuses_before_any_fill(tmp_path, sandbox):
    work = H.work_from_family(family_file(tmp_path), None, None, None)
    model = executor()
    with ToolStore(tmp_path / "store") as store:
        with pytest.raises(InputError, match=r"screen refuses this code: .*open.*line 2"):
            check(work, "def solve(length, nights, rate):\n    return open('/etc/passwd').read()\n", sandbox, store,
                  model=model)
        assert store.names() == []
    assert model.calls == []


def test_adopt_with_a_schema_file_checks_each_drafting_line_against_it(tmp_path, sandbox):
    path = family_file(tmp_path)
    schema = {"type": "object", "properties": {"length": {"type": "integer"}, "nights": {"type": "integer"},
                                               "rate": {"type": "integer", "maximum": 2}},
              "required": ["length", "nights", "rate"], "additionalProperties": False}
    sfile = tmp_path / "schema.json"
    sfile.write_text(json.dumps(schema))
    with pytest.raises(InputError, match=r"examples.jsonl:2: arguments do not fit the schema at rate"):
        H.work_from_family(path, sfile, None, None)
    schema["properties"]["rate"].pop("maximum")
    sfile.write_text(json.dumps(schema))
    work = H.work_from_family(path, sfile, "dues-by-schema", None)
    assert work.schema_ == schema and work.name == "dues-by-schema"
    sfile.write_text('{"type": "object", "required": 3}')
    with pytest.raises(InputError, match="not a valid JSON Schema"):
        H.work_from_family(path, sfile, None, None)


@pytest.mark.parametrize("with_arguments,message", [(0, "no line has 'arguments'"),
                                                    (5, "every line has 'arguments'")])
def test_adopt_needs_drafting_and_held_out_lines(tmp_path, with_arguments, message):
    with pytest.raises(InputError, match=message):
        H.work_from_family(family_file(tmp_path, with_arguments), None, None, None)


def test_adopt_refuses_arguments_that_are_not_an_object_or_not_alike(tmp_path):
    path = family_file(tmp_path)
    lines = path.read_text().splitlines()
    row = json.loads(lines[1])
    row["arguments"] = [8, 3, 2]
    path.write_text("\n".join([lines[0], json.dumps(row)] + lines[2:]) + "\n")
    with pytest.raises(InputError, match=r"examples.jsonl:2: 'arguments' must be a JSON object"):
        H.work_from_family(path, None, None, None)
    row["arguments"] = {"metres": 10, "nights": 2, "rate": 3}
    path.write_text("\n".join([lines[0], json.dumps(row)] + lines[2:]) + "\n")
    with pytest.raises(InputError, match="do not share one shape"):
        H.work_from_family(path, None, None, None)


def built_attempt(tmp_path, sandbox, store):
    """What a build leaves when no draft passes: the closest attempt, unverified, with its examples recorded."""
    family = B.load_family(family_file(tmp_path, with_arguments=0))
    objects = [a for _, _, a in DUES[:3]]

    def builder(messages, **kw):
        if messages[0]["content"].startswith("You design the arguments"):
            return json.dumps({"arguments": objects})
        return "```python\n" + WRONG + "```"

    settings = B.BuildSettings(draft_samples=1, shape_samples=1, strategies=["direct"], repair_rounds=0)
    tool, report = B.build(family, builder=ScriptedModel("builder", builder), executor=executor(), sandbox=sandbox,
                           store=store, settings=settings, builder_sha="b" * 64, executor_sha="e" * 64)
    assert tool is not None and not tool.verified
    return tool


def test_edit_from_the_editor_finishes_a_built_attempt(tmp_path, sandbox, monkeypatch):
    fixed = tmp_path / "fixed.py"
    fixed.write_text(RIGHT)
    with ToolStore(tmp_path / "store") as store:
        attempt = built_attempt(tmp_path, sandbox, store)
        work = H.work_from_tool(attempt)
        assert [e.id for e in work.held_out] == ["d3", "d4"] and work.objects == [a for _, _, a in DUES[:3]]
        text = H.edit_text(attempt)
        assert "must return 48: WRONG" in text and text.endswith(attempt.code.rstrip() + "\n")
        # an "editor" that saves the corrected code over the file it is given
        monkeypatch.setenv("EDITOR", f"cp {fixed}")
        monkeypatch.delenv("VISUAL", raising=False)
        code = H.open_in_editor(attempt)
        assert code == RIGHT
        tool, report = check(work, code, sandbox, store, origin="edited by hand", base=attempt.provenance)
        assert report.verified and report.replaced
        stored = store.get("mooring-dues")
        assert stored.provenance.origin == "edited by hand" and stored.provenance.builder_model == "builder"
        assert stored.card.schema_ == attempt.card.schema_


def test_editor_failures_are_one_line_errors(tmp_path, sandbox, monkeypatch):
    with ToolStore(tmp_path / "store") as store:
        attempt = built_attempt(tmp_path, sandbox, store)
    monkeypatch.delenv("VISUAL", raising=False)
    monkeypatch.delenv("EDITOR", raising=False)
    with pytest.raises(InputError, match=r"no editor: set \$EDITOR"):
        H.open_in_editor(attempt)
    monkeypatch.setenv("EDITOR", "false")
    with pytest.raises(InputError, match="exited with status 1; nothing was stored"):
        H.open_in_editor(attempt)
    empty = tmp_path / "empty.py"
    empty.write_text(H.EDIT_MARK + "\n")
    with pytest.raises(InputError, match="the file is empty"):
        H.read_code(empty)


def test_cli_refuses_a_screened_file_and_a_missing_tool_with_one_line(tmp_home, tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text("import os\n\ndef solve(length, nights, rate):\n    return os.getcwd()\n")
    proc = jigwright("tools", "adopt", str(bad), "--examples", str(family_file(tmp_path)))
    assert proc.returncode == 9 and "screen refuses this code" in proc.stderr and "line 1" in proc.stderr
    proc = jigwright("tools", "edit", "no-such-tool", "--from", str(bad))
    assert proc.returncode == 10 and "no tool named 'no-such-tool'" in proc.stderr


def jigwright(*args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "JIGWRIGHT_THREADS": "1", "COLUMNS": "100"}
    return subprocess.run([sys.executable, "-c", "from runner.cli import main; main()", *args], cwd=ROOT, env=env,
                          capture_output=True, text=True)


# ---- with the real executor ------------------------------------------------------------------------------------

CODES = ROOT / "samples" / "container_codes"
# A wrong first attempt of the kind the builder writes (letters valued by their place in the alphabet), and its
# correction by hand (the ISO 6346 letter values skip multiples of 11).
ATTEMPT = '''def solve(code):
    total = 0
    for i, c in enumerate(code[:10]):
        v = int(c) if c.isdigit() else ord(c) - ord("A") + 10
        total += v * 2 ** i
    return total % 11 % 10
'''
CORRECTED = '''import re


def solve(code):
    code = code.strip().upper()
    if not re.fullmatch(r"[A-Z]{4}[0-9]{6}[0-9]?", code):
        return None  # not a container code: a question sent here by mistake falls back instead
    values, v = {}, 10
    for letter in "ABCDEFGHIJKLMNOPQRSTUVWXYZ":
        if v % 11 == 0:
            v += 1
        values[letter] = v
        v += 1
    total = sum((int(c) if c.isdigit() else values[c]) * 2 ** i for i, c in enumerate(code[:10]))
    return total % 11 % 10
'''


@pytest.mark.models
def test_edit_from_a_corrected_file_then_answer_the_demo_family(tmp_home, tmp_path):
    """A container-codes attempt that fails is finished with `tools edit --from`, checked with the real executor's
    fills, and then answers the family's test questions through `jigwright answer`, each answer checked against
    python-stdnum's ISO 6346 check digit."""
    need_models()
    family = B.load_family(CODES / "examples.jsonl")
    objects = [{"code": re.search(r"[A-Z]{4}[0-9]{6}", e.question).group()} for e in family.examples[:3]]
    held = len(family.examples) - 3

    def builder(messages, **kw):
        if messages[0]["content"].startswith("You design the arguments"):
            return json.dumps({"arguments": objects})
        return "```python\n" + ATTEMPT + "```"

    settings = B.BuildSettings(draft_samples=1, shape_samples=1, strategies=["direct"], repair_rounds=0)
    with ToolStore() as store, Sandbox() as sandbox:
        attempt, _ = B.build(family, builder=ScriptedModel("builder", builder), executor=ScriptedModel("unused", []),
                             sandbox=sandbox, store=store, settings=settings)
    assert attempt is not None and not attempt.verified
    fixed = tmp_path / "container_codes_fixed.py"
    fixed.write_text(CORRECTED)
    proc = jigwright("tools", "edit", "container-codes", "--from", str(fixed), "--json")
    report = json.loads(proc.stdout)
    assert report["origin"] == "edited by hand" and report["drafting_ok"] == 3 and report["held_out"] == held
    assert report["executor_cpu"] > 0  # the held-out arguments were filled by the real executor
    held_checks = [c for c in report["checks"] if c["split"] == "held_out"]
    for c, ex in zip(held_checks, family.examples[3:]):
        stated = re.search(r"[A-Z]{4}[0-9]{6}", ex.question).group()
        assert c["arguments"] is not None
        if c["arguments"]["code"] == stated:  # copied whole: the corrected code must be right (python-stdnum)
            assert c["ok"] and c["got"] == int(iso6346.calc_check_digit(stated)), c
    # verified only if every held-out example passed end to end; otherwise stored unverified, exit code 11
    assert report["verified"] == all(c["ok"] for c in held_checks)
    assert proc.returncode == (0 if report["verified"] else 11), proc.stderr
    with ToolStore() as store:
        stored = store.by_key(report["key"])
        assert stored.provenance.origin == "edited by hand" and stored.verified == report["verified"]
    if not report["verified"]:
        # measured 2026-12-02 before copied strings were held to the question: the executor copied 5 of the 6
        # held-out codes whole (XAQZ617077 lost its X), the edited tool stayed unverified, and `answer` had no
        # verified tool to route to. With the hold, every held-out code is copied whole and the tool verifies.
        return

    tasks = [json.loads(line) for line in (CODES / "test.jsonl").read_text().splitlines()[:4]]
    queue = tmp_path / "queue.jsonl"
    queue.write_text("".join(json.dumps({"id": t["id"], "question": t["question"]}) + "\n" for t in tasks))
    answers = tmp_path / "answers.jsonl"
    proc = jigwright("answer", str(queue), "--out", str(answers), "--fallback", "none")
    assert proc.returncode == 0, proc.stderr
    records = {r["id"]: r for r in map(json.loads, answers.read_text().splitlines())}
    assert set(records) == {t["id"] for t in tasks}
    # the router is the small executor model and may send a question to none; every question it sends to the
    # finished tool must come back right
    # (measured 2026-12-02 on a clean clone: 2 of the 4 went to the tool, 2 to none)
    backed = [t for t in tasks if records[t["id"]]["status"] == "tool"]
    assert len(backed) >= 2, [records[t["id"]] for t in tasks]
    for t in backed:
        rec = records[t["id"]]
        assert rec["route"] == "container-codes" and rec["tool_backed"], rec
        code = rec["arguments"]["code"]
        assert int(rec["answer"]) == int(iso6346.calc_check_digit(code[:10])) == t["answer"], rec


def test_edit_can_check_against_a_family_file(tmp_path, sandbox):
    """A tool whose record lacks its held-out examples is checked against the family file given with --examples:
    lines asking a demo question are the drafting examples (with the demo's arguments), the rest held out."""
    with ToolStore(tmp_path / "store") as store:
        attempt = built_attempt(tmp_path, sandbox, store)
    work = H.work_from_tool(attempt, family_file(tmp_path / "again", with_arguments=0))
    assert [e.id for e in work.drafting] == ["d0", "d1", "d2"] and [e.id for e in work.held_out] == ["d3", "d4"]
    assert work.objects == [a for _, _, a in DUES[:3]] and work.schema_ == attempt.card.schema_
    other = tmp_path / "other.jsonl"
    other.write_text(json.dumps({"question": "Dues for the Ruff?", "answer": 5}) + "\n" +
                     json.dumps({"question": "Dues for the Stint?", "answer": 6}) + "\n")
    with pytest.raises(InputError, match="no line asks one of the usage card's demo questions"):
        H.work_from_tool(attempt, other)
