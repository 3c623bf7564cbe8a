"""Fault injection (issue 12): SIGKILL at random points, a full disk (a real small tmpfs when root can mount
one), a damaged tool store, a 50,000-character question, a lone surrogate, 200 tools, invalid bytes in both
file kinds and an edited question on resume. Control-flow cases use the scripted double (kill_target.py);
the paths that need the models run the real `jigwright` command with the default models (marker `models`)."""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import ROOT, need_models
from doubles import ScriptedModel
from runner.errors import OutputError
from runner.queue import AnswerRecord, AnswerWriter, QueueReader, RouteJournal, journal_path, read_answers
from runner.runloop import Engine, RunLoop, RunOptions, run
from bench.route_budget import generated_cards
from test_runloop import TOOLS, family_tasks, real_tools, scripted, store_real_tools, write_queue

JW = str(Path(sys.executable).with_name("jigwright"))
TARGET = str(Path(__file__).with_name("kill_target.py"))


def queue_of(n: int) -> list[dict]:
    return [{"id": f"t{i}", "question": f"Add {i} and {i + 1}." if i % 3 else
             (f"Shout w{i}." if i % 2 else f"Who is on watch at pier {i}?")} for i in range(n)]


def expected_answer(i: int):
    return 2 * i + 1 if i % 3 else (f"W{i}" if i % 2 else "kept")


def count_lines(path: Path) -> int:
    return len(path.read_bytes().splitlines()) if path.exists() else 0


def test_sigkill_at_random_points_over_twenty_runs_answers_every_id_exactly_once(tmp_path):
    rng = random.Random(20261202)
    n = 60
    q = write_queue(tmp_path / "q.jsonl", queue_of(n))
    out = tmp_path / "answers.jsonl"
    (tmp_path / "home").mkdir()  # the runs' own JIGWRIGHT_HOME, never the person's
    env = {**os.environ, "PYTHONPATH": str(ROOT), "JIGWRIGHT_HOME": str(tmp_path / "home")}
    killed = 0
    for attempt in range(20):
        mode = "group" if attempt % 2 == 0 else "plain"
        before = count_lines(out)
        proc = subprocess.Popen([sys.executable, TARGET, str(q), str(out), mode], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, env=env)
        # The kill follows the run's progress, not the clock (a fixed clock let a fast machine finish the queue
        # before the later runs started): let 0-2 records through, then kill somewhere in the next routing,
        # filling or writing, or in startup when none are let through.
        let_through = rng.choice([0, 1, 1, 2])
        deadline = time.monotonic() + 60
        while proc.poll() is None and count_lines(out) < before + let_through and time.monotonic() < deadline:
            time.sleep(0.01)
        time.sleep(rng.uniform(0.0, 0.25))
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            killed += 1
        proc.wait()
        # after every kill the file reads back as whole records (a cut last line is repaired on reading)
        read_answers(out)
    assert killed >= 15  # nearly every run was killed part-way
    proc = subprocess.run([sys.executable, TARGET, str(q), str(out), "group"], capture_output=True, text=True,
                          env=env, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    recs = [AnswerRecord.model_validate_json(line) for line in out.read_text().splitlines()]
    ids = [r.id for r in recs]
    assert sorted(ids) == sorted(f"t{i}" for i in range(n)), ids  # every id exactly once, in aggregate
    for r in recs:
        assert r.answer == expected_answer(int(r.id[1:])), r
    assert not journal_path(out).exists()


@pytest.fixture
def small_tmpfs(tmp_path):
    """A 16 KiB tmpfs (root only), unmounted afterwards; skipped where it cannot be mounted (the injected
    write error in test_reliability.py covers the same path everywhere)."""
    where = tmp_path / "small"
    where.mkdir()
    if os.geteuid() != 0 or subprocess.run(["mount", "-t", "tmpfs", "-o", "size=16k", "tmpfs", str(where)],
                                           capture_output=True).returncode != 0:
        pytest.skip("cannot mount a tmpfs here (needs root)")
    try:
        yield where
    finally:
        subprocess.run(["umount", str(where)], capture_output=True)


def test_a_full_disk_leaves_a_valid_answers_file_and_a_clear_error(tmp_path, small_tmpfs):
    from runner.sandbox import Sandbox

    q = write_queue(tmp_path / "q.jsonl", queue_of(200))
    out = small_tmpfs / "answers.jsonl"
    with Sandbox(pool_size=1) as sandbox:
        with pytest.raises(OutputError, match=r"answers\.jsonl: cannot write the answer of 't\d+' \(No space left "
                                              r"on device\); the \d+ records written before it are kept"):
            with AnswerWriter(out) as writer:
                # answered line by line, so the disk fills part-way through the records
                engine = Engine(TOOLS, scripted(direct="Answer: kept"), sandbox,
                                RunOptions(fallback="executor", group=False))
                loop = RunLoop(engine, writer, read_answers(out),
                               journal=RouteJournal(journal_path(out), engine.router_key))
                run(loop, QueueReader(q), follow=False, out=str(out), load_cpu_seconds=lambda: 0.0)
    data = out.read_bytes()
    assert data.endswith(b"\n")
    recs = [AnswerRecord.model_validate_json(line) for line in data.splitlines()]  # every line a whole record
    assert 5 < len(recs) < 200 and len({r.id for r in recs}) == len(recs)


# ---- with the real models --------------------------------------------------------------------------------------

def jw(*args: str, timeout: int = 600, **kw) -> subprocess.CompletedProcess:
    return subprocess.run([JW, *args], capture_output=True, text=True, timeout=timeout,
                          env={**os.environ, "COLUMNS": "80", "JIGWRIGHT_THREADS": "1"}, **kw)


@pytest.mark.models
def test_real_run_with_odd_inputs_writes_a_record_for_each_and_goes_on(tmp_home, tmp_path):
    need_models()
    store_real_tools()
    dep = json.loads((ROOT / "samples" / "departures" / "test.jsonl").read_text().splitlines()[2])
    q = tmp_path / "q.jsonl"
    q.write_bytes(b"".join([
        json.dumps({"id": "huge", "question": "The Gannet sails every 7 minutes. " * 1500}).encode() + b"\n",
        b'{"id": "surrogate", "question": "When does the \\ud800 leave?"}\n',
        b'{"id": "bytes", "question": "When does the Ga\xffnnet leave?"}\n',
        json.dumps({"id": "dep", "question": dep["question"]}).encode() + b"\n",
    ]))
    assert len(json.loads(q.read_bytes().splitlines()[0])["question"]) > 50_000
    out = tmp_path / "answers.jsonl"
    proc = jw("answer", str(q), "--out", str(out), "--fallback", "none", "--json")
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "Traceback" not in proc.stderr
    recs = {r["id"]: r for r in map(json.loads, out.read_text().splitlines())}
    assert recs["huge"]["error_kind"] == "too_long" and "4,096-token context" in recs["huge"]["error"]
    assert recs["huge"]["tokens"]["prompt"] == 0  # no model call was made for it
    assert recs["surrogate"]["error_kind"] == "input" and "lone surrogate" in recs["surrogate"]["error"]
    assert recs["line-3"]["error"].startswith("not valid UTF-8: byte 0xff")
    assert recs["dep"]["status"] == "tool" and recs["dep"]["answer"] == dep["answer"]
    report = json.loads(proc.stdout)
    assert report["error_kinds"] == {"input": 2, "too_long": 1} and report["by_tool"] == 1


@pytest.mark.models
def test_real_router_with_two_hundred_tools_stays_inside_the_context_and_routes_as_well(tmp_home):
    """The demo queue routed by the real executor with two real tools among 198 generated cards: every prompt
    (measured with the model's own chat template) fits the 4,096-token context, every question of the two
    tools' families reaches its tool, and over all 24 questions routing is about as right as with the two
    tools alone (within two; the misses are other families' questions routed to a tool, which the run loop's
    fit check then sends to the fallback). bench/route_budget.py prints the figures."""
    need_models()
    from runner.llm import LocalModel
    from runner import models, settings
    from runner.route import fit_prompt, route
    from runner.tools import slug

    executor = LocalModel(models.for_role(settings.load_registry(), "executor"), n_threads=1)
    tools = real_tools()
    many = generated_cards(198) + [t.card for t in tools]
    queue = [json.loads(line) for line in (ROOT / "samples" / "queue.jsonl").read_text().splitlines()]
    expected = {e["id"]: e for e in map(json.loads, (ROOT / "samples" / "queue_expected.jsonl").read_text().splitlines())}
    right = {"many": 0, "two": 0}
    for q in queue:
        family = expected[q["id"]]["family"]
        want = slug(family) if family and slug(family) in {t.name for t in tools} else "none"
        fitted = fit_prompt(executor, many, q["question"])
        assert fitted.shortlisted and fitted.tokens is not None
        assert fitted.tokens + 40 <= executor.n_ctx
        r = route(executor, many, q["question"])
        assert r.prompt_tokens == fitted.tokens and len(r.shortlist) <= 8
        if want != "none":
            assert r.tool == want, (q, r)
        right["many"] += r.tool == want
    for q in queue:  # the two tools alone, after the others so their shared prompt prefix stays cached
        family = expected[q["id"]]["family"]
        want = slug(family) if family and slug(family) in {t.name for t in tools} else "none"
        right["two"] += route(executor, [t.card for t in tools], q["question"]).tool == want
    assert right["many"] >= right["two"] - 2, right


@pytest.mark.models
def test_real_grouped_run_killed_while_routing_keeps_its_route_decisions(tmp_home, tmp_path):
    need_models()
    store_real_tools()
    tasks = family_tasks(7, 10)
    q = write_queue(tmp_path / "q.jsonl", [{"id": t["id"], "question": t["question"]} for t in tasks])
    out = tmp_path / "answers.jsonl"
    journal = journal_path(out)
    cmd = [JW, "answer", str(q), "--out", str(out), "--fallback", "none", "--json"]
    env = {**os.environ, "JIGWRIGHT_THREADS": "1"}
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    deadline = time.time() + 300
    while time.time() < deadline and proc.poll() is None:
        if journal.exists() and journal.read_text().count("\n") >= 2:
            break
        time.sleep(0.05)
    assert proc.poll() is None, "the run ended before it could be killed"
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    kept = journal.read_text().count("\n")
    assert 2 <= kept < len(tasks) and not out.read_text().strip()  # killed while routing: no record yet
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=600, env=env)
    assert proc.returncode == 0, proc.stderr[-2000:]
    report = json.loads(proc.stdout)
    assert report["routes_reused"] == kept and report["tasks"] == len(tasks)
    recs = {r["id"]: r for r in map(json.loads, out.read_text().splitlines())}
    assert sorted(recs) == sorted(t["id"] for t in tasks) and not journal.exists()
    right = sum(recs[t["id"]]["answer"] == t["answer"] for t in tasks)
    assert right >= len(tasks) - 1  # the small executor may misfill one


@pytest.mark.models
def test_real_fallback_answers_with_a_damaged_store_and_the_cli_names_bad_family_bytes(tmp_home, tmp_path):
    need_models()
    from runner.settings import store_dir

    folder = store_dir()
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "cache.db").write_bytes(b"\x00not sqlite\x00" * 512)
    q = write_queue(tmp_path / "q.jsonl", [{"id": "a", "question": "How many days are there in a week?"}])
    proc = jw("answer", str(q), "--out", str(tmp_path / "a.jsonl"), "--fallback", "executor", "--json")
    assert proc.returncode == 0, proc.stderr[-2000:]
    said = " ".join(proc.stderr.split())
    assert "cannot be read" in said and f"mv {folder}" in said
    rec = json.loads((tmp_path / "a.jsonl").read_text())
    assert rec["status"] == "fallback" and rec["answer"]
    proc = jw("answer", str(q), "--out", str(tmp_path / "b.jsonl"), "--fallback", "none")
    assert proc.returncode == 16 and "Traceback" not in proc.stderr
    fam = tmp_path / "fam.jsonl"
    fam.write_bytes(b'{"question": "a?", "answer": 1}\n{"question": "b\xfe?", "answer": 2}\n')
    proc = jw("build", str(fam))
    assert proc.returncode == 9 and f"{fam}:2: not valid UTF-8: byte 0xfe" in " ".join(proc.stderr.split())
