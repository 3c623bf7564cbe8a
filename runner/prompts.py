"""The Jinja environment over prompts/ (StrictUndefined) and template hashes for cache keys."""

from __future__ import annotations

import hashlib
import json
from functools import lru_cache
from pathlib import Path
from typing import Any

import jinja2

from .settings import shipped_path

PROMPTS_DIR: Path = shipped_path("prompts")


@lru_cache(maxsize=1)
def environment() -> jinja2.Environment:
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(PROMPTS_DIR)), undefined=jinja2.StrictUndefined,
                             keep_trailing_newline=False, trim_blocks=True, lstrip_blocks=True,
                             autoescape=False)
    env.filters["tojson_compact"] = lambda v: json.dumps(v, ensure_ascii=False, separators=(", ", ": "))
    return env


def render(name: str, **context: Any) -> str:
    """Render prompts/NAME with the given context; a missing variable is an error, not an empty string."""
    return environment().get_template(name).render(**context).strip()


def template_hash(*names: str) -> dict[str, str]:
    """SHA-256 (first 16 hex digits) of each named template's source, for cache keys and provenance."""
    return {n: hashlib.sha256((PROMPTS_DIR / n).read_bytes()).hexdigest()[:16] for n in names}


def all_template_hashes() -> dict[str, str]:
    return template_hash(*sorted(p.name for p in PROMPTS_DIR.glob("*.j2")))
