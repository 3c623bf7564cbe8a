"""One queue answered by many workers: Ray actors on this machine (`--workers N`) or on a team's Ray cluster
(`--cluster ADDRESS`).

Each worker is the run loop's Engine in its own process, with its own executor (the fallback model loads on
first need), sandbox pool and llama.cpp threads, and the verified tools sent by value from the driver (no
shared tool store). At start a worker checks its node's model files (size and SHA-256) and says which node
lacks which file; nothing is downloaded at run time. The driver alone reads the queue and writes the answers
file, through the run loop's own RunLoop: the same records and the same resume, plus the answering worker's
node and id. The steps mirror the grouped run loop: route every task, answer grouped by tool (a worker keeps
to one tool while it has tasks, so its prompt cache stays warm), then the fallbacks. A worker that dies has
its task sent to another; a task whose worker died twice gets an error record; every id is written once.

Ray is imported only here and only when a run asks for workers: the run loop works without it."""

from __future__ import annotations

import os
import socket
from collections import deque
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator

from pydantic import BaseModel, Field

from . import __version__, errors
from .errors import ClusterError
from .meter import process_cpu_seconds
from .queue import NONE_ROUTE, AnswerRecord, BadLine, Task
from .runloop import (Engine, Progress, RunLoop, RunOptions, RunReport, Setup, StopFlag, _Quiet, _Work,
                      answers_file, open_queue, run)
from .tools import Tool

EXTRA = "pip install 'jigwright[cluster]'"
# A task whose worker died this many times is not sent again: it gets an error record (it may be what kills them).
DEATHS_PER_TASK = 2
# How long the driver waits for a result before it looks at Ctrl-C again.
POLL_SECONDS = 0.5


def import_ray() -> Any:
    """Ray, or a one-line error naming the extra that installs it."""
    try:
        import ray
    except ImportError:
        raise ClusterError(f"--workers and --cluster need Ray, which is not installed: {EXTRA}") from None
    return ray


class ClusterOptions(BaseModel):
    """Where the workers run and what each one loads."""

    workers: int = Field(2, ge=1)
    address: str | None = Field(None, description="a Ray cluster to join; None starts Ray on this machine")
    threads: int = Field(1, ge=1, description="llama.cpp threads per worker (also the CPUs Ray reserves for it)")
    executor_name: str | None = None
    builder_name: str | None = None
    worker_env: dict[str, str] = Field(default_factory=dict,
                                       description="environment set in each worker before it starts")
    verbose: bool = False


class WorkerInfo(BaseModel):
    """What a worker says when it has started (or why it could not)."""

    node: str
    worker: str
    version: str
    error: str | None = None
    error_class: str | None = None


def node_name() -> str:
    """This machine as the answers file and error messages name it."""
    return socket.gethostname()


def _check_model_files(options: RunOptions, executor_name: str | None, builder_name: str | None) -> None:
    """Size and SHA-256 of the model files this worker may need (a file whose size and time match its last
    successful SHA-256 check is not hashed again); raises the models module's errors."""
    from . import models, settings

    registry = settings.load_registry()
    wanted = [("executor", executor_name)] + ([("builder", builder_name)] if options.fallback == "builder" else [])
    for role, name in wanted:
        models.check_file(models.for_role(registry, role, name), rehash=False)


class Worker:
    """One worker (a Ray actor): an Engine over its own models and sandbox. `setup` builds the models
    instead of the local files (tests pass scripted doubles; it must be importable on the worker)."""

    def __init__(self, tools: list[Tool], options: RunOptions, executor_name: str | None = None,
                 builder_name: str | None = None, threads: int = 1, verbose: bool = False,
                 env: dict[str, str] | None = None, setup: Callable[[list[Tool], RunOptions], Setup] | None = None):
        os.environ.update(env or {})
        self.cpu_at_start = process_cpu_seconds()
        self.tools = tools
        self.options = options
        self.executor_name = executor_name
        self.builder_name = builder_name
        self.threads = threads
        self.verbose = verbose
        self.make_setup = setup
        self.node = node_name()
        self.worker = _actor_id()
        self.setup: Setup | None = None
        self.engine: Engine | None = None
        self.sandbox: Any = None

    def start(self) -> WorkerInfo:
        """Check the model files, load the executor and start the sandbox pool; an error is returned, not
        raised, so the driver can say which node it came from."""
        from .runloop import model_setup
        from .sandbox import Sandbox

        try:
            if self.make_setup is not None:
                self.setup = self.make_setup(self.tools, self.options)
            else:
                _check_model_files(self.options, self.executor_name, self.builder_name)
                self.setup = model_setup(self.tools, self.options, self.executor_name, self.builder_name,
                                         self.verbose, self.threads)
                self.setup.executor.load()  # type: ignore[attr-defined]
            self.sandbox = Sandbox(pool_size=1)
            self.sandbox.start()
            self.engine = Engine(self.setup.tools, self.setup.executor, self.sandbox, self.options,
                                 self.setup.fallback_model)
        except errors.JigwrightError as exc:
            return WorkerInfo(node=self.node, worker=self.worker, version=__version__, error=str(exc),
                              error_class=type(exc).__name__)
        return WorkerInfo(node=self.node, worker=self.worker, version=__version__)

    def _signed(self, record: AnswerRecord | None) -> AnswerRecord | None:
        return None if record is None else record.model_copy(update={"node": self.node, "worker": self.worker})

    def step(self, name: str, work: _Work) -> tuple[AnswerRecord | None, _Work]:
        """One step of a task: `route`, `answer` (with its tool), `fall_back`, or `whole` (all of them).
        Returns the task's record when it is final, else None and the task for the next step."""
        assert self.engine is not None, "start() first"
        if name == "route":
            self.engine.route(work)
            return None, work
        if name == "answer":
            return self._signed(self.engine.execute(work)), work
        if name == "fall_back":
            return self._signed(self.engine.fall_back(work)), work
        if name == "whole":
            return self._signed(self.engine.answer(work.task)), work
        raise ValueError(f"unknown step {name!r}")

    def usage(self) -> tuple[float, float]:
        """CPU seconds of this worker since it was created, and of those spent loading models."""
        from .runloop import _load_cpu

        opened = self.setup.opened if self.setup else []
        return process_cpu_seconds() - self.cpu_at_start, _load_cpu(*{id(m): m for m in opened}.values())

    def stop(self) -> None:
        if self.sandbox is not None:
            self.sandbox.close()
            self.sandbox = None


def _actor_id() -> str:
    try:
        import ray

        return ray.get_runtime_context().get_actor_id() or f"pid-{os.getpid()}"
    except Exception:  # not inside Ray (a Worker made directly): the process stands in for the actor
        return f"pid-{os.getpid()}"


# ---- the driver's side -------------------------------------------------------------------------------------

@dataclass
class _Handle:
    actor: Any
    info: WorkerInfo
    alive: bool = True
    cpu: float = 0.0
    load_cpu: float = 0.0


class WorkerPool:
    """The driver's handles on its workers. It stands in for the Engine a RunLoop is given: the loop reads
    the run options from it."""

    def __init__(self, ray: Any, handles: list[_Handle], options: RunOptions, started_ray: bool):
        self.ray = ray
        self.handles = handles
        self.options = options
        self.started_ray = started_ray

    @property
    def live(self) -> list[int]:
        return [i for i, h in enumerate(self.handles) if h.alive]

    def name(self, i: int) -> str:
        h = self.handles[i]
        return f"worker {i + 1} ({h.info.worker[:12]}) on {h.info.node}"

    def _collect_usage(self) -> None:
        for i in self.live:
            try:
                self.handles[i].cpu, self.handles[i].load_cpu = self.ray.get(
                    self.handles[i].actor.usage.remote(), timeout=30)
            except Exception:  # a worker gone since: its last figures stand
                pass

    def cpu_seconds(self) -> float:
        self._collect_usage()
        return sum(h.cpu for h in self.handles)

    def load_cpu_seconds(self) -> float:
        return sum(h.load_cpu for h in self.handles)

    def close(self) -> None:
        for i in self.live:
            try:
                self.ray.get(self.handles[i].actor.stop.remote(), timeout=30)
            except Exception:
                pass
            self.ray.kill(self.handles[i].actor)
        if self.started_ray:
            self.ray.shutdown()


def _connect(ray: Any, opts: ClusterOptions) -> bool:
    """Join the cluster at opts.address, or start Ray on this machine; True when this call started it. An
    already connected process (tests) keeps its connection."""
    if ray.is_initialized():
        return False
    quiet = {"logging_level": "WARNING", "log_to_driver": opts.verbose, "configure_logging": True}
    try:
        if opts.address:
            ray.init(address=opts.address, **quiet)
        else:
            ray.init(address="local", num_cpus=opts.workers * opts.threads, include_dashboard=False,
                     object_store_memory=100 * 1024 * 1024, **quiet)
    except (ConnectionError, RuntimeError, ValueError) as exc:
        where = f"the Ray cluster at {opts.address}" if opts.address else "Ray on this machine"
        raise ClusterError(f"could not start or join {where}: {' '.join(str(exc).split())[:300]}") from None
    return True


def _raise_start_error(info: WorkerInfo) -> None:
    message = f"node {info.node}: {info.error}"
    if info.error_class in ("ModelMissingError", "ModelIntegrityError", "NotGGUFError"):
        message += " (on that node; every node needs the model files: `jigwright models fetch`)"
    cls = getattr(errors, info.error_class or "", None)
    if not (isinstance(cls, type) and issubclass(cls, errors.JigwrightError)) or cls.__init__ is not Exception.__init__:
        cls = ClusterError
    raise cls(message)


@contextmanager
def start_workers(tools: list[Tool], options: RunOptions, opts: ClusterOptions, progress: Progress | None = None,
                  setup: Callable[[list[Tool], RunOptions], Setup] | None = None) -> Iterator[WorkerPool]:
    """Start opts.workers workers and wait until each has checked its model files and loaded the executor;
    the first worker that could not start is raised as its own error class, naming its node."""
    ray = import_ray()
    progress = progress or _Quiet()
    started = _connect(ray, opts)
    pool = WorkerPool(ray, [], options, started)
    try:
        remote = ray.remote(Worker).options(num_cpus=opts.threads, max_restarts=0, max_task_retries=0)
        shared_tools = ray.put(tools)
        actors = [remote.remote(shared_tools, options, opts.executor_name, opts.builder_name, opts.threads,
                                opts.verbose, opts.worker_env, setup) for _ in range(opts.workers)]
        progress.phase("starting workers", len(actors))
        pool.handles = [_Handle(a, WorkerInfo(node="?", worker="?", version="?")) for a in actors]
        waiting = {a.start.remote(): i for i, a in enumerate(actors)}
        while waiting:
            ready, _ = ray.wait(list(waiting), num_returns=1)
            i = waiting.pop(ready[0])
            try:
                info = ray.get(ready[0])
            except ray.exceptions.RayActorError as exc:
                raise ClusterError(f"worker {i + 1} died while starting: {_first_line(exc)}") from None
            pool.handles[i].info = info
            if info.error:
                _raise_start_error(info)
            if info.version != __version__:
                raise ClusterError(f"node {info.node} runs Jigwright {info.version}, this machine {__version__}: "
                                   f"install the same version on every node")
            progress.advance()
        yield pool
    finally:
        pool.close()


def _first_line(exc: BaseException) -> str:
    lines = [ln.strip() for ln in str(exc).splitlines() if ln.strip()]
    return lines[0][:300] if lines else type(exc).__name__


@dataclass
class _Job:
    work: _Work
    key: str  # tasks of one key go to the same worker while they last (the tool, for `answer`)
    deaths: int = 0


class ClusterLoop(RunLoop):
    """The run loop's driver with the steps done by workers; records are written here, one per task."""

    def __init__(self, pool: WorkerPool, writer: Any, resumed: Any = None, progress: Progress | None = None,
                 stop: StopFlag | None = None):
        super().__init__(pool, writer, resumed, progress, stop)  # type: ignore[arg-type]
        self.pool = pool
        self.deaths = 0

    def run_batch(self, items: Iterable[Task | BadLine]) -> None:
        works = [_Work(t) for t in self.take_pending(items)]
        if not self.pool.options.group:
            self.progress.phase("answering", len(works))
            self.spread("whole", works, lambda w: "whole")
            return
        self.progress.phase("routing", len(works))
        routed = self.spread("route", works, lambda w: "route")
        if routed is None:
            return  # nothing of the unanswered tasks is written: a rerun routes them again
        self.progress.phase("answering", len(routed))
        later = self.spread("answer", routed, lambda w: w.route.tool if w.route else NONE_ROUTE)
        if later is None:
            return
        self.spread("fall_back", later, lambda w: "fall_back")

    def run_follow(self, reader: Any, poll: float = 0.5) -> None:
        raise ClusterError("--follow answers lines as they arrive in one process: drop --workers/--cluster")

    def _next(self, pending: dict[str, deque[_Job]], current: dict[int, str], busy: set[str], i: int) -> _Job | None:
        """The next job for worker i: its own key while it has jobs, else the largest key no other worker
        is on, else the largest key."""
        if not pending:
            return None
        key = current.get(i)
        if key not in pending:
            free = [k for k in pending if k not in busy]
            key = max(free or list(pending), key=lambda k: len(pending[k]))
        current[i] = key
        job = pending[key].popleft()
        if not pending[key]:
            del pending[key]
        return job

    def spread(self, step: str, works: list[_Work], key: Callable[[_Work], str]) -> list[_Work] | None:
        """Send each task to a worker for `step`, one at a time per worker; write the records that come back
        and return the tasks that go on to the next step (None when stopped by Ctrl-C: the tasks in hand
        are finished and written first)."""
        ray = self.pool.ray
        pending: dict[str, deque[_Job]] = {}
        for w in works:
            pending.setdefault(key(w), deque()).append(_Job(w, key(w)))
        inflight: dict[Any, tuple[int, _Job]] = {}
        current: dict[int, str] = {}
        onward: list[_Work] = []
        while pending or inflight:
            if not self.stop():
                taken = {i for i, _ in inflight.values()}
                for i in self.pool.live:
                    if i in taken:
                        continue
                    job = self._next(pending, current, {current[j] for j in taken if j in current}, i)
                    if job is None:
                        break
                    inflight[self.pool.handles[i].actor.step.remote(step, job.work)] = (i, job)
                    taken.add(i)
            if not inflight:
                if self.stop():
                    break
                raise ClusterError(f"every worker has died ({self.deaths} deaths); the answers written so far "
                                   f"are kept: rerun the same command to answer the rest")
            ready, _ = ray.wait(list(inflight), num_returns=1, timeout=POLL_SECONDS)
            for ref in ready:
                i, job = inflight.pop(ref)
                try:
                    record, work = ray.get(ref)
                except ray.exceptions.RayActorError as exc:
                    self._died(i, job, pending, exc)
                    continue
                except ray.exceptions.RayTaskError as exc:
                    cause = exc.cause
                    raise cause if isinstance(cause, errors.JigwrightError) else ClusterError(
                        f"{self.pool.name(i)} failed on '{job.work.task.id}': {_first_line(exc)}") from None
                if record is not None:
                    self._write(record)
                else:
                    onward.append(work)
                    if step == "route":
                        self.progress.advance()
        return None if self.stop() else onward

    def _died(self, i: int, job: _Job, pending: dict[str, deque[_Job]], exc: BaseException) -> None:
        """Worker i died with `job` in hand: the job goes back to the front of its key (or, the second time,
        becomes the task's error record), and the worker gets no more work."""
        self.pool.handles[i].alive = False
        self.deaths += 1
        job.deaths += 1
        task = job.work.task
        if job.deaths >= DEATHS_PER_TASK:
            self.progress.message(f"{self.pool.name(i)} died; '{task.id}' has now lost two workers: "
                                  f"it gets an error record")
            self._write(job.work.record("error", None).model_copy(update={
                "error": f"the worker answering it died {job.deaths} times ({_first_line(exc)})"}))
            return
        self.progress.message(f"{self.pool.name(i)} died; '{task.id}' goes to another worker")
        pending.setdefault(job.key, deque()).appendleft(job)


def verified_tools() -> list[Tool]:
    from .store import ToolStore

    with ToolStore() as store:
        return list(store.tools(verified_only=True))


def answer_on_workers(queue: str, out: Path | None, options: RunOptions, opts: ClusterOptions, *,
                      tools: list[Tool] | None = None, progress: Progress | None = None,
                      setup: Callable[[list[Tool], RunOptions], Setup] | None = None) -> RunReport:
    """`jigwright answer --workers N`: like runloop.run_queue, with the tasks answered by workers."""
    progress = progress or _Quiet()
    reader = open_queue(queue, out)
    tools = verified_tools() if tools is None else tools
    with answers_file(out, progress) as (writer, resumed):
        if not tools:
            progress.message("no verified tools in the tool store: every question goes to the fallback")
        with start_workers(tools, options, opts, progress, setup) as pool:
            loop = ClusterLoop(pool, writer, resumed, progress, StopFlag(progress))
            return run(loop, reader, follow=False, out=str(out) if out else "-",
                       load_cpu_seconds=pool.load_cpu_seconds, worker_cpu_seconds=pool.cpu_seconds)
