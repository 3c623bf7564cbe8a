"""How the host, the worker and the per-call child talk (standard library only; used on both sides).

Host <-> worker: length-prefixed JSON messages over the worker's stdin/stdout.

Child -> worker: the child holds the write end of a pipe. The sandbox's own code writes a first frame,
`{"setup": "ok"}` (or why set-up failed), *before* any tool code runs; only then does the tool run and the
child write its result frame. Tool code that gets hold of the descriptor can therefore write only what comes
after the set-up frame, and the worker trusts none of that: `judge` decides the outcome from what the worker
observed (exit status, signal, limits) and accepts a result frame only if it is the one well-formed frame
with known fields, within the size limits, from a child that then exited with status 0. Anything else is a
`crashed` result; nothing the tool writes can turn into a sandbox failure on the host.
"""

import json
import os
import select
import signal
import time

HEADER_BYTES = 4
SETUP_OK = {"setup": "ok"}
CHILD_ERROR_KINDS = frozenset({"exception", "bad_return", "output", "timeout", "memory", "screen"})
MESSAGE_CHARS = 400
MAX_LINE = 10_000_000


def frame(obj: dict, ensure_ascii: bool = True) -> bytes:
    """One message: a 4-byte big-endian length, then compact UTF-8 JSON."""
    data = json.dumps(obj, separators=(",", ":"), ensure_ascii=ensure_ascii, allow_nan=False).encode("utf-8")
    return len(data).to_bytes(HEADER_BYTES, "big") + data


def send(fd: int, obj: dict) -> None:
    """Write one message on a blocking descriptor (worker side)."""
    data = frame(obj)
    while data:
        data = data[os.write(fd, data) :]


def recv(fd: int):
    """Read one message on a blocking descriptor (worker side); None at end of input."""
    header = read_exact(fd, HEADER_BYTES)
    if header is None:
        return None
    body = read_exact(fd, int.from_bytes(header, "big"))
    return None if body is None else json.loads(body)


def read_exact(fd: int, size: int, deadline: float | None = None):
    """Read `size` bytes, before `deadline` if given (host side); None at end of input, TimeoutError past it."""
    chunks = []
    while size:
        if deadline is not None:
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


def write_all(fd: int, data: bytes, deadline: float) -> None:
    """Write all of `data` before `deadline` (host side), or raise TimeoutError."""
    view = memoryview(data)
    while view:
        remaining = deadline - time.monotonic()
        if remaining <= 0:
            raise TimeoutError
        _, ready, _ = select.select([], [fd], [], remaining)
        if ready:
            view = view[os.write(fd, view[: 1 << 16]) :]


def result_cap(limits: dict) -> int:
    """The most bytes the worker reads from a child: a full value, full stdout and room for escapes."""
    return 8 * (limits["value_bytes"] + limits["stdout_bytes"]) + (1 << 16)


def split_frames(data: bytes):
    """The frames in `data`, or None if it is not a whole number of well-formed frames."""
    frames = []
    at = 0
    while at < len(data):
        if len(data) - at < HEADER_BYTES:
            return None
        size = int.from_bytes(data[at : at + HEADER_BYTES], "big")
        body = data[at + HEADER_BYTES : at + HEADER_BYTES + size]
        if len(body) != size:
            return None
        try:
            frames.append(json.loads(body.decode("utf-8")))
        except (UnicodeDecodeError, ValueError, RecursionError):
            return None
        at += HEADER_BYTES + size
    return frames


def _crashed(message: str) -> dict:
    return {"status": "error", "error_kind": "crashed", "message": message}


def signal_verdict(status: int, limits: dict) -> dict:
    """What the exit status of a child that sent no acceptable result says."""
    if os.WIFSIGNALED(status):
        number = os.WTERMSIG(status)
        if number in (signal.SIGXCPU, signal.SIGPROF):
            return {"status": "error", "error_kind": "timeout", "message": f"CPU time limit of {limits['cpu_seconds']:g} s exceeded"}
        name = signal.Signals(number).name if number in signal.Signals._value2member_map_ else str(number)
        hint = " (possibly out of memory)" if number == signal.SIGKILL else ""
        return _crashed(f"the tool's process was killed by {name}{hint}")
    code = os.waitstatus_to_exitcode(status)
    return _crashed(f"the tool's process exited with code {code} before returning a result")


def judge(data: bytes, status: int, limits: dict) -> dict:
    """The outcome of one call from the bytes the child sent and how it ended.

    Returns a result record, or `{"sandbox_error": ...}` only when the set-up frame (written before any tool
    code ran) says set-up failed or never came. What follows the set-up frame may come from the tool, so
    nothing in it can produce a sandbox error.
    """
    if not data:
        if os.WIFSIGNALED(status) or os.waitstatus_to_exitcode(status) != 0:
            return {"sandbox_error": f"the sandbox's child ended during set-up ({_describe_status(status)})"}
        return {"sandbox_error": "the sandbox's child ended during set-up without a word"}
    first = split_frames(data[: HEADER_BYTES + int.from_bytes(data[:HEADER_BYTES], "big")])
    if not first:
        return {"sandbox_error": "the sandbox's child sent a malformed set-up message"}
    if first[0] != SETUP_OK:
        reason = first[0].get("setup") if isinstance(first[0], dict) else None
        return {"sandbox_error": f"the sandbox's child could not set up: {str(reason)[:MESSAGE_CHARS]}"}
    rest = split_frames(data[HEADER_BYTES + int.from_bytes(data[:HEADER_BYTES], "big") :])
    malformed = _crashed("the tool's process sent a malformed result")
    if rest is None:
        return malformed
    if not rest:
        return signal_verdict(status, limits)
    if len(rest) > 1 or os.WIFSIGNALED(status) or os.waitstatus_to_exitcode(status) != 0:
        return malformed
    return check_result(rest[0], limits)


def _describe_status(status: int) -> str:
    if os.WIFSIGNALED(status):
        return f"signal {os.WTERMSIG(status)}"
    return f"exit code {os.waitstatus_to_exitcode(status)}"


def check_result(payload, limits: dict) -> dict:
    """Accept a result frame only with known fields of the right types and sizes; else `crashed`."""
    malformed = _crashed("the tool's process sent a malformed result")
    if not isinstance(payload, dict):
        return malformed
    status = payload.get("status")
    stdout = payload.get("stdout", "")
    if not isinstance(stdout, str) or _utf8_size(stdout) is None or _utf8_size(stdout) > limits["stdout_bytes"]:
        return malformed
    if status == "ok":
        if set(payload) - {"status", "value", "stdout"}:
            return malformed
        try:
            encoded = json.dumps(payload.get("value"), ensure_ascii=False, allow_nan=False,
                                 separators=(",", ":")).encode("utf-8")
        except UnicodeEncodeError:
            return {"status": "error", "error_kind": "bad_return", "stdout": stdout,
                    "message": "returned a string that cannot be encoded as UTF-8 (a lone surrogate)"}
        except (TypeError, ValueError, RecursionError):
            return malformed
        if len(encoded) > limits["value_bytes"]:
            return {"status": "error", "error_kind": "bad_return", "stdout": stdout,
                    "message": f"returned {len(encoded)} bytes of JSON; the limit is {limits['value_bytes']} bytes"}
        return {"status": "ok", "value": payload.get("value"), "stdout": stdout}
    if status != "error" or set(payload) - {"status", "error_kind", "message", "line", "stdout"}:
        return malformed
    kind, message, line = payload.get("error_kind"), payload.get("message"), payload.get("line")
    if kind not in CHILD_ERROR_KINDS or not isinstance(message, str) or len(message) > MESSAGE_CHARS:
        return malformed
    if "\n" in message or "\r" in message or _utf8_size(message) is None:
        return malformed
    if line is not None and (type(line) is not int or not 0 < line < MAX_LINE):
        return malformed
    return {"status": "error", "error_kind": kind, "message": message, "line": line, "stdout": stdout}


def _utf8_size(text: str):
    try:
        return len(text.encode("utf-8"))
    except UnicodeEncodeError:
        return None
