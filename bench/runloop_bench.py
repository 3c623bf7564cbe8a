"""Run-loop cost against its floor, plus routing and answer accuracy, on samples/queue.jsonl.

1. Runs the whole run loop (route all, answer grouped by tool, fallback = executor) over the queue with the
   hand-made tools of bench/handmade.py, recording every executor call's prompt and generated tokens.
2. The floor: replays exactly those token sequences through llama.cpp (`Llama.eval`, same order, so the KV
   cache reuses the same prefixes), without chat templating, grammar, sampling, sandbox or Python around it.
3. Prints CPU seconds per task for both and their ratio (goal: within 1.3x), and the routing and answer
   accuracy against samples/queue_expected.jsonl.

    .venv/bin/python bench/runloop_bench.py [--n 24] [--json]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from handmade import handmade_tools, tool_name  # noqa: E402

from runner.execute import answers_match  # noqa: E402
from runner.runloop import local_model  # noqa: E402
from runner.meter import Stopwatch, process_cpu_seconds  # noqa: E402
from runner.runloop import RunOptions, Setup, run_queue  # noqa: E402


def record_calls(model):
    """Replace model.chat on the instance (it stays a LocalModel) with one that keeps each call's token sequences."""
    calls: list[dict] = []
    inner = model.chat

    def chat(*args, **kwargs):
        reply = inner(*args, **kwargs)
        llm = model._llm
        p = reply.usage.prompt_tokens
        calls.append({"prompt": [int(t) for t in llm.input_ids[:p]],
                      "generated": [int(t) for t in llm.input_ids[p: llm.n_tokens]],
                      "usage": reply.usage.model_dump()})
        return reply

    model.chat = chat
    return calls


def floor_cpu(model, calls: list[dict]) -> float:
    """CPU seconds llama.cpp itself needs for the same tokens, in the same order, with the same cache reuse."""
    llm = model._llm
    llm.reset()
    llm._ctx.kv_cache_seq_rm(-1, 0, -1)
    total = 0.0
    for c in calls:
        prompt, gen = c["prompt"], c["generated"]
        have = [int(t) for t in llm.input_ids[: llm.n_tokens]]
        keep = 0
        for a, b in zip(have, prompt):
            if a != b:
                break
            keep += 1
        keep = min(keep, len(prompt) - 1)  # llama.cpp re-evaluates the last prompt token for its logits
        llm.n_tokens = keep
        cpu0 = process_cpu_seconds()
        llm.eval(prompt[keep:])
        for t in gen:
            llm.eval([t])
        total += process_cpu_seconds() - cpu0
    return total


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=24, help="first N tasks of the queue")
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--keep", help="also copy the answers file here")
    ap.add_argument("--threads", type=int, default=1, help="llama.cpp threads (0: one per physical core)")
    args = ap.parse_args()

    queue = [json.loads(l) for l in (ROOT / "samples" / "queue.jsonl").read_text().splitlines()][: args.n]
    expected = {r["id"]: r for r in map(json.loads, (ROOT / "samples" / "queue_expected.jsonl").read_text().splitlines())}
    model = local_model("executor", None, args.threads).load()
    # llama.cpp's first decode after loading is slow (buffers are set up); keep that out of both sides
    model.chat([{"role": "user", "content": "Hi"}], seed=0, temperature=0.0, max_tokens=1)
    calls = record_calls(model)
    tools = handmade_tools()
    with tempfile.TemporaryDirectory() as tmp:
        qfile = Path(tmp) / "queue.jsonl"
        qfile.write_text("".join(json.dumps(t) + "\n" for t in queue))
        out = Path(tmp) / "answers.jsonl"
        setup = Setup(tools=tools, executor=model, fallback_model=lambda: model)
        with Stopwatch() as sw:
            # patterns off: the floor replays model calls, and a pattern fill makes none
            report = run_queue(str(qfile), out, RunOptions(fallback="executor", patterns=False), setup)
        records = [json.loads(l) for l in out.read_text().splitlines()]
        if args.keep:
            Path(args.keep).write_text(out.read_text())
    print(f"run loop done: {len(records)} records, {sw.cpu_seconds:.1f} CPU s, {sw.wall_seconds:.1f} wall s; "
          f"replaying {len(calls)} calls for the floor", file=sys.stderr, flush=True)
    loop_cpu = sw.cpu_seconds + sum(r["cpu"]["tool"] for r in records)
    floor = floor_cpu(model, calls)
    n = len(records)

    routed = answered = tool_answered = 0
    rows = []
    for r in records:
        e = expected[r["id"]]
        want = tool_name(e["family"]) if e["family"] else "none"
        ok_route = r["route"] == want
        ok_answer = e["answer"] is None and r["route"] == "none" or (
            e["answer"] is not None and answers_match(e["answer"], r["answer"]))
        routed += ok_route
        answered += ok_answer
        tool_answered += ok_answer and r["status"] == "tool"
        rows.append({"id": r["id"], "route": r["route"], "want": want, "status": r["status"], "answer": r["answer"],
                     "expected": e["answer"], "cpu": round(r["cpu"]["model"] + r["cpu"]["tool"], 2)})
    result = {
        "tasks": n, "routing_accuracy": routed / n, "answer_accuracy": answered / n,
        "answered_by_tool_correctly": tool_answered,
        "loop_cpu_per_task": loop_cpu / n, "floor_cpu_per_task": floor / n, "ratio": loop_cpu / floor,
        "wall_per_task": sw.wall_seconds / n, "model_calls": len(calls),
        "prompt_tokens": sum(c["usage"]["prompt_tokens"] for c in calls),
        "cached_tokens": sum(c["usage"]["cached_tokens"] for c in calls),
        "completion_tokens": sum(c["usage"]["completion_tokens"] for c in calls),
        "saved_cpu_estimate": report.savings.cpu_seconds_saved, "rate_source": report.savings.rate_source,
        "rows": rows,
    }
    if args.json:
        print(json.dumps(result, indent=1))
        return
    for r in rows:
        mark = "ok " if r["route"] == r["want"] else "BAD"
        print(f"{r['id']} {mark} route {r['route']:<15} want {r['want']:<15} {r['status']:<8} "
              f"answer {str(r['answer'])[:24]!s:<24} expected {r['expected']!s:<10} cpu {r['cpu']:.2f}")
    print(f"\nrouting accuracy {routed}/{n} = {routed / n:.0%}; answer accuracy {answered}/{n} = {answered / n:.0%} "
          f"(off-family questions count as right when routed to none)")
    print(f"run loop: {loop_cpu / n:.2f} CPU s/task ({sw.wall_seconds / n:.2f} wall s/task); "
          f"llama.cpp floor for the same tokens: {floor / n:.2f} CPU s/task; ratio {loop_cpu / floor:.2f}x (goal <= 1.3x)")
    print(f"{len(calls)} model calls; prompt tokens {result['prompt_tokens']} of which cached {result['cached_tokens']}; "
          f"generated {result['completion_tokens']}; cache saved ~{report.savings.cpu_seconds_saved:.0f} CPU s "
          f"({report.savings.rate_source} rate)")


if __name__ == "__main__":
    main()
