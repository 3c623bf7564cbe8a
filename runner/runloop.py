"""The run loop: route each queued question to a tool (or none), fill the tool's arguments with the executor,
run it in the sandbox, fall back to a model's direct answer when no tool fits or the tool fails, and write one
answer record per task to an append-only file that a rerun resumes. Ends with a run report.

Order: a whole queue is routed first, then answered grouped by tool, so each llama.cpp prompt prefix (the
card list while routing, one tool's demos while filling, the fallback prompt at the end) is evaluated once
and then reused from the KV cache. `--follow` answers line by line instead, as lines arrive.

Isolation: whatever goes wrong with one task (a question too long for the context, a model or sandbox
failure, a value that cannot be written) becomes that task's error record and the loop goes on. Route
decisions of a grouped run are journalled as they are made, so a crash loses at most the task in hand."""

from __future__ import annotations

import math
import signal
import threading
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator, Literal, Protocol

from pydantic import BaseModel, Field

from . import shapecheck
from .errors import (ConfigError, ContextOverflowError, JigwrightError, ModelIntegrityError, ModelLoadError,
                     ModelMissingError, NotGGUFError, OutputError, UnknownModelError)
from .execute import DIRECT_MAX_TOKENS, answer_directly, answer_with_tool, direct_messages, schema_problem
from .llm import ChatModel, prompt_size
from .meter import Stopwatch, Usage
from .patterns import Prediction, check_due, learn, predict, retire, tool_key
from .patternstore import PatternStore
from .queue import (NONE_ROUTE, AnswerRecord, AnswerWriter, BadLine, Cpu, FilledBy, PatternCheck, QueueReader,
                    Resumed, RouteJournal, Task, Tokens)
from .route import Route, route
from .tools import Tool

Fallback = Literal["builder", "executor", "none"]
# CPU seconds per prompt token of the default executor when a run has too few tasks to measure it: about
# 90 prompt tokens per second on 2 threads (`bench/model_speed.py`), so about 2/90.
PRESET_PROMPT_CPU_PER_TOKEN = 2 / 90


# Errors that are about the setup, not the task: every later task would fail the same way, so the run stops
# with the one-line message instead of writing an error record for each task.
FATAL = (ConfigError, UnknownModelError, ModelMissingError, ModelIntegrityError, NotGGUFError, ModelLoadError,
         OutputError)
STAGE_WORDS = {"route": "routing", "tool": "answering with the tool", "fallback": "the fallback"}


class RunOptions(BaseModel):
    fallback: Fallback = "builder"
    min_confidence: float = Field(0.0, ge=0.0, le=1.0)
    seed: int = 0
    group: bool = True
    retries: int = Field(1, ge=0)
    retry_temperature: float = 0.3
    retry_failed: bool = False
    patterns: bool = Field(True, description="fill arguments from sentence patterns learned from the executor's "
                                             "fills when every sentence of a question matches (runner/patterns.py)")
    pattern_check_every: int = Field(20, ge=1, description="the executor checks 1 in this many pattern fills")


class Progress(Protocol):
    """What the loop tells its caller as it goes (the CLI draws a progress bar from it)."""

    def phase(self, name: str, total: int | None) -> None: ...

    def advance(self, record: AnswerRecord | None = None) -> None: ...

    def message(self, text: str) -> None: ...


class _Quiet:
    def phase(self, name: str, total: int | None) -> None:
        pass

    def advance(self, record: AnswerRecord | None = None) -> None:
        pass

    def message(self, text: str) -> None:
        pass


class StopFlag:
    """Ctrl-C handling: the first SIGINT asks the loop to stop after the task in hand (its record is
    written); a second one abandons that task at once (KeyboardInterrupt). The file stays valid JSONL
    either way, because each record is a single write."""

    def __init__(self, progress: Progress | None = None):
        self.requested = False
        self.idle = False  # waiting for input, no task in hand: Ctrl-C stops at once
        self._progress = progress or _Quiet()
        self._old: Any = None

    def __call__(self) -> bool:
        return self.requested

    def request(self) -> None:
        self.requested = True

    def _handler(self, signum: int, frame: Any) -> None:
        if self.requested or self.idle:
            self.requested = True
            raise KeyboardInterrupt
        self.requested = True
        self._progress.message("stopping after the current task (Ctrl-C again to abandon it)")

    def __enter__(self) -> "StopFlag":
        if threading.current_thread() is threading.main_thread():
            self._old = signal.signal(signal.SIGINT, self._handler)
        return self

    def __exit__(self, *exc: object) -> None:
        if self._old is not None:
            signal.signal(signal.SIGINT, self._old)
            self._old = None


# ---- one task ----------------------------------------------------------------------------------------------

@dataclass
class _Work:
    """A task on its way: its route and everything it has cost so far."""

    task: Task
    route: Route | None = None
    usage: Usage = field(default_factory=Usage)
    route_cpu: float = 0.0
    fill_cpu: float = 0.0
    tool_cpu: float = 0.0
    tool_wall: float = 0.0
    pattern_cpu: float = 0.0  # matching and learning sentence patterns (no model call)
    attempts: int = 0
    arguments: dict[str, Any] | None = None
    error: str | None = None
    filled_by: FilledBy | None = None
    pattern_check: PatternCheck | None = None

    def record(self, status: str, answer: Any = None, tool_backed: bool = False,
               reply: str | None = None, error_kind: str | None = None) -> AnswerRecord:
        r = self.route
        u = self.usage
        return AnswerRecord(
            id=self.task.id, line=self.task.line, question=self.task.question, answer=answer, reply=reply,
            route=r.tool if r else NONE_ROUTE, confidence=r.confidence if r else None, arguments=self.arguments,
            status=status, tool_backed=tool_backed, error=self.error, error_kind=error_kind, attempts=self.attempts,
            filled_by=self.filled_by if tool_backed else None,
            pattern_check=self.pattern_check if tool_backed else None,
            cpu=Cpu(model=round(u.cpu_seconds + self.pattern_cpu, 4), tool=round(self.tool_cpu, 4),
                    route=round(self.route_cpu, 4), fill=round(self.fill_cpu + self.pattern_cpu, 4)),
            wall_seconds=round(u.wall_seconds + self.tool_wall, 4),
            tokens=Tokens(prompt=u.prompt_tokens, completion=u.completion_tokens, cached=u.cached_tokens,
                          forced=u.forced_tokens, restored=u.restored_tokens))


class Engine:
    """Route, execute and fall back for single tasks, given the verified tools, the executor, a factory for
    the fallback model (loaded only when first needed), a sandbox and the pattern books (None: no patterns)."""

    def __init__(self, tools: list[Tool], executor: ChatModel, sandbox: Any, options: RunOptions,
                 fallback_model: Callable[[], ChatModel] | None = None, patterns: PatternStore | None = None):
        self.patterns = patterns if options.patterns else None
        self.tools = {t.name: t for t in tools}
        self.cards = [t.card for t in tools]
        self.executor = executor
        self.sandbox = sandbox
        self.options = options
        self._fallback_factory = fallback_model
        self._fallback: ChatModel | None = None

    def fallback_model(self) -> ChatModel | None:
        if self.options.fallback == "none":
            return None
        if self.options.fallback == "executor" and self._fallback_factory is None:
            return self.executor
        if self._fallback is None and self._fallback_factory is not None:
            self._fallback = self._fallback_factory()
        return self._fallback

    @property
    def router_key(self) -> str:
        """What decides a route besides the question: the cards, the executor, seed and threshold."""
        import hashlib
        import json

        payload = {"cards": sorted((c.model_dump(by_alias=True) for c in self.cards), key=lambda c: c["name"]),
                   "executor": getattr(self.executor, "name", "?"), "seed": self.options.seed,
                   "min_confidence": self.options.min_confidence}
        return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()[:24]

    def route(self, work: _Work) -> None:
        try:
            work.route = route(self.executor, self.cards, work.task.question, seed=self.options.seed,
                               min_confidence=self.options.min_confidence)
        except ContextOverflowError as exc:  # the question fits a direct answer but not beside any card
            work.route = Route(tool=NONE_ROUTE, chosen=NONE_ROUTE, note=f"too long for the router: {exc}")
            work.error = work.route.note
            return
        work.usage = work.usage + work.route.usage
        work.route_cpu += work.route.usage.cpu_seconds
        if work.route.note and work.route.tool == NONE_ROUTE and work.route.chosen != NONE_ROUTE:
            work.error = work.route.note

    def too_long(self, work: _Work) -> AnswerRecord | None:
        """A `too_long` error record when the question cannot fit the executor's context even in the smallest
        prompt any path sends (the direct answer's, with room for its reply); None when it fits or the model
        cannot measure prompts. No model is called for such a question."""
        n_ctx = getattr(self.executor, "n_ctx", None)
        if n_ctx is None:
            return None
        need = prompt_size(self.executor, direct_messages(work.task.question))
        if need is None or need + DIRECT_MAX_TOKENS <= n_ctx:
            return None
        alone = prompt_size(self.executor, [{"role": "user", "content": work.task.question}]) or need
        work.error = (f"the question is about {alone:,} tokens; with the shortest prompt and its reply it needs "
                      f"{need + DIRECT_MAX_TOKENS:,} of the executor's {n_ctx:,}-token context: shorten or split it")
        return work.record("error", error_kind="too_long")

    def error_record(self, work: _Work, stage: str, exc: Exception) -> AnswerRecord:
        """The record of a task whose `stage` raised: status error, a kind, and a one-line message."""
        text = " ".join(str(exc).split()) or "(no message)"
        if not isinstance(exc, JigwrightError):
            text = f"{type(exc).__name__}: {text}"
        kind = "too_long" if isinstance(exc, ContextOverflowError) else stage
        earlier = f" (after: {work.error})" if work.error else ""
        work.error = f"{STAGE_WORDS.get(stage, stage)} failed: {text[:300]}{earlier[:200]}"
        return work.record("error", error_kind=kind)

    def guarded(self, work: _Work, stage: str, step: Callable[[_Work], Any]) -> tuple[Any, AnswerRecord | None]:
        """Run one step of a task; an exception becomes the task's error record (setup errors still stop)."""
        try:
            return step(work), None
        except FATAL:
            raise
        except Exception as exc:
            return None, self.error_record(work, stage, exc)

    def try_route(self, work: _Work) -> AnswerRecord | None:
        """Route one task; an error record when it cannot be (too long, or routing failed), else None."""
        early, err = self.guarded(work, "route", self.too_long)
        if err is not None or early is not None:
            return err or early
        _, err = self.guarded(work, "route", self.route)
        return err

    def complete(self, work: _Work) -> AnswerRecord:
        """Answer a routed task: the tool, else the fallback; any failure is the task's error record."""
        record, err = self.guarded(work, "tool", self.execute)
        if err is not None or record is not None:
            return err or record
        return self.try_fall_back(work)

    def try_execute(self, work: _Work) -> AnswerRecord | None:
        record, err = self.guarded(work, "tool", self.execute)
        return err or record

    def try_fall_back(self, work: _Work) -> AnswerRecord:
        record, err = self.guarded(work, "fallback", self.fall_back)
        return err or record

    def execute(self, work: _Work) -> AnswerRecord | None:
        """Answer with the routed tool; None when the task needs the fallback (no tool fits, or it failed)."""
        assert work.route is not None
        tool = self.tools.get(work.route.tool)
        if tool is None:
            return None
        checking: Prediction | None = None
        if self.patterns is not None:
            done, checking = self.pattern_fill(work, tool)
            if done is not None:
                return done
        out = answer_with_tool(self.executor, tool, work.task.question, self.sandbox, seed=self.options.seed,
                               retries=self.options.retries, retry_temperature=self.options.retry_temperature)
        work.usage = work.usage + out.usage
        work.fill_cpu += out.usage.cpu_seconds
        work.tool_cpu += out.tool_cpu_seconds
        work.tool_wall += out.tool_wall_seconds
        work.attempts = out.attempts
        work.arguments = out.arguments
        if out.ok:
            misfit = self.misfit(tool, work.task.question, out.arguments)
            if misfit is None:
                work.filled_by = "executor"
                if self.patterns is not None and out.arguments is not None:
                    self.learn_patterns(work, tool, out.arguments, checking)
                return work.record("tool", out.value, tool_backed=True)
            work.error = misfit
            return None
        work.error = out.error
        return None

    def pattern_fill(self, work: _Work, tool: Tool) -> tuple[AnswerRecord | None, Prediction | None]:
        """Answer from the tool's confirmed sentence patterns, with no model call: the record when every sentence
        matched and the arguments passed the schema check, the fit check and the tool run; else (None, None) and
        the executor fills as usual. A fill sampled for a cross-check comes back as (None, its prediction)."""
        assert self.patterns is not None
        started = time.process_time()
        key = tool_key(tool.code, tool.entry, tool.schema_)
        pred = predict(self.patterns.load(key), work.task.question, tool.schema_)
        args = pred.arguments
        fits = args is not None and schema_problem(tool.schema_, args) is None \
            and self.misfit(tool, work.task.question, args) is None
        work.pattern_cpu += time.process_time() - started
        if not fits:
            return None, None
        try:
            result = self.sandbox.run(tool.code, args, entry=tool.entry)
        except Exception:  # the executor's path runs the tool again and reports what goes wrong
            return None, None
        work.tool_cpu += result.cpu_seconds
        work.tool_wall += result.wall_seconds
        if not result.ok or result.value is None:
            return None, None
        if check_due(key, work.task.id, self.options.pattern_check_every):
            return None, pred
        work.arguments, work.filled_by, work.attempts = args, "pattern", 0
        return work.record("tool", result.value, tool_backed=True), None

    def learn_patterns(self, work: _Work, tool: Tool, arguments: dict[str, Any], checking: Prediction | None) -> None:
        """Fold a checked executor fill into the tool's pattern book; a cross-checked pattern fill that
        disagrees with it has its patterns retired."""
        assert self.patterns is not None
        started = time.process_time()
        question, schema = work.task.question, tool.schema_
        disagreed = checking is not None and checking.arguments != arguments

        def change(book):
            lesson = learn(book, question, arguments, schema)
            if disagreed and checking is not None and not lesson.retired:
                retire(book, checking.used, "disagreed with the executor on a cross-check", lesson)
            return lesson

        self.patterns.update(tool_key(tool.code, tool.entry, schema), change)
        if checking is not None:
            work.pattern_check = "disagreed" if disagreed else "agreed"
        work.pattern_cpu += time.process_time() - started

    @staticmethod
    def misfit(tool: Tool, question: str, arguments: dict[str, Any] | None) -> str | None:
        """Why the routed tool does not fit the question, judged from the filled arguments (None if it fits).

        A tool whose demos copy every number from their questions must get arguments that do too: numbers the
        question does not state mean the executor made them up to fill a form that does not fit. Measured on
        the demo queue, all 5 questions routed to a tool of another family got such numbers (a year and a
        day of month for working days, say); none of the 60 eval tasks filled for their own family's tool did."""
        invented = shapecheck.invented_numbers(question, arguments)
        if not invented or any(shapecheck.invented_numbers(d.question, d.arguments) for d in tool.card.demos):
            return None
        shown = ", ".join(f"{n:g}" for n in invented[:4])
        return f"tool '{tool.name}' does not fit: its arguments hold numbers the question does not state ({shown})"

    def fall_back(self, work: _Work) -> AnswerRecord:
        model = self.fallback_model()
        if model is None:
            if work.error is None:
                work.error = "no tool fits this question and the fallback is off"
            return work.record("failed")
        direct = answer_directly(model, work.task.question, seed=self.options.seed)
        work.usage = work.usage + direct.usage
        if direct.answer in ("", None):
            why = "ran out of tokens before answering" if direct.text else "gave no answer"
            work.error = (work.error + "; " if work.error else "") + f"the fallback model {why}"
            return work.record("failed", reply=direct.text or None)
        return work.record("fallback", direct.answer, tool_backed=False, reply=direct.text)

    def answer(self, task: Task) -> AnswerRecord:
        """The whole path for one task (used by `ask`, `--no-group` and `--follow`); never raises for a
        failure of this task alone."""
        work = _Work(task)
        return self.try_route(work) or self.complete(work)


# ---- the run report ----------------------------------------------------------------------------------------

class CpuStats(BaseModel):
    tasks: int
    mean: float
    p50: float
    p95: float


class CpuSteps(BaseModel):
    """Mean CPU seconds per answered task spent routing, filling the tool's arguments, running the tool, and
    answering directly after a fallback (each over all answered tasks, so they add up to the mean)."""

    routing: float
    filling: float
    tool: float
    fallback: float


def cpu_steps(records: list[AnswerRecord]) -> CpuSteps:
    n = max(len(records), 1)
    return CpuSteps(routing=round(sum(r.cpu.route for r in records) / n, 4),
                    filling=round(sum(r.cpu.fill for r in records) / n, 4),
                    tool=round(sum(r.cpu.tool for r in records) / n, 4),
                    fallback=round(sum(max(r.cpu.model - r.cpu.route - r.cpu.fill, 0.0) for r in records) / n, 4))


class CacheSavings(BaseModel):
    """Prompt tokens llama.cpp reused from its KV cache instead of evaluating again, and what that saved.
    In queue order (route, fill, route, fill, …) consecutive prompts share almost nothing, so nearly all
    of these tokens would have been evaluated."""

    prompt_tokens: int
    cached_tokens: int
    cached_share: float
    cpu_per_prompt_token: float
    rate_source: Literal["this run", "preset"]
    cpu_seconds_saved: float


class RunReport(BaseModel):
    queue: str
    out: str
    tasks: int = Field(description="answer records written by this run (errors included)")
    skipped: int = Field(description="tasks and bad lines already in the answers file")
    by_tool: int
    by_pattern: int = Field(0, description="of the tool answers, those whose arguments sentence patterns filled "
                                           "(no model call)")
    pattern_checks: int = Field(0, description="pattern fills the executor filled again to check them")
    pattern_disagreements: int = Field(0, description="checks where the executor disagreed (patterns retired)")
    by_fallback: int
    failed: int
    errors: int
    cpu_per_task: dict[str, CpuStats] = Field(description="by route; 'all' covers every answered task")
    cpu_by_step: CpuSteps = Field(default_factory=lambda: CpuSteps(routing=0, filling=0, tool=0, fallback=0),
                                  description="mean CPU s per answered task by step")
    task_cpu_seconds: float
    model_load_cpu_seconds: float
    total_cpu_seconds: float
    wall_seconds: float
    tasks_per_minute: float
    tokens: Tokens
    savings: CacheSavings
    repaired_bytes: int = 0
    interrupted: bool = False
    superseded: int = Field(0, description="earlier answer records replaced by this run's (edited question, retry)")
    routes_reused: int = Field(0, description="route decisions taken from an interrupted run's journal")
    error_kinds: dict[str, int] = Field(default_factory=dict, description="error records by kind")


def quantile(values: list[float], q: float) -> float:
    """Linear-interpolation quantile (numpy's default) of a non-empty list."""
    xs = sorted(values)
    pos = (len(xs) - 1) * q
    lo, hi = math.floor(pos), math.ceil(pos)
    return xs[lo] + (xs[hi] - xs[lo]) * (pos - lo)


def cpu_stats(values: list[float]) -> CpuStats:
    return CpuStats(tasks=len(values), mean=round(sum(values) / len(values), 4), p50=round(quantile(values, 0.5), 4),
                    p95=round(quantile(values, 0.95), 4))


def prompt_cpu_per_token(records: list[AnswerRecord]) -> tuple[float, str]:
    """CPU seconds per evaluated prompt token, fitted over this run's tool-answered tasks as
    cpu ≈ a·(prompt − cached) + b·completion (least squares through the origin); the preset rate otherwise."""
    rows = [(r.tokens.prompt - r.tokens.cached, r.tokens.completion, r.cpu.model) for r in records
            if r.status == "tool" and r.cpu.model > 0]
    if len(rows) >= 4:
        sxx = sum(x * x for x, _, _ in rows)
        syy = sum(y * y for _, y, _ in rows)
        sxy = sum(x * y for x, y, _ in rows)
        sxc = sum(x * c for x, _, c in rows)
        syc = sum(y * c for _, y, c in rows)
        det = sxx * syy - sxy * sxy
        if det > 1e-9 * max(sxx * syy, 1):
            a = (sxc * syy - syc * sxy) / det
            b = (syc * sxx - sxc * sxy) / det
            if a > 0 and b > 0:
                return a, "this run"
    return PRESET_PROMPT_CPU_PER_TOKEN, "preset"


def summarise(records: list[AnswerRecord], *, queue: str, out: str, skipped: int, wall_seconds: float,
              process_cpu_seconds: float, load_cpu_seconds: float, repaired_bytes: int = 0,
              interrupted: bool = False, superseded: int = 0, routes_reused: int = 0) -> RunReport:
    """The run report from this run's records and its measured totals (pure)."""
    answered = [r for r in records if r.status != "error"]
    by_route: dict[str, list[float]] = {}
    for r in answered:
        by_route.setdefault(r.route, []).append(r.cpu.total)
    stats = {k: cpu_stats(v) for k, v in sorted(by_route.items())}
    if answered:
        stats["all"] = cpu_stats([r.cpu.total for r in answered])
    tokens = Tokens(prompt=sum(r.tokens.prompt for r in records), completion=sum(r.tokens.completion for r in records),
                    cached=sum(r.tokens.cached for r in records), forced=sum(r.tokens.forced for r in records),
                    restored=sum(r.tokens.restored for r in records))
    rate, source = prompt_cpu_per_token(records)
    tool_cpu = sum(r.cpu.tool for r in records)
    total_cpu = process_cpu_seconds + tool_cpu
    return RunReport(
        queue=queue, out=out, tasks=len(records), skipped=skipped,
        by_tool=sum(r.status == "tool" for r in records), by_fallback=sum(r.status == "fallback" for r in records),
        by_pattern=sum(r.filled_by == "pattern" for r in records),
        pattern_checks=sum(r.pattern_check is not None for r in records),
        pattern_disagreements=sum(r.pattern_check == "disagreed" for r in records),
        failed=sum(r.status == "failed" for r in records), errors=sum(r.status == "error" for r in records),
        cpu_per_task=stats, cpu_by_step=cpu_steps(answered), task_cpu_seconds=round(sum(r.cpu.total for r in records), 3),
        model_load_cpu_seconds=round(load_cpu_seconds, 3), total_cpu_seconds=round(total_cpu, 3),
        wall_seconds=round(wall_seconds, 3),
        tasks_per_minute=round(len(answered) / (wall_seconds / 60), 2) if wall_seconds > 0 else 0.0,
        tokens=tokens,
        savings=CacheSavings(prompt_tokens=tokens.prompt, cached_tokens=tokens.cached,
                             cached_share=round(tokens.cached / tokens.prompt, 3) if tokens.prompt else 0.0,
                             cpu_per_prompt_token=round(rate, 5), rate_source=source,
                             cpu_seconds_saved=round(tokens.cached * rate, 2)),
        repaired_bytes=repaired_bytes, interrupted=interrupted, superseded=superseded, routes_reused=routes_reused,
        error_kinds={k: sum((r.error_kind or "input") == k for r in records if r.status == "error")
                     for k in sorted({r.error_kind or "input" for r in records if r.status == "error"})})


# ---- the loop ----------------------------------------------------------------------------------------------

class RunLoop:
    """Drives an Engine over a queue, writing each record as soon as it is final."""

    def __init__(self, engine: Engine, writer: AnswerWriter, resumed: Resumed | None = None,
                 progress: Progress | None = None, stop: StopFlag | None = None,
                 journal: RouteJournal | None = None):
        self.engine = engine
        self.writer = writer
        self.resumed = resumed or Resumed([])
        self.progress = progress or _Quiet()
        self.stop = stop or StopFlag()
        self.journal = journal or RouteJournal(None, "")
        self.records: list[AnswerRecord] = []
        self.skipped = 0
        self.superseded = 0
        self.routes_reused = 0
        self._earlier = set(self.resumed.latest)
        self._done_lines = set(self.resumed.done_error_lines)
        self._told = 0  # notes of the pattern books already shown

    def _write(self, record: AnswerRecord) -> None:
        patterns = self.engine.patterns
        while patterns is not None and len(patterns.notes) > self._told:
            self.progress.message(patterns.notes[self._told])
            self._told += 1
        record = self.writer.write(record)
        self.records.append(record)
        if record.error_kind != "input" and record.id in self._earlier:
            self.superseded += 1
            self._earlier.discard(record.id)
        self.progress.advance(record)

    def _pending(self, item: Task | BadLine) -> bool:
        """False for what an earlier run already wrote (counted as skipped): a bad line already reported, or a
        task with a record of the same id and question (unless it failed and failed tasks are retried)."""
        if isinstance(item, BadLine):
            done = item.line in self._done_lines
        else:
            done = self.resumed.done(item, self.engine.options.retry_failed)
        if done:
            self.skipped += 1
        return not done

    def _journalled(self, work: _Work) -> bool:
        """Take a task's route from the journal of an earlier, interrupted run; False when it holds none."""
        kept = self.journal.get(work.task)
        if kept is None:
            return False
        try:
            work.route = Route.model_validate(kept)
        except ValueError:
            work.route = None
            return False
        work.usage = work.usage + work.route.usage
        if work.route.note and work.route.tool == NONE_ROUTE and work.route.chosen != NONE_ROUTE:
            work.error = work.route.note
        self.routes_reused += 1
        return True

    def _route(self, work: _Work) -> AnswerRecord | None:
        """Route a task, or take its decision from the journal of an earlier, interrupted run."""
        if self._journalled(work):
            return None
        failed = self.engine.try_route(work)
        if failed is None and work.route is not None:
            self.journal.add(work.task, work.route.model_dump(mode="json"))
        return failed

    def take_pending(self, items: Iterable[Task | BadLine]) -> list[Task]:
        """The tasks still to answer; bad lines not yet reported get their error records now."""
        tasks: list[Task] = []
        for item in items:
            if not self._pending(item):
                continue
            if isinstance(item, BadLine):
                self._write(item.record())
            else:
                tasks.append(item)
        return tasks

    def run_batch(self, items: Iterable[Task | BadLine]) -> None:
        """Route everything first, then answer grouped by tool, then the fallbacks together."""
        tasks = self.take_pending(items)
        if not self.engine.options.group:
            self.progress.phase("answering", len(tasks))
            for task in tasks:
                if self.stop():
                    return
                self._write(self.engine.answer(task))
            return
        self.progress.phase("routing", len(tasks))
        works = []
        for task in tasks:
            if self.stop():
                return  # the decisions so far are in the journal: a rerun does not route them again
            work = _Work(task)
            failed = self._route(work)
            if failed is not None:
                self._write(failed)  # a task that cannot be routed is finished here
            else:
                works.append(work)
            self.progress.advance()
        self.progress.phase("answering", len(works))
        groups: dict[str, list[_Work]] = {}
        for w in works:
            groups.setdefault(w.route.tool if w.route else NONE_ROUTE, []).append(w)
        later: list[_Work] = []
        for name in sorted(groups, key=lambda n: (n == NONE_ROUTE, n)):
            for w in groups[name]:
                if self.stop():
                    return
                record = self.engine.try_execute(w)
                if record is None:
                    later.append(w)
                else:
                    self._write(record)
        for w in later:
            if self.stop():
                return
            self._write(self.engine.try_fall_back(w))
        self.journal.close(finished=True)

    def run_follow(self, reader: QueueReader, poll: float = 0.5) -> None:
        """Answer line by line as lines are appended, until Ctrl-C."""
        self.progress.phase("following", None)
        items = reader.follow(self.stop, poll=poll)
        while True:
            self.stop.idle = True
            try:
                item = next(items)
            except StopIteration:
                return
            finally:
                self.stop.idle = False
            if not self._pending(item):
                continue
            self._write(item.record() if isinstance(item, BadLine) else self.engine.answer(item))
            if self.stop():
                return


def run(loop: RunLoop, reader: QueueReader, *, follow: bool, out: str, load_cpu_seconds: Callable[[], float],
        poll: float = 0.5, worker_cpu_seconds: Callable[[], float] = lambda: 0.0) -> RunReport:
    """Run the loop over the queue under the Ctrl-C handler and measure it; the report notes an interruption.
    `worker_cpu_seconds` adds the CPU of processes that answered for this one (workers of a cluster run)."""
    interrupted = False
    with Stopwatch() as sw, loop.stop:
        try:
            if follow:
                loop.run_follow(reader, poll=poll)
            else:
                loop.run_batch(reader.items())
        except KeyboardInterrupt:
            interrupted = True
        finally:
            loop.journal.close(finished=False)
        interrupted = interrupted or loop.stop.requested
    return summarise(loop.records, queue=reader.source, out=out, skipped=loop.skipped, wall_seconds=sw.wall_seconds,
                     process_cpu_seconds=sw.cpu_seconds + worker_cpu_seconds(), load_cpu_seconds=load_cpu_seconds(),
                     repaired_bytes=loop.resumed.repaired_bytes, interrupted=interrupted,
                     superseded=loop.superseded, routes_reused=loop.routes_reused)


def default_out(queue: str) -> Path | None:
    """QUEUE.jsonl → QUEUE.answers.jsonl next to it; None for stdin (then --out is required)."""
    if queue == "-":
        return None
    p = Path(queue)
    return p.with_name(p.name[: -len(p.suffix)] + ".answers.jsonl" if p.suffix else p.name + ".answers.jsonl")


# ---- services for the CLI ----------------------------------------------------------------------------------

def _load_cpu(*models: Any) -> float:
    return sum(m.load_usage.cpu_seconds for m in models if getattr(m, "load_usage", None) is not None)


@dataclass
class Setup:
    """What a run needs from the outside world; tests pass doubles for the models and their own tools."""

    tools: list[Tool]
    executor: ChatModel
    fallback_model: Callable[[], ChatModel] | None
    opened: list[Any] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)  # warnings to show before answering (a damaged store)


def local_model(role: str, name: str | None, threads: int, verbose: bool = False) -> ChatModel:
    """A local model with `threads` llama.cpp threads (0: one per physical core, llm.py's default).

    The run loop uses one thread by default: on a 2-core machine shared with other work, two threads spend
    far more CPU on a short executor reply, since each spin-waits at every layer for the other to be scheduled
    (`bench/thread_contention.py`: 4.8-5.9 CPU s per reply with two threads against 0.37 with one). CPU
    seconds per task are what the run report counts."""
    from . import models, settings
    from .llm import LocalModel, open_model

    if threads <= 0:
        return open_model(role, name, verbose=verbose)
    return LocalModel(models.for_role(settings.load_registry(), role, name), n_threads=threads, verbose=verbose)


def local_setup(options: RunOptions, executor_name: str | None = None, builder_name: str | None = None,
                verbose: bool = False, threads: int = 1) -> Setup:
    """The verified tools of the tool store and the local models (the fallback model loads on first use)."""
    tools, notes = store_tools(options)
    setup = model_setup(tools, options, executor_name, builder_name, verbose, threads)
    setup.notes = notes
    return setup


def store_tools(options: RunOptions) -> tuple[list[Tool], list[str]]:
    """The verified tools of the tool store and notes to show about it. A tool store that cannot be read is
    no reason to stop: with the fallback on, questions are answered without tools and a note says why; with
    it off, the store's error stands."""
    from .errors import StoreError
    from .store import ToolStore

    notes: list[str] = []
    try:
        with ToolStore() as store:
            tools = list(store.tools(verified_only=True))
            notes += store.warnings
    except StoreError as exc:
        if options.fallback == "none":
            raise
        tools = []
        notes.append(f"{exc}: answering without tools")
    return tools, notes


def model_setup(tools: list[Tool], options: RunOptions, executor_name: str | None = None,
                builder_name: str | None = None, verbose: bool = False, threads: int = 1) -> Setup:
    """Given tools and the local models (the fallback model loads on first use): what a worker of a cluster
    run uses, with the tools it was sent."""
    executor = local_model("executor", executor_name, threads, verbose)
    setup = Setup(tools=tools, executor=executor, fallback_model=None, opened=[executor])

    def fallback() -> ChatModel:
        model = executor if options.fallback == "executor" else local_model("builder", builder_name, threads, verbose)
        setup.opened.append(model)
        return model

    setup.fallback_model = fallback
    return setup


def pattern_books(options: RunOptions) -> PatternStore | None:
    """The pattern books under JIGWRIGHT_HOME, or None when patterns are off (`--no-patterns`)."""
    from .patternstore import default_store

    return default_store() if options.patterns else None


def open_queue(queue: str, out: Path | None) -> QueueReader:
    """A reader of the queue, once it is known to exist and not to be the answers file itself."""
    from .errors import InputError

    reader = QueueReader(queue)
    if not reader.is_stdin and not Path(queue).is_file():
        raise InputError(f"{queue}: no such queue file")
    if out is not None and not reader.is_stdin and out.resolve() == Path(queue).resolve():
        raise InputError(f"{out}: the answers file must not be the queue itself")
    return reader


@contextmanager
def answers_file(out: Path | None, progress: Progress) -> Iterator[tuple[AnswerWriter, Resumed]]:
    """The locked answers file and what an earlier run left in it (a partial last line cut off and said)."""
    from .queue import read_answers

    with AnswerWriter(out) as writer:  # the lock first: never repair a file another run is writing
        resumed = read_answers(out) if out is not None else Resumed([])
        if resumed.repaired_bytes:
            progress.message(f"{out}: cut a partial last line ({resumed.repaired_bytes} bytes) left by an "
                             f"interrupted run")
        yield writer, resumed


def run_queue(queue: str, out: Path | None, options: RunOptions, setup: Setup, *, follow: bool = False,
              progress: Progress | None = None, poll: float = 0.5) -> RunReport:
    """`jigwright answer`: resume the answers file, answer every pending task, report. `out=None` writes the
    answer records to stdout instead (no resume)."""
    from .queue import journal_path
    from .sandbox import Sandbox

    progress = progress or _Quiet()
    reader = open_queue(queue, out)
    with answers_file(out, progress) as (writer, resumed):
        for note in setup.notes:
            progress.message(note)
        if not setup.tools:
            progress.message("no verified tools in the tool store: every question goes to the fallback")
        with Sandbox(pool_size=1) as sandbox:
            engine = Engine(setup.tools, setup.executor, sandbox, options, setup.fallback_model, pattern_books(options))
            journal = RouteJournal(journal_path(out) if out is not None and options.group and not follow else None,
                                   engine.router_key)
            loop = RunLoop(engine, writer, resumed, progress, StopFlag(progress), journal)
            return run(loop, reader, follow=follow, out=str(out) if out else "-", poll=poll,
                       load_cpu_seconds=lambda: _load_cpu(*{id(m): m for m in setup.opened}.values()))


def ask(question: str, options: RunOptions, setup: Setup) -> AnswerRecord:
    """`jigwright ask`: the run loop's path for one question, nothing written. A question that is not text
    (bytes that are not UTF-8 reach argv as lone surrogates) or too long for the context is an InputError;
    any other failure comes back as the error record."""
    from .errors import InputError
    from .queue import lone_surrogate
    from .sandbox import Sandbox

    if not question.strip():
        raise InputError("the question is empty")
    at = lone_surrogate(question)
    if at is not None:
        raise InputError(f"the question is not UTF-8 text (byte 0x{ord(question[at]) & 0xff:02x} at character "
                         f"{at + 1})")
    with Sandbox(pool_size=1) as sandbox:
        engine = Engine(setup.tools, setup.executor, sandbox, options, setup.fallback_model, pattern_books(options))
        record = engine.answer(Task(id="ask", question=question.strip(), line=0))
    if record.error_kind == "too_long":
        raise InputError(record.error or "the question is too long")
    return record


class Score(BaseModel):
    """How an answers file compares with expected records (id, family or null, answer or null)."""

    tasks: int
    routed_right: int
    answers_checked: int
    answers_right: int
    unrelated: int
    unrelated_to_none: int
    wrong: list[str] = Field(default_factory=list)


def score_answers(records: list[AnswerRecord], expected: list[dict[str, Any]],
                  available: set[str] | None = None) -> Score:
    """Routing accuracy (the route is the family's tool, or none for a question that fits no family or whose
    family has no tool in `available`) and answer accuracy (normalised comparison) of the records whose ids
    have an expected entry."""
    from .execute import answers_match
    from .tools import slug

    by_id = Resumed(records).latest  # the newest answer record of each id
    s = Score(tasks=0, routed_right=0, answers_checked=0, answers_right=0, unrelated=0, unrelated_to_none=0)
    for exp in expected:
        rec = by_id.get(str(exp.get("id")))
        if rec is None:
            continue
        s.tasks += 1
        family = exp.get("family")
        want_route = slug(family) if family and (available is None or slug(family) in available) else NONE_ROUTE
        s.routed_right += rec.route == want_route
        if not family:
            s.unrelated += 1
            s.unrelated_to_none += rec.route == NONE_ROUTE
        if exp.get("answer") is not None:
            s.answers_checked += 1
            ok = answers_match(exp["answer"], rec.answer)
            s.answers_right += ok
            if not ok:
                s.wrong.append(f"{rec.id}: expected {exp['answer']!r}, got {rec.answer!r} via {rec.route}")
    return s
