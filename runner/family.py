"""A family of solved examples as the user gives it: JSONL lines (question, answer, optional id) and an optional
`family.toml` beside them (name, description, float tolerance, hints). Bad input is an InputError naming file
and line; family files and evaluation task files share the line format."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path
from typing import Any

from pydantic import BaseModel, Field

from .errors import InputError
from .execute import REL_TOL
from .tools import slug


class Example(BaseModel):
    """One solved question of a family."""

    id: str
    question: str
    answer: Any
    line: int = 0


class Family(BaseModel):
    name: str
    description: str = ""
    examples: list[Example]
    source: str
    rel_tol: float = Field(REL_TOL, description="relative tolerance for float answers (family.toml `tolerance`)")
    hints: list[str] = Field(default_factory=list)  # the user's own lines about the rule, given verbatim


def parse_solved(source: str, lines: list[str]) -> list[Example]:
    """Solved examples from JSONL lines (question, answer, optional id); blank lines are skipped and a bad line
    is an InputError naming source and line. Family files and evaluation task files share this format. An
    answer may not be null or blank (there is nothing to check a tool against; every such line is named), and text may not hold lone surrogate
    escapes ("\\ud800": not Unicode)."""
    examples: list[Example] = []
    seen: set[str] = set()
    empty: list[int] = []
    for i, line in enumerate(lines, 1):
        if not line.strip():
            continue
        try:
            raw = json.loads(line)
        except ValueError as exc:
            raise InputError(f"{source}:{i}: not valid JSON: {exc.msg} at column {exc.colno}") from None
        if not isinstance(raw, dict):
            raise InputError(f"{source}:{i}: expected an object with 'question' and 'answer'")
        for key in ("question", "answer"):
            if key not in raw:
                raise InputError(f"{source}:{i}: missing '{key}'")
        if not isinstance(raw["question"], str) or not raw["question"].strip():
            raise InputError(f"{source}:{i}: 'question' must be non-empty text")
        if raw["answer"] is None or (isinstance(raw["answer"], str) and not raw["answer"].strip()):
            empty.append(i)  # all such lines are named together: a suggested family starts with six of them
        if _has_surrogate(raw):
            raise InputError(f"{source}:{i}: holds a lone surrogate escape (\\ud800-\\udfff): not Unicode text")
        ex_id = str(raw.get("id", f"line-{i}"))
        if ex_id in seen:
            raise InputError(f"{source}:{i}: duplicate id '{ex_id}'")
        seen.add(ex_id)
        examples.append(Example(id=ex_id, question=raw["question"].strip(), answer=raw["answer"], line=i))
    if empty:
        raise InputError(f"{source}: line{'s' if len(empty) > 1 else ''} {', '.join(map(str, empty))} "
                         f"{'have' if len(empty) > 1 else 'has'} an empty answer: give each solved answer "
                         "(a number, text, yes/no or a list)")
    return examples


def _has_surrogate(value: Any) -> bool:
    if isinstance(value, str):
        return any("\ud800" <= ch <= "\udfff" for ch in value)
    if isinstance(value, dict):
        return any(_has_surrogate(k) or _has_surrogate(v) for k, v in value.items())
    if isinstance(value, list):
        return any(_has_surrogate(v) for v in value)
    return False


def read_lines(path: Path) -> list[str]:
    """A JSONL file's lines, decoded as UTF-8 line by line: a line that is not UTF-8 is an InputError naming
    file, line and byte (never silently repaired)."""
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror}") from exc
    lines = []
    for i, raw in enumerate(data.split(b"\n"), 1):
        try:
            lines.append(raw.decode("utf-8").rstrip("\r"))
        except UnicodeDecodeError as exc:
            raise InputError(f"{path}:{i}: not valid UTF-8: byte 0x{raw[exc.start]:02x} at byte {exc.start + 1} "
                             f"of the line; save the file as UTF-8") from None
    return lines


def load_family(path: Path, name: str | None = None, description: str | None = None) -> Family:
    """Read a family file (JSONL: question, answer, optional id); a family.toml beside it supplies the name,
    description and float tolerance unless given. Bad lines are an InputError naming file and line."""
    lines = read_lines(path)
    examples = parse_solved(str(path), lines)
    if len(examples) < 2:
        raise InputError(f"{path}: a family needs at least 2 solved examples (found {len(examples)})")
    about: dict[str, Any] = {}
    toml = path.parent / "family.toml"
    if toml.exists():
        try:
            about = tomllib.loads(toml.read_text(encoding="utf-8"))
        except tomllib.TOMLDecodeError as exc:
            raise InputError(f"{toml}: not valid TOML: {exc}") from exc
    default_name = path.parent.name if path.stem in ("examples", "family") else path.stem
    tolerance = about.get("tolerance", REL_TOL)
    if isinstance(tolerance, bool) or not isinstance(tolerance, (int, float)) or not 0 <= tolerance < 1:
        raise InputError(f"{toml}: 'tolerance' must be a relative tolerance between 0 and 1, got {tolerance!r}")
    return Family(name=slug(name or about.get("name") or default_name),
                  description=description or about.get("description", ""), examples=examples, source=str(path),
                  rel_tol=float(tolerance), hints=read_hints(toml, about.get("hints", [])))


def read_hints(toml: Path, raw: Any) -> list[str]:
    """`hints` in family.toml: one line of text or a list of lines, each stating the rule as a user would."""
    if isinstance(raw, str):
        raw = raw.splitlines()
    if not isinstance(raw, list) or not all(isinstance(h, str) for h in raw):
        raise InputError(f"{toml}: 'hints' must be a line of text or a list of lines")
    return [h.strip() for h in raw if h.strip()]


__all__ = ["Example", "Family", "load_family", "parse_solved", "read_hints", "read_lines"]
