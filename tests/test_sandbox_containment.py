"""The operating-system layer alone contains every program of the adversarial corpus.

Each program runs with the static screen off and the real builtins, so with the real `__import__` and the
real modules instead of filtered copies (the test-only switches of `Sandbox._run`). Only the OS layers
stand: the syscall filter, Landlock, the privilege drop, rlimits and the network namespace. After each
program the host world (tests/sandbox_world.py) must be as it was, and the host must have a result record.
"""

from __future__ import annotations

import pytest

from runner.sandbox import Limits, RunResult, Sandbox, isolation_layers, pool
from sandbox_corpus import ALL_CASES, NEW_CORPUS, NORMAL, Case, fill
from sandbox_world import World

LIMITS = Limits(cpu_seconds=1, wall_seconds=8, memory_mb=128)  # wall room for a busy shared machine
LAYERS = {layer.name: layer for layer in isolation_layers()}
ALL_OS_LAYERS = ("syscall_filter", "files", "privileges")


def needs(*names: str):
    missing = [f"{n}: {LAYERS[n].detail}" for n in names if not LAYERS[n].active]
    return pytest.mark.skipif(bool(missing), reason="; ".join(missing))


@pytest.fixture(scope="module", params=["libseccomp", "built-in"])
def sandbox(request):
    """Sandboxes whose filter libseccomp compiled, and whose filter is the built-in x86_64 fallback."""
    with pytest.MonkeyPatch.context() as patch:
        if request.param == "built-in":
            patch.setattr(pool, "_compiled_filter", lambda: (None, "built-in program asked for by the test"))
        elif pool._compiled_filter()[0] is None:
            pytest.skip(pool._compiled_filter()[1])
        with Sandbox(limits=LIMITS) as sb:
            mode = next(layer for layer in sb.layers() if layer.name == "syscall_filter")
            if not mode.active:
                pytest.skip(mode.detail)
            expected = "hand-assembled" if request.param == "built-in" else "compiled by libseccomp"
            assert expected in mode.detail, mode
            yield sb


@pytest.fixture
def world():
    w = World()
    yield w
    w.close()


@pytest.fixture(scope="module")
def shared_world():
    """One world for the whole corpus run (a helper process per program would cost more than the programs)."""
    w = World()
    yield w
    w.close()


def run_bare(sb: Sandbox, case: Case, world: World, os_layers_off: tuple[str, ...] = ()) -> RunResult:
    """The program with every Python-level layer switched off (and, if asked, some OS layers too)."""
    return sb._run(fill(case.code, world.places()), case.args, screen_code=False, builtins_mode="full",
                   os_layers_off=os_layers_off)


@needs("syscall_filter")
@pytest.mark.parametrize("case", ALL_CASES, ids=[c.name for c in ALL_CASES])
def test_os_layer_alone_contains_the_corpus(sandbox: Sandbox, shared_world: World, case: Case) -> None:
    result = run_bare(sandbox, case, shared_world)  # must not raise: the host always gets a result record
    assert isinstance(result, RunResult)
    assert "\n" not in result.message
    harm = shared_world.harm(result)
    shared_world.baseline = shared_world.snapshot()  # one failure is reported once, not by every later program
    assert harm == []
    follow_up = sandbox.run(NORMAL, {"x": 21})
    assert follow_up.ok and follow_up.value == 42, follow_up


# The checks above can fail: with the per-call OS layers switched off, these programs do real harm to a
# throw-away world (as root here and in CI; a non-root run still changes the files it owns).
HARMFUL_WITHOUT_LAYERS = {
    "ioctl_attribute_flags": "canary",
    "chmod_utime_chown_read_only": "canary",
    "path_changes": "canary",
    "prlimit_other_process": "helper limits",
    "signal_other_process": "helper",
    "read_secret_file": "secret",
    "read_world_readable_files": "world-readable",
    "list_host_folders": "listing",
    "update_wrapper_reader": "canary",
    "traceback_frame_walk": "canary",
    "singledispatch_annotation": "canary",
}


@pytest.mark.parametrize("name", sorted(HARMFUL_WITHOUT_LAYERS))
def test_the_corpus_does_harm_when_the_os_layers_are_off(sandbox: Sandbox, world: World, name: str) -> None:
    case = next(c for c in NEW_CORPUS if c.name == name)
    assert not case.risky_alone
    result = run_bare(sandbox, case, world, os_layers_off=ALL_OS_LAYERS)
    harm = world.harm(result)
    assert any(HARMFUL_WITHOUT_LAYERS[name] in h for h in harm), (harm, result)


def test_forged_result_frames_never_raise_and_never_pass_as_sandbox_errors(sandbox: Sandbox, world: World) -> None:
    """Even with every per-call OS layer off, forged frames on the result pipe give a result record."""
    for name in ("forge_result_descriptors", "forge_then_return", "forge_through_proc_fd"):
        case = next(c for c in NEW_CORPUS if c.name == name)
        result = run_bare(sandbox, case, world, os_layers_off=ALL_OS_LAYERS)
        assert (result.error_kind, result.message) == ("crashed", "the tool's process sent a malformed result"), result
        assert "chosen by the tool" not in result.message


@needs("syscall_filter", "files", "privileges")
def test_every_layer_is_reported_and_held() -> None:
    for name in ("syscall_filter", "files", "privileges", "network"):
        assert LAYERS[name].active and LAYERS[name].detail, LAYERS[name]
    assert LAYERS["syscall_filter"].mode == "allow-list"


def test_checkup_lists_every_layer_as_json_and_as_a_table(tmp_home) -> None:
    import json
    import os
    import subprocess
    import sys

    def cli(*args: str) -> subprocess.CompletedProcess:
        return subprocess.run([sys.executable, "-c", "from runner.cli import main; main()", "checkup", *args],
                              capture_output=True, text=True, env={**os.environ, "COLUMNS": "80"})

    facts = json.loads(cli("--json").stdout)
    assert [layer["name"] for layer in facts["sandbox_layers"]] == ["syscall_filter", "files", "privileges", "network"]
    for layer in facts["sandbox_layers"]:
        assert layer["active"] == LAYERS[layer["name"]].active and layer["mode"] and layer["detail"]
    table = cli().stdout
    for title in ("syscall filter", "file-system restriction", "privilege drop", "network namespace"):
        assert title in table
    assert max(len(line) for line in table.splitlines()) <= 80
