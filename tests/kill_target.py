"""A small run of the run loop in its own process, for the SIGKILL test (test_faults.py): the scripted model
double of test_runloop with a short pause per call, so a kill can land anywhere (routing, filling, writing).
Usage: python kill_target.py QUEUE ANSWERS group|plain"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from doubles import ScriptedModel  # noqa: E402
from runner.queue import AnswerWriter, QueueReader, RouteJournal, journal_path, read_answers  # noqa: E402
from runner.runloop import Engine, RunLoop, RunOptions, run  # noqa: E402
from runner.sandbox import Sandbox  # noqa: E402
from test_runloop import TOOLS, scripted  # noqa: E402


def main() -> None:
    queue, out, mode = sys.argv[1], Path(sys.argv[2]), sys.argv[3]
    base = scripted(direct="Answer: kept")

    def slow(messages, **kw):
        time.sleep(0.05)
        return base.replies(messages, **kw)

    # patterns off: a learned pattern fills with no model call, and the kills are meant to land mid-run
    options = RunOptions(fallback="executor", group=mode == "group", patterns=False)
    with AnswerWriter(out) as writer, Sandbox(pool_size=1) as sandbox:
        resumed = read_answers(out)
        engine = Engine(TOOLS, ScriptedModel("double", slow), sandbox, options)
        journal = RouteJournal(journal_path(out) if options.group else None, engine.router_key)
        loop = RunLoop(engine, writer, resumed, journal=journal)
        report = run(loop, QueueReader(queue), follow=False, out=str(out), load_cpu_seconds=lambda: 0.0)
    print(report.tasks, report.skipped, flush=True)


if __name__ == "__main__":
    main()
