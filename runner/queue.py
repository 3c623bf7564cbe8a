"""Task and answer records, JSONL queue reading with per-line errors, and the append-only answers file that a
rerun resumes (a partial last line left by a killed run is repaired, never a complete one).

Resume is by content: a task is done when the answers file holds a record with the same id *and* the same
question text; the newest record for an id is its answer (a task answered again appends, never rewrites)."""

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

from .errors import InputError, OutputError

NONE_ROUTE = "none"
Status = Literal["tool", "fallback", "failed", "error"]
# What went wrong in an error record: a bad queue line, a question too long for the model's context, an
# unexpected failure while routing, using the tool or falling back, or a record that could not be written as is.
ErrorKind = Literal["input", "too_long", "route", "tool", "fallback", "unwritable"]
# "pattern", not "template": templates are the prompt files in prompts/.
FilledBy = Literal["pattern", "executor"]
PatternCheck = Literal["agreed", "disagreed"]


class Task(BaseModel):
    """One queued question. `line` is its 1-based line in the queue file (stdin counts lines too)."""

    id: str
    question: str
    line: int


class Cpu(BaseModel):
    """CPU seconds of one task: model calls and the pattern matcher (this process, all threads) and tool runs
    (sandbox workers). Of the model's seconds, `route` went to routing and `fill` to filling the tool's
    arguments (by the executor or from sentence patterns, and learning patterns from the fill); the rest
    (model minus both) to the fallback's direct answer."""

    model: float = 0.0
    tool: float = 0.0
    route: float = 0.0
    fill: float = 0.0

    @property
    def total(self) -> float:
        return self.model + self.tool


class Tokens(BaseModel):
    """Prompt tokens (of which `cached` were reused rather than evaluated; `restored` of those came from a saved
    state of a stable prompt prefix, loaded from disk) and generated tokens."""

    prompt: int = 0
    completion: int = 0
    cached: int = 0
    forced: int = 0  # of the completion tokens, those the schema forced, appended in batches
    restored: int = 0  # of the cached tokens, those loaded from a saved warm state


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
    error_kind: ErrorKind | None = None
    attempts: int = 0
    filled_by: FilledBy | None = Field(None, description="who filled the tool's arguments: the executor model, or "
                                                         "sentence patterns learned from its earlier fills")
    pattern_check: PatternCheck | None = Field(None, description="a pattern fill the executor filled again to check "
                                                                 "it: agreed, or disagreed (its patterns retired)")
    cpu: Cpu = Field(default_factory=Cpu)
    wall_seconds: float = 0.0
    tokens: Tokens = Field(default_factory=Tokens)
    node: str | None = Field(None, description="the machine of the worker that answered (runs with --workers)")
    worker: str | None = Field(None, description="the id of the worker that answered (runs with --workers)")


@dataclass(frozen=True)
class BadLine:
    """A queue line that is not a usable task; it becomes an error record (id `line-N` when it has none)."""

    line: int
    id: str
    error: str
    question: str | None = None

    def record(self) -> AnswerRecord:
        return AnswerRecord(id=self.id, line=self.line, question=self.question, status="error", error=self.error,
                            error_kind="input")


Item = Task | BadLine


def lone_surrogate(text: str) -> int | None:
    """The index of the first lone surrogate in `text` (JSON's "\\ud800" escapes decode to one; it is not
    Unicode text and cannot be encoded as UTF-8), or None."""
    for i, ch in enumerate(text):
        if "\ud800" <= ch <= "\udfff":
            return i
    return None


def decode_line(raw: bytes) -> tuple[str | None, str | None]:
    """A line's bytes as text, or why they are not UTF-8 (no silent repair: the line is reported, not guessed)."""
    try:
        return raw.decode("utf-8"), None
    except UnicodeDecodeError as exc:
        return None, f"not valid UTF-8: byte 0x{raw[exc.start]:02x} at byte {exc.start + 1} of the line"


def parse_line(text: str | bytes, line: int) -> Item | None:
    """One queue line as a task, a bad line, or None for a blank line (blank lines are skipped silently:
    editors and `echo >>` leave them, and they carry no task)."""
    if isinstance(text, bytes):
        decoded, problem = decode_line(text)
        if decoded is None:
            return BadLine(line, f"line-{line}", problem or "not valid UTF-8")
        text = decoded
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
        if lone_surrogate(tid) is not None:
            return BadLine(line, f"line-{line}", "'id' holds a lone surrogate escape (\\ud800-\\udfff): not Unicode text")
    else:
        return BadLine(line, f"line-{line}", f"'id' must be a non-empty string or an integer, got {raw_id!r}")
    question = obj.get("question")
    if question is None:
        return BadLine(line, tid, "missing 'question' field")
    if not isinstance(question, str) or not question.strip():
        return BadLine(line, tid, "'question' must be a non-empty string")
    at = lone_surrogate(question)
    if at is not None:
        return BadLine(line, tid, f"'question' holds a lone surrogate escape (\\u{ord(question[at]):04x}) at "
                                  f"character {at + 1}: not Unicode text; write the character itself or drop it")
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

    def _open(self) -> IO[bytes]:
        """The queue as bytes: each line is decoded on its own, so one line that is not UTF-8 becomes that
        line's error record instead of being silently repaired or stopping the run."""
        if self.is_stdin:
            return getattr(sys.stdin, "buffer", None) or _EncodedText(sys.stdin)
        try:
            return open(self.source, "rb")
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
            n, pending = 0, b""
            while not stop():
                chunk = fh.readline()
                if not chunk:
                    time.sleep(poll)
                    continue
                pending += chunk
                if not pending.endswith(b"\n"):
                    continue
                n += 1
                text, pending = pending, b""
                item = parse_line(text, n)
                if item is not None:
                    yield self._dedupe(item)
        finally:
            fh.close()


class _EncodedText:
    """A text stream read as UTF-8 bytes line by line (stdin replaced by a StringIO in tests)."""

    def __init__(self, stream: IO[str]):
        self._stream = stream

    def __iter__(self) -> Iterator[bytes]:
        for line in self._stream:
            yield line.encode("utf-8", "surrogateescape")

    def readline(self) -> bytes:
        return self._stream.readline().encode("utf-8", "surrogateescape")

    def close(self) -> None:
        pass


# ---- the answers file ---------------------------------------------------------------------------------------

@dataclass
class Resumed:
    """What an earlier run left in the answers file."""

    records: list[AnswerRecord]
    repaired_bytes: int = 0

    @property
    def latest(self) -> dict[str, AnswerRecord]:
        """The newest record of each id that is a task's answer (bad-line records are not answers)."""
        out: dict[str, AnswerRecord] = {}
        for r in self.records:
            if not is_bad_line(r):
                out[r.id] = r
        return out

    @property
    def done_ids(self) -> set[str]:
        """Ids that have an answer record (whatever its question)."""
        return set(self.latest)

    @property
    def done_error_lines(self) -> set[int]:
        """Queue lines already reported as bad: a rerun does not report them again (a fixed line is retried)."""
        return {r.line for r in self.records if is_bad_line(r) and r.line is not None}

    def done(self, task: Task, retry_failed: bool = False) -> bool:
        """Whether `task` is answered already: a record with its id and its question text (an edited question
        is answered again); with `retry_failed`, a task whose newest record failed or is an error is not."""
        rec = self.latest.get(task.id)
        if rec is None or rec.question != task.question:
            return False
        return not (retry_failed and rec.status in ("failed", "error"))

    def superseded(self) -> int:
        """Records that are not the newest answer of their id (an edited question or a retried task)."""
        return sum(1 for r in self.records if not is_bad_line(r)) - len(self.latest)


def is_bad_line(record: AnswerRecord) -> bool:
    """A record about a queue line that held no usable task (older files have no error_kind: then any error)."""
    return record.status == "error" and record.error_kind in ("input", None)


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

    def write(self, record: AnswerRecord) -> AnswerRecord:
        """Append one record; returns what was written (an `unwritable` error record in place of a record that
        cannot be serialised). A failed write is cut back off the file and raised as an OutputError, so the
        file never holds half a record."""
        record, line = serialisable(record)
        if self._fd is not None:
            data = line.encode("utf-8")
            start = os.lseek(self._fd, 0, os.SEEK_END)
            try:
                done = 0
                while done < len(data):
                    done += os.write(self._fd, data[done:])
                os.fsync(self._fd)
            except OSError as exc:
                try:
                    os.ftruncate(self._fd, start)
                except OSError:
                    pass
                raise OutputError(f"{self.path}: cannot write the answer of '{record.id}' ({exc.strerror}); the "
                                  f"{self.written} records written before it are kept and the file is valid: "
                                  f"free space (or fix the folder) and rerun the same command to go on") from None
        else:
            stream = self._stream or sys.stdout
            stream.write(line)
            stream.flush()
        self.written += 1
        return record


def _printable(text: str | None) -> str | None:
    """Text with anything UTF-8 cannot hold written as a backslash escape."""
    return None if text is None else text.encode("utf-8", "backslashreplace").decode("utf-8")


def serialisable(record: AnswerRecord) -> tuple[AnswerRecord, str]:
    """The record and its JSONL line; a record that cannot be serialised (a value JSON cannot hold, text that
    is not Unicode) becomes an error record of kind `unwritable` that says why, with its text escaped."""
    try:
        return record, record.model_dump_json() + "\n"
    except Exception as exc:  # pydantic's serialisation errors, encoding errors: the record, not the run
        why = " ".join(str(exc).split())[:200]
        safe = AnswerRecord(id=_printable(record.id) or "?", line=record.line, question=_printable(record.question),
                            route=_printable(record.route) or NONE_ROUTE, status="error", error_kind="unwritable",
                            error=f"the {record.status} record could not be written as JSON: {why}",
                            attempts=record.attempts, cpu=record.cpu, wall_seconds=record.wall_seconds,
                            tokens=record.tokens)
        return safe, safe.model_dump_json() + "\n"


def write_all(path: Path, records: Iterable[AnswerRecord]) -> None:
    """Convenience for tests and tools: append several records."""
    with AnswerWriter(path) as w:
        for r in records:
            w.write(r)


# ---- the route journal ------------------------------------------------------------------------------------

def question_digest(question: str) -> str:
    """A short fingerprint of a question's text (for the route journal)."""
    import hashlib

    return hashlib.sha256(question.encode("utf-8", "surrogatepass")).hexdigest()[:24]


def journal_path(answers: Path) -> Path:
    """Where the route decisions of a grouped run on `answers` are kept: QUEUE.answers.jsonl →
    QUEUE.answers.routes.jsonl."""
    stem = answers.name[: -len(answers.suffix)] if answers.suffix else answers.name
    return answers.with_name(stem + ".routes.jsonl")


class RouteJournal:
    """Route decisions of a grouped run, appended as they are made (one fsync'ed line each), so a run killed
    after routing part of its queue does not route those tasks again. An entry is used only for the same id,
    question and router setup (tools, executor, seed, confidence threshold); the file is removed when a run
    has written every record it routed. Lines it cannot read (a cut last line) are ignored: they only cost a
    routing call."""

    def __init__(self, path: Path | None, router_key: str):
        self.path = path
        self.router_key = router_key
        self.entries: dict[tuple[str, str], dict[str, Any]] = {}
        self._fd: int | None = None
        if path is not None and path.exists():
            for raw in path.read_bytes().split(b"\n"):
                try:
                    e = json.loads(raw)
                except ValueError:
                    continue
                if isinstance(e, dict) and e.get("router") == router_key and isinstance(e.get("route"), dict):
                    self.entries[(str(e.get("id")), str(e.get("question")))] = e["route"]

    def get(self, task: Task) -> dict[str, Any] | None:
        return self.entries.get((task.id, question_digest(task.question)))

    def add(self, task: Task, route: dict[str, Any]) -> None:
        if self.path is None:
            return
        entry = {"id": task.id, "question": question_digest(task.question), "router": self.router_key,
                 "route": route}
        try:
            if self._fd is None:
                self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
            os.write(self._fd, (json.dumps(entry, ensure_ascii=False) + "\n").encode("utf-8", "backslashreplace"))
            os.fsync(self._fd)
        except OSError:
            pass  # the journal only saves routing work; the answers file is what must be written

    def close(self, finished: bool) -> None:
        if self._fd is not None:
            try:
                os.close(self._fd)
            except OSError:
                pass
            self._fd = None
        if finished and self.path is not None:
            try:
                self.path.unlink(missing_ok=True)
            except OSError:
                pass
