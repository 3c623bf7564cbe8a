"""Worker setups for the cluster tests: the scripted model double of test_runloop in each worker, with the
failure a test asks for. They run inside Ray workers, so this folder must be on the workers' PYTHONPATH
(test_cluster.py puts it there before starting Ray)."""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

from doubles import ScriptedModel, is_fill
from runner.runloop import RunOptions, Setup
from runner.tools import Tool
from test_runloop import scripted


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
            if marker is None or not Path(marker).exists():
                if marker is not None:
                    Path(marker).write_text(str(os.getpid()))
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
