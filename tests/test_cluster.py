"""Many workers (runner/cluster/) on a local Ray instance of 2 CPUs: the same answers as the single-process run
loop (real models), grouped by tool, resume by content through the workers, a worker killed mid-run loses and
duplicates nothing, a task that kills every worker gets an error record, a driver killed with SIGKILL or
stopped with Ctrl-C resumes on rerun with its journalled routes, a worker without the model file names its
node and the fetch command, several families built at once, and the run loop without Ray installed. Control
flow uses the scripted model double in the workers (tests/cluster_doubles.py)."""

from __future__ import annotations

import functools
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from runner.errors import ClusterError, ModelMissingError
from runner.queue import AnswerRecord
from runner.runloop import RunOptions
from conftest import REAL_HOME, ROOT, need_models
from test_runloop import TOOLS, _queue_of, by_id, real_queue, real_tools, write_queue

ray = pytest.importorskip("ray", reason="the cluster extra is not installed: pip install 'jigwright[cluster]'")

from runner.cluster import ClusterOptions, answer_on_workers  # noqa: E402
from cluster_doubles import scripted_setup  # noqa: E402

TESTS = Path(__file__).resolve().parent


# The faults below are injected in the scripted executor's fill call, and the module's workers share one pattern
# book (their JIGWRIGHT_HOME is fixed when Ray starts): with patterns on, a question learned by an earlier test
# would be filled with no model call and the fault would never fire.
NO_PATTERNS = RunOptions(fallback="executor", patterns=False)


def two_workers(**kw) -> ClusterOptions:
    return ClusterOptions(workers=2, **kw)


def records(path: Path) -> list[AnswerRecord]:
    return [AnswerRecord.model_validate_json(line) for line in path.read_text().splitlines()]


def test_scripted_queue_is_answered_once_per_id_by_both_workers(local_ray, tmp_path):
    q = write_queue(tmp_path / "q.jsonl", _queue_of(8) + ["not json", {"id": "t1", "question": "Add 5 and 6."}])
    out = tmp_path / "out.jsonl"
    report = answer_on_workers(str(q), out, RunOptions(fallback="executor"), two_workers(), tools=TOOLS,
                               setup=functools.partial(scripted_setup, pause=0.05))
    recs = records(out)
    answered = [r for r in recs if r.status != "error"]
    assert sorted(r.id for r in answered) == sorted(f"t{i}" for i in range(8))
    assert {r.id for r in recs if r.status == "error"} == {"line-9", "t1"}  # bad JSON, duplicate id
    for r in answered:  # the scripted tools: t odd adds i and i+1, t even shouts w{i}
        i = int(r.id[1:])
        assert r.answer == (2 * i + 1 if i % 2 else f"W{i}"), r
        assert r.node and r.worker and r.route in ("add", "shout")
    assert len({r.worker for r in answered}) == 2  # both workers answered
    # grouped by tool: a worker answers one tool's tasks in a row and never comes back to a tool it has left
    # (it may help with another tool once its own has none left); records are written as they come back
    for w in {r.worker for r in answered}:
        runs = [r.route for r in answered if r.worker == w]
        switches = [a for a, b in zip(runs, runs[1:]) if a != b]
        assert len(switches) <= 1, runs
    assert report.tasks == 10 and report.by_tool == 8 and report.errors == 2
    # a rerun finds everything answered
    again = answer_on_workers(str(q), out, RunOptions(fallback="executor"), two_workers(), tools=TOOLS,
                              setup=scripted_setup)
    assert (again.tasks, again.skipped) == (0, 10) and len(records(out)) == 10
    # resume is by content: an edited question is answered again, its new record is the id's answer
    lines = q.read_text().splitlines()
    lines[2] = json.dumps({"id": "t2", "question": "Shout gull."})
    q.write_text("\n".join(lines) + "\n")
    edited = answer_on_workers(str(q), out, RunOptions(fallback="executor"), two_workers(), tools=TOOLS,
                               setup=scripted_setup)
    assert (edited.tasks, edited.skipped, edited.superseded) == (1, 9, 1)
    newest = [r for r in records(out) if r.id == "t2"][-1]
    assert newest.answer == "GULL" and newest.worker


def test_a_worker_killed_mid_run_loses_and_duplicates_nothing(local_ray, tmp_path):
    q = write_queue(tmp_path / "q.jsonl", _queue_of(8))
    out = tmp_path / "out.jsonl"
    marker = tmp_path / "killed"
    report = answer_on_workers(str(q), out, NO_PATTERNS, two_workers(), tools=TOOLS,
                               setup=functools.partial(scripted_setup, pause=0.05, kill_on="Add 3 and",
                                                       marker=str(marker)))
    assert marker.exists()  # a worker really died, while filling t3's arguments
    recs = records(out)
    assert sorted(r.id for r in recs) == sorted(f"t{i}" for i in range(8))  # each id once
    t3 = next(r for r in recs if r.id == "t3")
    assert t3.status == "tool" and t3.answer == 7 and t3.worker
    assert report.tasks == 8 and report.by_tool == 8
    # the survivor answered t3 and everything after the death
    dead = int(marker.read_text())
    assert all(r.status == "tool" for r in recs) and dead > 0


def test_a_task_that_kills_every_worker_gets_an_error_record(local_ray, tmp_path):
    q = write_queue(tmp_path / "q.jsonl", [{"id": "poison", "question": "Add 1 and 2."}])
    out = tmp_path / "out.jsonl"
    report = answer_on_workers(str(q), out, NO_PATTERNS, two_workers(), tools=TOOLS,
                               setup=functools.partial(scripted_setup, kill_on="Add 1 and"))
    (rec,) = records(out)
    assert rec.id == "poison" and rec.status == "error" and "died 2 times" in rec.error
    assert rec.error_kind == "tool"  # it killed them while its arguments were being filled
    assert report.tasks == 1


def own_home_env(tmp_path: Path) -> dict[str, str]:
    """The environment for a run in a subprocess: a JIGWRIGHT_HOME of its own under tmp_path, whatever an earlier
    test or fixture set."""
    home = tmp_path / "home"
    home.mkdir()
    return {**os.environ, "JIGWRIGHT_HOME": str(home)}


def _descendants(pid: int) -> set[int]:
    """Process ids started (directly or not) by `pid`, from /proc."""
    children: dict[int, list[int]] = {}
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                ppid = int((d / "stat").read_text().rsplit(")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
            children.setdefault(ppid, []).append(int(d.name))
    out, todo = set(), [pid]
    while todo:
        for c in children.get(todo.pop(), []):
            if c not in out:
                out.add(c)
                todo.append(c)
    return out


def _alive(pids: set[int]) -> set[int]:
    alive = set()
    for p in pids:
        try:
            state = Path(f"/proc/{p}/stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state != "Z":
            alive.add(p)
    return alive


def test_a_driver_killed_with_sigkill_resumes_on_rerun(tmp_path):
    tasks = _queue_of(12)
    q = write_queue(tmp_path / "q.jsonl", tasks)
    out = tmp_path / "out.jsonl"
    cmd = [sys.executable, str(TESTS / "cluster_target.py"), str(q), str(out)]
    env = own_home_env(tmp_path)
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, env=env)
    started: set[int] = set()
    try:
        deadline = time.time() + 240
        while time.time() < deadline and proc.poll() is None:
            started |= _descendants(proc.pid)
            if out.exists() and out.read_text().count("\n") >= 2:
                break
            time.sleep(0.1)
        assert proc.poll() is None, "the run ended before it could be killed"
        started |= _descendants(proc.pid)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        first = [AnswerRecord.model_validate_json(l) for l in out.read_text().splitlines() if l.endswith("}")]
        assert 2 <= len(first) < len(tasks)
        # Ray's processes share the driver's fate: none is left running (its helper agent takes longest: it
        # checks its parent every few seconds and gives up on the dead head only after its own timeouts)
        deadline = time.time() + 120
        while _alive(started) and time.time() < deadline:
            time.sleep(0.5)
        print(f"Ray's processes were gone {time.time() - deadline + 120:.0f} s after the kill")
        assert not _alive(started), [Path(f"/proc/{p}/cmdline").read_bytes()[:40] for p in _alive(started)]
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=300, env=env)
        assert done.returncode == 0, done.stderr[-2000:]
        # answered, skipped, not interrupted, and every route taken from the killed run's journal
        rest = str(len(tasks) - len(first))
        assert done.stdout.split() == [rest, str(len(first)), "0", rest], done.stderr[-2000:]
        recs = records(out)
        assert sorted(r.id for r in recs) == sorted(t["id"] for t in tasks)
    finally:
        for p in _alive(started):  # only processes this test started
            os.kill(p, signal.SIGKILL)


def test_a_worker_without_the_model_file_names_its_node_and_the_fetch_command(local_ray, tmp_path):
    bare = tmp_path / "bare-node"
    bare.mkdir()
    q = write_queue(tmp_path / "q.jsonl", _queue_of(2))
    out = tmp_path / "out.jsonl"
    with pytest.raises(ModelMissingError) as caught:
        answer_on_workers(str(q), out, RunOptions(fallback="executor"),
                          two_workers(worker_env={"JIGWRIGHT_HOME": str(bare)}), tools=TOOLS)
    message = str(caught.value)
    assert f"node {os.uname().nodename}:" in message and "jigwright models fetch" in message
    assert str(bare) in message and "\n" not in message
    assert not out.exists() or out.read_text() == ""  # nothing answered, nothing lost


def test_without_ray_the_run_loop_imports_and_workers_name_the_extra(tmp_path):
    """A `ray` that cannot be imported (the extra not installed) stands first on the path."""
    block = tmp_path / "noray"
    block.mkdir()
    (block / "ray.py").write_text("raise ImportError('ray is not installed here')\n")
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(block), str(ROOT)])}
    probe = subprocess.run([sys.executable, "-c", "import runner.cli, runner.runloop, runner.cluster, sys; "
                            "print('ray' in sys.modules and sys.modules['ray'] is not None)"],
                           capture_output=True, text=True, env=env, timeout=120)
    assert probe.returncode == 0 and probe.stdout.strip() == "False", probe.stderr
    q = write_queue(tmp_path / "q.jsonl", _queue_of(2))
    proc = subprocess.run([sys.executable, "-c", "from runner.cli import main; main()", "answer", str(q),
                           "--workers", "2"],
                          capture_output=True, text=True, env=env, timeout=120)
    assert proc.returncode == ClusterError.exit_code, proc.stderr
    assert "pip install 'jigwright[cluster]'" in proc.stderr
    assert not (tmp_path / "q.answers.jsonl").exists() or (tmp_path / "q.answers.jsonl").read_text() == ""


@pytest.mark.models
def test_two_workers_answer_like_one_process(local_ray, tmp_home, tmp_path):
    """The real default executor, on the same queue: same routes, arguments and answers from the run loop in
    one process and from two workers."""
    need_models()
    from runner.runloop import model_setup, run_queue

    rows = real_queue()
    q = write_queue(tmp_path / "q.jsonl", [{"id": r["id"], "question": r["question"]} for r in rows])
    options = RunOptions(fallback="executor")
    one, two = tmp_path / "one.jsonl", tmp_path / "two.jsonl"
    run_queue(str(q), one, options, model_setup(real_tools(), options, threads=1))
    report = answer_on_workers(str(q), two, options, two_workers(worker_env={"JIGWRIGHT_HOME": str(tmp_home)}),
                               tools=real_tools())
    a, b = by_id([r.model_dump() for r in records(one)]), by_id([r.model_dump() for r in records(two)])
    assert sorted(a) == sorted(b) == sorted(r["id"] for r in rows)
    for r in rows:
        x, y = a[r["id"]], b[r["id"]]
        assert (x["route"], x["arguments"], x["answer"], x["status"]) == \
               (y["route"], y["arguments"], y["answer"], y["status"]), (x, y)
        assert x["node"] is None and y["node"] == os.uname().nodename and y["worker"]
    assert len({b[r["id"]]["worker"] for r in rows}) == 2
    assert report.by_tool == 4 and report.by_fallback == 1


def test_several_families_build_at_once_one_per_worker(local_ray, bare_home, tmp_path):
    from runner import build as B
    from runner.cluster import build_on_workers
    from runner.store import ToolStore
    from cluster_doubles import fee_models
    from test_build import FEES

    families = []
    for name in ("slipway-fees", "ramp-fees", "crane-fees"):
        f = tmp_path / f"{name}.jsonl"
        f.write_text("".join(json.dumps({"id": f"f{i}", "question": q, "answer": a}) + "\n"
                             for i, (q, a, _) in enumerate(FEES)))
        families.append(B.load_family(f, name=name, description="the fee of one boat"))
    settings = B.BuildSettings(draft_samples=1, shape_samples=2)
    outcomes = build_on_workers(families, settings, two_workers(), models=fee_models, shas=("b" * 64, "e" * 64))
    assert [f.name for f, _, _ in outcomes] == ["slipway-fees", "ramp-fees", "crane-fees"]
    assert all(tool is not None and tool.verified and not report.cache_hit for _, tool, report in outcomes)
    with ToolStore() as store:  # the driver kept them
        assert sorted(store.names()) == ["crane-fees", "ramp-fees", "slipway-fees"]
        assert store.get("ramp-fees").held_out_score == 1.0
    again = build_on_workers(families, settings, two_workers(), models=fee_models, shas=("b" * 64, "e" * 64))
    assert all(report.cache_hit for _, _, report in again)  # the workers saw the driver's store


def test_ctrl_c_finishes_the_tasks_in_hand_and_a_rerun_completes(tmp_path):
    """Ctrl-C at a terminal reaches the whole process group, Ray's processes included."""
    tasks = _queue_of(12)
    q = write_queue(tmp_path / "q.jsonl", tasks)
    out = tmp_path / "out.jsonl"
    cmd = [sys.executable, str(TESTS / "cluster_target.py"), str(q), str(out)]
    env = own_home_env(tmp_path)
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, start_new_session=True,
                            env=env)
    try:
        deadline = time.time() + 240
        while time.time() < deadline and proc.poll() is None:
            if out.exists() and out.read_text().count("\n") >= 2:
                break
            time.sleep(0.1)
        os.killpg(proc.pid, signal.SIGINT)
        stdout, _ = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    answered, skipped, interrupted, _ = map(int, stdout.split())
    first = records(out)
    assert interrupted == 1 and answered == len(first) < len(tasks) and skipped == 0
    assert all(r.status == "tool" for r in first)  # the tasks in hand were finished, not cut off
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=300, env=env)
    rest = str(len(tasks) - len(first))  # the rest answered, with the routes of the interrupted run
    assert done.stdout.split() == [rest, str(len(first)), "0", rest], done.stderr[-2000:]
    assert sorted(r.id for r in records(out)) == sorted(t["id"] for t in tasks)
