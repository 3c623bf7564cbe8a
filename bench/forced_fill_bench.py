"""Forced-span fills against sampled fills, per stored tool, on its family's held-out questions.

*sampled* is the fill as it was before forced spans: free greedy, checked against the schema, asked again under
the schema's grammar when it does not fit (and straight under the grammar once a tool has missed). *spans* is
one greedy pass with the spans the schema forces appended in batches (`LocalModel.chat_forced(draft=False)`).
*drafted* (what `fill_arguments` does) also guesses values from the question and checks the guess in the same
batch. Each way runs over the same questions after one warm-up fill on a question of examples.jsonl (not
counted), so each starts with the tool's demos in llama.cpp's prompt cache and none gets a question's prompt
from another. Prints per tool: CPU s per fill each way, tokens per fill sampled one at a time and appended in
batches, llama.cpp decode calls per fill, and how many replies equal the sampled ones (text, argument object).

    PYTHONPATH=$PWD .venv/bin/python bench/forced_fill_bench.py departures working-days manifest-order \\
        [--n 50] [--threads 1] [--handmade] [--json] [--replies FILE.jsonl]

`--handmade` takes the tools from bench/handmade.py instead of the tool store (for a home without builds).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.execute import _parse_fill, fill_arguments, fill_messages, forget_fill_misses, token_budget  # noqa: E402
from runner.execute import Filled  # noqa: E402
from runner.runloop import local_model  # noqa: E402
from runner.store import ToolStore  # noqa: E402

WAYS = ("sampled", "spans", "drafted")


class Calls:
    """Counts llama.cpp decode calls (one per batch, however many tokens it holds)."""

    def __init__(self, model):
        model.load()
        ctx = model._llm._ctx
        self.n = 0
        inner = ctx.decode

        def counted(batch):
            self.n += 1
            return inner(batch)

        ctx.decode = counted


def fill(model, card, question: str, way: str) -> Filled:
    if way == "spans":
        reply = model.chat_forced(fill_messages(card, question), schema=card.schema_, max_tokens=token_budget(card),
                                  draft=False)
        args, error = _parse_fill(card, reply.text, reply.finish_reason)
        return Filled(arguments=args, error=error, usage=reply.usage, raw=reply.text)
    return fill_arguments(model, card, question, seed=0, forced=way == "drafted")


def run_way(model, calls: Calls, card, warm_up: str, questions: list[str], way: str) -> list[dict]:
    forget_fill_misses()
    fill(model, card, warm_up, way)
    out = []
    for q in questions:
        calls.n = 0
        f = fill(model, card, q, way)
        u = f.usage
        out.append({"question": q, "text": f.raw.strip(), "arguments": f.arguments, "cpu": u.cpu_seconds,
                    "sampled_tokens": u.completion_tokens - u.forced_tokens, "forced_tokens": u.forced_tokens,
                    "prompt_tokens": u.prompt_tokens - u.cached_tokens, "decode_calls": calls.n})
    return out


def summary(rows: dict[str, list[dict]]) -> dict:
    n = len(rows["sampled"])
    per = {}
    for way in WAYS:
        r = rows[way]
        per[way] = {"cpu_per_fill": round(sum(x["cpu"] for x in r) / n, 3),
                    "sampled_tokens_per_fill": round(sum(x["sampled_tokens"] for x in r) / n, 1),
                    "batched_tokens_per_fill": round(sum(x["forced_tokens"] for x in r) / n, 1),
                    "decode_calls_per_fill": round(sum(x["decode_calls"] for x in r) / n, 1),
                    "question_tokens_per_fill": round(sum(x["prompt_tokens"] for x in r) / n, 1)}
        if way != "sampled":
            pairs = list(zip(rows["sampled"], r))
            per[way].update(
                cpu_ratio=round(per[way]["cpu_per_fill"] / per["sampled"]["cpu_per_fill"], 3),
                identical_text=sum(a["text"] == b["text"] for a, b in pairs),
                identical_arguments=sum(a["arguments"] == b["arguments"] for a, b in pairs),
                differences=[{"question": a["question"], "sampled": a["text"], way: b["text"]}
                             for a, b in pairs if a["text"] != b["text"]])
    return {"fills": n, **per}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("tools", nargs="+", help="tool names in the tool store (family folder = name with _ for -)")
    ap.add_argument("--n", type=int, default=50)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--handmade", action="store_true", help="tools from bench/handmade.py, not the tool store")
    ap.add_argument("--replies", type=Path, help="write every reply both ways to this JSONL file")
    args = ap.parse_args()
    model = local_model("executor", None, args.threads)
    calls = Calls(model)
    results, replies = {}, []
    with ToolStore() as store:
        for name in args.tools:
            if args.handmade:
                from bench.handmade import handmade_tool

                tool = handmade_tool(name.replace("-", "_"))
            else:
                tool = store.get(name)
            folder = ROOT / "samples" / name.replace("-", "_")
            lines = (folder / "test.jsonl").read_text().splitlines()[: args.n]
            questions = [json.loads(line)["question"] for line in lines]
            warm_up = json.loads((folder / "examples.jsonl").read_text().splitlines()[0])["question"]
            rows = {way: run_way(model, calls, tool.card, warm_up, questions, way) for way in WAYS}
            results[name] = summary(rows)
            replies += [{"tool": name, "way": way, **r} for way in WAYS for r in rows[way]]
    if args.replies:
        args.replies.write_text("".join(json.dumps(r) + "\n" for r in replies))
    if args.json:
        print(json.dumps(results, indent=2))
        return
    for name, r in results.items():
        print(f"{name}: {r['fills']} fills")
        for way in WAYS:
            w = r[way]
            same = "" if way == "sampled" else (
                f"; CPU ratio {w['cpu_ratio']}; replies equal to sampled {w['identical_text']}/{r['fills']}, "
                f"arguments {w['identical_arguments']}/{r['fills']}")
            print(f"  {way:8} CPU s/fill {w['cpu_per_fill']:.2f}; tokens sampled {w['sampled_tokens_per_fill']}, "
                  f"in batches {w['batched_tokens_per_fill']}; decode calls {w['decode_calls_per_fill']}; "
                  f"question tokens {w['question_tokens_per_fill']}{same}")
            for d in w.get("differences", [])[:3]:
                print(f"    differs: {d['question'][:60]!r}\n      sampled {d['sampled'][:100]}\n"
                      f"      {way:7} {d[way][:100]}")


if __name__ == "__main__":
    main()
