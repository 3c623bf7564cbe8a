"""CPU time (this process and its children), wall time and tokens, measured around a block of work."""

from __future__ import annotations

import os
import resource
import time
from dataclasses import dataclass, field

from pydantic import BaseModel


def process_cpu_seconds() -> float:
    """User + system CPU seconds of this process so far (all threads)."""
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def children_cpu_seconds() -> float:
    """User + system CPU seconds of reaped child processes so far."""
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


class Usage(BaseModel):
    """What one model call (or a sum of them) cost."""

    prompt_tokens: int = 0
    completion_tokens: int = 0
    cached_tokens: int = 0
    forced_tokens: int = 0  # reply tokens the schema forced, appended in batches (part of completion_tokens)
    restored_tokens: int = 0  # of the cached tokens, those loaded from a saved state (runner/warmstate.py)
    wall_seconds: float = 0.0
    cpu_seconds: float = 0.0

    def __add__(self, other: "Usage") -> "Usage":
        return Usage(
            prompt_tokens=self.prompt_tokens + other.prompt_tokens,
            completion_tokens=self.completion_tokens + other.completion_tokens,
            cached_tokens=self.cached_tokens + other.cached_tokens,
            forced_tokens=self.forced_tokens + other.forced_tokens,
            restored_tokens=self.restored_tokens + other.restored_tokens,
            wall_seconds=self.wall_seconds + other.wall_seconds,
            cpu_seconds=self.cpu_seconds + other.cpu_seconds,
        )


@dataclass
class Stopwatch:
    """Wall and process-CPU seconds between start() and stop(); reusable as a context manager."""

    wall_seconds: float = 0.0
    cpu_seconds: float = 0.0
    _wall0: float = field(default=0.0, repr=False)
    _cpu0: float = field(default=0.0, repr=False)

    def start(self) -> "Stopwatch":
        self._wall0 = time.perf_counter()
        self._cpu0 = process_cpu_seconds()
        return self

    def stop(self) -> "Stopwatch":
        self.wall_seconds = time.perf_counter() - self._wall0
        self.cpu_seconds = process_cpu_seconds() - self._cpu0
        return self

    def __enter__(self) -> "Stopwatch":
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()


def physical_cores() -> int:
    """Physical CPU cores (llama.cpp runs best with one thread per physical core)."""
    try:
        cores = set()
        with open("/proc/cpuinfo", encoding="ascii", errors="replace") as fh:
            phys = core = None
            for line in fh:
                if line.startswith("physical id"):
                    phys = line.split(":")[1].strip()
                elif line.startswith("core id"):
                    core = line.split(":")[1].strip()
                elif not line.strip():
                    if core is not None:
                        cores.add((phys, core))
                    phys = core = None
            if core is not None:
                cores.add((phys, core))
        if cores:
            return min(len(cores), len(os.sched_getaffinity(0)))
    except OSError:
        pass
    return max(1, (os.cpu_count() or 2) // 2) if (os.cpu_count() or 1) > 2 else (os.cpu_count() or 1)
