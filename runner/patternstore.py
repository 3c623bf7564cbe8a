"""The pattern books on disk: one JSON file per tool under JIGWRIGHT_HOME/patterns, named by the tool's key
(`patterns.tool_key`), so an edited or rebuilt tool starts with an empty book.

A change is a read-modify-write under an exclusive lock on a file beside the book (fcntl), written whole or not
at all (`atomicfile`), so processes answering with the same tool at once never lose or tear each other's
changes; reads take no lock (a rename is atomic). A book that cannot be read (damaged, another version) counts
as empty and is overwritten by the next change; a folder that cannot be written turns learning off for this
process with one note. The book only saves model calls: losing it loses no answer."""

from __future__ import annotations

import fcntl
import os
from contextlib import contextmanager
from pathlib import Path
from typing import Callable, Iterator, TypeVar

from pydantic import ValidationError

from . import atomicfile
from .patterns import Book

T = TypeVar("T")


class PatternStore:
    """Pattern books of the tools, in `folder`. `notes` collects what a caller should tell the person."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.notes: list[str] = []
        self.writable = True
        self._cache: dict[str, tuple[tuple[int, int, int], Book]] = {}

    def path(self, tool: str) -> Path:
        return self.folder / f"{tool}.json"

    def load(self, tool: str, fresh: bool = False) -> Book:
        """The book of `tool` (empty when there is none or it cannot be read). Unless `fresh`, a copy read
        earlier is reused while the file's identity, time and size are unchanged (changes read it `fresh`:
        two writes within one clock tick can leave all three alike)."""
        path = self.path(tool)
        try:
            st = path.stat()
        except OSError:
            return Book(tool=tool)
        stamp = (st.st_ino, st.st_mtime_ns, st.st_size)
        kept = self._cache.get(tool)
        if kept is not None and kept[0] == stamp and not fresh:
            return kept[1].model_copy(deep=True)
        try:
            book = Book.model_validate_json(path.read_bytes())
            if book.tool != tool:
                raise ValueError("the book of another tool")
        except (OSError, ValidationError, ValueError):
            self._note(f"{path}: the pattern book cannot be read; starting it again")
            return Book(tool=tool)
        self._cache[tool] = (stamp, book)
        return book.model_copy(deep=True)

    @contextmanager
    def _locked(self, tool: str) -> Iterator[None]:
        self.folder.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.folder / f"{tool}.lock", os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX)
            yield
        finally:
            os.close(fd)

    def update(self, tool: str, change: Callable[[Book], T]) -> T | None:
        """Apply `change` to the newest book of `tool` and write it back, all under the lock. None (and the
        book unchanged) when the folder cannot be written."""
        if not self.writable:
            return None
        try:
            with self._locked(tool):
                book = self.load(tool, fresh=True)
                before = book.model_dump_json()
                result = change(book)
                text = book.model_dump_json()
                if text != before:
                    atomicfile.write_text(self.path(tool), text, sync=False)
                return result
        except OSError as exc:
            self.writable = False
            self._note(f"{self.folder}: cannot write pattern books ({exc.strerror}); answering without learning")
            return None

    def _note(self, text: str) -> None:
        if text not in self.notes:
            self.notes.append(text)


def default_store() -> PatternStore:
    from .settings import patterns_dir

    return PatternStore(patterns_dir())


__all__ = ["PatternStore", "default_store"]
