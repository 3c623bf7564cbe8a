"""The static screen: check tool source with `ast` before anything runs.

Allow-listed imports only, no dangerous names, no underscore attributes, no dunder strings, no attribute
access through `str.format` (also inside nested format specs), and no class hooks that run on attribute
access. It is the first layer, not the boundary: the operating-system layer must hold without it.
"""

from __future__ import annotations

import ast
import string

from pydantic import BaseModel, ConfigDict

from .policy import (
    ALLOWED_DUNDER_ATTRIBUTES,
    ALLOWED_DUNDER_NAMES,
    ALLOWED_DUNDER_STRINGS,
    ALLOWED_MODULES,
    DENIED_ATTRIBUTES,
    DENIED_METHOD_NAMES,
    DENIED_NAMES,
    TOOL_FILENAME,
)
from .records import RunResult

MAX_CODE_BYTES = 200_000


class Violation(BaseModel):
    """One finding of the static screen: which rule, where, and what."""

    model_config = ConfigDict(frozen=True)

    rule: str
    line: int | None
    message: str

    def describe(self) -> str:
        where = f" at line {self.line}" if self.line is not None else ""
        return f"{self.message} (rule: {self.rule}){where}"


def screen(code: str, entry: str | None = None) -> list[Violation]:
    """Check tool source before it runs; an empty list means no rule objects.

    With `entry`, also require a top-level definition of that name (the function the sandbox calls).
    """
    size = len(code.encode("utf-8", "replace"))
    if size > MAX_CODE_BYTES:
        return [Violation(rule="code-size", line=None, message=f"code is {size} bytes; the limit is {MAX_CODE_BYTES}")]
    try:
        tree = ast.parse(code, filename=TOOL_FILENAME)
    except SyntaxError as exc:
        return [Violation(rule="syntax", line=exc.lineno, message=f"SyntaxError: {exc.msg}")]
    except (ValueError, RecursionError, MemoryError) as exc:
        return [Violation(rule="syntax", line=None, message=f"{type(exc).__name__}: {exc}")]
    found: list[Violation] = []
    docstrings = _docstring_nodes(tree)
    for node in ast.walk(tree):
        found.extend(_check_node(node, docstrings))
    if entry is not None and not _defines(tree, entry):
        found.append(Violation(rule="entry-point", line=None, message=f"no top-level function {entry!r} is defined"))
    found.sort(key=lambda v: (v.line is None, v.line or 0))
    return found


def _docstring_nodes(tree: ast.AST) -> set[int]:
    """ids of string constants that are docstrings (they may mention dunders freely)."""
    ids: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)) and node.body:
            first = node.body[0]
            if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant) and isinstance(first.value.value, str):
                ids.add(id(first.value))
    return ids


def _defines(tree: ast.Module, name: str) -> bool:
    for stmt in tree.body:
        if isinstance(stmt, (ast.FunctionDef, ast.AsyncFunctionDef)) and stmt.name == name:
            return True
        targets = stmt.targets if isinstance(stmt, ast.Assign) else [stmt.target] if isinstance(stmt, ast.AnnAssign) else []
        if any(isinstance(t, ast.Name) and t.id == name for t in targets):
            return True
    return False


def _attribute_violation(name: str, line: int | None) -> Violation | None:
    if name in ALLOWED_DUNDER_ATTRIBUTES:
        return None
    if name.startswith("__") and name.endswith("__"):
        return Violation(rule="dunder-attribute", line=line, message=f"attribute {name!r} is not allowed")
    if name.startswith("_"):
        return Violation(rule="private-attribute", line=line, message=f"attribute {name!r} is not allowed")
    if name in DENIED_ATTRIBUTES:
        return Violation(rule="denied-attribute", line=line, message=f"attribute {name!r} is not allowed")
    return None


def _check_node(node: ast.AST, docstrings: set[int]) -> list[Violation]:
    line = getattr(node, "lineno", None)
    out: list[Violation] = []
    if isinstance(node, ast.Import):
        for alias in node.names:
            if alias.name not in ALLOWED_MODULES:
                out.append(Violation(rule="import-allow-list", line=line, message=f"import of {alias.name!r} is not allowed"))
    elif isinstance(node, ast.ImportFrom):
        if node.level:
            out.append(Violation(rule="import-allow-list", line=line, message="relative imports are not allowed"))
        elif node.module not in ALLOWED_MODULES:
            out.append(Violation(rule="import-allow-list", line=line, message=f"import of {node.module!r} is not allowed"))
        for alias in node.names:
            if alias.name == "*":
                continue
            if alias.name in DENIED_NAMES or alias.name in DENIED_ATTRIBUTES or alias.name.startswith("_"):
                out.append(Violation(rule="denied-name", line=line, message=f"importing {alias.name!r} is not allowed"))
    elif isinstance(node, ast.Name):
        if node.id in DENIED_NAMES:
            out.append(Violation(rule="denied-name", line=line, message=f"name {node.id!r} is not allowed"))
        elif node.id.startswith("__") and node.id not in ALLOWED_DUNDER_NAMES:
            out.append(Violation(rule="dunder-name", line=line, message=f"name {node.id!r} is not allowed"))
    elif isinstance(node, ast.Attribute):
        found = _attribute_violation(node.attr, line)
        if found:
            out.append(found)
        elif node.attr in ("format", "format_map"):
            out.extend(_check_format(node, line))
    elif isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and node.name in DENIED_METHOD_NAMES:
        out.append(Violation(rule="dunder-method", line=line, message=f"defining {node.name!r} is not allowed"))
    elif isinstance(node, ast.MatchClass):
        for attr in node.kwd_attrs:
            found = _attribute_violation(attr, line)
            if found:
                out.append(found)
    elif isinstance(node, ast.Constant) and isinstance(node.value, (str, bytes)):
        text = node.value if isinstance(node.value, str) else node.value.decode("latin-1")
        if "__" in text and text not in ALLOWED_DUNDER_STRINGS and id(node) not in docstrings:
            out.append(Violation(rule="dunder-string", line=line, message="string literals containing '__' are not allowed"))
    elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id == "type":
        if len(node.args) + len(node.keywords) > 1:
            out.append(Violation(rule="type-three-args", line=line, message="type() with more than one argument is not allowed"))
    return out


def _check_format(node: ast.Attribute, line: int | None) -> list[Violation]:
    """`str.format` reaches attributes through `{0.attr}`; allow it only on literals without attribute fields."""
    receiver = node.value
    if not (isinstance(receiver, ast.Constant) and isinstance(receiver.value, str)):
        return [Violation(rule="format-string", line=line, message=f".{node.attr}() is only allowed on a string literal")]
    field = _attribute_field(receiver.value)
    if field is not None:
        return [Violation(rule="format-string", line=line, message=f"format field {{{field}}} uses attribute access")]
    return []


def _attribute_field(template: str, depth: int = 0) -> str | None:
    """The first replacement field that reads an attribute, looking inside nested format specs too."""
    try:
        parts = list(string.Formatter().parse(template))
    except ValueError:
        return None  # str.format would raise on it as well
    for _, field, spec, _ in parts:
        if field and "." in field:
            return field
        if spec and "{" in spec:
            if depth >= 2:  # str.format itself refuses deeper nesting
                return spec
            found = _attribute_field(spec, depth + 1)
            if found is not None:
                return found
    return None


def screen_result(violations: list[Violation]) -> RunResult:
    """The RunResult for code the screen rejected: up to three findings, the first one's line."""
    shown = "; ".join(v.describe() for v in violations[:3])
    if len(violations) > 3:
        shown += f"; and {len(violations) - 3} more"
    return RunResult(status="error", error_kind="screen", message=shown, line=violations[0].line)
