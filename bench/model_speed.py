"""Load time, prompt-eval and generation speed of each default model on this machine (the floor for every
other figure). Run: .venv/bin/python bench/model_speed.py"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from runner import models, settings  # noqa: E402
from runner.llm import LocalModel  # noqa: E402
from runner.meter import Stopwatch  # noqa: E402

PROMPT = ("The Kelpwick Quay Co-operative keeps a yard of containers, a fuel berth and a slipway. " * 12).strip()


def measure(role: str) -> dict:
    spec = models.for_role(settings.load_registry(), role)
    m = LocalModel(spec)
    t0 = time.perf_counter()
    m.load()
    load_s = time.perf_counter() - t0
    llm = m._llm
    tokens = llm.tokenize(PROMPT.encode(), add_bos=True)
    llm.reset()
    with Stopwatch() as pe:
        llm.eval(tokens)
    n_gen = 64
    llm.reset()
    llm.eval(tokens[:8])
    with Stopwatch() as ge:
        for _ in range(n_gen):
            tok = llm.sample(temp=0.0)
            llm.eval([tok])
    return {"model": spec.name, "role": role, "threads": m.n_threads, "load_wall_s": round(load_s, 2),
            "prompt_tokens": len(tokens), "prompt_tok_per_s": round(len(tokens) / pe.wall_seconds, 1),
            "prompt_cpu_s_per_tok": round(pe.cpu_seconds / len(tokens), 4),
            "gen_tokens": n_gen, "gen_tok_per_s": round(n_gen / ge.wall_seconds, 1),
            "gen_cpu_s_per_tok": round(ge.cpu_seconds / n_gen, 4)}


if __name__ == "__main__":
    rows = [measure(r) for r in ("executor", "builder")]
    for r in rows:
        print(json.dumps(r))
    ex, bu = rows
    print(f"ratio builder/executor: prompt eval {ex['prompt_tok_per_s'] / bu['prompt_tok_per_s']:.2f}x slower, "
          f"generation {ex['gen_tok_per_s'] / bu['gen_tok_per_s']:.2f}x slower")
