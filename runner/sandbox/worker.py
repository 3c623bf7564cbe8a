"""The worker process ("zygote") and the per-call child it forks.

The pool starts this file as `python -I -S -B worker.py CONFIG`; it uses the standard library and its
sibling modules `policy`, `protocol` and `oslimits`, imported from this folder as top-level modules (never
`runner.*`, which needs third-party packages). The zygote sets up what can be shared once (network namespace,
compiled syscall filter, Landlock ruleset, every module a tool may use, restricted builtins), checks in a
throw-away child that each operating-system layer really holds, says hello with that report, then forks one
child per request. The child applies the operating-system layers, writes the set-up frame, and only then
compiles and runs the tool under restricted builtins and filtered module copies.
"""

import json
import os
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

import oslimits  # noqa: E402
import protocol  # noqa: E402
from policy import (  # noqa: E402
    ALLOWED_MODULES,
    DENIED_ATTRIBUTES,
    DENIED_NAMES,
    LAZY_INTERNAL_MODULES,
    PRELOADED_CODECS,
    SAFE_BUILTINS,
    TOOL_FILENAME,
)

_CPU_GRACE_SECONDS = 0.25
_POLL_SECONDS = 0.05
_MAX_DEPTH = 100
_MAX_INT_BITS = 13_000

_state: dict = {}


def _clean(text: str) -> str:
    """The text with anything UTF-8 cannot carry (lone surrogates) replaced."""
    return text.encode("utf-8", "replace").decode("utf-8")


def _one_line(text, limit: int = protocol.MESSAGE_CHARS) -> str:
    text = " ".join(part.strip() for part in _clean(str(text)).splitlines() if part.strip())
    return text if len(text) <= limit else text[: limit - 1] + "…"


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


def _make_guarded_import():
    cache: dict = {}

    def guarded_import(name, globals=None, locals=None, fromlist=(), level=0):
        if level:
            raise ImportError("relative imports are not allowed")
        if name in LAZY_INTERNAL_MODULES and not fromlist:
            return sys.modules[name]
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
                self.overflow_line = _innermost_tool_line(sys._getframe(1))
            raise _OutputLimit(f"printed more than {self.cap} bytes")
        self.parts.append(data.decode("utf-8"))
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
    if kind is str or isinstance(value, str):
        return _encodable(str(value))
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
                result[_encodable(str(key))] = _plain(item, depth + 1)
            except _BadReturn as bad:
                bad.path.insert(0, f"[{_clean(repr(key))}]")
                raise
        return result
    if isinstance(value, (set, frozenset)):
        raise _BadReturn(f"a {kind.__name__}, which is not JSON (return a sorted list instead)")
    raise _BadReturn(f"a {kind.__name__} object, which is not JSON (use int, float, str, bool, None, list or dict)")


def _encodable(text: str) -> str:
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        raise _BadReturn("a string that cannot be encoded as UTF-8 (a lone surrogate)") from None
    return text


def _write_frame(payload: dict) -> None:
    data = protocol.frame(payload, ensure_ascii=False)
    fd = _state["result_fd"]
    while data:
        data = data[os.write(fd, data) :]


def _report(payload: dict) -> None:
    """Hand the child's one result to the zygote and end the child; later calls are ignored."""
    import signal

    if _state.get("reported"):
        return
    _state["reported"] = True
    signal.setitimer(signal.ITIMER_PROF, 0)
    try:
        _write_frame(payload)
    except (TypeError, ValueError, MemoryError, RecursionError) as exc:
        _write_frame(_error("bad_return", f"returned a value that could not be encoded: {type(exc).__name__}"))
    os._exit(0)


def _error(kind: str, message: str, line=None) -> dict:
    out = _state.get("stdout")
    return {"status": "error", "error_kind": kind, "message": _one_line(message), "line": line, "stdout": out.text() if out else ""}


def _on_cpu_limit(signum, frame) -> None:
    limit = _state["limits"]["cpu_seconds"]
    line = _innermost_tool_line(frame)
    where = f" at line {line}" if line is not None else ""
    _report(_error("timeout", f"CPU time limit of {limit:g} s exceeded{where}", line))


def _child(request: dict, result_fd: int) -> None:
    """Body of the per-call child: the OS layers, the set-up frame, then the tool. Never returns."""
    import builtins
    import signal
    import types

    limits = request["limits"]
    _state.update(result_fd=result_fd, limits=limits, reported=False)
    for fd in (_state["in_fd"], _state["out_fd"]):
        os.close(fd)
    sys.path[:] = []  # every module a tool may use is loaded already; nothing is read from disk
    sys.path_importer_cache.clear()
    try:
        oslimits.harden(limits, _state["layers"], frozenset(request.get("os_layers_off", ())))
        signal.signal(signal.SIGPROF, _on_cpu_limit)
    except Exception as exc:  # noqa: BLE001 - any failure here is the sandbox's, not the tool's
        _write_frame({"setup": f"{type(exc).__name__}: {exc}"})
        os._exit(0)
    _write_frame(protocol.SETUP_OK)  # from here on, what arrives on the pipe may come from the tool
    stdout = _CappedStdout(limits["stdout_bytes"])
    _state["stdout"] = stdout
    sys.stdout = sys.stderr = stdout
    module = types.ModuleType("__tool__")
    namespace = module.__dict__
    namespace["__builtins__"] = builtins if request["builtins"] == "full" else _state["builtins"]
    sys.modules["__tool__"] = module
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
        encoded = json.dumps(plain, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
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
    cap = protocol.result_cap(limits)
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
            chunk = os.read(read_fd, 1 << 16)
            buffer += chunk
            eof = not chunk
            if len(buffer) > cap:
                verdict = ("crashed", "the child sent an oversized result")
                break
        elif _process_cpu(pid) > cpu_kill:
            verdict = ("timeout", f"CPU time limit of {limits['cpu_seconds']:g} s exceeded")
            break
    os.close(read_fd)
    if verdict is not None:
        os.kill(pid, signal.SIGKILL)
    if verdict is None and not _exited_by(pid, wall_deadline):
        os.kill(pid, signal.SIGKILL)
        verdict = ("timeout", f"wall-clock limit of {limits['wall_seconds']:g} s exceeded")
    _, status, usage = os.wait4(pid, 0)
    return bytes(buffer), verdict, status, usage


def _exited_by(pid: int, deadline: float) -> bool:
    """Wait until the child has exited or the deadline passes (it closed its result pipe, so it should be soon)."""
    import select
    import time

    try:
        handle = os.pidfd_open(pid)
    except (AttributeError, OSError):
        handle = None
    try:
        while True:
            if os.waitid(os.P_PID, pid, os.WEXITED | os.WNOHANG | os.WNOWAIT) is not None:
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
            os.close(handle)




def _serve(request: dict) -> dict:
    """Run one call in a fresh child and judge the outcome from what this process observed."""
    import time

    read_fd, write_fd = os.pipe()
    started = time.monotonic()
    pid = os.fork()
    if pid == 0:
        try:
            os.close(read_fd)
            _child(request, write_fd)
        finally:
            os._exit(70)
    os.close(write_fd)
    limits = request["limits"]
    data, verdict, status, usage = _await_child(pid, read_fd, limits, started)
    timing = {"cpu_seconds": round(usage.ru_utime + usage.ru_stime, 6), "wall_seconds": round(time.monotonic() - started, 6)}
    if verdict is not None:
        return {"status": "error", "error_kind": verdict[0], "message": verdict[1], **timing}
    outcome = protocol.judge(data, status, limits)
    return outcome if "sandbox_error" in outcome else {**outcome, **timing}


def _probe_layers(layers: dict) -> dict:
    """Apply every layer in a throw-away child and check that each one holds; the report says what did."""
    import ctypes

    read_fd, write_fd = os.pipe()
    pid = os.fork()
    if pid == 0:
        try:
            os.close(read_fd)
            found = {}
            limits = {"cpu_seconds": 5, "memory_mb": 512, "open_files": 16}
            try:
                oslimits.harden(limits, layers, frozenset({"syscall_filter"}))
            except Exception as exc:  # noqa: BLE001 - reported, never raised
                found["setup"] = f"{type(exc).__name__}: {exc}"
            if layers["privileges"][0]:
                header = (ctypes.c_uint32 * 2)(0x20080522, 0)  # _LINUX_CAPABILITY_VERSION_3, this process
                data = (ctypes.c_uint32 * 6)()
                if os.uname().machine == "x86_64":
                    oslimits.libc().syscall(125, header, data)  # capget
                found["privileges"] = (os.getresuid() == (oslimits.dropped_to(),) * 3 and not any(data),
                                       f"uid {os.getresuid()}, capabilities {[hex(v) for v in data]}")
            if layers["files"][0]:
                try:
                    os.close(os.open("/", os.O_RDONLY))
                    found["files"] = (False, "opening / still worked after the Landlock restriction")
                except PermissionError:
                    found["files"] = (True, "")
            if layers["syscall_filter"][0]:
                try:
                    oslimits.install_syscall_filter()
                    os.close(os.dup(0))
                    found["syscall_filter"] = (False, "dup() still worked after the filter was installed")
                except PermissionError:
                    found["syscall_filter"] = (True, "")
                except oslimits.SetupError as exc:
                    found["syscall_filter"] = (False, str(exc))
            data = json.dumps(found).encode()
            while data:
                data = data[os.write(write_fd, data) :]
        finally:
            os._exit(0)
    os.close(write_fd)
    chunks = []
    while True:
        chunk = os.read(read_fd, 1 << 16)
        if not chunk:
            break
        chunks.append(chunk)
    os.close(read_fd)
    os.waitpid(pid, 0)
    try:
        found = json.loads(b"".join(chunks) or b"{}")
    except ValueError:
        found = {"setup": "the probe sent a malformed report"}
    report = {}
    for name, (active, mode, detail) in layers.items():
        if active and "setup" in found:
            report[name] = (False, "failed", f"set-up failed in a test child: {found['setup']}")
        elif active and name in found and not found[name][0]:
            report[name] = (False, "failed", found[name][1])
        else:
            report[name] = (active, mode, detail)
    return report


def _warm_up() -> None:
    """Import every module a tool may use and fill the caches that would otherwise need a file later."""
    import datetime
    import importlib
    import time

    for name in ["builtins", "math", "resource", "select", "signal", "time", "types",
                 *sorted(LAZY_INTERNAL_MODULES), *sorted(ALLOWED_MODULES), *PRELOADED_CODECS]:
        try:
            importlib.import_module(name)
        except ImportError:
            continue
    time.localtime()  # reads the time zone once
    datetime.datetime.strptime("2026-01-02 03:04", "%Y-%m-%d %H:%M").strftime("%A %B %c %x %X %p %Z")


def _worker_main(config_text: str) -> None:
    """The zygote: set up isolation once, say hello, then fork one child per request."""
    import gc

    config = json.loads(config_text)
    oslimits.set_parent_death_signal()
    if os.getppid() != config["parent"]:
        os._exit(1)
    in_fd, out_fd = os.dup(0), os.dup(1)
    null = os.open(os.devnull, os.O_RDWR)
    os.dup2(null, 0)
    os.dup2(null, 1)
    _state.update(in_fd=in_fd, out_fd=out_fd, clock_ticks=os.sysconf("SC_CLK_TCK"))
    netns, why = oslimits.unshare_network()
    layers = {
        "syscall_filter": oslimits.prepare_syscall_filter(
            bytes.fromhex(config["seccomp_program"]) if config.get("seccomp_program") else None,
            config.get("seccomp_note", "no filter was compiled on the host")),
        "files": oslimits.prepare_landlock(),
        "privileges": oslimits.prepare_privileges(),
    }
    _warm_up()
    _state["builtins"] = _safe_builtins()
    layers = _probe_layers(layers)
    layers["network"] = (netns, "fresh namespace" if netns else "none", why)
    _state["layers"] = layers
    gc.collect()
    gc.freeze()
    protocol.send(out_fd, {"ready": True, "pid": os.getpid(), "layers": layers})
    os.dup2(null, 2)
    os.close(null)  # a child holds only 0-2 (all /dev/null) and its result pipe
    while True:
        request = protocol.recv(in_fd)
        if request is None:
            os._exit(0)
        try:
            reply = _serve(request)
        except Exception as exc:  # noqa: BLE001 - reported to the parent as a sandbox failure
            reply = {"sandbox_error": f"sandbox worker failed: {type(exc).__name__}: {exc}"}
        protocol.send(out_fd, reply)


if __name__ == "__main__":
    _worker_main(sys.argv[1])
