"""Run model-written tool code with limits: a static screen first, then warm workers behind OS layers.

Layers, outermost first:
1. `screen` (screen.py) checks the source with `ast` before anything runs.
2. The worker (worker.py) runs the tool with restricted builtins and filtered copies of allow-listed
   modules, in a fresh namespace.
3. The operating system (oslimits.py), which must hold even when 1 and 2 are bypassed: every call runs in
   a new process forked from a pre-started worker, which drops to an unprivileged uid/gid with no
   capabilities (as root), takes rlimits, a Landlock ruleset that grants no file access (where the kernel
   has Landlock) and an allow-list seccomp filter (compiled by libseccomp, or a built-in program on
   x86_64); the worker lives in a fresh network namespace where the kernel allows one.
The child reports through a protocol (protocol.py) it cannot forge into anything but its own result; the
pool (pool.py) keeps the warm workers and turns replies into `RunResult`s.
"""

from .pool import LAYER_TITLES, Sandbox, isolation_layers, network_isolation, run_once, syscall_filter
from .records import ErrorKind, Layer, Limits, RunResult
from .screen import MAX_CODE_BYTES, Violation, screen

__all__ = [
    "ErrorKind", "LAYER_TITLES", "Layer", "Limits", "MAX_CODE_BYTES", "RunResult", "Sandbox", "Violation", "isolation_layers",
    "network_isolation", "run_once", "screen", "syscall_filter",
]
