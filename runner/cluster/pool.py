"""Workers on Ray: joining or starting Ray, starting workers that check their node first, and handing jobs to
them one at a time with affinity (a worker keeps to one kind of job while that kind lasts), sending a dead
worker's job to another."""

from __future__ import annotations

import os
import socket
from collections import deque
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Callable, Iterator

from pydantic import BaseModel, Field

from .. import __version__, errors
from ..errors import ClusterError
from ..meter import process_cpu_seconds

EXTRA = "pip install 'jigwright[cluster]'"
# A job whose worker died this many times is not sent again (it may be what kills them).
DEATHS_PER_JOB = 2
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


def actor_id() -> str:
    """This worker's Ray actor id (the process id outside Ray)."""
    try:
        import ray

        return ray.get_runtime_context().get_actor_id() or f"pid-{os.getpid()}"
    except Exception:  # not inside Ray (a worker object made directly): the process stands in for the actor
        return f"pid-{os.getpid()}"


def check_model_files(roles: list[tuple[str, str | None]]) -> None:
    """Size and SHA-256 of this node's model files for (role, name) pairs (a file whose size and time match its
    last successful SHA-256 check is not hashed again); raises the models module's errors."""
    from .. import models, settings

    registry = settings.load_registry()
    for role, name in roles:
        models.check_file(models.for_role(registry, role, name), rehash=False)


class WorkerBase:
    """What every worker does: take its environment, start (returning an error rather than raising, so the
    driver can say which node it came from), report its CPU, stop."""

    def __init__(self, env: dict[str, str] | None = None):
        os.environ.update(env or {})
        self.cpu_at_start = process_cpu_seconds()
        self.node = node_name()
        self.worker = actor_id()
        self.opened: list[Any] = []

    def prepare(self) -> None:
        """Check model files and load what the worker needs at once (subclasses)."""

    def start(self) -> WorkerInfo:
        try:
            self.prepare()
        except errors.JigwrightError as exc:
            return WorkerInfo(node=self.node, worker=self.worker, version=__version__, error=str(exc),
                              error_class=type(exc).__name__)
        return WorkerInfo(node=self.node, worker=self.worker, version=__version__)

    def usage(self) -> tuple[float, float]:
        """CPU seconds of this worker since it was created, and of those spent loading models."""
        loads = {id(m): m for m in self.opened if getattr(m, "load_usage", None) is not None}
        return process_cpu_seconds() - self.cpu_at_start, sum(m.load_usage.cpu_seconds for m in loads.values())

    def stop(self) -> None:
        """Release what prepare() opened (subclasses)."""


@dataclass
class _Handle:
    actor: Any
    info: WorkerInfo
    alive: bool = True
    cpu: float = 0.0
    load_cpu: float = 0.0


class WorkerPool:
    """The driver's handles on its workers."""

    def __init__(self, ray: Any, started_ray: bool):
        self.ray = ray
        self.handles: list[_Handle] = []
        self.started_ray = started_ray
        self.deaths = 0

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
        self._collect_usage()
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
    quiet = {"logging_level": "ERROR", "log_to_driver": opts.verbose, "configure_logging": True}
    try:
        if opts.address:
            ray.init(address=opts.address, **quiet)
        else:
            # Ray starts its workers at niceness 15 unless told otherwise: on a machine shared with other work
            # they then get little CPU (bench/cluster_bench.py: 0.87x with 2 workers niced, 1.12x at 0, under
            # a similar load). The workers are the job.
            os.environ.setdefault("RAY_worker_niceness", "0")
            ray.init(address="local", num_cpus=opts.workers * opts.threads, include_dashboard=False,
                     object_store_memory=100 * 1024 * 1024, **quiet)
    except (ConnectionError, RuntimeError, ValueError) as exc:
        where = f"the Ray cluster at {opts.address}" if opts.address else "Ray on this machine"
        raise ClusterError(f"could not start or join {where}: {first_line(exc)}") from None
    return True


def first_line(exc: BaseException) -> str:
    lines = [ln.strip() for ln in str(exc).splitlines() if ln.strip()]
    return lines[0][:300] if lines else type(exc).__name__


def _raise_start_error(info: WorkerInfo) -> None:
    message = f"node {info.node}: {info.error}"
    if info.error_class in ("ModelMissingError", "ModelIntegrityError", "NotGGUFError"):
        message += " (on that node; every node needs the model files: `jigwright models fetch`)"
    cls = getattr(errors, info.error_class or "", None)
    if not (isinstance(cls, type) and issubclass(cls, errors.JigwrightError)) or cls.__init__ is not Exception.__init__:
        cls = ClusterError
    raise cls(message)


@contextmanager
def start_workers(worker_class: type, args: tuple, opts: ClusterOptions, progress: Any) -> Iterator[WorkerPool]:
    """Start opts.workers workers of `worker_class(*args, env=opts.worker_env)` and wait until each has
    started; the first one that could not is raised as its own error class, naming its node. Large
    arguments are shared through Ray's object store, not copied per worker."""
    ray = import_ray()
    pool = WorkerPool(ray, _connect(ray, opts))
    try:
        remote = ray.remote(worker_class).options(num_cpus=opts.threads, max_restarts=0, max_task_retries=0)
        shared = [ray.put(a) for a in args]
        actors = [remote.remote(*shared, env=opts.worker_env) for _ in range(opts.workers)]
        progress.phase("starting workers", len(actors))
        pool.handles = [_Handle(a, WorkerInfo(node="?", worker="?", version="?")) for a in actors]
        waiting = {a.start.remote(): i for i, a in enumerate(actors)}
        while waiting:
            ready, _ = ray.wait(list(waiting), num_returns=1)
            i = waiting.pop(ready[0])
            try:
                info = ray.get(ready[0])
            except ray.exceptions.RayActorError as exc:
                raise ClusterError(f"worker {i + 1} died while starting: {first_line(exc)}") from None
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


@dataclass
class Job:
    payload: Any
    key: str  # jobs of one key go to the same worker while they last
    deaths: int = 0


def _next(pending: dict[str, deque[Job]], current: dict[int, str], busy: set[str], i: int) -> Job | None:
    """The next job for worker i: its own key while it has jobs, else the largest key no other worker is
    on, else the largest key."""
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


def farm(pool: WorkerPool, jobs: list[Job], send: Callable[[Any, Job], Any], done: Callable[[Job, Any], None],
         lost: Callable[[Job, str], None], stop: Callable[[], bool], progress: Any) -> bool:
    """Hand `jobs` to the live workers, one at a time each (`send(actor, job)` returns Ray's reference), and
    call `done(job, result)` as results come back. A worker that dies is not used again and its job goes
    to the front of its key, unless it has now killed DEATHS_PER_JOB workers: then `lost(job, why)`. When
    `stop()` turns true no job is sent and those in hand are finished; returns False then."""
    ray = pool.ray
    pending: dict[str, deque[Job]] = {}
    for job in jobs:
        pending.setdefault(job.key, deque()).append(job)
    inflight: dict[Any, tuple[int, Job]] = {}
    current: dict[int, str] = {}
    while pending or inflight:
        if not stop():
            taken = {i for i, _ in inflight.values()}
            for i in pool.live:
                if i not in taken:
                    job = _next(pending, current, {current[j] for j in taken if j in current}, i)
                    if job is None:
                        break
                    inflight[send(pool.handles[i].actor, job)] = (i, job)
                    taken.add(i)
        if not inflight:
            if stop():
                break
            raise ClusterError(f"every worker has died ({pool.deaths} deaths); what was written so far is "
                               f"kept: rerun the same command to do the rest")
        ready, _ = ray.wait(list(inflight), num_returns=1, timeout=POLL_SECONDS)
        for ref in ready:
            i, job = inflight.pop(ref)
            try:
                result = ray.get(ref)
            except ray.exceptions.RayActorError as exc:
                pool.handles[i].alive = False
                pool.deaths += 1
                job.deaths += 1
                if job.deaths >= DEATHS_PER_JOB:
                    progress.message(f"{pool.name(i)} died; this job has now lost {job.deaths} workers: given up")
                    lost(job, f"the worker doing it died {job.deaths} times ({first_line(exc)})")
                else:
                    progress.message(f"{pool.name(i)} died; its job goes to another worker")
                    pending.setdefault(job.key, deque()).appendleft(job)
                continue
            except ray.exceptions.RayTaskError as exc:
                cause = exc.cause
                detail = f"{type(cause).__name__}: {first_line(cause)}" if cause is not None else first_line(exc)
                raise cause if isinstance(cause, errors.JigwrightError) else ClusterError(
                    f"{pool.name(i)} failed: {detail}") from None
            done(job, result)
    return not stop()
