"""A fingerprint of the runner's own code that decides a cached result: the package version plus a hash of
the source files whose behaviour shapes a build or an answer (shape checks, strategy wrappers, answer
comparison, the sandbox, the model calls). Cache keys hold it, so an upgraded runner never serves an old
build or eval result as fresh."""

from __future__ import annotations

import hashlib
from functools import lru_cache
from pathlib import Path

from . import __version__

RUNNER_DIR = Path(__file__).resolve().parent
# Modules (or packages: a folder of that name) whose code decides results, by the kind of result.
SOURCES = {
    "build": ("build", "family", "readwords", "shapecheck", "execute", "sandbox", "llm", "tools", "probe", "forced", "guess", "guided",
              "answerform"),
    "eval": ("execute", "sandbox", "llm", "tools", "evaluate", "forced", "guess", "guided", "answerform"),
}


def _files(modules: tuple[str, ...]) -> list[Path]:
    out: list[Path] = []
    for name in modules:
        single, package = RUNNER_DIR / f"{name}.py", RUNNER_DIR / name
        if single.is_file():
            out.append(single)
        if package.is_dir():
            out.extend(sorted(package.rglob("*.py")))
    return out


@lru_cache(maxsize=None)
def code_fingerprint(kind: str) -> str:
    """"VERSION+HASH": the package version and the first 12 hex digits of SHA-256 over the relevant sources
    (path and text, so a module moved into a package counts as a change)."""
    h = hashlib.sha256()
    for path in _files(SOURCES[kind]):
        h.update(str(path.relative_to(RUNNER_DIR)).encode())
        h.update(b"\0")
        h.update(path.read_bytes())
        h.update(b"\0")
    return f"{__version__}+{h.hexdigest()[:12]}"


__all__ = ["SOURCES", "code_fingerprint"]
