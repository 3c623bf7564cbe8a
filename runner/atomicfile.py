"""Files written whole or not at all: a temporary file in the target's folder, then a rename over the target.
A crash, a full disk or an exception in the writer leaves the old file (or none) and no temporary behind."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Callable


def replace_with(path: Path, write: Callable[[Path], None], *, prefix: str | None = None,
                 suffix: str = ".tmp", sync: bool = False) -> None:
    """Call `write(tmp)` on a fresh temporary path beside `path`, then rename it over `path`. With `sync` the
    data reaches the disk before the rename."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=prefix if prefix is not None else f".{path.name}.",
                               suffix=suffix)
    os.close(fd)
    try:
        write(Path(tmp))
        if sync:
            with open(tmp, "rb") as fh:
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_text(path: Path, text: str, *, sync: bool = True) -> None:
    """Write `text` (UTF-8) to `path` whole or not at all."""
    replace_with(path, lambda p: p.write_text(text, encoding="utf-8"), sync=sync)


def write_bytes(path: Path, data: bytes, *, prefix: str | None = None, suffix: str = ".tmp") -> None:
    """Write `data` to `path` whole or not at all."""
    replace_with(path, lambda p: p.write_bytes(data), prefix=prefix, suffix=suffix)
