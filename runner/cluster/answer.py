"""`jigwright answer QUEUE --workers N`: the run loop with its steps done by workers.

Each worker is the run loop's Engine in its own process, with its own executor (the fallback model loads on
first need), sandbox pool and llama.cpp threads, and the verified tools sent by value from the driver. The
driver alone reads the queue and writes the answers file, through a RunLoop: the same records and the same
resume, plus the answering worker's node and id. The steps mirror the grouped run loop: route every task,
answer grouped by tool (a worker keeps to one tool while it has tasks, so its prompt cache stays warm), then
the fallbacks. A worker that dies has its task sent to another; a task that killed two workers gets an
error record; every id is written once."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Callable, Iterable

from ..queue import NONE_ROUTE, AnswerRecord, BadLine, RouteJournal, Task, journal_path
from ..runloop import (Engine, Progress, RunLoop, RunOptions, RunReport, Setup, StopFlag, _Quiet, _Work,
                       answers_file, open_queue, run, store_tools)
from ..tools import Tool
from .pool import ClusterOptions, Job, WorkerBase, WorkerPool, check_model_files, farm, import_ray, start_workers

MakeSetup = Callable[[list[Tool], RunOptions], Setup]
# The error kind of a task given up at each step (its worker died twice there).
STAGE_OF_STEP = {"route": "route", "answer": "tool", "fall_back": "fallback", "whole": "tool"}


class AnswerWorker(WorkerBase):
    """One worker (a Ray actor): an Engine over its own models and sandbox. `setup` builds the models
    instead of the node's model files (tests pass scripted doubles; it must be importable on the worker)."""

    def __init__(self, tools: list[Tool], options: RunOptions, executor_name: str | None = None,
                 builder_name: str | None = None, threads: int = 1, verbose: bool = False,
                 setup: MakeSetup | None = None, *, env: dict[str, str] | None = None):
        super().__init__(env)
        self.tools = tools
        self.options = options
        self.names = (executor_name, builder_name)
        self.threads = threads
        self.verbose = verbose
        self.make_setup = setup
        self.engine: Engine | None = None
        self.sandbox: Any = None

    def prepare(self) -> None:
        """Check the model files, load the executor and start the sandbox pool."""
        from ..runloop import model_setup, pattern_books
        from ..sandbox import Sandbox

        executor_name, builder_name = self.names
        if self.make_setup is not None:
            setup = self.make_setup(self.tools, self.options)
        else:
            check_model_files([("executor", executor_name)]
                              + ([("builder", builder_name)] if self.options.fallback == "builder" else []))
            setup = model_setup(self.tools, self.options, executor_name, builder_name, self.verbose, self.threads)
            setup.executor.load()  # type: ignore[attr-defined]
        self.opened = setup.opened
        self.sandbox = Sandbox(pool_size=1)
        self.sandbox.start()
        self.engine = Engine(setup.tools, setup.executor, self.sandbox, self.options, setup.fallback_model,
                             pattern_books(self.options))

    def _signed(self, record: AnswerRecord | None) -> AnswerRecord | None:
        return None if record is None else record.model_copy(update={"node": self.node, "worker": self.worker})

    def step(self, name: str, work: _Work) -> tuple[AnswerRecord | None, _Work]:
        """One step of a task: `route`, `answer` (with its tool), `fall_back`, or `whole` (all of them).
        Returns the task's record when it is final, else None and the task for the next step; a failure of
        this task alone is its error record (the run loop's per-task isolation)."""
        assert self.engine is not None, "start() first"
        if name == "route":
            return self._signed(self.engine.try_route(work)), work
        if name == "answer":
            return self._signed(self.engine.try_execute(work)), work
        if name == "fall_back":
            return self._signed(self.engine.try_fall_back(work)), work
        if name == "whole":
            return self._signed(self.engine.answer(work.task)), work
        raise ValueError(f"unknown step {name!r}")

    def stop(self) -> None:
        if self.sandbox is not None:
            self.sandbox.close()
            self.sandbox = None


class ClusterLoop(RunLoop):
    """The run loop's driver with the steps done by workers; records are written here, one per task. Its
    Engine is dormant: no model is loaded in the driver, the loop only reads its options."""

    def __init__(self, pool: WorkerPool, engine: Engine, writer: Any, resumed: Any = None,
                 progress: Progress | None = None, stop: StopFlag | None = None, journal: RouteJournal | None = None):
        super().__init__(engine, writer, resumed, progress, stop, journal)
        self.pool = pool
        self.options = engine.options

    def run_batch(self, items: Iterable[Task | BadLine]) -> None:
        works = [_Work(t) for t in self.take_pending(items)]
        if not self.options.group:
            self.progress.phase("answering", len(works))
            self.spread("whole", works, lambda w: "whole")
            return
        self.progress.phase("routing", len(works))
        kept = [w for w in works if self._journalled(w)]  # routed by an earlier, interrupted run
        for _ in kept:
            self.progress.advance()
        fresh = self.spread("route", [w for w in works if w.route is None], lambda w: "route")
        if fresh is None:
            return  # the decisions so far are in the journal: a rerun does not route them again
        routed = kept + fresh
        self.progress.phase("answering", len(routed))
        later = self.spread("answer", routed, lambda w: w.route.tool if w.route else NONE_ROUTE)
        if later is None:
            return
        if self.spread("fall_back", later, lambda w: "fall_back") is not None:
            self.journal.close(finished=True)

    def run_follow(self, reader: Any, poll: float = 0.5) -> None:
        from ..errors import InputError

        raise InputError("--follow answers lines as they arrive, in this process: drop --workers")

    def spread(self, step: str, works: list[_Work], key: Callable[[_Work], str]) -> list[_Work] | None:
        """Send each task to a worker for `step`; write the records that come back and return the tasks that
        go on to the next step (None when stopped by Ctrl-C: the tasks in hand are finished and written)."""
        onward: list[_Work] = []

        def done(job: Job, result: tuple[AnswerRecord | None, _Work]) -> None:
            record, work = result
            if record is not None:
                self._write(record)
            else:
                onward.append(work)
                if step == "route":
                    if work.route is not None:
                        self.journal.add(work.task, work.route.model_dump(mode="json"))
                    self.progress.advance()

        def lost(job: Job, why: str) -> None:
            work: _Work = job.payload
            work.error = why
            self._write(work.record("error", error_kind=STAGE_OF_STEP[step]))

        finished = farm(self.pool, [Job(w, key(w)) for w in works],
                        lambda actor, job: actor.step.remote(step, job.payload), done, lost, self.stop,
                        self.progress)
        return onward if finished else None


def dormant_engine(tools: list[Tool], options: RunOptions, opts: ClusterOptions, setup: MakeSetup | None) -> Engine:
    """The Engine the workers hold, in the driver without its models loaded or a sandbox: what the run loop
    reads from an engine (its options) without answering anything here."""
    from ..runloop import model_setup

    s = setup(tools, options) if setup else model_setup(tools, options, opts.executor_name, opts.builder_name,
                                                         threads=opts.threads)
    return Engine(s.tools, s.executor, None, options, s.fallback_model)


def answer_on_workers(queue: str, out: Path | None, options: RunOptions, opts: ClusterOptions, *,
                      tools: list[Tool] | None = None, progress: Progress | None = None,
                      setup: MakeSetup | None = None) -> RunReport:
    """`jigwright answer --workers N`: like runloop.run_queue, with the tasks answered by workers."""
    import_ray()  # before anything else: without Ray nothing is read or written
    progress = progress or _Quiet()
    reader = open_queue(queue, out)
    tools, notes = store_tools(options) if tools is None else (tools, [])
    with answers_file(out, progress) as (writer, resumed):
        for note in notes:
            progress.message(note)
        if not tools:
            progress.message("no verified tools in the tool store: every question goes to the fallback")
        args = (tools, options, opts.executor_name, opts.builder_name, opts.threads, opts.verbose, setup)
        with start_workers(AnswerWorker, args, opts, progress) as pool:
            engine = dormant_engine(tools, options, opts, setup)
            journal = RouteJournal(journal_path(out) if out is not None and options.group else None, engine.router_key)
            loop = ClusterLoop(pool, engine, writer, resumed, progress, StopFlag(progress), journal)
            return run(loop, reader, follow=False, out=str(out) if out else "-",
                       load_cpu_seconds=pool.load_cpu_seconds, worker_cpu_seconds=pool.cpu_seconds)
