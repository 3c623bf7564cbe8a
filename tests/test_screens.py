"""What people read in an 80-column terminal: help texts as paragraphs, whole command lists, --version, and
every table within 80 columns (tool names whole, dates short, descriptions cut to one line)."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from importlib import metadata
from pathlib import Path

import pytest
import typer
from rich.console import Console

from runner import __version__, cli

ROOT = Path(__file__).resolve().parent.parent
JW = str(Path(sys.executable).with_name("jigwright"))
sys.path.insert(0, str(ROOT / "bench"))


def jw(*args: str, home: Path | None = None) -> str:
    env = {**os.environ, "COLUMNS": "80", "PYTHONPATH": str(ROOT)}
    if home is not None:
        env["JIGWRIGHT_HOME"] = str(home)
    proc = subprocess.run([JW, *args], capture_output=True, text=True, env=env, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return proc.stdout


def command_paths(group=None, prefix=()) -> list[tuple[str, ...]]:
    group = group or typer.main.get_command(cli.app)
    paths = [prefix]
    for name, cmd in getattr(group, "commands", {}).items():
        paths += command_paths(cmd, prefix + (name,)) if hasattr(cmd, "commands") else [prefix + (name,)]
    return paths


def fits(text: str, width: int = 80) -> list[str]:
    return [line for line in text.splitlines() if len(line.rstrip()) > width]


def test_every_help_fits_80_columns_with_paragraphs_rewrapped_and_whole_command_lists():
    paths = command_paths()
    assert ("answer",) in paths and ("tools", "list") in paths and ("models", "header") in paths
    for path in paths:
        text = jw(*path, "--help")
        assert fits(text) == [], path
        # the description: the paragraphs between the usage line and the first section
        body = text.split("\n\n", 1)[1]
        body = re.split(r"\n(?:Arguments|Options|Commands):\n", body)[0]
        for para in body.strip().split("\n\n"):
            lines = [ln.strip() for ln in para.splitlines()]
            # a docstring's own line break would leave a short line inside a paragraph
            assert all(len(ln) >= 55 for ln in lines[:-1]), (path, para)
        if "Commands:" in text:
            assert "..." not in text.split("Commands:")[1], path  # every command's first sentence whole


def test_first_sentence_joins_the_lines_of_the_first_paragraph():
    doc = """Answer a queue. Each question goes
    to a tool.

    More here."""
    assert cli.first_sentence(doc) == "Answer a queue."
    assert cli.first_sentence("One line without a full stop") == "One line without a full stop"


def test_version_names_this_package_and_the_llama_cpp_binding():
    out = jw("--version").strip()
    assert out == f"jigwright {__version__} (llama-cpp-python {metadata.version('llama-cpp-python')})"
    # the version has one source: the wheel's metadata is read from runner.__version__ (pyproject.toml)
    assert 'version = {attr = "runner.__version__"}' in (ROOT / "pyproject.toml").read_text()


@pytest.fixture
def stocked_home(tmp_path) -> Path:
    """A JIGWRIGHT_HOME whose tool store holds the hand-written tools of every demo family."""
    from handmade import handmade_tools

    from runner.store import ToolStore

    home = tmp_path / "home"
    (home / "tools").mkdir(parents=True)
    with ToolStore(home / "tools") as store:
        for tool in handmade_tools():
            store.put(tool)
    return home


def test_tools_list_fits_80_columns_with_whole_names_short_dates_and_one_line_each(stocked_home):
    from handmade import handmade_tools

    tools = handmade_tools()
    text = jw("tools", "list", home=stocked_home)
    assert fits(text) == []
    lines = text.splitlines()
    for tool in tools:
        row = [ln for ln in lines if ln.startswith(tool.name + " ")]
        assert len(row) == 1, (tool.name, text)  # whole name, one line
        assert re.search(r"\b\d{4}-\d{2}-\d{2}\b", row[0]) and "T" not in row[0].split()[3]
        assert tool.description[:20] in row[0]
    # the full description is in tools review
    review = jw("tools", "review", tools[0].name, home=stocked_home)
    assert " ".join(tools[0].description.split()) in " ".join(review.split())
    assert fits(review.split("def ")[0]) == []


def test_models_list_and_header_fit_80_columns(tmp_home):
    text = jw("models", "list", home=tmp_home)
    table = text.split("models folder:")[0]  # the folder's path is as long as it is
    assert fits(table) == [] and "coder-0.5b" in table and "executor*" in table
    header = jw("models", "header", "coder-0.5b", home=tmp_home)
    assert fits(header) == [] and "general.architecture" in header


def test_run_report_build_report_and_eval_tables_fit_80_columns():
    from runner import evaluate as E
    from runner.build import STEPS, BuildReport
    from runner.queue import AnswerRecord, Cpu
    from runner.runloop import summarise

    console = Console(width=80, record=True, color_system=None)
    recs = [AnswerRecord(id=f"q{i}", status="tool" if i % 3 else "fallback", route="crew-overlap" if i % 3 else "none",
                         cpu=Cpu(model=1.0 + i, tool=0.01)) for i in range(12)]
    report = summarise(recs, queue="samples/queue.jsonl", out="a/rather/long/folder/demo-answers.jsonl", skipped=3,
                       wall_seconds=100.0, process_cpu_seconds=80.0, load_cpu_seconds=2.0)
    cli._print_report(report, console)

    build = BuildReport(family="crate_handoffs", tool="crate-handoffs", key="k", held_out_score=0.67, held_out=6,
                        strategy="simulate", failures=["held-out e07: expected 'Tegen', got 'Cadan' " * 4])
    for i, step in enumerate(STEPS):
        build.steps[step].builder_cpu = 1234.5 * i
    console.print(cli.build_table(build))
    console.print(cli.build_verdict(build))
    cli.print_cut(console, "  - " + build.failures[0])

    rows = [E.MethodRow(family=f, method=m, model="coder-0.5b", tasks=20, correct=7, accuracy=0.35, ci_low=0.18,
                        ci_high=0.57, cpu_mean=12.345, cpu_p95=30.0, tokens_mean=900.0, cached_tokens_mean=400.0,
                        unanswered=1, build_cpu=480.0 if m == "split" else None,
                        break_even={"executor-direct": 41, "builder-direct": "never", "builder-steps": 7}
                        if m == "split" else {}, note="NOT verified: held-out 0.50" if m == "split" else "",
                        flagged=m == "split")
            for f in ("container-valid", E.ALL) for m in E.METHODS]
    ev = E.EvalReport(created="2026-12-02T06:00:00", machine=E.Machine(cores=2, physical_cores=2, cpu_model="cpu",
                      python="3.11", system="Linux"), n=20, seed=0, methods=list(E.METHODS),
                      models={"builder": "coder-1.5b", "executor": "coder-0.5b"}, families=["container-valid"],
                      builds=[], rows=rows, computed=0, reused=40)
    for part in cli.eval_tables(ev):
        console.print(part)
    text = console.export_text()
    assert fits(text) == []
    assert "Run report" in text and "skipped 3" in text and "crate-handoffs" in text
    assert "container-valid" in text and "executor-direct" in text and "41 tasks" in text
    assert "NOT verified: held-out 0.50" in text
