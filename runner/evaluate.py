"""`jigwright eval`: compare ways of answering a family's held-out tasks — the split (a tool built by the
builder, its arguments filled by the executor) against the models answering directly — by accuracy (with a
95% Wilson interval), CPU seconds and tokens per task, and for the split its build cost and break-even point.

The split is measured on tasks known to be of the family: each task goes straight to the family's tool, with
no routing and no fallback (routing and fallback are measured by the run loop's run report). Every task result
is cached on disk as soon as it is known, keyed by method, model SHA-256, task and prompt template hash, so an
interrupted eval loses nothing and a rerun computes only what is missing.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import platform
import random
import re
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable, Literal, Protocol

import diskcache
from pydantic import BaseModel, Field, computed_field

from . import build as build_mod
from . import answerform, prompts, settings
from .errors import InputError
from .execute import (REL_TOL, EXECUTOR_TEMPLATE, FILL_METHOD, FREE_THEN_SCHEMA, answer_with_tool, answers_match,
                      fill_start, forget_fill_misses, replay_fill_modes)
from .fingerprint import code_fingerprint
from .llm import ChatModel, Message
from .meter import physical_cores
from .runloop import RunOptions, quantile
from .store import ToolStore
from .tools import Tool

METHODS = ("split", "executor-direct", "builder-direct", "builder-steps")
DIRECT_TEMPLATE = "eval_direct.j2"
STEPS_TEMPLATE = "eval_steps.j2"
DIRECT_MAX_TOKENS = 24
STEPS_MAX_TOKENS = 400
MODEL_SEED = 0  # every model call of the eval uses this seed; --seed only picks the tasks
ALL = "all families"
Z95 = 1.959963984540054  # the 0.975 quantile of the standard normal distribution
BreakEven = int | Literal["never"]


# ---- input ---------------------------------------------------------------------------------------------------

class EvalTask(BaseModel):
    """One held-out task of a family: a question and its known answer."""

    id: str
    question: str
    answer: Any
    line: int


@dataclass
class FamilyDir:
    """A family folder: solved examples (for building and for few-shot demos) and held-out tasks."""

    path: Path
    family: build_mod.Family
    tasks: list[EvalTask]

    @property
    def name(self) -> str:
        return self.family.name


def parse_tasks(source: str, lines: list[str]) -> list[EvalTask]:
    """Tasks from the lines of a test.jsonl; a bad line is an InputError naming file and line."""
    tasks = [EvalTask(id=e.id, question=e.question, answer=e.answer, line=e.line)
             for e in build_mod.parse_solved(source, lines)]
    if not tasks:
        raise InputError(f"{source}: no tasks")
    return tasks


def load_family_dir(path: Path) -> FamilyDir:
    """Read a family folder: examples.jsonl as the build command reads it, then test.jsonl."""
    if not path.is_dir():
        raise InputError(f"{path}: not a family folder (expected examples.jsonl, test.jsonl, family.toml)")
    test = path / "test.jsonl"
    if not test.is_file():
        raise InputError(f"{path}: no test.jsonl (the held-out tasks with answers that eval needs)")
    family = build_mod.load_family(path / "examples.jsonl")
    lines = build_mod.read_lines(test)
    return FamilyDir(path=path, family=family, tasks=parse_tasks(str(test), lines))


def load_families(paths: list[Path]) -> list[FamilyDir]:
    """Every family folder, checked before any model is loaded; two folders may not share a family name."""
    fams: list[FamilyDir] = []
    for p in paths:
        fam = load_family_dir(p)
        other = next((f for f in fams if f.name == fam.name), None)
        if other is not None:
            raise InputError(f"{p}: family '{fam.name}' is already given by {other.path}")
        fams.append(fam)
    if not fams:
        raise InputError("no family folders given")
    return fams


def parse_methods(raw: list[str] | None) -> list[str]:
    """Method names from repeated and/or comma-separated options, in the order given; default all."""
    names = [m.strip() for item in (raw or []) for m in item.split(",") if m.strip()]
    if not names:
        return list(METHODS)
    for m in names:
        if m not in METHODS:
            raise InputError(f"unknown method '{m}' (choose from {', '.join(METHODS)})")
    return list(dict.fromkeys(names))


def select_tasks(tasks: list[EvalTask], n: int, seed: int) -> list[EvalTask]:
    """The first n tasks after a shuffle seeded with `seed` (a larger n extends the same selection)."""
    order = list(tasks)
    random.Random(seed).shuffle(order)
    return order[:n]


# ---- statistics (pure) -----------------------------------------------------------------------------------------

def wilson_interval(correct: int, n: int, z: float = Z95) -> tuple[float, float]:
    """The Wilson score interval for a proportion correct/n (E. B. Wilson, JASA 22, 1927):
    (p + z²/2n ± z·sqrt(p(1−p)/n + z²/4n²)) / (1 + z²/n). For n = 0 nothing is known: (0, 1)."""
    if n <= 0:
        return 0.0, 1.0
    p = correct / n
    z2 = z * z
    centre = (p + z2 / (2 * n)) / (1 + z2 / n)
    half = z / (1 + z2 / n) * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    lo = 0.0 if correct == 0 else max(0.0, centre - half)  # exact at the ends, where rounding strays by 1e-17
    hi = 1.0 if correct == n else min(1.0, centre + half)
    return lo, hi


def break_even(build_cpu: float, split_per_task: float, direct_per_task: float) -> BreakEven:
    """The smallest task count n with build + n·split < n·direct (CPU seconds), or "never" when the split
    is not cheaper per task."""
    if split_per_task >= direct_per_task:
        return "never"
    n = max(1, math.floor(build_cpu / (direct_per_task - split_per_task)) + 1)

    def cheaper(k: int) -> bool:
        return build_cpu + k * split_per_task < k * direct_per_task

    while n > 1 and cheaper(n - 1):  # floating-point rounding can put the quotient one off either way
        n -= 1
    while not cheaper(n):
        n += 1
    return n


def cpu_model(cpuinfo: str) -> str:
    """The processor's name from the text of /proc/cpuinfo (first 'model name'), or '' when absent."""
    m = re.search(r"^model name\s*:\s*(.+)$", cpuinfo, flags=re.MULTILINE)
    return m.group(1).strip() if m else ""


def answer_text(value: Any) -> str:
    """How a known answer reads in a prompt: text as written, lists joined with commas, else JSON."""
    if isinstance(value, str):
        return value
    if isinstance(value, (list, tuple)):
        return ", ".join(answer_text(v) for v in value)
    return json.dumps(value, ensure_ascii=False)


# ---- records -----------------------------------------------------------------------------------------------

class TaskResult(BaseModel):
    """What one method did on one task (cached as it is): the answer or why there is none, and its cost."""

    id: str
    answer: Any = None
    answered: bool
    error: str | None = None
    arguments: dict[str, Any] | None = None
    reply: str = ""
    model_cpu: float = 0.0
    tool_cpu: float = 0.0
    wall_seconds: float = 0.0
    prompt_tokens: int = 0
    completion_tokens: int = 0
    cached_tokens: int = 0
    forced_tokens: int = 0  # of the completion tokens, those the schema forced (appended in batches)
    fill: list[str] = Field(default_factory=list, description="how each fill was asked (free, schema, ...)")

    @property
    def cpu_seconds(self) -> float:
        return self.model_cpu + self.tool_cpu

    @property
    def tokens(self) -> int:
        return self.prompt_tokens + self.completion_tokens


class ScoredTask(TaskResult):
    expected: Any = None
    correct: bool = False
    cpu: float = 0.0


class BuildInfo(BaseModel):
    """The split's tool for one family and what building it cost (the stored report's CPU on a cache hit)."""

    family: str
    key: str
    tool: str | None = None
    tool_sha: str | None = None
    verified: bool = False
    held_out_score: float = 0.0
    strategy: str = ""
    cpu_seconds: float = 0.0
    cache_hit: bool = False
    failures: list[str] = Field(default_factory=list)
    contested: int = 0  # inputs on which the candidates that passed every example disagree, still unanswered
    agreement: float | None = None  # share of probe inputs on which they agree with this tool


class MethodRow(BaseModel):
    """One method on one family (or pooled over all families)."""

    family: str
    method: str
    model: str
    tasks: int
    correct: int
    accuracy: float
    ci_low: float
    ci_high: float
    cpu_mean: float
    cpu_p95: float
    cpu_model_mean: float = 0.0  # the split: filling the arguments (tasks go straight to the tool: no routing)
    cpu_tool_mean: float = 0.0
    generated_mean: float = 0.0
    forced_mean: float = 0.0
    tokens_mean: float
    cached_tokens_mean: float
    unanswered: int
    computed: int = 0
    build_cpu: float | None = None
    break_even: dict[str, BreakEven] = Field(default_factory=dict)
    note: str = ""
    flagged: bool = False
    results: list[ScoredTask] = Field(default_factory=list)

    @computed_field  # in eval.json too
    @property
    def cpu_per_correct(self) -> float | None:
        """CPU seconds per right answer (all tasks' CPU over the right ones; the split's build not included):
        what an answer worth having costs, where CPU s/task alone rewards answering fast and wrong."""
        return round(self.cpu_mean * self.tasks / self.correct, 3) if self.correct else None


class Machine(BaseModel):
    cores: int
    physical_cores: int
    cpu_model: str
    python: str
    system: str


class EvalReport(BaseModel):
    created: str
    machine: Machine
    n: int
    seed: int
    model_seed: int = MODEL_SEED
    methods: list[str]
    models: dict[str, str]
    families: list[str]
    builds: list[BuildInfo]
    rows: list[MethodRow]
    computed: int
    reused: int
    model_load_cpu_seconds: float = 0.0
    cache: str = ""
    files: dict[str, str] = Field(default_factory=dict)
    pooled_note: str = Field("", description="which families the pooled rows leave out, and why")


def machine() -> Machine:
    try:
        text = Path("/proc/cpuinfo").read_text(encoding="ascii", errors="replace")
    except OSError:
        text = ""
    return Machine(cores=os.cpu_count() or 1, physical_cores=physical_cores(),
                   cpu_model=cpu_model(text) or platform.processor() or "unknown",
                   python=platform.python_version(), system=f"{platform.system()} {platform.release()}")


# ---- prompts for the direct methods -----------------------------------------------------------------------------

def _description(family: build_mod.Family) -> str:
    return family.description or family.name


def direct_messages(family: build_mod.Family, question: str) -> list[Message]:
    """Few-shot: the family's solved examples as earlier turns (question, then only its answer)."""
    msgs: list[Message] = [{"role": "system",
                            "content": prompts.render(DIRECT_TEMPLATE, description=_description(family))}]
    for ex in family.examples:
        msgs.append({"role": "user", "content": ex.question})
        msgs.append({"role": "assistant", "content": answer_text(ex.answer)})
    msgs.append({"role": "user", "content": question})
    return msgs


def steps_messages(family: build_mod.Family, question: str) -> list[Message]:
    """The same examples shown in the system turn (to fix the answer's form), then the question."""
    examples = [{"question": ex.question, "answer": answer_text(ex.answer)} for ex in family.examples]
    return [{"role": "system", "content": prompts.render(STEPS_TEMPLATE, description=_description(family),
                                                         examples=examples)},
            {"role": "user", "content": question}]


@dataclass(frozen=True)
class DirectMethod:
    role: Literal["builder", "executor"]
    template: str
    max_tokens: int
    messages: Callable[[build_mod.Family, str], list[Message]]
    reasons: bool  # a reply cut off before "Answer:" has no answer (its last line is working, not an answer)


DIRECT = {
    "executor-direct": DirectMethod("executor", DIRECT_TEMPLATE, DIRECT_MAX_TOKENS, direct_messages, False),
    "builder-direct": DirectMethod("builder", DIRECT_TEMPLATE, DIRECT_MAX_TOKENS, direct_messages, False),
    "builder-steps": DirectMethod("builder", STEPS_TEMPLATE, STEPS_MAX_TOKENS, steps_messages, True),
}


def parse_reply(question: str, text: str, finish_reason: str, reasons: bool) -> Any:
    """The answer in a direct reply, cut down to what the question asks for by answerform's rules; none ("")
    from a reasoning reply that ran out of tokens before it answered."""
    if reasons and finish_reason == "length" and not re.search(r"answer\s*(?:is)?\s*[:=]", text, re.IGNORECASE):
        return ""
    return answerform.direct_answer(question, text)


# ---- one task -----------------------------------------------------------------------------------------------

def answer_direct(model: ChatModel, method: DirectMethod, family: build_mod.Family, task: EvalTask) -> TaskResult:
    reply = model.chat(method.messages(family, task.question), seed=MODEL_SEED, temperature=0.0,
                       max_tokens=method.max_tokens)
    answer = parse_reply(task.question, reply.text, reply.finish_reason, method.reasons)
    answered = answer not in ("", None)
    u = reply.usage
    return TaskResult(id=task.id, answer=answer if answered else None, answered=answered,
                      error=None if answered else f"no answer ({reply.finish_reason})", reply=reply.text[:2000],
                      model_cpu=u.cpu_seconds, wall_seconds=u.wall_seconds, prompt_tokens=u.prompt_tokens,
                      completion_tokens=u.completion_tokens, cached_tokens=u.cached_tokens)


def answer_split(executor: ChatModel, tool: Tool, task: EvalTask, sandbox: Any, options: RunOptions) -> TaskResult:
    """The run loop's tool path for one task (fill, run, one retry), without routing or fallback."""
    out = answer_with_tool(executor, tool, task.question, sandbox, seed=MODEL_SEED, retries=options.retries,
                           retry_temperature=options.retry_temperature)
    u = out.usage
    return TaskResult(id=task.id, answer=out.value if out.ok else None, answered=out.ok, error=out.error,
                      arguments=out.arguments, model_cpu=u.cpu_seconds, tool_cpu=out.tool_cpu_seconds,
                      wall_seconds=u.wall_seconds + out.tool_wall_seconds, prompt_tokens=u.prompt_tokens,
                      completion_tokens=u.completion_tokens, cached_tokens=u.cached_tokens,
                      forced_tokens=u.forced_tokens, fill=out.fill_modes)


def _sha(obj: Any) -> str:
    return hashlib.sha256(json.dumps(obj, sort_keys=True, ensure_ascii=False, default=str).encode()).hexdigest()


def tool_sha(tool: Tool) -> str:
    """Identity of what the split runs: the tool's code, entry and usage card."""
    return _sha({"code": tool.code, "entry": tool.entry, "card": tool.card.model_dump(by_alias=True)})[:32]


def result_key(method: str, model_sha: str, family: str, task: EvalTask, template_hash: str, context: str,
               knobs: dict[str, Any]) -> str:
    """Cache key of one task result: method, model SHA-256, task (id and question), prompt template hash,
    what else shapes the prompt (the tool, or the few-shot examples) and the call (token limit, seed, how the
    fill starts), and the fingerprint of the runner code that computes and checks answers."""
    return "task:" + _sha({"method": method, "model": model_sha, "family": family, "task": task.id,
                           "question": task.question, "template": template_hash, "context": context,
                           "knobs": knobs, "runner": code_fingerprint("eval")})[:40]


class ResultCache:
    """Task results and failed-build notes on diskcache (each set is one SQLite transaction, so a result is
    either stored whole or not at all)."""

    def __init__(self, path: Path):
        self.path = path
        path.mkdir(parents=True, exist_ok=True)
        self._cache = diskcache.Cache(str(path))

    def close(self) -> None:
        self._cache.close()

    def __enter__(self) -> "ResultCache":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def get(self, key: str) -> TaskResult | None:
        """A stored result, or None when there is none or it no longer validates (it is computed again)."""
        raw = self._cache.get(key)
        try:
            return TaskResult.model_validate_json(raw) if raw else None
        except ValueError:
            return None

    def put(self, key: str, result: TaskResult) -> None:
        self._cache.set(key, result.model_dump_json())

    def failed_build(self, build_key: str) -> BuildInfo | None:
        raw = self._cache.get(f"nobuild:{build_key}")
        return BuildInfo.model_validate_json(raw) if raw else None

    def note_failed_build(self, info: BuildInfo) -> None:
        self._cache.set(f"nobuild:{info.key}", info.model_dump_json())


# ---- the eval -----------------------------------------------------------------------------------------------

class Progress(Protocol):
    """What the eval tells its caller as it goes (the CLI draws a progress bar from it)."""

    def phase(self, name: str, total: int | None) -> None: ...

    def advance(self, record: Any = None) -> None: ...

    def message(self, text: str) -> None: ...


class _Quiet:
    def phase(self, name: str, total: int | None) -> None:
        pass

    def advance(self, record: Any = None) -> None:
        pass

    def message(self, text: str) -> None:
        pass


@dataclass
class EvalSetup:
    """The two models and their SHA-256s; tests pass doubles. Local models load on their first call, so a
    method that is not asked for never loads its model."""

    builder: ChatModel
    executor: ChatModel
    builder_sha: str
    executor_sha: str
    opened: list[Any] = field(default_factory=list)


def local_setup(builder_name: str | None = None, executor_name: str | None = None,
                verbose: bool = False) -> EvalSetup:
    from .llm import open_model

    b = open_model("builder", builder_name, verbose=verbose)
    e = open_model("executor", executor_name, verbose=verbose)
    return EvalSetup(builder=b, executor=e, builder_sha=b.spec.sha256, executor_sha=e.spec.sha256, opened=[b, e])


def _build_settings() -> build_mod.BuildSettings:
    """The settings `jigwright build FILE` uses with no options (its defaults), so eval finds that tool."""
    return build_mod.BuildSettings()


def known_no_build(family: str, key: str, store: ToolStore, cache: ResultCache, progress: Progress) -> BuildInfo | None:
    """When the tool store has no tool for this build: the eval's note of a build that gave none (so a rerun
    does not pay for it again), else None after saying that the build is about to run."""
    if store.by_key(key) is not None:
        return None
    failed = cache.failed_build(key)
    if failed is not None:
        return failed.model_copy(update={"cache_hit": True})
    if store.failed(key) is None:  # else the build returns the remembered failure at once
        progress.message(f"{family}: no tool in the tool store for this build yet; building it "
                         f"(the builder's cost is counted as the split's build cost)")
    return None


def build_info(family: str, tool: Tool | None, report: build_mod.BuildReport) -> BuildInfo:
    """What the eval keeps of a build's outcome."""
    return BuildInfo(family=family, key=report.key, tool=tool.name if tool else None,
                     tool_sha=tool_sha(tool) if tool else None, verified=bool(tool and report.verified),
                     held_out_score=report.held_out_score, strategy=report.strategy,
                     cpu_seconds=round(report.total_cpu, 3), cache_hit=report.cache_hit,
                     failures=report.failures[-5:], contested=len(report.contested or []), agreement=report.agreement)


class Evaluator:
    def __init__(self, setup: EvalSetup, cache: ResultCache, *, sandbox: Any = None, store: ToolStore | None = None,
                 progress: Progress | None = None, options: RunOptions | None = None):
        self.setup = setup
        self.cache = cache
        self.sandbox = sandbox
        self.store = store
        self.progress = progress or _Quiet()
        self.options = options or RunOptions(fallback="none")
        self.computed = 0
        self.reused = 0

    # -- the split's tool
    def split_tool(self, fam: FamilyDir) -> tuple[Tool | None, BuildInfo]:
        """The tool `jigwright build` would give (from the tool store when it has it); a build that ends with
        no tool at all is noted in the eval cache so a rerun does not pay for it again."""
        assert self.store is not None
        s = _build_settings()
        key = self.build_key(fam)
        known = known_no_build(fam.name, key, self.store, self.cache, self.progress)
        if known is not None:
            return None, known
        steps_seen: list[str] = []

        def on_step(step: str, note: str) -> None:
            if not steps_seen or steps_seen[-1] != step:
                steps_seen.append(step)
                self.progress.phase(f"{fam.name}: build · {step}", None)

        tool, report = build_mod.build(fam.family, builder=self.setup.builder, executor=self.setup.executor,
                                       sandbox=self.sandbox, store=self.store, settings=s,
                                       builder_sha=self.setup.builder_sha, executor_sha=self.setup.executor_sha,
                                       progress=on_step)
        info = build_info(fam.name, tool, report)
        if tool is None:
            self.cache.note_failed_build(info)
        return tool, info

    # -- tasks
    def _cached_or_run(self, key: str, run: Callable[[], TaskResult]) -> tuple[TaskResult, bool]:
        hit = self.cache.get(key)
        if hit is not None:
            self.reused += 1
            return hit, False
        result = run()
        self.cache.put(key, result)  # stored before the next task starts: an interruption loses nothing
        self.computed += 1
        return result, True

    def build_key(self, fam: FamilyDir) -> str:
        """The key of the build `jigwright build` would do for this family (its default settings)."""
        return build_mod.build_key(fam.family, self.setup.builder_sha, self.setup.executor_sha, _build_settings())

    def split_key(self, family: str, tool: Tool, task: EvalTask, start: str | None = None) -> str:
        """The result key of one split task; `start` is how the fill starts ("free", or "schema" after an
        earlier miss of this tool), by default as this process would start it now."""
        template = prompts.template_hash(EXECUTOR_TEMPLATE)[EXECUTOR_TEMPLATE]
        return result_key("split", self.setup.executor_sha, family, task, template, tool_sha(tool),
                          {"seed": MODEL_SEED, "retries": self.options.retries,
                           "retry_temperature": self.options.retry_temperature, "fill": FILL_METHOD,
                           "fill_start": start or fill_start(tool.card)})

    def direct_key(self, fam: FamilyDir, method: str, task: EvalTask) -> str:
        spec = DIRECT[method]
        sha = self.setup.builder_sha if spec.role == "builder" else self.setup.executor_sha
        template = prompts.template_hash(spec.template)[spec.template]
        context = _sha({"description": _description(fam.family),
                        "examples": [[e.question, e.answer] for e in fam.family.examples]})[:32]
        return result_key(method, sha, fam.name, task, template, context,
                          {"seed": MODEL_SEED, "max_tokens": spec.max_tokens, "answer_rules": answerform.RULES_VERSION})

    def run_split(self, fam: FamilyDir, tasks: list[EvalTask]) -> tuple[list[TaskResult], int, BuildInfo, Tool | None]:
        tool, info = self.split_tool(fam)
        results, computed = self.run_split_tasks(fam, tool, tasks)
        return results, computed, info, tool

    def run_split_tasks(self, fam: FamilyDir, tool: Tool | None, tasks: list[EvalTask]) -> tuple[list[TaskResult], int]:
        """The split's tasks in order with `tool`. Its fills start free, as in a fresh process, so a family's
        results do not hang on the families or builds done before it in this process (nor on which worker
        runs it); a miss within the family sends its later fills to the schema, and the keys say so (a
        rerun walks the same keys, so it reuses every result it has)."""
        self.progress.phase(f"{fam.name} · split", len(tasks))
        if tool is not None:
            forget_fill_misses(tool.card)
        results, computed = [], 0
        for task in tasks:
            if tool is None:
                results.append(TaskResult(id=task.id, answered=False, error="no tool: the build produced none"))
            else:
                # the fill's start ("free" or "schema" after an earlier miss in this process) changes the result
                r, new = self._cached_or_run(self.split_key(fam.name, tool, task),
                                             lambda: answer_split(self.setup.executor, tool, task, self.sandbox,
                                                                  self.options))
                if not new:  # a reused result's miss counts as if its fill ran now: later keys are as first computed
                    replay_fill_modes(tool.card, r.fill)
                results.append(r)
                computed += new
            self.progress.advance()
        return results, computed

    def run_direct(self, fam: FamilyDir, method: str, tasks: list[EvalTask]) -> tuple[list[TaskResult], int]:
        spec = DIRECT[method]
        model = self.setup.builder if spec.role == "builder" else self.setup.executor
        self.progress.phase(f"{fam.name} · {method}", len(tasks))
        results, computed = [], 0
        for task in tasks:
            key = self.direct_key(fam, method, task)
            r, new = self._cached_or_run(key, lambda: answer_direct(model, spec, fam.family, task))
            results.append(r)
            computed += new
            self.progress.advance()
        return results, computed

    def model_name(self, method: str) -> str:
        b = getattr(self.setup.builder, "name", "builder")
        e = getattr(self.setup.executor, "name", "executor")
        if method == "split":
            return f"{b} builds, {e} fills"
        return b if DIRECT[method].role == "builder" else e


def score(tasks: list[EvalTask], results: list[TaskResult], rel_tol: float = REL_TOL) -> list[ScoredTask]:
    """Each result next to its task's known answer (pure); floats within the family's tolerance."""
    return [ScoredTask(**r.model_dump(), expected=t.answer, cpu=round(r.cpu_seconds, 6),
                       correct=r.answered and answers_match(t.answer, r.answer, rel_tol))
            for t, r in zip(tasks, results)]


def make_row(family: str, method: str, model: str, scored: list[ScoredTask], computed: int = 0) -> MethodRow:
    """Accuracy with its Wilson interval, and CPU seconds and tokens per task (pure)."""
    n = len(scored)
    k = sum(s.correct for s in scored)
    lo, hi = wilson_interval(k, n)
    cpus = [s.cpu_seconds for s in scored] or [0.0]
    return MethodRow(family=family, method=method, model=model, tasks=n, correct=k,
                     accuracy=round(k / n, 4) if n else 0.0, ci_low=round(lo, 4), ci_high=round(hi, 4),
                     cpu_mean=round(sum(cpus) / len(cpus), 4), cpu_p95=round(quantile(cpus, 0.95), 4),
                     cpu_model_mean=round(sum(s.model_cpu for s in scored) / n, 4) if n else 0.0,
                     cpu_tool_mean=round(sum(s.tool_cpu for s in scored) / n, 4) if n else 0.0,
                     generated_mean=round(sum(s.completion_tokens for s in scored) / n, 1) if n else 0.0,
                     forced_mean=round(sum(s.forced_tokens for s in scored) / n, 1) if n else 0.0,
                     tokens_mean=round(sum(s.tokens for s in scored) / n, 1) if n else 0.0,
                     cached_tokens_mean=round(sum(s.cached_tokens for s in scored) / n, 1) if n else 0.0,
                     unanswered=sum(not s.answered for s in scored), computed=computed, results=scored)


def split_note(info: BuildInfo) -> tuple[str, bool]:
    if info.tool is None:
        return "NO TOOL: the build produced none, every task counts as failed", True
    if not info.verified:
        return f"UNVERIFIED tool (held-out score {info.held_out_score:.2f})", True
    if info.contested:
        share = f"; the other passing candidates agree on {info.agreement:.0%} of probe inputs" \
            if info.agreement is not None else ""
        return (f"verified tool, {info.contested} contested input(s) open (answer them: "
                f"`jigwright build --ask`){share}"), False
    return "verified tool", False


def add_break_even(rows: list[MethodRow]) -> None:
    """For each split row with a tool: break-even against every direct method of the same family."""
    for row in rows:
        if row.method != "split" or row.build_cpu is None or row.note.startswith("NO TOOL"):
            continue
        for other in rows:
            if other.family == row.family and other.method in DIRECT:
                row.break_even[other.method] = break_even(row.build_cpu, row.cpu_mean, other.cpu_mean)


def pooled_rows(rows: list[MethodRow], methods: list[str], builds: list[BuildInfo]) -> tuple[list[MethodRow], str]:
    """Each method over the families together (tasks pooled; the split's build costs summed), and a line
    saying what was left out. When the split ran, only families it has a tool for are pooled, for every
    method: a family without a tool has no split cost per task, and pooling it would make the split look
    cheaper than it is (its own row still counts those tasks as failed)."""
    with_tool = {b.family for b in builds if b.tool is not None}
    left = [b.family for b in builds if b.tool is None]
    keep = (lambda fam: fam in with_tool) if builds else (lambda fam: True)
    out = []
    for method in methods:
        mine = [r for r in rows if r.method == method and keep(r.family)]
        if not mine:
            continue
        row = make_row(ALL, method, mine[0].model, [s for r in mine for s in r.results],
                       computed=sum(r.computed for r in mine))
        row.results = []
        if method == "split":
            row.build_cpu = round(sum(b.cpu_seconds for b in builds if b.tool is not None), 3)
            bad = [b.family for b in builds if b.tool is not None and not b.verified]
            if bad:
                row.note, row.flagged = f"includes families with an UNVERIFIED tool: {', '.join(bad)}", True
        out.append(row)
    note = ""
    if left:
        tasks = sum(r.tasks for r in rows if r.method == "split" and r.family in left)
        note = (f"'{ALL}' pools the {len(with_tool)} families with a tool; left out: {len(left)} without a tool "
                f"({', '.join(left)}; {tasks} tasks per method, failed in the split's own rows)")
    return out, note


def method_row(fam: FamilyDir, method: str, model: str, tasks: list[EvalTask], results: list[TaskResult],
               computed: int, info: BuildInfo | None = None) -> MethodRow:
    """One method's row for one family: scored results, and the split's build cost and note."""
    row = make_row(fam.name, method, model, score(tasks, results, fam.family.rel_tol), computed)
    if method == "split":
        assert info is not None
        row.build_cpu = info.cpu_seconds
        row.note, row.flagged = split_note(info)
    elif row.unanswered:
        row.note = f"{row.unanswered} without an answer"
    return row


def finish_report(families: list[FamilyDir], setup: EvalSetup, rows: list[MethodRow], builds: list[BuildInfo], *,
                  methods: list[str], n: int, seed: int, computed: int, reused: int, load_cpu: float,
                  cache_dir: Path) -> EvalReport:
    """The pooled rows, the break-even points and the report around the family rows."""
    pooled_note = ""
    if len(families) > 1:
        pooled, pooled_note = pooled_rows(rows, methods, builds)
        rows.extend(pooled)
    add_break_even(rows)
    return EvalReport(
        created=datetime.now(timezone.utc).isoformat(timespec="seconds"), machine=machine(), n=n, seed=seed,
        methods=methods, models={"builder": getattr(setup.builder, "name", "builder"),
                                 "executor": getattr(setup.executor, "name", "executor")},
        families=[f.name for f in families], builds=builds, rows=rows, computed=computed, reused=reused,
        model_load_cpu_seconds=round(load_cpu, 3), cache=str(cache_dir), pooled_note=pooled_note)


def evaluate(families: list[FamilyDir], setup: EvalSetup, *, methods: list[str], n: int = 20, seed: int = 0,
             out_dir: Path = Path("eval-out"), cache_dir: Path | None = None, sandbox: Any = None,
             store: ToolStore | None = None, progress: Progress | None = None) -> EvalReport:
    """Run every method on the first n tasks (seeded shuffle) of every family, then write eval.json, eval.md,
    eval.png and eval.svg to `out_dir`. Sandbox and tool store are opened here unless given."""
    from contextlib import ExitStack

    from .sandbox import Sandbox

    progress = progress or _Quiet()
    cache_dir = cache_dir or settings.home() / "eval"
    rows: list[MethodRow] = []
    builds: list[BuildInfo] = []
    with ExitStack() as stack:
        cache = stack.enter_context(ResultCache(cache_dir))
        if "split" in methods:
            sandbox = sandbox if sandbox is not None else stack.enter_context(Sandbox(pool_size=1))
            store = store if store is not None else stack.enter_context(ToolStore())
        ev = Evaluator(setup, cache, sandbox=sandbox, store=store, progress=progress)
        for fam in families:
            tasks = select_tasks(fam.tasks, n, seed)
            for method in methods:
                info = None
                if method == "split":
                    results, computed, info, _ = ev.run_split(fam, tasks)
                    builds.append(info)
                else:
                    results, computed = ev.run_direct(fam, method, tasks)
                rows.append(method_row(fam, method, ev.model_name(method), tasks, results, computed, info))
        load_cpu = sum(m.load_usage.cpu_seconds for m in setup.opened if getattr(m, "load_usage", None) is not None)
        report = finish_report(families, setup, rows, builds, methods=methods, n=n, seed=seed, computed=ev.computed,
                               reused=ev.reused, load_cpu=load_cpu, cache_dir=cache_dir)
    from .evalreport import write_outputs

    write_outputs(report, out_dir)
    return report


__all__ = ["METHODS", "EvalTask", "FamilyDir", "parse_tasks", "load_family_dir", "load_families", "parse_methods",
           "select_tasks", "wilson_interval", "break_even", "cpu_model", "TaskResult", "MethodRow", "EvalReport",
           "EvalSetup", "local_setup", "evaluate"]
