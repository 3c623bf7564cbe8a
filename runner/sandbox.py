"""Run model-written tool code with limits, a static screen first, and warm workers.

Layers, outermost first:
1. `screen()` checks the source with `ast` before anything runs: allow-listed imports only, no dangerous
   names, no underscore attributes, no dunder strings, no attribute access through `str.format`.
2. The worker runs the tool with restricted builtins and an import hook that hands out fresh, filtered
   copies of allow-listed modules, in a fresh namespace.
3. The operating system: every call runs in a new process forked from a pre-started worker ("zygote"),
   with rlimits (CPU, address space, file size 0, few open files, no core dumps), a seccomp filter that
   denies process creation, sockets, file writes and admin syscalls (x86_64), and a fresh network
   namespace where the kernel allows one. The folder is an empty temporary one, the environment is empty.

Forking per call keeps calls cheap (about a millisecond) while making per-call limits exact and
guaranteeing that no state leaks from one call to the next. The worker code lives at the end of this
file, below the worker marker: the child interpreter (`python -I -S -B`) runs only that section.
"""

from __future__ import annotations

import ast
import functools
import json
import os
import select
import shutil
import signal
import string
import subprocess
import sys
import tempfile
import threading
import time
import weakref
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from runner.errors import SandboxError

ErrorKind = Literal["screen", "timeout", "memory", "exception", "bad_return", "output", "crashed"]

MAX_CODE_BYTES = 200_000
STARTUP_TIMEOUT_SECONDS = 30.0
REPLY_GRACE_SECONDS = 5.0


class Limits(BaseModel):
    """Resource limits for one tool call. File writes and new processes are always denied."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    cpu_seconds: float = Field(default=5.0, gt=0, le=3600)
    wall_seconds: float = Field(default=10.0, gt=0, le=3600)
    memory_mb: int = Field(default=512, ge=64, le=1 << 20)
    open_files: int = Field(default=16, ge=8, le=4096)
    stdout_bytes: int = Field(default=64 * 1024, ge=0)
    value_bytes: int = Field(default=1024 * 1024, ge=16)


class Violation(BaseModel):
    """One finding of the static screen: which rule, where, and what."""

    model_config = ConfigDict(frozen=True)

    rule: str
    line: int | None
    message: str

    def describe(self) -> str:
        where = f" at line {self.line}" if self.line is not None else ""
        return f"{self.message} (rule: {self.rule}){where}"


class RunResult(BaseModel):
    """The outcome of one tool call; `message` is one line, fit to show to a model as feedback."""

    status: Literal["ok", "error"]
    value: Any = None
    error_kind: ErrorKind | None = None
    message: str = ""
    line: int | None = None
    stdout: str = ""
    cpu_seconds: float = 0.0
    wall_seconds: float = 0.0

    @property
    def ok(self) -> bool:
        return self.status == "ok"


# ---------------------------------------------------------------------------------------------------
# The static screen
# ---------------------------------------------------------------------------------------------------


def screen(code: str, entry: str | None = None) -> list[Violation]:
    """Check tool source before it runs; an empty list means no rule objects.

    With `entry`, also require a top-level definition of that name (the function the sandbox calls).
    """
    size = len(code.encode("utf-8", "replace"))
    if size > MAX_CODE_BYTES:
        return [Violation(rule="code-size", line=None, message=f"code is {size} bytes; the limit is {MAX_CODE_BYTES}")]
    try:
        tree = ast.parse(code, filename=TOOL_FILENAME)
    except SyntaxError as exc:
        return [Violation(rule="syntax", line=exc.lineno, message=f"SyntaxError: {exc.msg}")]
    except (ValueError, RecursionError, MemoryError) as exc:
        return [Violation(rule="syntax", line=None, message=f"{type(exc).__name__}: {exc}")]
    found: list[Violation] = []
    docstrings = _docstring_nodes(tree)
    for node in ast.walk(tree):
        found.extend(_check_node(node, docstrings))
    if entry is not None and not _defines(tree, entry):
        found.append(Violation(rule="entry-point", line=None, message=f"no top-level function {entry!r} is defined"))
    found.sort(key=lambda v: (v.line is None, v.line or 0))
    return found


def _docstring_nodes(tree: ast.AST) -> set[int]:
    """ids of string constants that are docstrings (they may mention dunders freely)."""
    ids: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)) and node.body:
            first = node.body[0]
            if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant) and isinstance(first.value.value, str):
                ids.add(id(first.value))
    return ids


def _defines(tree: ast.Module, name: str) -> bool:
    for stmt in tree.body:
        if isinstance(stmt, (ast.FunctionDef, ast.AsyncFunctionDef)) and stmt.name == name:
            return True
        targets = stmt.targets if isinstance(stmt, ast.Assign) else [stmt.target] if isinstance(stmt, ast.AnnAssign) else []
        if any(isinstance(t, ast.Name) and t.id == name for t in targets):
            return True
    return False


def _attribute_violation(name: str, line: int | None) -> Violation | None:
    if name in ALLOWED_DUNDER_ATTRIBUTES:
        return None
    if name.startswith("__") and name.endswith("__"):
        return Violation(rule="dunder-attribute", line=line, message=f"attribute {name!r} is not allowed")
    if name.startswith("_"):
        return Violation(rule="private-attribute", line=line, message=f"attribute {name!r} is not allowed")
    if name in DENIED_ATTRIBUTES:
        return Violation(rule="denied-attribute", line=line, message=f"attribute {name!r} is not allowed")
    return None


def _check_node(node: ast.AST, docstrings: set[int]) -> list[Violation]:
    line = getattr(node, "lineno", None)
    out: list[Violation] = []
    if isinstance(node, ast.Import):
        for alias in node.names:
            if alias.name not in ALLOWED_MODULES:
                out.append(Violation(rule="import-allow-list", line=line, message=f"import of {alias.name!r} is not allowed"))
    elif isinstance(node, ast.ImportFrom):
        if node.level:
            out.append(Violation(rule="import-allow-list", line=line, message="relative imports are not allowed"))
        elif node.module not in ALLOWED_MODULES:
            out.append(Violation(rule="import-allow-list", line=line, message=f"import of {node.module!r} is not allowed"))
        for alias in node.names:
            if alias.name == "*":
                continue
            if alias.name in DENIED_NAMES or alias.name in DENIED_ATTRIBUTES or alias.name.startswith("_"):
                out.append(Violation(rule="denied-name", line=line, message=f"importing {alias.name!r} is not allowed"))
    elif isinstance(node, ast.Name):
        if node.id in DENIED_NAMES:
            out.append(Violation(rule="denied-name", line=line, message=f"name {node.id!r} is not allowed"))
        elif node.id.startswith("__") and node.id not in ALLOWED_DUNDER_NAMES:
            out.append(Violation(rule="dunder-name", line=line, message=f"name {node.id!r} is not allowed"))
    elif isinstance(node, ast.Attribute):
        found = _attribute_violation(node.attr, line)
        if found:
            out.append(found)
        elif node.attr in ("format", "format_map"):
            out.extend(_check_format(node, line))
    elif isinstance(node, ast.MatchClass):
        for attr in node.kwd_attrs:
            found = _attribute_violation(attr, line)
            if found:
                out.append(found)
    elif isinstance(node, ast.Constant) and isinstance(node.value, (str, bytes)):
        text = node.value if isinstance(node.value, str) else node.value.decode("latin-1")
        if "__" in text and text not in ALLOWED_DUNDER_STRINGS and id(node) not in docstrings:
            out.append(Violation(rule="dunder-string", line=line, message="string literals containing '__' are not allowed"))
    elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id == "type":
        if len(node.args) + len(node.keywords) > 1:
            out.append(Violation(rule="type-three-args", line=line, message="type() with more than one argument is not allowed"))
    return out


def _check_format(node: ast.Attribute, line: int | None) -> list[Violation]:
    """`str.format` reaches attributes through `{0.attr}`; allow it only on literals without attribute fields."""
    receiver = node.value
    if not (isinstance(receiver, ast.Constant) and isinstance(receiver.value, str)):
        return [Violation(rule="format-string", line=line, message=f".{node.attr}() is only allowed on a string literal")]
    try:
        fields = [f for _, f, _, _ in string.Formatter().parse(receiver.value) if f]
    except ValueError:
        return []
    for field in fields:
        if "." in field:
            return [Violation(rule="format-string", line=line, message=f"format field {{{field}}} uses attribute access")]
    return []


def _screen_result(violations: list[Violation]) -> RunResult:
    shown = "; ".join(v.describe() for v in violations[:3])
    if len(violations) > 3:
        shown += f"; and {len(violations) - 3} more"
    return RunResult(status="error", error_kind="screen", message=shown, line=violations[0].line)


# ---------------------------------------------------------------------------------------------------
# The parent side: workers and the Sandbox
# ---------------------------------------------------------------------------------------------------


@functools.lru_cache(maxsize=1)
def _worker_source() -> str:
    """The worker section of this file, padded with newlines so line numbers match the file."""
    text = Path(__file__).read_text(encoding="utf-8")
    at = text.index("\n" + WORKER_MARKER + "\n") + 1
    return "\n" * text.count("\n", 0, at) + text[at:]


class _WorkerLost(Exception):
    """The zygote died or stopped answering during a call."""


def _read_exact(fd: int, size: int, deadline: float) -> bytes | None:
    chunks: list[bytes] = []
    while size:
        remaining = deadline - time.monotonic()
        if remaining <= 0:
            raise TimeoutError
        ready, _, _ = select.select([fd], [], [], remaining)
        if not ready:
            continue
        chunk = os.read(fd, min(size, 1 << 20))
        if not chunk:
            return None
        chunks.append(chunk)
        size -= len(chunk)
    return b"".join(chunks)


def _write_all(fd: int, data: bytes, deadline: float) -> None:
    view = memoryview(data)
    while view:
        remaining = deadline - time.monotonic()
        if remaining <= 0:
            raise TimeoutError
        _, ready, _ = select.select([], [fd], [], remaining)
        if ready:
            view = view[os.write(fd, view[: 1 << 16]) :]


class _Worker:
    """One pre-started zygote process with its own empty temporary folder."""

    def __init__(self, preload: bool) -> None:
        self.folder = tempfile.mkdtemp(prefix="jigwright-sandbox-")
        config = json.dumps({"preload": preload, "parent": os.getpid()})
        try:
            self.proc = subprocess.Popen(
                [sys.executable, "-I", "-S", "-B", "-c", _worker_source(), config],
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
        """Wait for the zygote's hello (isolation facts); raise SandboxError if it never comes."""
        if self.info is not None:
            return self.info
        deadline = time.monotonic() + timeout
        try:
            header = _read_exact(self.proc.stdout.fileno(), 4, deadline)
            body = _read_exact(self.proc.stdout.fileno(), int.from_bytes(header, "big"), deadline) if header else None
        except TimeoutError:
            body = None
        if body is None:
            self.kill()
            detail = self._stderr_tail()
            raise SandboxError(f"sandbox worker failed to start{': ' + detail if detail else ''}")
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
            _write_all(self.proc.stdin.fileno(), len(request).to_bytes(4, "big") + request, deadline)
            header = _read_exact(self.proc.stdout.fileno(), 4, deadline)
            body = _read_exact(self.proc.stdout.fileno(), int.from_bytes(header, "big"), deadline) if header else None
        except TimeoutError:
            raise _WorkerLost("timeout") from None
        except OSError as exc:
            raise _WorkerLost(f"pipe error: {exc}") from None
        if body is None:
            raise _WorkerLost("died")
        return json.loads(body)

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


def _encode_request(code: str, args: dict[str, Any] | None, entry: str, limits: Limits, builtins_mode: str) -> bytes:
    args = {} if args is None else args
    if not isinstance(args, dict) or not all(isinstance(k, str) for k in args):
        raise SandboxError("tool arguments must be a JSON object with string keys")
    if not entry.isidentifier():
        raise SandboxError(f"entry point {entry!r} is not a Python identifier")
    try:
        return json.dumps(
            {"code": code, "entry": entry, "args": args, "limits": limits.model_dump(), "builtins": builtins_mode},
            separators=(",", ":"),
        ).encode("utf-8")
    except (TypeError, ValueError) as exc:
        raise SandboxError(f"tool arguments are not JSON-serialisable: {exc}") from exc


class Sandbox:
    """A small pool of warm, limited worker processes; `run` calls a tool in one of them.

    Calls are serialised with a lock. A worker that dies is replaced; tool failures are RunResults and
    only a sandbox that cannot run at all raises SandboxError.
    """

    def __init__(self, pool_size: int = 2, limits: Limits | None = None, preload: bool = True) -> None:
        if pool_size < 1:
            raise SandboxError("pool_size must be at least 1")
        self.pool_size = pool_size
        self.limits = limits or Limits()
        self.preload = preload
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

    def isolation(self) -> dict[str, tuple[bool, str]]:
        """What the OS layer could set up in this sandbox's workers: network namespace and syscall filter."""
        with self._lock:
            info = self._acquire().ready()
        return {"network": tuple(info["netns"]), "syscall_filter": tuple(info["seccomp"])}

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
    ) -> RunResult:
        """`run` with layers switched off, for tests of the deeper layers only."""
        limits = limits or self.limits
        request = _encode_request(code, args, entry, limits, builtins_mode)
        if screen_code:
            violations = screen(code, entry=entry)
            if violations:
                return _screen_result(violations)
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
            raise SandboxError(reply["sandbox_error"])
        return RunResult.model_validate(reply)

    def _acquire(self) -> _Worker:
        for worker in [w for w in self._workers if not w.alive()]:
            self._workers.remove(worker)
            worker.kill()
        while len(self._workers) < self.pool_size:
            self._workers.append(_Worker(self.preload))
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
        self._workers.append(_Worker(self.preload))


def run_once(code: str, args: dict[str, Any] | None = None, limits: Limits | None = None, *, entry: str = "solve") -> RunResult:
    """A cold call: screen, start a fresh worker process, call the tool, stop the worker."""
    violations = screen(code, entry=entry)
    if violations:
        return _screen_result(violations)
    with Sandbox(pool_size=1, limits=limits, preload=False) as sandbox:
        return sandbox._run(code, args, entry, screen_code=False)


@functools.lru_cache(maxsize=1)
def _probe() -> dict[str, tuple[bool, str]]:
    try:
        with Sandbox(pool_size=1, preload=False) as sandbox:
            return sandbox.isolation()
    except SandboxError as exc:
        return {"network": (False, str(exc)), "syscall_filter": (False, str(exc))}


def network_isolation() -> tuple[bool, str]:
    """Whether tool calls run without network access (fresh network namespace), and why not if not."""
    return _probe()["network"]


def syscall_filter() -> tuple[bool, str]:
    """Whether the seccomp filter (no processes, sockets, file writes) is active, and why not if not."""
    return _probe()["syscall_filter"]


# ---------------------------------------------------------------------------------------------------
# Everything below the marker also runs inside the worker under `python -I -S -B`: standard library
# only, and annotations must be valid at run time (no `from __future__ import annotations` there).
# ---------------------------------------------------------------------------------------------------
WORKER_MARKER = "# ==== worker section ===="
# ==== worker section ====
import json as _json  # noqa: E402
import os as _os  # noqa: E402
import sys as _sys  # noqa: E402

TOOL_FILENAME = "<tool>"

ALLOWED_MODULES = frozenset({
    "math", "itertools", "functools", "collections", "collections.abc", "datetime", "calendar", "re",
    "string", "fractions", "decimal", "statistics", "heapq", "bisect", "json", "operator", "typing",
    "dataclasses", "enum", "__future__",
})

DENIED_NAMES = frozenset({
    "open", "exec", "eval", "compile", "__import__", "globals", "locals", "vars", "getattr", "setattr",
    "delattr", "hasattr", "input", "breakpoint", "help", "exit", "quit", "memoryview", "dir", "copyright",
    "credits", "license", "__builtins__", "__loader__", "__spec__", "__build_class__",
})

DENIED_ATTRIBUTES = frozenset({
    "gi_frame", "gi_code", "gi_yieldfrom", "cr_frame", "cr_code", "cr_await", "ag_frame", "ag_code",
    "ag_await", "f_globals", "f_locals", "f_builtins", "f_back", "f_code", "f_trace", "tb_frame", "tb_next",
    "co_code", "co_consts", "co_names", "modules", "sys", "os", "posix", "builtins", "subprocess",
    "inspect", "importlib", "ctypes", "socket", "signal", "threading", "shutil", "attrgetter",
    "methodcaller", "get_type_hints", "ForwardRef", "Formatter", "vformat", "get_field",
})

ALLOWED_DUNDER_NAMES = frozenset({"__name__"})
ALLOWED_DUNDER_ATTRIBUTES = frozenset({"__init__", "__name__"})
ALLOWED_DUNDER_STRINGS = frozenset({"__main__"})

SAFE_BUILTINS = (
    "abs", "aiter", "all", "anext", "any", "ascii", "bin", "bool", "bytearray", "bytes", "callable", "chr",
    "classmethod", "complex", "dict", "divmod", "enumerate", "filter", "float", "format", "frozenset",
    "hash", "hex", "id", "int", "isinstance", "issubclass", "iter", "len", "list", "map", "max", "min",
    "next", "object", "oct", "ord", "pow", "print", "property", "range", "repr", "reversed", "round", "set",
    "slice", "sorted", "staticmethod", "str", "sum", "super", "tuple", "type", "zip", "NotImplemented",
    "Ellipsis", "__build_class__",
)

_CPU_GRACE_SECONDS = 0.25
_POLL_SECONDS = 0.05
_MAX_DEPTH = 100
_MAX_INT_BITS = 13_000

_AUDIT_ARCH_X86_64 = 0xC000003E
_DENIED_SYSCALLS_X86_64 = (
    56, 57, 58, 59, 322, 435,  # clone fork vfork execve execveat clone3
    101, 62, 200, 234, 129, 297, 310, 311, 312, 424, 434, 438,  # ptrace, signals to others, other processes
    41, 53,  # socket socketpair
    85, 437, 76, 77, 82, 264, 316, 83, 258, 84, 86, 265, 88, 266, 87, 263, 90, 91, 268, 92, 93, 94, 260,
    133, 259, 132, 235, 280, 261, 188, 189, 190, 197, 198, 199, 304,  # file creation and changes
    165, 166, 155, 161, 169, 170, 171, 175, 313, 176, 246, 320, 321, 298, 250, 248, 249, 164, 227, 305,
    159, 103, 163, 179, 172, 173, 323, 425, 426, 427, 428, 429, 430, 431, 432, 433, 442, 272, 308, 167,
    168, 29, 30, 31, 64, 65, 66, 68, 69, 70, 71, 240, 300, 153, 135,  # admin, namespaces, IPC
)
_OPEN_FLAG_ARGS_X86_64 = ((257, 2), (2, 1))  # openat flags are argument 2, open flags argument 1
_WRITE_OPEN_FLAGS = 0o1 | 0o2 | 0o100 | 0o1000 | 0o2000  # O_WRONLY O_RDWR O_CREAT O_TRUNC O_APPEND

_state: dict = {}


def _one_line(text: str, limit: int = 400) -> str:
    text = " ".join(part.strip() for part in str(text).splitlines() if part.strip())
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _send(fd: int, obj: dict) -> None:
    data = _json.dumps(obj, separators=(",", ":")).encode("utf-8")
    data = len(data).to_bytes(4, "big") + data
    while data:
        data = data[_os.write(fd, data) :]


def _recv(fd: int):
    header = _read_all(fd, 4)
    if header is None:
        return None
    body = _read_all(fd, int.from_bytes(header, "big"))
    return None if body is None else _json.loads(body)


def _read_all(fd: int, size: int):
    chunks = []
    while size:
        chunk = _os.read(fd, min(size, 1 << 20))
        if not chunk:
            return None
        chunks.append(chunk)
        size -= len(chunk)
    return b"".join(chunks)


def _libc():
    import ctypes

    if "libc" not in _state:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl.argtypes = [ctypes.c_int, ctypes.c_ulong, ctypes.c_ulong, ctypes.c_ulong, ctypes.c_ulong]
        _state["libc"] = libc
    return _state["libc"]


def _unshare_network() -> tuple:
    """Move this process into a fresh network namespace (no interfaces up, so no network at all).

    Root can do that directly; other users need a new user namespace around it, where the kernel allows one.
    """
    import ctypes

    clone_newnet, clone_newuser = 0x40000000, 0x10000000
    attempts = [clone_newnet] if _os.geteuid() == 0 else [clone_newnet, clone_newnet | clone_newuser]
    try:
        libc = _libc()
        for flags in attempts:
            if libc.unshare(flags) == 0:
                how = " (inside a new user namespace)" if flags & clone_newuser else ""
                return True, f"each worker runs in a fresh network namespace with no interfaces{how}"
            err = ctypes.get_errno()
    except (OSError, AttributeError) as exc:
        return False, f"unshare(CLONE_NEWNET) is unavailable: {exc}"
    return False, f"unshare(CLONE_NEWNET) failed: {_os.strerror(err)} (needs root or unprivileged user namespaces)"


def _filter_program() -> list:
    """A classic-BPF seccomp program: deny the listed syscalls and opening files for writing with EPERM."""
    ld, jeq, jge, jset, ret = 0x20, 0x15, 0x35, 0x45, 0x06
    allow, errno_eperm, kill = 0x7FFF0000, 0x00050001, 0x80000000
    prog = [(ld, 0, 0, 4), (jeq, 1, 0, _AUDIT_ARCH_X86_64), (ret, 0, 0, kill), (ld, 0, 0, 0), (jge, "E", 0, 0x40000000)]
    prog += [(jeq, "E", 0, nr) for nr in sorted(set(_DENIED_SYSCALLS_X86_64))]
    for nr, arg in _OPEN_FLAG_ARGS_X86_64:
        prog += [(jeq, 0, 2, nr), (ld, 0, 0, 16 + 8 * arg), (jset, "E", "A", _WRITE_OPEN_FLAGS)]
    prog += [(ret, 0, 0, allow), (ret, 0, 0, errno_eperm)]
    targets = {"A": len(prog) - 2, "E": len(prog) - 1}
    resolved = []
    for i, (code, jt, jf, k) in enumerate(prog):
        jt = targets[jt] - i - 1 if isinstance(jt, str) else jt
        jf = targets[jf] - i - 1 if isinstance(jf, str) else jf
        resolved.append((code, jt, jf, k))
    return resolved


def _compiled_filter():
    """The filter as a ctypes `sock_fprog`, built once in the zygote so children only make two prctl calls."""
    import ctypes

    if "filter" not in _state:

        class SockFilter(ctypes.Structure):
            _fields_ = [("code", ctypes.c_ushort), ("jt", ctypes.c_ubyte), ("jf", ctypes.c_ubyte), ("k", ctypes.c_uint)]

        class SockFprog(ctypes.Structure):
            _fields_ = [("len", ctypes.c_ushort), ("filter", ctypes.POINTER(SockFilter))]

        program = _filter_program()
        filters = (SockFilter * len(program))(*[SockFilter(*ins) for ins in program])
        _state["filter"] = (SockFprog(len(program), filters), filters)
    return _state["filter"][0]


def _install_syscall_filter() -> int:
    """Install the seccomp filter on this process; return 0 or an errno. Irreversible, so only in children."""
    import ctypes

    fprog = _compiled_filter()
    libc = _libc()
    if libc.prctl(38, 1, 0, 0, 0) != 0:  # PR_SET_NO_NEW_PRIVS
        return ctypes.get_errno() or 1
    if libc.prctl(22, 2, ctypes.addressof(fprog), 0, 0) != 0:  # PR_SET_SECCOMP, SECCOMP_MODE_FILTER
        return ctypes.get_errno() or 1
    return 0


def _probe_syscall_filter() -> tuple:
    """Try the filter in a throw-away child so the zygote itself keeps the right to fork."""
    if _os.uname().machine != "x86_64":
        return False, f"no syscall table for {_os.uname().machine}; seccomp filter not installed"
    _compiled_filter()
    pid = _os.fork()
    if pid == 0:
        try:
            _os._exit(_install_syscall_filter() & 0x7F)
        finally:
            _os._exit(127)
    _, status = _os.waitpid(pid, 0)
    code = _os.waitstatus_to_exitcode(status)
    if code != 0:
        return False, f"seccomp filter could not be installed: {_os.strerror(code) if code > 0 else 'signal'}"
    return True, "seccomp filter denies new processes, sockets, file writes and admin syscalls"


def _set_parent_death_signal() -> None:
    import signal

    try:
        _libc().prctl(1, int(signal.SIGKILL), 0, 0, 0)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass


def _module_copy(name: str, cache: dict):
    """A fresh, filtered copy of an allow-listed module: no private names, no other modules, no gadgets."""
    import importlib
    import types

    if name in cache:
        return cache[name]
    module = importlib.import_module(name)
    copy = types.ModuleType(name, getattr(module, "__doc__", None))
    cache[name] = copy
    for key, value in list(vars(module).items()):
        if key.startswith("_") or key in DENIED_NAMES or key in DENIED_ATTRIBUTES:
            continue
        if isinstance(value, types.ModuleType):
            if f"{name}.{key}" not in ALLOWED_MODULES:
                continue
            value = _module_copy(f"{name}.{key}", cache)
        setattr(copy, key, value)
    for sub in ALLOWED_MODULES:
        if sub.startswith(name + "."):
            setattr(copy, sub[len(name) + 1 :], _module_copy(sub, cache))
    return copy


# Modules that allowed modules import lazily from C code (datetime.strptime imports _strptime, strftime
# imports time). The screen rejects importing them in tool code, so only those C paths reach them.
LAZY_INTERNAL_MODULES = frozenset({"_strptime", "time"})


def _make_guarded_import():
    cache: dict = {}

    def guarded_import(name, globals=None, locals=None, fromlist=(), level=0):
        if level:
            raise ImportError("relative imports are not allowed")
        if name in LAZY_INTERNAL_MODULES and not fromlist:
            return _sys.modules[name]
        if name not in ALLOWED_MODULES:
            raise ImportError(f"import of {name!r} is not allowed")
        return _module_copy(name if fromlist else name.split(".")[0], cache)

    return guarded_import


def _safe_builtins() -> dict:
    import builtins

    table = {name: getattr(builtins, name) for name in SAFE_BUILTINS}
    for name, value in vars(builtins).items():
        if isinstance(value, type) and issubclass(value, BaseException):
            table[name] = value
    table["__import__"] = _make_guarded_import()
    return table


class _OutputLimit(BaseException):
    """Raised into the tool when it prints past the stdout cap."""


class _CappedStdout:
    """Collects what the tool prints, up to a byte cap; past the cap it records the line and raises."""

    def __init__(self, cap: int) -> None:
        self.cap = cap
        self.size = 0
        self.parts: list = []
        self.overflow_line = None
        self.overflowed = False

    def write(self, text) -> int:
        if not isinstance(text, str):
            raise TypeError(f"write() argument must be str, not {type(text).__name__}")
        data = text.encode("utf-8", "replace")
        if self.size + len(data) > self.cap:
            room = self.cap - self.size
            self.parts.append(data[:room].decode("utf-8", "ignore"))
            self.size = self.cap
            if not self.overflowed:
                self.overflowed = True
                self.overflow_line = _innermost_tool_line(_sys._getframe(1))
            raise _OutputLimit(f"printed more than {self.cap} bytes")
        self.parts.append(text)
        self.size += len(data)
        return len(text)

    def flush(self) -> None:
        pass

    def text(self) -> str:
        return "".join(self.parts)


def _innermost_tool_line(frame):
    while frame is not None:
        if frame.f_code.co_filename == TOOL_FILENAME:
            return frame.f_lineno
        frame = frame.f_back
    return None


def _last_tool_line(tb):
    line = None
    while tb is not None:
        if tb.tb_frame.f_code.co_filename == TOOL_FILENAME:
            line = tb.tb_lineno
        tb = tb.tb_next
    return line


class _BadReturn(Exception):
    def __init__(self, what: str) -> None:
        super().__init__(what)
        self.what = what
        self.path: list = []


def _plain(value, depth: int = 0):
    """The value as plain JSON types (tuples become lists); raise _BadReturn naming what is wrong."""
    if value is None or value is True or value is False:
        return value
    kind = type(value)
    if kind is str:
        return value
    if isinstance(value, int) and not isinstance(value, bool):
        if value.bit_length() > _MAX_INT_BITS:
            raise _BadReturn("an integer too large to write as JSON (more than 4000 digits)")
        return int(value)
    if kind is float or isinstance(value, float):
        if value != value:
            raise _BadReturn("NaN")
        if value in (float("inf"), float("-inf")):
            raise _BadReturn("Infinity" if value > 0 else "-Infinity")
        return float(value)
    if depth >= _MAX_DEPTH:
        raise _BadReturn(f"a value nested deeper than {_MAX_DEPTH} levels")
    if isinstance(value, (list, tuple)):
        out = []
        for i, item in enumerate(value):
            try:
                out.append(_plain(item, depth + 1))
            except _BadReturn as bad:
                bad.path.insert(0, f"[{i}]")
                raise
        return out
    if isinstance(value, dict):
        result = {}
        for key, item in value.items():
            if not isinstance(key, str):
                raise _BadReturn(f"a dict with a non-string key {key!r} ({type(key).__name__})")
            try:
                result[str(key)] = _plain(item, depth + 1)
            except _BadReturn as bad:
                bad.path.insert(0, f"[{key!r}]")
                raise
        return result
    if isinstance(value, str):
        return str(value)
    if isinstance(value, (set, frozenset)):
        raise _BadReturn(f"a {kind.__name__}, which is not JSON (return a sorted list instead)")
    raise _BadReturn(f"a {kind.__name__} object, which is not JSON (use int, float, str, bool, None, list or dict)")


def _report(payload: dict) -> None:
    """Hand the child's one result to the zygote and end the child; later calls are ignored."""
    import signal

    if _state.get("reported"):
        return
    _state["reported"] = True
    signal.setitimer(signal.ITIMER_PROF, 0)
    try:
        data = _json.dumps(payload, separators=(",", ":")).encode("utf-8")
    except (TypeError, ValueError, MemoryError, RecursionError) as exc:
        data = _json.dumps({"status": "error", "error_kind": "crashed", "message": f"result could not be encoded: {exc}"}).encode()
    fd = _state["result_fd"]
    while data:
        data = data[_os.write(fd, data) :]
    _os._exit(0)


def _error(kind: str, message: str, line=None) -> dict:
    out = _state.get("stdout")
    return {"status": "error", "error_kind": kind, "message": _one_line(message), "line": line, "stdout": out.text() if out else ""}


def _on_cpu_limit(signum, frame) -> None:
    limit = _state["limits"]["cpu_seconds"]
    line = _innermost_tool_line(frame)
    where = f" at line {line}" if line is not None else ""
    _report(_error("timeout", f"CPU time limit of {limit:g} s exceeded{where}", line))


def _apply_limits(limits: dict) -> None:
    import math
    import resource

    cpu = math.ceil(limits["cpu_seconds"]) + 1
    memory = limits["memory_mb"] * 1024 * 1024
    for which, value in (
        (resource.RLIMIT_CPU, (cpu, cpu + 1)),
        (resource.RLIMIT_AS, (memory, memory)),
        (resource.RLIMIT_FSIZE, (0, 0)),
        (resource.RLIMIT_NOFILE, (limits["open_files"], limits["open_files"])),
        (resource.RLIMIT_NPROC, (0, 0)),
        (resource.RLIMIT_CORE, (0, 0)),
    ):
        resource.setrlimit(which, value)
    _libc().prctl(4, 0, 0, 0, 0)  # PR_SET_DUMPABLE 0: no core dumps, no ptrace from peers


def _child(request: dict, result_fd: int) -> None:
    """Body of the per-call child: limits, filter, then the tool. Never returns."""
    import builtins
    import signal
    import types

    limits = request["limits"]
    _state.update(result_fd=result_fd, limits=limits, reported=False)
    for fd in (_state["in_fd"], _state["out_fd"]):
        _os.close(fd)
    _set_parent_death_signal()
    try:
        _apply_limits(limits)
        if _state["seccomp"][0]:
            err = _install_syscall_filter()
            if err:
                _report({"sandbox_error": f"seccomp filter failed in the child: {_os.strerror(err)}"})
    except Exception as exc:  # noqa: BLE001 - any failure here is the sandbox's, not the tool's
        _report({"sandbox_error": f"cannot apply limits in the child: {exc}"})
    stdout = _CappedStdout(limits["stdout_bytes"])
    _state["stdout"] = stdout
    _sys.stdout = _sys.stderr = stdout
    module = types.ModuleType("__tool__")
    namespace = module.__dict__
    namespace["__builtins__"] = builtins if request["builtins"] == "full" else _state["builtins"]
    _sys.modules["__tool__"] = module
    signal.signal(signal.SIGPROF, _on_cpu_limit)
    signal.setitimer(signal.ITIMER_PROF, limits["cpu_seconds"])
    try:
        code = compile(request["code"], TOOL_FILENAME, "exec", dont_inherit=True)
    except (SyntaxError, ValueError, RecursionError, MemoryError) as exc:
        line = getattr(exc, "lineno", None)
        where = f" at line {line}" if line is not None else ""
        _report(_error("screen", f"{type(exc).__name__}: {getattr(exc, 'msg', exc)}{where}", line))
    try:
        exec(code, namespace)
        function = namespace.get(request["entry"])
        if not callable(function):
            _report(_error("exception", f"NameError: the tool defines no callable {request['entry']!r}"))
        value = function(**request["args"])
    except BaseException as exc:  # noqa: BLE001 - every tool failure becomes a result
        line = _last_tool_line(exc.__traceback__)
        exc.__traceback__ = None
        namespace.clear()
        _report(_describe_failure(exc, line, limits))
    if stdout.overflowed:
        _report(_error("output", _output_message(limits), stdout.overflow_line))
    try:
        plain = _plain(value)
        encoded = _json.dumps(plain, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    except _BadReturn as bad:
        where = f" at {''.join(bad.path)}" if bad.path else ""
        _report(_error("bad_return", f"returned {bad.what}{where}"))
    except ValueError as exc:
        _report(_error("bad_return", f"returned a value that cannot be written as JSON: {exc}"))
    except (RecursionError, MemoryError) as exc:
        _report(_error("bad_return", f"returned a value too large or deep to write as JSON ({type(exc).__name__})"))
    size = len(encoded.encode("utf-8"))
    if size > limits["value_bytes"]:
        _report(_error("bad_return", f"returned {size} bytes of JSON; the limit is {limits['value_bytes']} bytes"))
    _report({"status": "ok", "value": plain, "stdout": stdout.text()})


def _output_message(limits: dict) -> str:
    return f"printed more than {limits['stdout_bytes']} bytes to stdout (the limit)"


def _describe_failure(exc: BaseException, line, limits: dict) -> dict:
    where = f" at line {line}" if line is not None else ""
    if _state["stdout"].overflowed:
        return _error("output", _output_message(limits), _state["stdout"].overflow_line)
    if isinstance(exc, MemoryError):
        return _error("memory", f"MemoryError: memory limit of {limits['memory_mb']} MB exceeded{where}", line)
    try:
        text = str(exc)
    except Exception:  # noqa: BLE001 - a tool's own __str__ may fail
        text = "<unprintable message>"
    name = type(exc).__name__
    return _error("exception", f"{name}: {text}{where}" if text else f"{name}{where}", line)


def _process_cpu(pid: int) -> float:
    try:
        with open(f"/proc/{pid}/stat", "rb") as fh:
            fields = fh.read().rsplit(b")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / _state["clock_ticks"]
    except (OSError, IndexError, ValueError):
        return 0.0


def _await_child(pid: int, read_fd: int, limits: dict, started: float):
    """Collect the child's result while enforcing wall and (hard) CPU limits; return (bytes, verdict, status, rusage)."""
    import select
    import signal
    import time

    wall_deadline = started + limits["wall_seconds"]
    cpu_kill = limits["cpu_seconds"] + _CPU_GRACE_SECONDS
    cap = 8 * (limits["value_bytes"] + limits["stdout_bytes"]) + (1 << 20)
    buffer = bytearray()
    verdict = None
    eof = False
    while not eof:
        remaining = wall_deadline - time.monotonic()
        if remaining <= 0:
            verdict = ("timeout", f"wall-clock limit of {limits['wall_seconds']:g} s exceeded")
            break
        ready, _, _ = select.select([read_fd], [], [], min(_POLL_SECONDS, remaining))
        if ready:
            chunk = _os.read(read_fd, 1 << 16)
            buffer += chunk
            eof = not chunk
            if len(buffer) > cap:
                verdict = ("crashed", "the child sent an oversized result")
                break
        elif _process_cpu(pid) > cpu_kill:
            verdict = ("timeout", f"CPU time limit of {limits['cpu_seconds']:g} s exceeded")
            break
    _os.close(read_fd)
    if verdict is not None:
        _os.kill(pid, signal.SIGKILL)
    if verdict is None and not _exited_by(pid, wall_deadline):
        _os.kill(pid, signal.SIGKILL)
        verdict = ("timeout", f"wall-clock limit of {limits['wall_seconds']:g} s exceeded")
    _, status, usage = _os.wait4(pid, 0)
    return bytes(buffer), verdict, status, usage


def _exited_by(pid: int, deadline: float) -> bool:
    """Wait until the child has exited or the deadline passes (it closed its result pipe, so it should be soon)."""
    import select
    import time

    try:
        handle = _os.pidfd_open(pid)
    except (AttributeError, OSError):
        handle = None
    try:
        while True:
            if _os.waitid(_os.P_PID, pid, _os.WEXITED | _os.WNOHANG | _os.WNOWAIT) is not None:
                return True
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                return False
            if handle is None:
                time.sleep(min(0.0005, remaining))
            else:
                select.select([handle], [], [], remaining)
    finally:
        if handle is not None:
            _os.close(handle)


def _signal_verdict(status: int, limits: dict) -> tuple:
    import signal

    if _os.WIFSIGNALED(status):
        number = _os.WTERMSIG(status)
        if number in (signal.SIGXCPU, signal.SIGPROF):
            return "timeout", f"CPU time limit of {limits['cpu_seconds']:g} s exceeded"
        name = signal.Signals(number).name if number in signal.Signals._value2member_map_ else str(number)
        hint = " (possibly out of memory)" if number == signal.SIGKILL else ""
        return "crashed", f"the tool's process was killed by {name}{hint}"
    return "crashed", f"the tool's process exited with code {_os.waitstatus_to_exitcode(status)} before returning a result"


def _serve(request: dict) -> dict:
    """Run one call in a fresh child and describe the outcome."""
    import time

    read_fd, write_fd = _os.pipe()
    started = time.monotonic()
    pid = _os.fork()
    if pid == 0:
        try:
            _os.close(read_fd)
            _child(request, write_fd)
        finally:
            _os._exit(70)
    _os.close(write_fd)
    limits = request["limits"]
    data, verdict, status, usage = _await_child(pid, read_fd, limits, started)
    timing = {"cpu_seconds": round(usage.ru_utime + usage.ru_stime, 6), "wall_seconds": round(time.monotonic() - started, 6)}
    if verdict is not None:
        return {"status": "error", "error_kind": verdict[0], "message": verdict[1], **timing}
    if data:
        try:
            payload = _json.loads(data)
        except ValueError:
            payload = {"status": "error", "error_kind": "crashed", "message": "the tool's process sent a malformed result"}
        return {**payload, **timing}
    kind, message = _signal_verdict(status, limits)
    return {"status": "error", "error_kind": kind, "message": message, **timing}


def _worker_main(config_text: str) -> None:
    """The zygote: set up isolation once, say hello, then fork one child per request."""
    import gc

    config = _json.loads(config_text)
    _set_parent_death_signal()
    if _os.getppid() != config["parent"]:
        _os._exit(1)
    in_fd, out_fd = _os.dup(0), _os.dup(1)
    null = _os.open(_os.devnull, _os.O_RDWR)
    _os.dup2(null, 0)
    _os.dup2(null, 1)
    _state.update(in_fd=in_fd, out_fd=out_fd, clock_ticks=_os.sysconf("SC_CLK_TCK"))
    _state["netns"] = _unshare_network()
    _state["seccomp"] = _probe_syscall_filter()
    import importlib

    warm = ["builtins", "math", "resource", "select", "signal", "time", "types", *sorted(LAZY_INTERNAL_MODULES)]
    for name in warm + (sorted(ALLOWED_MODULES) if config["preload"] else []):
        importlib.import_module(name)
    _state["builtins"] = _safe_builtins()
    gc.collect()
    gc.freeze()
    _send(out_fd, {"ready": True, "pid": _os.getpid(), "netns": _state["netns"], "seccomp": _state["seccomp"]})
    _os.dup2(null, 2)
    while True:
        request = _recv(in_fd)
        if request is None:
            _os._exit(0)
        try:
            reply = _serve(request)
        except Exception as exc:  # noqa: BLE001 - reported to the parent as a sandbox failure
            reply = {"sandbox_error": f"sandbox worker failed: {type(exc).__name__}: {exc}"}
        _send(out_fd, reply)


if __name__ == "__main__" and _sys.argv[:1] == ["-c"]:
    _worker_main(_sys.argv[1])
