"""The host side: a small pool of warm worker processes, and the `Sandbox` that calls tools in them."""

from __future__ import annotations

import functools
import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
import weakref
from pathlib import Path
from typing import Any, Literal

from pydantic import ValidationError

from runner.errors import SandboxError

from . import oslimits, protocol
from .records import Layer, Limits, RunResult
from .screen import screen, screen_result

STARTUP_TIMEOUT_SECONDS = 30.0
REPLY_GRACE_SECONDS = 5.0
WORKER_PATH = Path(__file__).with_name("worker.py")
OS_LAYERS = ("syscall_filter", "files", "privileges")
LAYER_TITLES = {
    "syscall_filter": "syscall filter",
    "files": "file-system restriction",
    "privileges": "privilege drop",
    "network": "network namespace",
}


@functools.lru_cache(maxsize=1)
def _compiled_filter() -> tuple[bytes | None, str]:
    """The allow-list syscall filter as libseccomp compiles it, once per process (the worker has no site-packages)."""
    return oslimits.compile_with_libseccomp()


class _WorkerLost(Exception):
    """The zygote died or stopped answering during a call."""


class _Worker:
    """One pre-started zygote process with its own empty temporary folder."""

    def __init__(self) -> None:
        self.folder = tempfile.mkdtemp(prefix="jigwright-sandbox-")
        program, note = _compiled_filter()
        config = json.dumps({"parent": os.getpid(), "seccomp_program": program.hex() if program else None,
                             "seccomp_note": note})
        try:
            self.proc = subprocess.Popen(
                [sys.executable, "-I", "-S", "-B", str(WORKER_PATH), config],
                stdin=subprocess.PIPE,
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                cwd=self.folder,
                env={},
                start_new_session=True,
            )
        except OSError as exc:
            shutil.rmtree(self.folder, ignore_errors=True)
            raise SandboxError(f"cannot start a sandbox worker: {exc}") from exc
        self.info: dict[str, Any] | None = None

    def alive(self) -> bool:
        return self.proc.poll() is None

    def ready(self, timeout: float = STARTUP_TIMEOUT_SECONDS) -> dict[str, Any]:
        """Wait for the zygote's hello (the layer report); raise SandboxError if it never comes."""
        if self.info is not None:
            return self.info
        deadline = time.monotonic() + timeout
        try:
            header = protocol.read_exact(self.proc.stdout.fileno(), 4, deadline)
            body = protocol.read_exact(self.proc.stdout.fileno(), int.from_bytes(header, "big"), deadline) if header else None
        except TimeoutError:
            body = None
        if body is None:
            self.kill()
            detail = self._stderr_tail()
            raise SandboxError(f"sandbox worker failed to start{': ' + detail if detail else ''}; "
                               "run `jigwright checkup` to see which layer is missing")
        self.info = json.loads(body)
        self.proc.stderr.close()
        return self.info

    def _stderr_tail(self) -> str:
        try:
            text = self.proc.stderr.read().decode("utf-8", "replace").strip()
        except (OSError, ValueError):
            return ""
        return text.splitlines()[-1][:300] if text else ""

    def call(self, request: bytes, deadline: float) -> dict[str, Any]:
        """Send one request and return the zygote's reply; raise _WorkerLost if it dies or hangs."""
        try:
            protocol.write_all(self.proc.stdin.fileno(), len(request).to_bytes(4, "big") + request, deadline)
            header = protocol.read_exact(self.proc.stdout.fileno(), 4, deadline)
            body = protocol.read_exact(self.proc.stdout.fileno(), int.from_bytes(header, "big"), deadline) if header else None
        except TimeoutError:
            raise _WorkerLost("timeout") from None
        except OSError as exc:
            raise _WorkerLost(f"pipe error: {exc}") from None
        if body is None:
            raise _WorkerLost("died")
        try:
            reply = json.loads(body)
        except ValueError:
            raise _WorkerLost("malformed reply") from None
        if not isinstance(reply, dict):
            raise _WorkerLost("malformed reply")
        return reply

    def kill(self) -> None:
        """Kill the zygote's process group; only while it is unreaped, so the group id is still ours."""
        if self.proc.returncode is None:
            try:
                os.killpg(self.proc.pid, signal.SIGKILL)
            except (ProcessLookupError, PermissionError):
                pass
        self._reap()

    def close(self) -> None:
        try:
            self.proc.stdin.close()
            self.proc.wait(timeout=2)
        except (OSError, subprocess.TimeoutExpired):
            pass
        self.kill()

    def _reap(self) -> None:
        try:
            self.proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            pass
        for stream in (self.proc.stdin, self.proc.stdout, self.proc.stderr):
            try:
                stream.close()
            except OSError:
                pass
        shutil.rmtree(self.folder, ignore_errors=True)


def _shutdown(workers: list[_Worker]) -> None:
    while workers:
        workers.pop().close()


def _encode_request(code: str, args: dict[str, Any] | None, entry: str, limits: Limits, builtins_mode: str,
                    os_layers_off: tuple[str, ...] = ()) -> bytes:
    args = {} if args is None else args
    if not isinstance(args, dict) or not all(isinstance(k, str) for k in args):
        raise SandboxError("tool arguments must be a JSON object with string keys")
    if not entry.isidentifier():
        raise SandboxError(f"entry point {entry!r} is not a Python identifier")
    unknown = set(os_layers_off) - set(OS_LAYERS)
    if unknown:
        raise SandboxError(f"unknown sandbox layers {sorted(unknown)}; known: {', '.join(OS_LAYERS)}")
    try:
        return json.dumps(
            {"code": code, "entry": entry, "args": args, "limits": limits.model_dump(), "builtins": builtins_mode,
             "os_layers_off": sorted(os_layers_off)},
            separators=(",", ":"),
            allow_nan=False,
        ).encode("utf-8")
    except (TypeError, ValueError) as exc:
        raise SandboxError(f"tool arguments are not JSON-serialisable: {exc}") from exc


class Sandbox:
    """A small pool of warm, limited worker processes; `run` calls a tool in one of them.

    Calls are serialised with a lock. A worker that dies is replaced; tool failures are RunResults and
    only a sandbox that cannot run at all raises SandboxError.
    """

    def __init__(self, pool_size: int = 2, limits: Limits | None = None) -> None:
        if pool_size < 1:
            raise SandboxError("pool_size must be at least 1")
        self.pool_size = pool_size
        self.limits = limits or Limits()
        self._workers: list[_Worker] = []
        self._lock = threading.Lock()
        self._closed = False
        self._finalizer = weakref.finalize(self, _shutdown, self._workers)

    def __enter__(self) -> "Sandbox":
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def start(self) -> None:
        """Start the worker processes (they boot in the background) and wait for the first."""
        with self._lock:
            if self._closed:
                raise SandboxError("the sandbox is closed")
            self._acquire()

    def close(self) -> None:
        """Stop all workers and remove their folders."""
        with self._lock:
            self._closed = True
            _shutdown(self._workers)

    def layers(self) -> list[Layer]:
        """Each operating-system layer as the worker set it up and checked it in a test child."""
        with self._lock:
            info = self._acquire().ready()
        return [Layer(name=name, active=bool(active), mode=mode, detail=detail)
                for name in LAYER_TITLES for active, mode, detail in [info["layers"][name]]]

    def worker_pid(self) -> int:
        """The process id of the worker that takes the next call (for tests that inspect it)."""
        with self._lock:
            return self._acquire().proc.pid

    def run(self, code: str, args: dict[str, Any] | None = None, entry: str = "solve", limits: Limits | None = None) -> RunResult:
        """Screen `code`, then call `entry(**args)` in a fresh process forked from a warm worker."""
        return self._run(code, args, entry, limits)

    def _run(
        self,
        code: str,
        args: dict[str, Any] | None = None,
        entry: str = "solve",
        limits: Limits | None = None,
        *,
        screen_code: bool = True,
        builtins_mode: Literal["safe", "full"] = "safe",
        os_layers_off: tuple[str, ...] = (),
    ) -> RunResult:
        """`run` with layers switched off, for tests of the deeper layers only.

        `builtins_mode="full"` gives the tool the real builtins, so also the real `__import__` and the real
        modules instead of filtered copies; `os_layers_off` names operating-system layers to skip.
        """
        limits = limits or self.limits
        request = _encode_request(code, args, entry, limits, builtins_mode, tuple(os_layers_off))
        if screen_code:
            violations = screen(code, entry=entry)
            if violations:
                return screen_result(violations)
        with self._lock:
            if self._closed:
                raise SandboxError("the sandbox is closed")
            worker = self._acquire()
            deadline = time.monotonic() + limits.wall_seconds + REPLY_GRACE_SECONDS
            started = time.monotonic()
            try:
                reply = worker.call(request, deadline)
            except _WorkerLost as lost:
                self._replace(worker)
                wall = time.monotonic() - started
                if str(lost) == "timeout":
                    return RunResult(status="error", error_kind="timeout", wall_seconds=wall,
                                     message=f"wall-clock limit of {limits.wall_seconds:g} s exceeded (worker restarted)")
                return RunResult(status="error", error_kind="crashed", wall_seconds=wall,
                                 message=f"the sandbox worker died during the call ({lost})")
        if "sandbox_error" in reply:
            raise SandboxError(str(reply["sandbox_error"])[:400])
        try:
            return RunResult.model_validate(reply)
        except ValidationError:
            return RunResult(status="error", error_kind="crashed", message="the sandbox worker sent a malformed result")

    def _acquire(self) -> _Worker:
        for worker in [w for w in self._workers if not w.alive()]:
            self._workers.remove(worker)
            worker.kill()
        while len(self._workers) < self.pool_size:
            self._workers.append(_Worker())
        worker = self._workers[0]
        try:
            worker.ready()
        except SandboxError:
            self._workers.remove(worker)
            raise
        return worker

    def _replace(self, worker: _Worker) -> None:
        worker.kill()
        if worker in self._workers:
            self._workers.remove(worker)
        self._workers.append(_Worker())


def run_once(code: str, args: dict[str, Any] | None = None, limits: Limits | None = None, *, entry: str = "solve") -> RunResult:
    """A cold call: screen, start a fresh worker process, call the tool, stop the worker."""
    violations = screen(code, entry=entry)
    if violations:
        return screen_result(violations)
    with Sandbox(pool_size=1, limits=limits) as sandbox:
        return sandbox._run(code, args, entry, screen_code=False)


@functools.lru_cache(maxsize=1)
def _probe() -> tuple[Layer, ...]:
    try:
        with Sandbox(pool_size=1) as sandbox:
            return tuple(sandbox.layers())
    except SandboxError as exc:
        return tuple(Layer(name=name, active=False, mode="none", detail=str(exc)) for name in LAYER_TITLES)


def isolation_layers() -> list[Layer]:
    """The operating-system layers a sandbox on this machine gets, each checked in a test child."""
    return list(_probe())


def _layer(name: str) -> tuple[bool, str]:
    found = next(layer for layer in _probe() if layer.name == name)
    return found.active, f"{found.mode}: {found.detail}"


def network_isolation() -> tuple[bool, str]:
    """Whether tool calls run without network access (fresh network namespace), and why not if not."""
    return _layer("network")


def syscall_filter() -> tuple[bool, str]:
    """Whether the allow-list syscall filter is active, and why not if not."""
    return _layer("syscall_filter")
