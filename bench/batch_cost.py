"""CPU seconds of one llama.cpp decode call of the executor by batch size (one thread), after a cached prompt.

The figure behind forced fills: a batch of a few tokens costs several single-token decodes, so appending short
forced spans alone saves little, while one batch of a whole drafted reply saves most of the decode calls.

    PYTHONPATH=$PWD .venv/bin/python bench/batch_cost.py [--reps 4]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.runloop import local_model  # noqa: E402

PROMPT = "The Curlew leaves at minute 2 and then every 28 minutes. The Thrift leaves at minute 4 and then every 18."
REPLY = json.dumps({"boats": [{"name": "Curlew", "start": 2, "period": 28}, {"name": "Thrift", "start": 4,
                                                                             "period": 18}]})


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=4)
    args = ap.parse_args()
    model = local_model("executor", None, 1)
    model.load()
    llm = model._llm
    llm.reset()
    llm.eval(model.tokenize(PROMPT))
    base = llm.n_tokens
    toks = model.tokenize(REPLY)
    single = None
    for n in (1, 2, 4, 8, 16, 32):
        t = time.process_time()
        for _ in range(args.reps):
            llm.n_tokens = base
            llm.eval(toks[:n])
        dt = (time.process_time() - t) / args.reps
        single = single or dt
        print(f"batch of {n:2} tokens: {dt:.3f} CPU s per decode call, {dt / single:.1f}x a single-token call, "
              f"{dt / n:.3f} per token")


if __name__ == "__main__":
    main()
