"""`jigwright build A.jsonl B.jsonl … --workers N`: one build per worker at a time.

A worker builds with its own builder and executor and a scratch tool store that the driver seeds with what
its own store holds for that build (the family's tool, the build's earlier outcome), so the builder's reuse
rules decide as they would here. The driver alone writes its tool store: each new outcome as it arrives."""

from __future__ import annotations

import tempfile
from pathlib import Path
from typing import Any, Callable

from ..build import BuildReport, BuildSettings, Family, build, build_key
from ..llm import ChatModel
from ..runloop import Progress, _Quiet
from ..tools import Tool
from .pool import ClusterOptions, Job, WorkerBase, WorkerPool, check_model_files, farm, import_ray, start_workers

MakeModels = Callable[[], tuple[ChatModel, ChatModel]]


class BuildWorker(WorkerBase):
    """One build worker: builder and executor (loaded on first use), a sandbox per build. `models` makes
    them instead of the node's model files (tests pass scripted doubles)."""

    def __init__(self, builder_name: str | None = None, executor_name: str | None = None, threads: int = 1,
                 verbose: bool = False, models: MakeModels | None = None, *, env: dict[str, str] | None = None):
        super().__init__(env)
        self.names = (builder_name, executor_name)
        self.threads = threads
        self.verbose = verbose
        self.make_models = models
        self.models: tuple[ChatModel, ChatModel] | None = None
        self.roles: tuple[str, ...] = ("builder", "executor")  # whose model files are checked at the start

    def prepare(self) -> None:
        from ..runloop import local_model

        builder_name, executor_name = self.names
        if self.make_models is not None:
            self.models = self.make_models()
        else:
            check_model_files([(role, builder_name if role == "builder" else executor_name) for role in self.roles])
            self.models = (local_model("builder", builder_name, self.threads, self.verbose),
                           local_model("executor", executor_name, self.threads, self.verbose))
        self.opened = list(self.models)

    def build(self, family: Family, settings: BuildSettings, shas: tuple[str, str], seed: dict[str, Any],
              force: bool) -> tuple[Tool | None, BuildReport]:
        """Build one family against a scratch store holding `seed` (the driver's entries for it)."""
        from ..sandbox import Sandbox
        from ..store import ToolStore

        assert self.models is not None, "start() first"
        builder, executor = self.models
        with tempfile.TemporaryDirectory(prefix="jigwright-build-") as tmp, ToolStore(Path(tmp)) as store:
            for tool in seed["tools"]:
                store.put(tool)
            if seed["failed"] is not None:
                store.put_failed(seed["key"], seed["failed"])
            with Sandbox() as sandbox:
                return build(family, builder=builder, executor=executor, sandbox=sandbox, store=store,
                             settings=settings, builder_sha=shas[0], executor_sha=shas[1], force=force)


def model_shas(opts: ClusterOptions) -> tuple[str, str]:
    """SHA-256 of the builder and executor in the registry (every node must hold these very files)."""
    from .. import models, settings

    registry = settings.load_registry()
    return (models.for_role(registry, "builder", opts.builder_name).sha256,
            models.for_role(registry, "executor", opts.executor_name).sha256)


def build_jobs(store: Any, families: list[Family], settings: BuildSettings, shas: tuple[str, str]) -> list[Job]:
    """One job per family, each with what the driver's tool store holds for that build (the seed)."""
    jobs = []
    for n, family in enumerate(families):
        key = build_key(family, shas[0], shas[1], settings)
        seed = {"key": key, "failed": store.failed(key),
                "tools": [t for t in (store.get(family.name, missing_ok=True), store.by_key(key)) if t]}
        jobs.append(Job((n, family, key, seed), f"build-{n}"))
    return jobs


def run_builds(pool: WorkerPool, store: Any, families: list[Family], settings: BuildSettings,
               shas: tuple[str, str], force: bool, progress: Progress,
               arrived: Callable[[Family, Tool | None, BuildReport], None] | None = None
               ) -> tuple[dict[int, tuple[Tool | None, BuildReport]], list[str]]:
    """Build each family on the pool's workers (BuildWorker or a subclass); each new outcome goes into the
    driver's `store` as it arrives (then `arrived` is told). Returns the outcomes by family index and the
    builds given up (a build that killed two workers)."""
    results: dict[int, tuple[Tool | None, BuildReport]] = {}
    lost: list[str] = []

    def done(job: Job, result: tuple[Tool | None, BuildReport]) -> None:
        n, family, key, _ = job.payload
        tool, report = result
        if not report.cache_hit:
            if tool is not None:
                store.put(tool)
            else:
                store.put_failed(key, report.model_dump_json())
        results[n] = result
        if arrived is not None:
            arrived(family, tool, report)
        progress.advance()

    progress.phase("building", len(families))
    farm(pool, build_jobs(store, families, settings, shas),
         lambda actor, job: actor.build.remote(job.payload[1], settings, shas, job.payload[3], force),
         done, lambda job, why: lost.append(f"{job.payload[1].name}: {why}"), lambda: False, progress)
    return results, lost


def build_on_workers(families: list[Family], settings: BuildSettings, opts: ClusterOptions, *, force: bool = False,
                     progress: Progress | None = None, models: MakeModels | None = None,
                     shas: tuple[str, str] | None = None) -> list[tuple[Family, Tool | None, BuildReport]]:
    """Build each family on a worker; the outcomes in the order of `families`, each kept in the tool store
    as soon as it arrives. A family whose build killed two workers is reported, not retried."""
    from ..errors import ClusterError
    from ..store import ToolStore

    import_ray()
    progress = progress or _Quiet()
    shas = shas or model_shas(opts)
    with ToolStore() as store:
        args = (opts.builder_name, opts.executor_name, opts.threads, opts.verbose, models)
        with start_workers(BuildWorker, args, opts, progress) as pool:
            results, lost = run_builds(pool, store, families, settings, shas, force, progress)
    if lost:
        raise ClusterError("builds given up: " + "; ".join(lost) + " (the other outcomes are kept in the tool store)")
    return [(family, *results[n]) for n, family in enumerate(families)]
