"""Tools finished by hand: the best attempt of a build edited by a person (`tools edit`), or a tool written from
scratch (`tools adopt`). Either goes through exactly the checks a built tool goes through (the sandbox's static
screen, the drafting examples in the sandbox, the held-out examples end to end with the executor filling the
arguments) and is stored as verified only if every one passes."""

from __future__ import annotations

import hashlib
import json
import os
import shlex
import subprocess
import tempfile
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable, Literal

import jsonschema
from pydantic import BaseModel

from . import prompts, shapecheck
from .build import Example, drafting_checks, fill_examples, held_out_checks, load_family, make_card
from .errors import InputError
from .execute import EXECUTOR_TEMPLATE, REL_TOL, schema_problem
from .llm import ChatModel
from .meter import Usage
from .sandbox import screen
from .store import ToolStore
from .tools import ExampleCheck, Provenance, Tool

Origin = Literal["edited by hand", "written by hand"]
EDIT_MARK = "# ---- edit below this line (everything above it is dropped) ----"


class HandReport(BaseModel):
    """What checking a hand-finished tool found and cost."""

    tool: str
    key: str
    origin: Origin
    verified: bool
    drafting_ok: int
    drafting: int
    held_out_ok: int
    held_out: int
    executor_cpu: float
    checks: list[ExampleCheck]
    replaced: bool  # whether the tool now answers under its name (an unverified one never displaces a verified)


class HandWork(BaseModel):
    """Everything a hand-finished tool is checked against: its card's parts and the solved examples."""

    name: str
    description: str
    schema_: dict[str, Any]
    drafting: list[Example]
    objects: list[dict[str, Any]]
    held_out: list[Example]
    source: str  # where the examples came from (a family file, or the tool they were recorded in)
    rel_tol: float = REL_TOL  # relative tolerance for float answers, as the family file sets it


def screen_or_fail(code: str, where: str) -> None:
    """The sandbox's static screen, before any model time is spent: a violation is a one-line InputError."""
    found = screen(code, "solve")
    if found:
        raise InputError(f"{where}: the sandbox's screen refuses this code: {found[0].describe()}"
                         + (f" (and {len(found) - 1} more)" if len(found) > 1 else "") + "; fix it and run again")


def check_by_hand(work: HandWork, code: str, origin: Origin, *, executor: ChatModel, sandbox: Any,
                  store: ToolStore, seed: int = 0, executor_sha: str = "", base: Provenance | None = None,
                  progress: Callable[[str], None] | None = None) -> tuple[Tool, HandReport]:
    """Check `code` as the builder checks its own candidates and store the result (verified only if every
    drafting and held-out example passes)."""
    note = progress or (lambda text: None)
    screen_or_fail(code, "the tool's code")
    card = make_card(work.name, work.description, work.schema_, work.drafting, work.objects)
    note(f"running the {len(work.drafting)} drafting examples in the sandbox")
    drafted = drafting_checks(sandbox, code, work.drafting, work.objects, rel_tol=work.rel_tol)
    usage = Usage()

    def after(ex: Example, filled: Any) -> None:
        nonlocal usage
        usage = usage + filled.usage

    fills = fill_examples(executor, card, work.held_out, seed=seed, after=after,
                          before=lambda i: note(f"executor fills held-out {i + 1}/{len(work.held_out)}"))
    held = held_out_checks(sandbox, code, work.held_out, fills, rel_tol=work.rel_tol)
    checks = drafted + held
    verified = all(c.ok for c in checks)
    examples_sha = hashlib.sha256(json.dumps([e.model_dump(exclude={"line"}) for e in work.drafting + work.held_out],
                                             sort_keys=True).encode()).hexdigest()
    key = hashlib.sha256(json.dumps({"code": code, "card": card.model_dump(by_alias=True), "examples": examples_sha,
                                     "executor": executor_sha, "origin": origin}, sort_keys=True).encode()
                         ).hexdigest()[:32]
    fields = dict(executor_model=getattr(executor, "name", "?"), executor_sha256=executor_sha,
                  template_hashes=prompts.template_hash(EXECUTOR_TEMPLATE), family_file=work.source,
                  examples_sha256=examples_sha, origin=origin)
    if base is not None:  # an edited build keeps what its builder was, and says it was finished by hand
        provenance = base.model_copy(update={**fields, "created": datetime.now(timezone.utc).isoformat(timespec="seconds")})
    else:
        provenance = Provenance(builder_model="-", builder_sha256="", settings={"seed": seed}, strategy="by hand",
                                **fields)
    held_ok = sum(c.ok for c in held)
    tool = Tool(key=key, name=work.name, description=work.description, code=code, card=card, verified=verified,
                held_out_score=held_ok / len(held) if held else 0.0, checks=checks, provenance=provenance,
                report={"origin": origin, "executor_cpu": usage.cpu_seconds})
    store.put(tool)
    current = store.get(work.name, missing_ok=True)
    report = HandReport(tool=work.name, key=key, origin=origin, verified=verified,
                        drafting_ok=sum(c.ok for c in drafted), drafting=len(drafted), held_out_ok=held_ok,
                        held_out=len(held), executor_cpu=usage.cpu_seconds, checks=checks,
                        replaced=current is not None and current.key == key)
    return tool, report


# ---- tools edit -----------------------------------------------------------------------------------------------

def work_from_tool(tool: Tool, examples: Path | None = None) -> HandWork:
    """The examples a stored tool was checked on, read back from its record (the family file may have moved);
    or, given a family file, its lines: those whose question is one of the card's demos are the drafting
    examples (with the demo's arguments), the rest are held out."""
    if examples is not None:
        family = load_family(examples)
        demos = {d.question: d.arguments for d in tool.card.demos}
        drafting_ex = [e for e in family.examples if e.question in demos]
        held_ex = [e for e in family.examples if e.question not in demos]
        if not drafting_ex or not held_ex:
            why = ("no line asks one of the usage card's demo questions" if not drafting_ex
                   else "every line is a demo question; none is left to hold out")
            raise InputError(f"{examples}: {why}")
        return HandWork(name=tool.name, description=tool.description, schema_=tool.card.schema_, drafting=drafting_ex,
                        objects=[demos[e.question] for e in drafting_ex], held_out=held_ex, source=str(examples),
                        rel_tol=family.rel_tol)
    drafting = [c for c in tool.checks if c.split == "draft" and c.arguments is not None]
    held, seen = [], set()
    for c in tool.checks:  # choose and confirm examples (held_out: tools built before those parts existed)
        if c.split in ("choose", "confirm", "held_out") and c.id not in seen:
            seen.add(c.id)
            held.append(c)
    if not drafting or not held:
        raise InputError(f"tool '{tool.name}' records no {'drafting' if not drafting else 'held-out'} examples "
                         "to check an edit against; give its family file with --examples")
    return HandWork(name=tool.name, description=tool.description, schema_=tool.card.schema_,
                    drafting=[Example(id=c.id, question=c.question, answer=c.expected) for c in drafting],
                    objects=[c.arguments for c in drafting if c.arguments is not None],
                    held_out=[Example(id=c.id, question=c.question, answer=c.expected) for c in held],
                    source=tool.provenance.family_file)


def with_schema(work: HandWork, schema_file: Path) -> HandWork:
    """The same examples under a schema a person wrote (say, a pattern for codes the executor must copy whole);
    every drafting example's arguments must fit it."""
    schema = read_schema(schema_file)
    for ex, args in zip(work.drafting, work.objects):
        problem = schema_problem(schema, args)
        if problem:
            raise InputError(f"{schema_file}: drafting example {ex.id}: {problem}")
    return work.model_copy(update={"schema_": schema})


def edit_text(tool: Tool) -> str:
    """The file a person edits: what the tool must do, as comments above a marker, then its code."""
    lines = [f"# Tool '{tool.name}': {tool.description}",
             f"# verified: {tool.verified}; held-out score {tool.held_out_score:.2f}",
             f"# solve(**arguments) gets arguments of this JSON Schema: {json.dumps(tool.card.schema_)}"]
    for c in tool.checks:
        args = json.dumps(c.arguments, ensure_ascii=False) if c.arguments is not None else "(executor fills)"
        mark = "ok" if c.ok else f"WRONG (got {c.got!r}{', ' + c.error if c.error else ''})"
        lines.append(f"# {c.split} {c.id}: solve(**{args}) must return {c.expected!r}: {mark}")
    return "\n".join(lines) + "\n" + EDIT_MARK + "\n" + tool.code.rstrip() + "\n"


def strip_header(text: str) -> str:
    return text.split(EDIT_MARK + "\n", 1)[1] if EDIT_MARK + "\n" in text else text


def open_in_editor(tool: Tool) -> str:
    """Open the tool's code in $VISUAL or $EDITOR and return what was saved (without the comment header)."""
    editor = os.environ.get("VISUAL") or os.environ.get("EDITOR")
    if not editor:
        raise InputError("no editor: set $EDITOR (or $VISUAL), or give the corrected code with --from FILE")
    with tempfile.TemporaryDirectory(prefix="jigwright-edit-") as tmp:
        path = Path(tmp) / f"{tool.name.replace('-', '_')}.py"
        path.write_text(edit_text(tool), encoding="utf-8")
        try:
            done = subprocess.run(shlex.split(editor) + [str(path)])
        except OSError as exc:
            raise InputError(f"cannot start the editor {editor!r}: {exc.strerror}; set $EDITOR or use --from FILE") from exc
        if done.returncode != 0:
            raise InputError(f"the editor {editor!r} exited with status {done.returncode}; nothing was stored")
        return strip_header(path.read_text(encoding="utf-8"))


def read_code(path: Path) -> str:
    try:
        code = strip_header(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {getattr(exc, 'strerror', None) or exc}") from exc
    if not code.strip():
        raise InputError(f"{path}: the file is empty; it must define solve(**arguments)")
    return code


# ---- tools adopt ----------------------------------------------------------------------------------------------

def read_schema(path: Path) -> dict[str, Any]:
    try:
        schema = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror}") from exc
    except ValueError as exc:
        raise InputError(f"{path}: not valid JSON: {exc}") from exc
    try:
        jsonschema.validators.validator_for(schema).check_schema(schema)
    except jsonschema.SchemaError as exc:
        raise InputError(f"{path}: not a valid JSON Schema: {exc.message}") from exc
    if not isinstance(schema, dict) or schema.get("type") != "object":
        raise InputError(f"{path}: the schema must describe an object (\"type\": \"object\"): the tool is called "
                         "as solve(**arguments)")
    return schema


def work_from_family(examples: Path, schema_file: Path | None, name: str | None,
                     description: str | None) -> HandWork:
    """Drafting examples are the lines that carry `arguments` (the object solve(**arguments) gets); the others
    are held out. The schema is the given file, or inferred from those objects as for built tools."""
    family = load_family(examples, name, description)
    raw = {i: line for i, line in enumerate(examples.read_text(encoding="utf-8").splitlines(), 1)}
    drafting, objects, held = [], [], []
    for ex in family.examples:
        args = json.loads(raw[ex.line]).get("arguments")
        if args is None:
            held.append(ex)
        elif not isinstance(args, dict):
            raise InputError(f"{examples}:{ex.line}: 'arguments' must be a JSON object (what solve(**arguments) gets)")
        else:
            drafting.append(ex)
            objects.append(args)
    if not drafting:
        raise InputError(f"{examples}: no line has 'arguments': give them on the drafting examples (the usage "
                         "card's demos), and leave them off the held-out ones")
    if not held:
        raise InputError(f"{examples}: every line has 'arguments'; leave them off at least one line, which is then "
                         "held out and answered end to end by the executor")
    if schema_file is not None:
        schema = read_schema(schema_file)
        for ex, args in zip(drafting, objects):
            problem = schema_problem(schema, args)
            if problem:
                raise InputError(f"{examples}:{ex.line}: {problem} (schema {schema_file})")
    else:
        try:
            schema = shapecheck.infer_schema(objects)
        except ValueError:
            raise InputError(f"{examples}: the 'arguments' objects do not share one shape, so no schema can be "
                             "inferred; make them alike or give --schema FILE") from None
    return HandWork(name=family.name, description=family.description or family.name, schema_=schema,
                    drafting=drafting, objects=objects, held_out=held, source=family.source, rel_tol=family.rel_tol)


__all__ = ["HandReport", "HandWork", "check_by_hand", "work_from_tool", "work_from_family", "edit_text",
           "open_in_editor", "read_code", "screen_or_fail", "strip_header", "with_schema", "EDIT_MARK"]
