"""Answering a queue on many workers (runner/cluster.py) with a local Ray instance of 2 CPUs: the same answers
as the single-process run loop (real models), a worker killed mid-run loses and duplicates nothing, a driver
killed with SIGKILL resumes on rerun, a worker without the model file names its node and the fetch command,
and the run loop without Ray installed."""

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
from conftest import ROOT, need_models
from test_runloop import TOOLS, _queue_of, by_id, real_queue, real_tools, write_queue

ray = pytest.importorskip("ray", reason="the cluster extra is not installed: pip install 'jigwright[cluster]'")

from runner.cluster import ClusterOptions, answer_on_workers  # noqa: E402
from cluster_doubles import scripted_setup  # noqa: E402

TESTS = Path(__file__).resolve().parent


@pytest.fixture(scope="module")
def local_ray():
    """One local Ray instance for the module: 2 CPUs, no dashboard; workers see the project and this folder."""
    old = os.environ.get("PYTHONPATH")
    os.environ["PYTHONPATH"] = os.pathsep.join([str(ROOT), str(TESTS)] + ([old] if old else []))
    ray.init(address="local", num_cpus=2, include_dashboard=False, object_store_memory=100 * 1024 * 1024,
             logging_level="WARNING", log_to_driver=False)
    yield ray
    ray.shutdown()
    if old is None:
        os.environ.pop("PYTHONPATH", None)
    else:
        os.environ["PYTHONPATH"] = old


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
    # grouped by tool: each worker answered one tool's tasks only (4 of each, one tool each)
    tools_of = {w: {r.route for r in answered if r.worker == w} for w in {r.worker for r in answered}}
    assert all(len(v) == 1 for v in tools_of.values()), tools_of
    assert report.tasks == 10 and report.by_tool == 8 and report.errors == 2
    # a rerun finds everything answered
    again = answer_on_workers(str(q), out, RunOptions(fallback="executor"), two_workers(), tools=TOOLS,
                              setup=scripted_setup)
    assert (again.tasks, again.skipped) == (0, 10) and len(records(out)) == 10
