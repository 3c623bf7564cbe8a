"""What `jigwright eval` shows and writes: the results table (terminal cells and Markdown), the split's CPU by
step, the accuracy-against-CPU chart, and the four output files. Rendering only: `runner/evaluate.py` measures."""

from __future__ import annotations

from pathlib import Path

from .atomicfile import replace_with
from .evaluate import ALL, DIRECT, DIRECT_MAX_TOKENS, STEPS_MAX_TOKENS, EvalReport


def fmt_cpu(x: float) -> str:
    return f"{x:.3g}" if x < 100 else f"{x:.0f}"


def table_columns(report: EvalReport) -> list[str]:
    cols = ["family", "method", "model", "accuracy", "95% CI", "CPU s/task", "p95", "CPU s per right answer",
            "tokens/task"]
    if "split" in report.methods:
        cols.append("build CPU s")
        cols += [f"break-even vs {m}" for m in report.methods if m in DIRECT]
    return cols + ["note"]


def table_rows(report: EvalReport) -> list[list[str]]:
    """The table as text cells, shared by the terminal table and the Markdown (pure)."""
    out = []
    for r in report.rows:
        cells = [r.family, r.method, r.model, f"{r.accuracy:.2f} ({r.correct}/{r.tasks})",
                 f"{r.ci_low:.2f}–{r.ci_high:.2f}", fmt_cpu(r.cpu_mean), fmt_cpu(r.cpu_p95),
                 fmt_cpu(r.cpu_per_correct) if r.cpu_per_correct is not None else "none right", f"{r.tokens_mean:.0f}"]
        if "split" in report.methods:
            cells.append(fmt_cpu(r.build_cpu) if r.build_cpu is not None else "")
            for m in report.methods:
                if m in DIRECT:
                    v = r.break_even.get(m)
                    cells.append("" if v is None else f"{v} tasks" if isinstance(v, int) else str(v))
        cells.append(r.note)
        out.append(cells)
    return out


STEP_COLUMNS = ["family", "routing", "filling", "tool", "generated tokens", "of them forced"]


def step_rows(report: EvalReport) -> list[list[str]]:
    """The split's CPU per task by step (pure). Routing is not part of the eval (tasks go straight to their
    family's tool); the run report of `jigwright answer` measures it."""
    return [[r.family, "not measured", f"{r.cpu_model_mean:.3g}", f"{r.cpu_tool_mean:.3g}", f"{r.generated_mean:.1f}",
             f"{r.forced_mean:.1f}"] for r in report.rows if r.method == "split"]


def markdown(report: EvalReport) -> str:
    """The table as Markdown with date, machine and how it was measured, ready to paste into the README."""
    m = report.machine
    cols = table_columns(report)
    esc = lambda s: s.replace("|", "\\|")  # noqa: E731
    lines = [
        f"### Eval: {', '.join(report.families)}",
        "",
        f"Measured {report.created[:16].replace('T', ' ')} UTC on {m.cpu_model} ({m.physical_cores} physical cores, "
        f"{m.cores} logical; {m.system}, Python {m.python}). Builder `{report.models['builder']}`, executor "
        f"`{report.models['executor']}`. {report.n} tasks per family (`--seed {report.seed}` shuffle of "
        f"test.jsonl); model calls at temperature 0, seed {report.model_seed}.",
        "",
        "| " + " | ".join(cols) + " |",
        "|" + "|".join("---" if i < 3 or c == "note" else "---:" for i, c in enumerate(cols)) + "|",
    ]
    lines += ["| " + " | ".join(esc(c) for c in row) + " |" for row in table_rows(report)]
    if report.pooled_note:
        lines += ["", report.pooled_note + "."]
    steps = step_rows(report)
    if steps:
        lines += ["", "CPU s per task of the split by step, and the executor's generated tokens per task:", "",
                  "| " + " | ".join(STEP_COLUMNS) + " |", "|---|" + "---:|" * (len(STEP_COLUMNS) - 1)]
        lines += ["| " + " | ".join(esc(c) for c in row) + " |" for row in steps]
    lines += [
        "",
        "- *split*: the tool that `jigwright build` makes from examples.jsonl, its arguments filled by the executor "
        "(one retry, as in the run loop). Tasks go straight to their family's tool: routing and the fallback are "
        "not part of this number (the run report of `jigwright answer` measures them).",
        "- *executor-direct*, *builder-direct*: the model answers with no tool, the family's examples as earlier "
        f"chat turns, at most {DIRECT_MAX_TOKENS} tokens. *builder-steps*: the builder reasons step by step and "
        f"ends with \"Answer: …\", at most {STEPS_MAX_TOKENS} tokens. Each direct reply is cut to the answer its "
        "question asks for (yes/no, a number, a clock time, a date or a name; `runner/answerform.py`).",
        "- Accuracy with a 95% Wilson score interval. CPU s/task: model calls (all threads of this process) plus "
        "the tool's run in the sandbox; model loading is not included. CPU s per right answer: all the tasks' "
        "CPU over the right answers (build not included). Tokens: prompt + generated. The first task "
        "of a method pays for its shared prompt prefix; later tasks reuse it from llama.cpp's cache, as in a run.",
        "- Build CPU s: builder and executor CPU of the build, from its stored report (also when the tool came "
        "from the tool store). Break-even: the number of tasks after which build + split per task costs less CPU "
        "than the direct method; \"never\" when the split is not cheaper per task. *all families*: the tasks "
        "of every family the split has a tool for, pooled for each method; the split's build costs summed.",
    ]
    return "\n".join(lines) + "\n"


MARKERS = {"split": "o", "executor-direct": "s", "builder-direct": "^", "builder-steps": "D"}


def method_colour(method: str) -> str:
    """A hue computed from the method's place in MARKERS (evenly spaced round the colour wheel, mid lightness),
    so each method keeps its colour from chart to chart; methods not listed are grey."""
    import colorsys

    order = list(MARKERS)
    if method not in order:
        return "#666666"
    r, g, b = colorsys.hls_to_rgb(order.index(method) / len(order) + 0.08, 0.42, 0.62)
    return "#{:02x}{:02x}{:02x}".format(round(r * 255), round(g * 255), round(b * 255))


def write_chart(report: EvalReport, png: Path, svg: Path) -> None:
    """Accuracy against CPU seconds per task (log x), one point per method and family with its interval."""
    from matplotlib.figure import Figure  # no pyplot: no global state, no display backend

    fig = Figure(figsize=(8.5, 5.5))
    ax = fig.subplots()
    plotted = 0
    for method in report.methods:
        colour, marker = method_colour(method), MARKERS.get(method, "o")
        rows = [r for r in report.rows if r.method == method and r.cpu_mean > 0]
        if not rows:
            continue
        for flagged in (False, True):  # a flagged row (no or unverified tool) is drawn hollow
            group = [r for r in rows if r.flagged == flagged]
            if not group:
                continue
            yerr = [[max(0.0, r.accuracy - r.ci_low) for r in group],
                    [max(0.0, r.ci_high - r.accuracy) for r in group]]
            ax.errorbar([r.cpu_mean for r in group], [r.accuracy for r in group], yerr=yerr, fmt=marker,
                        color=colour, label=method + (" (flagged: see table)" if flagged else ""), capsize=2,
                        elinewidth=0.8, markersize=7, alpha=0.85, markerfacecolor="white" if flagged else colour)
        for r in rows:
            ax.annotate(r.family, (r.cpu_mean, r.accuracy), textcoords="offset points", xytext=(5, 4), fontsize=7,
                        fontweight="bold" if r.family == ALL else "normal", color="#333333")
        plotted += len(rows)
    if plotted:
        ax.set_xscale("log")
        ax.legend(title="method", fontsize=8, loc="best")
    else:
        ax.text(0.5, 0.5, "no task cost measured", ha="center", va="center", transform=ax.transAxes)
    ax.set_ylim(-0.04, 1.04)
    ax.set_xlabel("CPU seconds per task (mean, log scale)")
    ax.set_ylabel("accuracy (bars: 95% Wilson interval)")
    ax.set_title(f"Jigwright eval: {report.n} tasks per family, {report.machine.physical_cores} cores", fontsize=10)
    ax.grid(True, which="both", alpha=0.25)
    fig.tight_layout()
    replace_with(png, lambda p: fig.savefig(p, format="png", dpi=150))
    import matplotlib

    with matplotlib.rc_context({"svg.fonttype": "none"}):  # labels stay text: searchable and small
        replace_with(svg, lambda p: fig.savefig(p, format="svg"))


def write_outputs(report: EvalReport, out_dir: Path) -> None:
    """eval.json, eval.md, eval.png and eval.svg in `out_dir`, each written atomically."""
    out_dir.mkdir(parents=True, exist_ok=True)
    files = {k: out_dir / f"eval.{k}" for k in ("json", "md", "png", "svg")}
    report.files = {k: str(p) for k, p in files.items()}
    write_chart(report, files["png"], files["svg"])
    replace_with(files["md"], lambda p: p.write_text(markdown(report), encoding="utf-8"))
    replace_with(files["json"], lambda p: p.write_text(report.model_dump_json(indent=2), encoding="utf-8"))


__all__ = ["fmt_cpu", "table_columns", "table_rows", "step_rows", "STEP_COLUMNS", "markdown", "method_colour",
           "write_chart", "write_outputs"]
