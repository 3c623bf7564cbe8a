"""Shared fixtures: a throw-away JIGWRIGHT_HOME that still sees the real fetched models."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from runner import models, settings  # noqa: E402

REAL_HOME = settings.home()


def real_model_path(role: str) -> Path:
    reg = settings.load_registry()
    spec = models.for_role(reg, role)
    return REAL_HOME / "models" / spec.file


def need_models() -> None:
    """Real-model tests need the weights: `make test` fetches them first, so missing weights are a failure."""
    for role in ("builder", "executor"):
        p = real_model_path(role)
        if not p.exists():
            pytest.fail(f"{p} is missing: run `jigwright models fetch` (make test does)")


@pytest.fixture
def tmp_home(tmp_path, monkeypatch) -> Path:
    """A fresh JIGWRIGHT_HOME whose models/ points at the real models folder (read-only use)."""
    home = tmp_path / "home"
    home.mkdir()
    real_models = REAL_HOME / "models"
    if real_models.exists():
        (home / "models").symlink_to(real_models, target_is_directory=True)
    monkeypatch.setenv("JIGWRIGHT_HOME", str(home))
    return home


@pytest.fixture
def bare_home(tmp_path, monkeypatch) -> Path:
    """A fresh, empty JIGWRIGHT_HOME."""
    home = tmp_path / "bare"
    home.mkdir()
    monkeypatch.setenv("JIGWRIGHT_HOME", str(home))
    return home


@pytest.fixture(autouse=True)
def _fresh_fill_policy():
    """Each test starts with free fills for every tool (the executor remembers misses within a process)."""
    from runner.execute import forget_fill_misses

    forget_fill_misses()
    yield


@pytest.fixture(scope="module")
def local_ray(tmp_path_factory):
    """One local Ray instance per test module (the cluster tests): 2 CPUs, no dashboard; workers see the
    project and the tests folder, and a JIGWRIGHT_HOME of their own (with the real models) so what they learn
    (pattern books) stays there."""
    ray = pytest.importorskip("ray", reason="the cluster extra is not installed: pip install 'jigwright[cluster]'")
    tests = Path(__file__).resolve().parent
    old = os.environ.get("PYTHONPATH")
    old_home = os.environ.get("JIGWRIGHT_HOME")
    home = tmp_path_factory.mktemp("ray-home")
    if (REAL_HOME / "models").exists():
        (home / "models").symlink_to(REAL_HOME / "models", target_is_directory=True)
    os.environ["JIGWRIGHT_HOME"] = str(home)
    os.environ["PYTHONPATH"] = os.pathsep.join([str(ROOT), str(tests)] + ([old] if old else []))
    os.environ.setdefault("RAY_worker_niceness", "0")  # as runner/cluster/pool.py starts Ray
    ray.init(address="local", num_cpus=2, include_dashboard=False, object_store_memory=100 * 1024 * 1024,
             logging_level="WARNING", log_to_driver=False)
    yield ray
    ray.shutdown()
    for name, value in (("JIGWRIGHT_HOME", old_home), ("PYTHONPATH", old)):
        if value is None:
            os.environ.pop(name, None)
        else:
            os.environ[name] = value


@pytest.fixture(autouse=True)
def _own_pattern_books(tmp_path_factory, monkeypatch):
    """Pattern books learned by a test stay in that test's own folder, never in the person's JIGWRIGHT_HOME."""
    folder = tmp_path_factory.mktemp("patterns")
    monkeypatch.setattr(settings, "patterns_dir", lambda: folder)
    yield
