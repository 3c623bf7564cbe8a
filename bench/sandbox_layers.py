"""Which operating-system layer, on its own, contains which program of the adversarial corpus.

Run from the repository root as root (as CI does): `python bench/sandbox_layers.py`. Every program runs with
the screen, the restricted builtins and the filtered module copies off, first with no per-call OS layer
(to see whether it does harm at all), then with exactly one layer on. The network namespace stays on
throughout. Programs that could start processes or signal every process are not run without the layers
that stop those (`risky`). A layer "stops" a program when the world (tests/sandbox_world.py) shows no harm.
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

from runner.sandbox import Limits, Sandbox, isolation_layers  # noqa: E402
from sandbox_corpus import ALL_CASES, NEW_CORPUS, fill  # noqa: E402
from sandbox_world import World  # noqa: E402

LAYERS = ("syscall_filter", "files", "privileges")
RISKY_WORDS = ("fork", "subprocess", "system(", "Thread", "_thread", "kill(")
LIMITS = Limits(cpu_seconds=1, wall_seconds=8, memory_mb=128)


def risky(case) -> bool:
    return case.risky_alone or any(word in case.code for word in RISKY_WORDS)


def harm(sb: Sandbox, case, layers_on: tuple[str, ...]) -> list[str]:
    world = World()
    try:
        result = sb._run(fill(case.code, world.places()), case.args, screen_code=False, builtins_mode="full",
                         os_layers_off=tuple(x for x in LAYERS if x not in layers_on))
        return world.harm(result)
    finally:
        world.close()


def main() -> None:
    held = {layer.name: layer.active for layer in isolation_layers()}
    print("layers here:", ", ".join(f"{k}={'held' if v else 'MISSING'}" for k, v in held.items()))
    new = {c.name for c in NEW_CORPUS}
    stopped: dict[str, list[str]] = {name: [] for name in LAYERS}
    harmless, untested = [], []
    with Sandbox(pool_size=1, limits=LIMITS) as sb:
        for case in ALL_CASES:
            label = case.name + (" (new)" if case.name in new else "")
            if risky(case):
                untested.append(label)
                configs = [("syscall_filter",), ("privileges",)]
            else:
                if not harm(sb, case, ()):
                    harmless.append(label)
                    continue
                configs = [(name,) for name in LAYERS]
            for (name,) in configs:
                if held[name] and not harm(sb, case, (name,)):
                    stopped[name].append(label)
            all_on = harm(sb, case, LAYERS)
            if all_on:
                print(f"NOT CONTAINED with every layer on: {case.name}: {all_on}")
    for name in LAYERS:
        print(f"\n{name} alone stops {len(stopped[name])}:")
        print("  " + ", ".join(stopped[name]))
    print(f"\nharmless even with no per-call layer ({len(harmless)}): " + ", ".join(harmless))
    print(f"\nrisky, so run only with the filter or the privilege drop alone ({len(untested)}): " + ", ".join(untested))


if __name__ == "__main__":
    main()
