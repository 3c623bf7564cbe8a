"""Jigwright installs like any Python command-line tool: a wheel built from this checkout, installed into a fresh
virtual environment, runs `jigwright checkup` and `jigwright models list` from outside the checkout, with the
prompt templates and the default model registry it carries inside the package.

The fresh environment gets its dependencies the way `make install` got them, from the package index through
pip's cache; llama-cpp-python comes from the wheel pip built and cached during `make install`, so nothing is
compiled again."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from runner import __version__, prompts, settings

pytestmark = pytest.mark.wheel

ROOT = Path(__file__).resolve().parent.parent
LEFT_OUT = shutil.ignore_patterns(".git", ".venv", "__pycache__", "*.pyc", "build", "dist", "*.egg-info", "eval-out",
                                  ".pytest_cache", "*.answers.jsonl", "demo-answers.jsonl")


def run(cmd: list[str], *, cwd: Path, env: dict[str, str] | None = None, timeout: int = 900) -> str:
    proc = subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout)
    assert proc.returncode == 0, f"{' '.join(map(str, cmd))} failed:\n{proc.stdout[-3000:]}\n{proc.stderr[-3000:]}"
    return proc.stdout


def clean_env(**extra: str) -> dict[str, str]:
    """This process's environment without anything that would point Python at the checkout or this venv."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("PYTHONPATH", "VIRTUAL_ENV", "PYTHONHOME", "JIGWRIGHT_MODELS_TOML", "PIP_REQUIRE_VIRTUALENV")}
    return {**env, "COLUMNS": "80", **extra}


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    """A fresh virtual environment with the wheel built from this checkout installed; its bin/ folder."""
    cached = run([sys.executable, "-m", "pip", "cache", "list", "llama_cpp_python"], cwd=ROOT)
    if "llama_cpp_python" not in cached:
        pytest.fail("pip's wheel cache holds no llama-cpp-python wheel: `make install` builds and caches it "
                    "(unless PIP_NO_CACHE_DIR is set); without it this test would compile llama.cpp again")
    base = tmp_path_factory.mktemp("wheel")
    src = base / "src"
    shutil.copytree(ROOT, src, ignore=LEFT_OUT)
    run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--disable-pip-version-check", "-q", "-w",
         str(base / "dist"), str(src)], cwd=base)
    wheels = list((base / "dist").glob("jigwright-*.whl"))
    assert [w.name for w in wheels] == [f"jigwright-{__version__}-py3-none-any.whl"]
    venv = base / "venv"
    run([getattr(sys, "_base_executable", sys.executable), "-m", "venv", str(venv)], cwd=base, env=clean_env())
    log = run([str(venv / "bin" / "python"), "-m", "pip", "install", "--disable-pip-version-check",
               str(wheels[0])], cwd=base, env=clean_env())
    assert "Building wheel for llama-cpp-python" not in log  # the cached wheel was used
    return venv / "bin"


@pytest.fixture
def outside(tmp_path) -> Path:
    """A working folder outside the checkout, and a JIGWRIGHT_HOME that sees the fetched models."""
    home = tmp_path / "home"
    home.mkdir()
    models = settings.home() / "models"
    if models.exists():
        (home / "models").symlink_to(models, target_is_directory=True)
    work = tmp_path / "work"
    work.mkdir()
    return work


def test_the_installed_package_carries_its_templates_and_registry(installed, outside):
    code = ("from runner import prompts, settings; print(settings.registry_file()); print(prompts.PROMPTS_DIR); "
            "print(prompts.render('direct_answer.j2'))")
    lines = run([str(installed / "python"), "-c", code], cwd=outside, env=clean_env()).splitlines()
    site = installed.parent / "lib"
    registry, prompts_dir = Path(lines[0]), Path(lines[1])
    assert site in registry.parents and registry.name == "models.toml"
    assert site in prompts_dir.parents
    assert registry.read_bytes() == (ROOT / "models.toml").read_bytes()
    assert sorted(p.name for p in prompts_dir.glob("*.j2")) == sorted(p.name for p in (ROOT / "prompts").glob("*.j2"))
    assert "\n".join(lines[2:]) == prompts.render("direct_answer.j2")


def test_checkup_models_list_and_version_run_from_outside_the_checkout(installed, outside):
    env = clean_env(JIGWRIGHT_HOME=str(outside.parent / "home"))
    jw = str(installed / "jigwright")
    checkup = run([jw, "checkup"], cwd=outside, env=env)
    assert "model coder-1.5b:" in checkup and "model coder-0.5b:" in checkup
    assert "syscall filter: compiled by libseccomp" in checkup  # the worker ships in the wheel and pyseccomp installs
    listing = run([jw, "models", "list"], cwd=outside, env=env)
    assert "coder-1.5b" in listing and "builder*" in listing and "executor*" in listing
    assert run([jw, "--version"], cwd=outside, env=env).startswith(f"jigwright {__version__} (llama-cpp-python ")


def test_user_overrides_of_the_registry_still_apply_when_installed(installed, outside):
    home = outside.parent / "home"
    own = outside / "my-models.toml"
    own.write_text((ROOT / "models.toml").read_text().replace("coder-0.5b", "quay-0.5b"))
    (home / "models.local.toml").write_text(
        '[models."my-gguf"]\nroles = ["executor"]\nfile = "x.gguf"\nsize = 10\nsha256 = "' + "0" * 64 + '"\n'
        '[models."my-gguf".source]\nkind = "local"\npath = "/nowhere/x.gguf"\n')
    jw = str(installed / "jigwright")
    listing = run([jw, "models", "list"], cwd=outside, env=clean_env(JIGWRIGHT_HOME=str(home),
                                                                        JIGWRIGHT_MODELS_TOML=str(own)))
    assert "quay-0.5b" in listing and "coder-0.5b" not in listing and "my-gguf" in listing
