"""The tool store: built tools on disk (diskcache under JIGWRIGHT_HOME), by content key and by name."""

from __future__ import annotations

import json
import os
import sqlite3
import tempfile
from pathlib import Path
from typing import Iterator

import diskcache
from pydantic import ValidationError

from . import settings
from .errors import StoreError, ToolNotFoundError
from .tools import Tool


def damaged(path: Path, exc: BaseException) -> StoreError:
    """The one-line error for a tool store whose files cannot be read, with the way out."""
    why = " ".join(str(exc).split()) or type(exc).__name__
    return StoreError(f"the tool store at {path} cannot be read ({why}); move the folder aside "
                      f"(mv {path} {path}.damaged) and build the tools again with `jigwright build`; "
                      f"`jigwright answer --fallback builder` still answers without tools meanwhile")


class ToolStore:
    """Content-addressed records (`key:` → tool JSON) plus a name index (`name:` → key). A record that no
    longer validates (written by another version, or edited by hand) is skipped with a warning in
    `warnings` when listing, and named in the error when asked for by name."""

    def __init__(self, path: Path | None = None):
        self.path = path or settings.store_dir()
        self.warnings: list[str] = []
        try:
            self.path.mkdir(parents=True, exist_ok=True)
            self._cache = diskcache.Cache(str(self.path))
            self._cache.get("name:")  # a damaged database fails here, not half-way through a run
        except (sqlite3.Error, OSError) as exc:
            raise damaged(self.path, exc) from None

    def close(self) -> None:
        self._cache.close()

    def __enter__(self) -> "ToolStore":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def by_key(self, key: str, name: str | None = None) -> Tool | None:
        """The tool stored under `key`; None if there is none, or if its record no longer validates (then a
        warning names it and the caller builds afresh)."""
        try:
            raw = self._cache.get(f"key:{key}")
        except sqlite3.Error as exc:
            raise damaged(self.path, exc) from None
        if not raw:
            return None
        try:
            return Tool.model_validate_json(raw)
        except (ValidationError, ValueError) as exc:
            first = exc.errors()[0] if isinstance(exc, ValidationError) else {"loc": (), "msg": str(exc)}
            where = ".".join(str(p) for p in first["loc"]) or "(record)"
            which = f"of tool '{name}' (key {key[:12]}…)" if name else f"{key[:12]}…"
            self.warnings.append(f"skipped the stored record {which} in {self.path}: it does not validate "
                                 f"({where}: {first['msg']}); `jigwright tools retire {name or 'NAME'}` removes it")
            return None

    def put(self, tool: Tool) -> None:
        """Store a tool; a verified tool also takes its name (a failed build never replaces a verified one)."""
        with self._cache.transact():
            self._cache.set(f"key:{tool.key}", tool.model_dump_json(by_alias=True))
            current = self.get(tool.name, missing_ok=True)
            if tool.verified or current is None or not current.verified:
                self._cache.set(f"name:{tool.name}", tool.key)

    def put_failed(self, key: str, report_json: str) -> None:
        """Remember a build that produced no tool at all, so the same build is not paid for twice."""
        self._cache.set(f"failed:{key}", report_json)

    def failed(self, key: str) -> str | None:
        return self._cache.get(f"failed:{key}")

    def get(self, name: str, missing_ok: bool = False) -> Tool | None:
        try:
            key = self._cache.get(f"name:{name}")
        except sqlite3.Error as exc:
            raise damaged(self.path, exc) from None
        tool = self.by_key(key, name) if key else None
        if tool is None and not missing_ok:
            if key:
                raise ToolNotFoundError(f"the stored record of tool '{name}' does not validate ({self.warnings[-1]})")
            known = ", ".join(self.names()) or "none yet"
            raise ToolNotFoundError(f"no tool named '{name}' in the tool store (known: {known})")
        return tool

    def names(self) -> list[str]:
        try:
            return sorted(k[5:] for k in self._cache.iterkeys() if isinstance(k, str) and k.startswith("name:"))
        except sqlite3.Error as exc:
            raise damaged(self.path, exc) from None

    def tools(self, verified_only: bool = False) -> Iterator[Tool]:
        for name in self.names():
            tool = self.get(name, missing_ok=True)
            if tool and (tool.verified or not verified_only):
                yield tool

    def remove(self, name: str) -> str:
        """Take a tool out of the store (a record that no longer validates too); returns its key."""
        key = self._cache.get(f"name:{name}")
        if not key:
            self.get(name)  # raises ToolNotFoundError with the known names
        with self._cache.transact():
            self._cache.delete(f"name:{name}")
            self._cache.delete(f"key:{key}")
        return str(key)


_TEST_FILE = """\"\"\"Verification examples of the tool {name}, exported by Jigwright (runs with plain pytest).\"\"\"

import json

import pytest

from {module} import {entry}

CASES = {cases}


@pytest.mark.parametrize("case_id,arguments,expected", CASES)
def test_{module}(case_id, arguments, expected):
    assert json.loads(json.dumps({entry}(**json.loads(arguments)))) == json.loads(expected)
"""


def export(tool: Tool, directory: Path) -> list[Path]:
    """Write the tool as a plain module plus a pytest file of its verification examples, runnable without
    Jigwright. Both files appear together or not at all (written to a temporary folder, then renamed)."""
    module = tool.name.replace("-", "_")
    header = (f'"""{tool.description}\n\nTool {tool.name!r} built by Jigwright (verified: {tool.verified}, '
              f'held-out score {tool.held_out_score:.2f}).\nWritten by a local model: review before relying on it.'
              f'\n\nArguments (JSON Schema): {json.dumps(tool.card.schema_)}\n"""\n\n')
    cases = [(c.id, json.dumps(c.arguments), json.dumps(c.expected)) for c in tool.checks
             if c.ok and c.arguments is not None]
    files = {
        f"{module}.py": header + tool.code.rstrip() + "\n",
        f"test_{module}.py": _TEST_FILE.format(name=tool.name, module=module, entry=tool.entry,
                                               cases=json.dumps(cases, indent=4)),
    }
    directory.mkdir(parents=True, exist_ok=True)
    written = []
    with tempfile.TemporaryDirectory(dir=directory, prefix=".export-") as tmp:
        for fname, text in files.items():
            Path(tmp, fname).write_text(text, encoding="utf-8")
        for fname in files:
            os.replace(Path(tmp, fname), directory / fname)
            written.append(directory / fname)
    return written
