"""`jigwright eval FAMILY_DIR… --workers N`: the eval with its builds and tasks done by workers.

The driver (this process) selects the tasks (the same seed and n), owns the result cache and the tool store,
and writes the outputs; the workers hold the models. First the split's builds, one per worker at a time under
the build command's reuse rules (builds.py): the tools come back by value and go into the driver's tool
store. Then the tasks, in jobs of one family and one method, so a worker keeps its prompt cache warm: a
direct method's missing tasks in runs of CHUNK (a worker keeps to one family and method while it has runs of
it), a family's split in one job (its fills start free and a miss sends the later ones to the schema, so the
order is part of the result). Only jobs with a result missing from the driver's cache are sent, each with the
cached results it may reuse, so the workers compute exactly what one process would; each job's results are
cached as it comes back, so an interrupted eval resumes. A worker that dies has its job sent to another."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..execute import FREE_THEN_SCHEMA
from ..evaluate import (DIRECT, EvalReport, EvalSetup, EvalTask, Evaluator, FamilyDir, MethodRow, Progress,
                        ResultCache, TaskResult, _build_settings, build_info, finish_report, known_no_build,
                        method_row, select_tasks)
from ..tools import Tool
from .builds import BuildWorker, MakeModels, model_shas, run_builds
from .pool import ClusterOptions, Job, farm, import_ray, start_workers

# Direct tasks per job: few enough that Ctrl-C or a dead worker costs little, enough to keep a prompt cache warm.
CHUNK = 5


@dataclass
class EvalJob:
    """Some tasks of one family under one method, with the driver's cached results the worker may reuse."""

    family: FamilyDir
    method: str
    tasks: list[EvalTask]
    first: int  # index of tasks[0] among the family's selected tasks
    tool: Tool | None = None
    hits: dict[str, TaskResult] | None = None

    @property
    def label(self) -> str:
        a, b = self.first + 1, self.first + len(self.tasks)
        where = "" if self.method == "split" else f" task {a}" if a == b else f" tasks {a}-{b}"
        return f"{self.family.name[:24]} · {self.method}{where}"


class HandedCache:
    """The result cache as a worker sees it during one job: the driver's results it may reuse, and the ones
    it computes (sent back; the driver stores them)."""

    def __init__(self, hits: dict[str, TaskResult] | None):
        self.hits = dict(hits or {})
        self.new: dict[str, TaskResult] = {}

    def get(self, key: str) -> TaskResult | None:
        return self.new.get(key) or self.hits.get(key)

    def put(self, key: str, result: TaskResult) -> None:
        self.new[key] = result


class EvalWorker(BuildWorker):
    """One eval worker: a build worker (builder and executor, loaded on first use) that also answers eval
    tasks, through the single-process Evaluator with the job's handed cache; one sandbox pool for the split."""

    def __init__(self, builder_name: str | None = None, executor_name: str | None = None, threads: int = 1,
                 verbose: bool = False, models: MakeModels | None = None, shas: tuple[str, str] = ("", ""),
                 roles: tuple[str, ...] = ("builder", "executor"), *, env: dict[str, str] | None = None):
        super().__init__(builder_name, executor_name, threads, verbose, models, env=env)
        self.shas = shas
        self.roles = roles
        self.sandbox: Any = None

    def evaluate(self, job: EvalJob) -> tuple[list[TaskResult], dict[str, TaskResult]]:
        """The job's results in task order, and those computed here by result key."""
        from ..sandbox import Sandbox

        assert self.models is not None, "start() first"
        builder, executor = self.models
        setup = EvalSetup(builder=builder, executor=executor, builder_sha=self.shas[0], executor_sha=self.shas[1])
        cache = HandedCache(job.hits)
        if job.method == "split" and self.sandbox is None:
            self.sandbox = Sandbox(pool_size=1)
            self.sandbox.start()
        ev = Evaluator(setup, cache, sandbox=self.sandbox)  # type: ignore[arg-type]
        if job.method == "split":
            results, _ = ev.run_split_tasks(job.family, job.tool, job.tasks)
        else:
            results, _ = ev.run_direct(job.family, job.method, job.tasks)
        return results, cache.new

    def stop(self) -> None:
        if self.sandbox is not None:
            self.sandbox.close()
            self.sandbox = None


def roles_for(methods: list[str]) -> tuple[str, ...]:
    """The models the methods need (the split needs both: the builder builds, the executor fills)."""
    roles = {DIRECT[m].role for m in methods if m in DIRECT}
    if "split" in methods:
        roles |= {"builder", "executor"}
    return tuple(r for r in ("builder", "executor") if r in roles)


def driver_setup(opts: ClusterOptions, shas: tuple[str, str], models: MakeModels | None) -> EvalSetup:
    """The models as the driver knows them (names and SHA-256s; nothing is loaded here)."""
    from ..runloop import local_model

    if models is not None:
        builder, executor = models()
    else:
        builder = local_model("builder", opts.builder_name, opts.threads)
        executor = local_model("executor", opts.executor_name, opts.threads)
    return EvalSetup(builder=builder, executor=executor, builder_sha=shas[0], executor_sha=shas[1])


class _Plan:
    """The results the driver has, slot by slot, and the jobs for the rest."""

    def __init__(self, ev: Evaluator, cache: ResultCache, families: list[FamilyDir],
                 selected: dict[str, list[EvalTask]], methods: list[str], tools: dict[str, Tool | None]):
        self.results: dict[tuple[str, str], list[TaskResult | None]] = {}
        self.computed: dict[tuple[str, str], int] = {}
        self.reused = 0
        self.jobs: list[Job] = []
        for fam in families:
            tasks = selected[fam.name]
            for method in methods:
                slot = (fam.name, method)
                self.computed[slot] = 0
                if method == "split":
                    self.results[slot] = self._split(ev, cache, fam, tasks, tools.get(fam.name))
                else:
                    self.results[slot] = self._direct(ev, cache, fam, method, tasks)

    def _split(self, ev: Evaluator, cache: ResultCache, fam: FamilyDir, tasks: list[EvalTask],
               tool: Tool | None) -> list[TaskResult | None]:
        if tool is None:
            return list(ev.run_split_tasks(fam, None, tasks)[0])  # every task failed: no tool
        # the walk of Evaluator.run_split_tasks: fills start free; a reused result's miss sends later ones to
        # the schema. If every key it meets is cached, nothing is sent.
        have: list[TaskResult | None] = []
        start = "free"
        for t in tasks:
            r = cache.get(ev.split_key(fam.name, tool, t, start))
            if r is None:
                break
            have.append(r)
            start = "schema" if FREE_THEN_SCHEMA in r.fill else start
        if len(have) == len(tasks):
            self.reused += len(tasks)
            return have
        hits = {k: r for t in tasks for k in (ev.split_key(fam.name, tool, t, s) for s in ("free", "schema"))
                if (r := cache.get(k)) is not None}
        self.jobs.append(Job(EvalJob(fam, "split", tasks, 0, tool, hits), f"{fam.name}·split"))
        return [None] * len(tasks)

    def _direct(self, ev: Evaluator, cache: ResultCache, fam: FamilyDir, method: str,
                tasks: list[EvalTask]) -> list[TaskResult | None]:
        have = [cache.get(ev.direct_key(fam, method, t)) for t in tasks]
        self.reused += sum(r is not None for r in have)
        missing = [i for i, r in enumerate(have) if r is None]
        runs: list[list[int]] = []
        for i in missing:  # runs of neighbouring missing tasks, at most CHUNK long
            if runs and runs[-1][-1] == i - 1 and len(runs[-1]) < CHUNK:
                runs[-1].append(i)
            else:
                runs.append([i])
        for run in runs:
            self.jobs.append(Job(EvalJob(fam, method, [tasks[i] for i in run], run[0]), f"{fam.name}·{method}"))
        return have

    def fill(self, job: EvalJob, results: list[TaskResult], new: dict[str, TaskResult]) -> None:
        slot = (job.family.name, job.method)
        self.results[slot][job.first:job.first + len(results)] = results
        self.computed[slot] += len(new)
        self.reused += len(results) - len(new)


def eval_on_workers(families: list[FamilyDir], opts: ClusterOptions, *, methods: list[str], n: int = 20,
                    seed: int = 0, out_dir: Path = Path("eval-out"), cache_dir: Path | None = None,
                    progress: Progress | None = None, models: MakeModels | None = None,
                    shas: tuple[str, str] | None = None) -> EvalReport:
    """`jigwright eval --workers N`: evaluate.evaluate with the builds and tasks done by workers; the same
    results, cache and output files. `models` makes the workers' models instead of the node's model files
    (tests pass scripted doubles), with `shas` standing for their SHA-256s."""
    from contextlib import ExitStack

    from .. import settings
    from ..errors import ClusterError
    from ..evalreport import write_outputs
    from ..runloop import StopFlag, _Quiet
    from ..store import ToolStore

    import_ray()  # before anything else: without Ray nothing is read or written
    progress = progress or _Quiet()
    cache_dir = cache_dir or settings.home() / "eval"
    shas = shas or model_shas(opts)
    setup = driver_setup(opts, shas, models)
    selected = {fam.name: select_tasks(fam.tasks, n, seed) for fam in families}
    with ExitStack() as stack:
        cache = stack.enter_context(ResultCache(cache_dir))
        store = stack.enter_context(ToolStore()) if "split" in methods else None
        ev = Evaluator(setup, cache, store=store, progress=progress)
        stop = stack.enter_context(StopFlag(progress))
        args = (opts.builder_name, opts.executor_name, opts.threads, opts.verbose, models, shas, roles_for(methods))
        pool = stack.enter_context(start_workers(EvalWorker, args, opts, progress))
        builds = {}
        if store is not None:
            to_build = []
            for fam in families:
                known = known_no_build(fam.name, ev.build_key(fam), store, cache, progress)
                if known is not None:
                    builds[fam.name] = (None, known)
                else:
                    to_build.append(fam)
            if to_build:
                outcomes, lost = run_builds(pool, store, [f.family for f in to_build], _build_settings(), shas,
                                            False, progress)
                if lost:
                    raise ClusterError("builds given up: " + "; ".join(lost) + " (the other outcomes are kept "
                                       "in the tool store: rerun to evaluate)")
                for i, fam in enumerate(to_build):
                    tool, report = outcomes[i]
                    info = build_info(fam.name, tool, report)
                    if tool is None:
                        cache.note_failed_build(info)
                    builds[fam.name] = (tool, info)
        plan = _Plan(ev, cache, families, selected, methods, {k: t for k, (t, _) in builds.items()})
        given_up: list[str] = []

        def done(job: Job, result: tuple[list[TaskResult], dict[str, TaskResult]]) -> None:
            work: EvalJob = job.payload
            results, new = result
            for key, r in new.items():  # each result stored as its job comes back: an interruption keeps it
                cache.put(key, r)
            plan.fill(work, results, new)
            progress.message(f"{work.label}: {len(new)} computed, {len(results) - len(new)} reused")
            progress.advance()

        if plan.jobs:
            progress.phase(f"evaluating ({len(plan.jobs)} jobs)", len(plan.jobs))
        finished = farm(pool, plan.jobs, lambda actor, job: actor.evaluate.remote(job.payload), done,
                        lambda job, why: given_up.append(f"{job.payload.label} ({why})"), stop, progress)
        load_cpu = pool.load_cpu_seconds()
        if not finished:
            progress.message("stopped: the results so far are in the eval cache; rerun the same command for the rest")
            raise KeyboardInterrupt
        if given_up:
            raise ClusterError("eval jobs given up: " + "; ".join(given_up) + "; the other results are kept in "
                               f"{cache_dir}: rerun the same command to try them again")
        rows: list[MethodRow] = []
        for fam in families:
            for method in methods:
                results = plan.results[(fam.name, method)]
                assert all(r is not None for r in results), f"{fam.name} · {method}: a result is missing"
                info = builds[fam.name][1] if method == "split" else None
                rows.append(method_row(fam, method, ev.model_name(method), selected[fam.name],
                                       results, plan.computed[(fam.name, method)], info))  # type: ignore[arg-type]
        report = finish_report(families, setup, rows, [builds[f.name][1] for f in families if f.name in builds],
                               methods=methods, n=n, seed=seed, computed=sum(plan.computed.values()),
                               reused=plan.reused, load_cpu=load_cpu, cache_dir=cache_dir)
    write_outputs(report, out_dir)
    return report


__all__ = ["CHUNK", "EvalWorker", "eval_on_workers"]
