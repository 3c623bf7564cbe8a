"""A run on two workers in its own process, for the driver-SIGKILL test (test_cluster.py): it starts its own
local Ray instance and answers with the scripted double, pausing on each model call so a kill lands mid-run
(patterns off: a pattern fill makes no model call, so nothing would pause).
Usage: python cluster_target.py QUEUE ANSWERS"""

from __future__ import annotations

import functools
import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))
os.environ["PYTHONPATH"] = os.pathsep.join([str(HERE.parent), str(HERE), os.environ.get("PYTHONPATH", "")])

from cluster_doubles import scripted_setup  # noqa: E402
from runner.cluster import ClusterOptions, answer_on_workers  # noqa: E402
from runner.runloop import RunOptions  # noqa: E402
from test_runloop import TOOLS  # noqa: E402


def main() -> None:
    queue, out = sys.argv[1], Path(sys.argv[2])
    report = answer_on_workers(queue, out, RunOptions(fallback="executor", patterns=False), ClusterOptions(workers=2), tools=TOOLS,
                               setup=functools.partial(scripted_setup, pause=0.2))
    print(report.tasks, report.skipped, int(report.interrupted), report.routes_reused, flush=True)


if __name__ == "__main__":
    main()
