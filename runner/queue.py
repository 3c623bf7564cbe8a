"""Task and answer records, JSONL queue reading with per-line errors, and the append-only answers file that a
rerun resumes (a partial last line left by a killed run is repaired, never a complete one)."""

from __future__ import annotations

import fcntl
import json
import os
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any, Callable, Iterable, Iterator, Literal

from pydantic import BaseModel, Field, ValidationError

from .errors import InputError

NONE_ROUTE = "none"
Status = Literal["tool", "fallback", "failed", "error"]


class Task(BaseModel):
    """One queued question. `line` is its 1-based line in the queue file (stdin counts lines too)."""

    id: str
    question: str
    line: int


class Cpu(BaseModel):
    """CPU seconds of one task: model calls (this process, all threads) and tool runs (sandbox workers). Of the
    model's seconds, `route` went to routing and `fill` to filling the tool's arguments; the rest (model minus
    both) to the fallback's direct answer."""

    model: float = 0.0
    tool: float = 0.0
    route: float = 0.0
    fill: float = 0.0

    @property
    def total(self) -> float:
        return self.model + self.tool


class Tokens(BaseModel):
    prompt: int = 0
    completion: int = 0
    cached: int = 0
    forced: int = 0  # of the completion tokens, those the schema forced, appended in batches


class AnswerRecord(BaseModel):
    """One line of the answers file: exactly one per queued task (or per bad queue line, status "error")."""

    id: str
    line: int | None = None
    question: str | None = None
    answer: Any = None
    reply: str | None = Field(None, description="a model's full reply when it answered directly (the answer is "
                                                  "the part of it the question asks for)")
    route: str = NONE_ROUTE
    confidence: float | None = None
    arguments: dict[str, Any] | None = None
    status: Status
    tool_backed: bool = False
    error: str | None = None
    attempts: int = 0
    cpu: Cpu = Field(default_factory=Cpu)
    wall_seconds: float = 0.0
    tokens: Tokens = Field(default_factory=Tokens)


@dataclass(frozen=True)
class BadLine:
    """A queue line that is not a usable task; it becomes an error record (id `line-N` when it has none)."""

    line: int
    id: str
    error: str
    question: str | None = None

    def record(self) -> AnswerRecord:
        return AnswerRecord(id=self.id, line=self.line, question=self.question, status="error", error=self.error)


Item = Task | BadLine


def parse_line(text: str, line: int) -> Item | None:
    """One queue line as a task, a bad line, or None for a blank line (blank lines are skipped silently:
    editors and `echo >>` leave them, and they carry no task)."""
    if not text.strip():
        return None
    try:
        obj = json.loads(text)
    except ValueError as exc:
        return BadLine(line, f"line-{line}", f"not valid JSON: {exc.msg} at column {exc.colno}")
    if not isinstance(obj, dict):
        return BadLine(line, f"line-{line}", f"expected a JSON object, got {type(obj).__name__}")
    raw_id = obj.get("id")
    if raw_id is None:
        tid = f"line-{line}"
    elif isinstance(raw_id, (str, int)) and not isinstance(raw_id, bool) and str(raw_id).strip():
        tid = str(raw_id)
    else:
        return BadLine(line, f"line-{line}", f"'id' must be a non-empty string or an integer, got {raw_id!r}")
    question = obj.get("question")
    if question is None:
        return BadLine(line, tid, "missing 'question' field")
    if not isinstance(question, str) or not question.strip():
        return BadLine(line, tid, "'question' must be a non-empty string")
    return Task(id=tid, question=question.strip(), line=line)


class QueueReader:
    """Reads a queue (a file or `-` for stdin) into tasks and bad lines; a second task with an id already
    seen in this queue becomes a bad line, so no id is answered twice."""

    def __init__(self, source: str | Path):
        self.source = str(source)
        self.seen: dict[str, int] = {}

    @property
    def is_stdin(self) -> bool:
        return self.source == "-"

    def _dedupe(self, item: Item) -> Item:
        if isinstance(item, Task):
            first = self.seen.setdefault(item.id, item.line)
            if first != item.line:
                return BadLine(item.line, item.id, f"duplicate id '{item.id}' (first on line {first})", item.question)
        return item

    def _open(self) -> IO[str]:
        if self.is_stdin:
            return sys.stdin
        try:
            return open(self.source, encoding="utf-8", errors="replace", newline="")
        except OSError as exc:
            raise InputError(f"{self.source}: cannot read the queue: {exc.strerror}") from exc

    def items(self) -> Iterator[Item]:
        """Every task and bad line to the end of the input."""
        fh = self._open()
        try:
            for n, text in enumerate(fh, 1):
                item = parse_line(text, n)
                if item is not None:
                    yield self._dedupe(item)
        finally:
            if not self.is_stdin:
                fh.close()

    def follow(self, stop: Callable[[], bool], poll: float = 0.5) -> Iterator[Item]:
        """Like items(), then keep waiting for appended lines until stop() is true. A line is taken only once
        its newline arrives, so a writer caught mid-line is never read half-way."""
        if self.is_stdin:
            yield from self.items()
            return
        fh = self._open()
        try:
            n, pending = 0, ""
            while not stop():
                chunk = fh.readline()
                if not chunk:
                    time.sleep(poll)
                    continue
                pending += chunk
                if not pending.endswith("\n"):
                    continue
                n += 1
                text, pending = pending, ""
                item = parse_line(text, n)
                if item is not None:
                    yield self._dedupe(item)
        finally:
            fh.close()


# ---- the answers file ---------------------------------------------------------------------------------------

@dataclass
class Resumed:
    """What an earlier run left in the answers file."""

    records: list[AnswerRecord]
    repaired_bytes: int = 0

    @property
    def done_ids(self) -> set[str]:
        """Ids of tasks already answered (status tool, fallback or failed): a rerun skips them."""
        return {r.id for r in self.records if r.status != "error"}

    @property
    def done_error_lines(self) -> set[int]:
        """Queue lines already reported as bad: a rerun does not report them again (a fixed line is retried)."""
        return {r.line for r in self.records if r.status == "error" and r.line is not None}


def read_answers(path: Path, repair: bool = True) -> Resumed:
    """The records of an answers file. A last line without its newline (a run killed mid-write) is cut off
    when `repair`; any other bad line is an InputError naming file and line, and nothing is changed."""
    if not path.exists():
        return Resumed([])
    data = path.read_bytes()
    cut = 0
    if data and not data.endswith(b"\n"):
        keep = data.rfind(b"\n") + 1
        tail = data[keep:]
        try:
            AnswerRecord.model_validate_json(tail)
            whole = True
        except ValidationError:
            whole = False
        if whole:  # complete record whose newline was lost: keep it
            data += b"\n"
            if repair:
                with open(path, "ab") as fh:
                    fh.write(b"\n")
        else:
            cut = len(tail)
            data = data[:keep]
            if repair:
                with open(path, "r+b") as fh:
                    fh.truncate(keep)
                    os.fsync(fh.fileno())
    records = []
    for n, raw in enumerate(data.split(b"\n")[:-1], 1):
        if not raw.strip():
            continue
        try:
            records.append(AnswerRecord.model_validate_json(raw))
        except ValidationError as exc:
            first = exc.errors()[0]
            where = ".".join(str(p) for p in first["loc"]) or "(line)"
            raise InputError(f"{path}:{n}: not an answer record ({where}: {first['msg']}); "
                             f"use another --out file or fix this line") from None
    return Resumed(records, cut)


class AnswerWriter:
    """Append-only JSONL: each record is one write of one line, flushed and fsync'ed before the next task,
    so a crash loses at most the task in flight. Holds an exclusive lock so two runs cannot interleave."""

    def __init__(self, path: Path | None, stream: IO[str] | None = None):
        self.path = path
        self._stream = stream
        self._fd: int | None = None
        self.written = 0

    def __enter__(self) -> "AnswerWriter":
        if self.path is not None:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
            try:
                fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                os.close(self._fd)
                self._fd = None
                raise InputError(f"{self.path}: another run is writing to this answers file") from None
        return self

    def __exit__(self, *exc: object) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def write(self, record: AnswerRecord) -> None:
        line = record.model_dump_json() + "\n"
        if self._fd is not None:
            data = line.encode("utf-8")
            done = 0
            while done < len(data):
                done += os.write(self._fd, data[done:])
            os.fsync(self._fd)
        else:
            stream = self._stream or sys.stdout
            stream.write(line)
            stream.flush()
        self.written += 1


def write_all(path: Path, records: Iterable[AnswerRecord]) -> None:
    """Convenience for tests and tools: append several records."""
    with AnswerWriter(path) as w:
        for r in records:
            w.write(r)
