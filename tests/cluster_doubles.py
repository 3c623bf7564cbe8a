"""Worker setups for the cluster tests: the scripted model double of test_runloop in each worker, with the
failure a test asks for. They run inside Ray workers, so this folder must be on the workers' PYTHONPATH
(test_cluster.py puts it there before starting Ray)."""

from __future__ import annotations

import os
import signal
import time

from doubles import ScriptedModel, is_fill
from runner.runloop import RunOptions, Setup
from runner.tools import Tool
from test_runloop import scripted


def first_to_claim(marker: str) -> bool:
    """True in the one process that creates `marker` (holding its process id); workers race for it."""
    try:
        fd = os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
    except FileExistsError:
        return False
    with os.fdopen(fd, "w") as f:
        f.write(str(os.getpid()))
    return True


def scripted_setup(tools: list[Tool], options: RunOptions, pause: float = 0.0, kill_on: str | None = None,
                   marker: str | None = None) -> Setup:
    """The scripted executor (also the fallback). With `kill_on`, the first worker asked to fill the arguments
    of a question containing that text kills its own process (SIGKILL) and leaves `marker` behind, so the
    worker the task goes to next answers it; without a marker, every worker asked dies."""
    base = scripted(direct="Answer: kept")

    def reply(messages, **kw):
        if pause:
            time.sleep(pause)
        if kill_on and is_fill(messages) and kill_on in messages[-1]["content"]:
            if marker is None or first_to_claim(marker):
                os.kill(os.getpid(), signal.SIGKILL)
        return base.replies(messages, **kw)

    model = ScriptedModel("double", reply)
    return Setup(tools=tools, executor=model, fallback_model=None, opened=[])


def fee_models():
    """A scripted builder that always designs the slipway-fee arguments and drafts the right function, and
    the scripted executor of test_build (for the toy slipway-fee families)."""
    from test_build import FEES, GOOD, executor_script, shape_reply

    objects = [a for _, _, a in FEES[:3]]

    def builder(messages, **kw):
        return shape_reply(objects) if messages[0]["content"].startswith("You design the arguments") else GOOD

    return ScriptedModel("builder", builder), ScriptedModel("executor", executor_script())


# The eval's scripted models (test_evaluate's slipway-fee family): the direct methods get some tasks right,
# the split fills t5 wrongly and t6 unusably (so its later fills start under the schema: order matters).
EVAL_EXECUTOR = {"wrong_fill": {"t5"}, "bad_fill": {"t6"}, "direct_right": {"t1", "t2"}}
EVAL_BUILDER = {"direct_right": {"t1", "t2", "t3"}, "steps_right": {"t1", "t2", "t3", "t4"}, "steps_cut": {"t5"}}


def eval_kind(messages) -> str:
    """Which eval call this is: the executor's fill, or a direct or step-by-step answer."""
    if is_fill(messages):
        return "fill"
    return "steps" if "step by step" in messages[0]["content"] else "direct"


def eval_models(log: str | None = None, kill_on: str | None = None, fail_on: str | None = None,
                marker: str | None = None):
    """The scripted builder and executor of the eval tests. Each call is appended to `log` (process id, model,
    kind, question) before it is answered. `kill_on`: the first process asked a direct question containing
    that text kills itself (SIGKILL); `fail_on`: it raises instead (an interruption). `marker` makes either
    happen once."""
    from test_evaluate import builder_script, executor_script

    def logged(name, script):
        def reply(messages, **kw):
            question = messages[-1]["content"]
            kind = eval_kind(messages)
            if log is not None:
                with open(log, "a", encoding="utf-8") as f:
                    f.write(f"{os.getpid()}\t{name}\t{kind}\t{question}\n")
            hit = kind != "fill" and any(t and t in question for t in (kill_on, fail_on))
            if hit and (marker is None or first_to_claim(marker)):
                if kill_on and kill_on in question:
                    os.kill(os.getpid(), signal.SIGKILL)
                raise RuntimeError("simulated interruption")
            return script(messages, **kw)

        return reply

    return (ScriptedModel("builder", logged("builder", builder_script(**EVAL_BUILDER))),
            ScriptedModel("executor", logged("executor", executor_script(**EVAL_EXECUTOR))))
