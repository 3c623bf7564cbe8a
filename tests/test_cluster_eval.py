"""`jigwright eval --workers N` (runner/cluster/evals.py) on a local Ray instance of 2 CPUs: the same answers
and scores as the eval in one process (scripted models, and once the real default executor), a worker killed
mid-eval has its job done by the other and nothing counted twice, an interrupted eval resumes computing
exactly what one process would, and a tool built on a worker lands in this machine's tool store. Control flow
uses the scripted doubles of test_evaluate in the workers (tests/cluster_doubles.py)."""

from __future__ import annotations

import functools
import json
from collections import Counter
from pathlib import Path

import diskcache
import pytest

from runner import build as B
from runner import evaluate as E
from runner.errors import ClusterError
from runner.sandbox import Sandbox
from runner.store import ToolStore
from conftest import ROOT, need_models
from test_evaluate import BSHA, ESHA, make_family, put_tool

ray = pytest.importorskip("ray", reason="the cluster extra is not installed: pip install 'jigwright[cluster]'")

from runner.cluster import ClusterOptions, eval_on_workers  # noqa: E402
from runner.cluster.evals import CHUNK  # noqa: E402
from cluster_doubles import eval_models  # noqa: E402

ALL_METHODS = list(E.METHODS)


@pytest.fixture(scope="module")
def sandbox():
    with Sandbox(pool_size=1) as sb:
        yield sb


def families(tmp_path: Path, store: ToolStore) -> list[Path]:
    dirs = [make_family(tmp_path / "fams", "fees"), make_family(tmp_path / "fams", "dues")]
    for d in dirs:
        put_tool(store, d)
    return dirs


def one_process(tmp_path: Path, dirs: list[Path], sandbox, methods: list[str], cache: str, log: Path | None = None,
                n: int = 6) -> E.EvalReport:
    builder, executor = eval_models(str(log) if log else None)
    setup = E.EvalSetup(builder=builder, executor=executor, builder_sha=BSHA, executor_sha=ESHA)
    with ToolStore() as store:
        return E.evaluate(E.load_families(dirs), setup, methods=methods, n=n, seed=0,
                          out_dir=tmp_path / f"{cache}-out", cache_dir=tmp_path / cache, sandbox=sandbox, store=store)


def on_workers(tmp_path: Path, dirs: list[Path], methods: list[str], cache: str, n: int = 6,
               **script) -> E.EvalReport:
    return eval_on_workers(E.load_families(dirs), ClusterOptions(workers=2), methods=methods, n=n, seed=0,
                           out_dir=tmp_path / f"{cache}-out", cache_dir=tmp_path / cache,
                           models=functools.partial(eval_models, **script), shas=(BSHA, ESHA))


def outcome(report: E.EvalReport) -> list:
    """What must not depend on where the tasks ran: every row's score and every task's answer (CPU and the
    prompt cache's share do)."""
    return [(r.family, r.method, r.model, r.tasks, r.correct, r.accuracy, r.ci_low, r.ci_high, r.unanswered,
             r.build_cpu, r.note,
             [(s.id, s.answered, s.answer, s.correct, s.error, s.arguments, s.fill, s.reply) for s in r.results])
            for r in report.rows]


def calls(log: Path) -> list[tuple[str, str, str, str]]:
    return [tuple(line.split("\t", 3)) for line in log.read_text().splitlines()] if log.exists() else []


def task_results(cache_dir: Path) -> int:
    with diskcache.Cache(str(cache_dir)) as c:
        return sum(1 for k in c.iterkeys() if str(k).startswith("task:"))


def test_two_workers_evaluate_like_one_process(local_ray, bare_home, tmp_path, sandbox):
    with ToolStore() as store:
        dirs = families(tmp_path, store)
    one = one_process(tmp_path, dirs, sandbox, ALL_METHODS, "one")
    log = tmp_path / "calls.log"
    two = on_workers(tmp_path, dirs, ALL_METHODS, "two", log=str(log))
    assert outcome(two) == outcome(one)
    # the scripted case has every kind of result: right, wrong, unanswered, and a fill that fell to the schema
    split = next(r for r in two.rows if r.method == "split" and r.family == "fees")
    assert (split.correct, split.unanswered) == (4, 1)
    assert any("schema" in " ".join(s.fill) for s in split.results)
    assert [b.model_dump() for b in two.builds] == [b.model_dump() for b in one.builds]
    assert (two.computed, two.reused) == (one.computed, one.reused) == (2 * 4 * 6, 0)
    assert len({pid for pid, *_ in calls(log)}) == 2  # both workers answered
    assert json.loads((tmp_path / "two-out" / "eval.json").read_text())["families"] == ["fees", "dues"]
    # a rerun finds every result in the cache and sends nothing to the workers
    before = len(calls(log))
    again = on_workers(tmp_path, dirs, ALL_METHODS, "two", log=str(log))
    assert (again.computed, again.reused) == (0, 48) and len(calls(log)) == before
    assert outcome(again) == outcome(one)


def test_a_killed_worker_has_its_job_retried_and_nothing_counted_twice(local_ray, bare_home, tmp_path, sandbox):
    with ToolStore() as store:
        dirs = families(tmp_path, store)
    methods = ["split", "executor-direct"]
    one = one_process(tmp_path, dirs, sandbox, methods, "one")
    log, marker = tmp_path / "calls.log", tmp_path / "killed"
    two = on_workers(tmp_path, dirs, methods, "two", log=str(log), kill_on="Brant", marker=str(marker))
    assert marker.exists()  # a worker died answering t2 directly
    dead = marker.read_text()
    asked = [(pid, q) for pid, model, kind, q in calls(log) if kind == "direct" and "Brant" in q]
    assert len(asked) == 3 and sum(pid == dead for pid, _ in asked) == 1  # t2 of each family; once more after the death
    assert outcome(two) == outcome(one)
    assert two.computed == one.computed == 2 * 2 * 6 and two.reused == 0
    assert task_results(tmp_path / "two") == two.computed  # one stored result per task and method


def test_an_interrupted_eval_resumes_computing_what_one_process_would(local_ray, bare_home, tmp_path, sandbox):
    with ToolStore() as store:
        dirs = families(tmp_path, store)
    methods = ["split", "executor-direct", "builder-steps"]
    n = CHUNK + 1  # two jobs per family and direct method, the second with the last task
    last = E.select_tasks(E.load_family_dir(dirs[0]).tasks, n, 0)[-1]
    marker = tmp_path / "failed"
    with pytest.raises(ClusterError, match="RuntimeError: simulated interruption"):  # a direct answer of `last`
        on_workers(tmp_path, dirs, methods, "cache", n=n, fail_on=last.question.split()[1], marker=str(marker))
    stored = task_results(tmp_path / "cache")
    assert 0 < stored < 2 * 3 * 6
    # what one process would compute from this cache (a copy of it), against what the workers compute
    import shutil

    shutil.copytree(tmp_path / "cache", tmp_path / "copy")
    one_log, two_log = tmp_path / "one.log", tmp_path / "two.log"
    one = one_process(tmp_path, dirs, sandbox, methods, "copy", log=one_log, n=n)
    two = on_workers(tmp_path, dirs, methods, "cache", n=n, log=str(two_log))
    assert (two.computed, two.reused) == (one.computed, one.reused) == (2 * 3 * 6 - stored, stored)
    assert Counter(c[1:] for c in calls(two_log)) == Counter(c[1:] for c in calls(one_log))
    assert outcome(two) == outcome(one) == outcome(one_process(tmp_path, dirs, sandbox, methods, "clean", n=n))


def test_a_missing_tool_is_built_on_a_worker_and_kept_here(local_ray, bare_home, tmp_path):
    """No tool in the store: the split's build runs on a worker (the toy fee builder of test_build) and the
    tool comes back into this machine's tool store; the rerun takes it from there."""
    from cluster_doubles import fee_models
    from test_build import FEES

    d = tmp_path / "fams" / "fees"
    d.mkdir(parents=True)
    lines = [json.dumps({"id": f"f{i}", "question": q, "answer": a}) for i, (q, a, _) in enumerate(FEES)]
    (d / "examples.jsonl").write_text("\n".join(lines) + "\n")
    (d / "test.jsonl").write_text("\n".join(lines[:3]) + "\n")
    (d / "family.toml").write_text('name = "fees"\ndescription = "the fee of one boat"\n')
    report = eval_on_workers(E.load_families([d]), ClusterOptions(workers=2), methods=["split"], n=3,
                             out_dir=tmp_path / "out", cache_dir=tmp_path / "cache", models=fee_models,
                             shas=(BSHA, ESHA))
    (info,) = report.builds
    assert info.tool == "fees" and info.verified and not info.cache_hit and info.cpu_seconds > 0
    with ToolStore() as store:
        assert store.by_key(info.key) is not None
    again = eval_on_workers(E.load_families([d]), ClusterOptions(workers=2), methods=["split"], n=3,
                            out_dir=tmp_path / "out", cache_dir=tmp_path / "cache", models=fee_models,
                            shas=(BSHA, ESHA))
    assert again.builds[0].cache_hit and (again.computed, again.reused) == (0, 3)
    assert outcome(again) == outcome(report)


@pytest.mark.models
def test_real_executor_on_two_workers_evaluates_like_one_process(local_ray, tmp_home, tmp_path):
    """The real default models on three departures tasks, split (a hand-written tool standing for the built
    one) and executor-direct: the same answers and scores from one process and from two workers."""
    need_models()
    from runner import models, settings
    from test_runloop import real_tools

    fam_dir = ROOT / "samples" / "departures"
    family = B.load_family(fam_dir / "examples.jsonl")
    reg = settings.load_registry()
    shas = (models.for_role(reg, "builder").sha256, models.for_role(reg, "executor").sha256)
    key = B.build_key(family, *shas, B.BuildSettings())
    tool = next(t for t in real_tools() if t.name == "departures")
    report = B.BuildReport(family=family.name, tool=tool.name, key=key, verified=True, held_out_score=1.0,
                           held_out=3, strategy="direct")
    with ToolStore() as store:
        store.put(tool.model_copy(update={"key": key, "verified": True, "report": report.model_dump()}))
    methods = ["split", "executor-direct"]
    fams = E.load_families([fam_dir])
    one = E.evaluate(fams, E.local_setup(), methods=methods, n=3, out_dir=tmp_path / "one-out",
                     cache_dir=tmp_path / "one")
    two = eval_on_workers(fams, ClusterOptions(workers=2, worker_env={"JIGWRIGHT_HOME": str(tmp_home)}),
                          methods=methods, n=3, out_dir=tmp_path / "two-out", cache_dir=tmp_path / "two")
    assert outcome(two) == outcome(one)
    assert two.computed == one.computed == 6 and two.builds[0].cache_hit
    assert sum(r.correct for r in two.rows) >= 1  # the models really answered (not a row of failures)
