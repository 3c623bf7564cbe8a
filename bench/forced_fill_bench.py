"""Forced-span fills against sampled fills, per stored tool, on its family's held-out questions.

*sampled* is the fill as it was before forced spans: free greedy, checked against the schema, asked again under
the schema's grammar when it does not fit (and straight under the grammar once a tool has missed). *forced* is
one greedy pass with the spans the schema forces appended in batches (`LocalModel.chat_forced`). Each way runs
over the same questions after one warm-up fill on a question of examples.jsonl (not counted), so both start with
the tool's demos in llama.cpp's prompt cache and neither gets a question's prompt from the other. Prints per
tool: CPU s per fill both ways and their ratio, tokens per fill the model sampled and the tokens appended as
forced spans, and how many replies are identical (text, and the parsed argument object).

    PYTHONPATH=$PWD .venv/bin/python bench/forced_fill_bench.py departures working-days manifest-order \\
        [--n 50] [--threads 1] [--json] [--replies FILE.jsonl]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.execute import fill_arguments, forget_fill_misses  # noqa: E402
from runner.runloop import local_model  # noqa: E402
from runner.store import ToolStore  # noqa: E402

WAYS = ("sampled", "forced")


def run_way(model, card, warm_up: str, questions: list[str], forced: bool) -> list[dict]:
    forget_fill_misses()
    fill_arguments(model, card, warm_up, seed=0, forced=forced)
    out = []
    for q in questions:
        f = fill_arguments(model, card, q, seed=0, forced=forced)
        u = f.usage
        out.append({"question": q, "text": f.raw.strip(), "arguments": f.arguments, "cpu": u.cpu_seconds,
                    "sampled_tokens": u.completion_tokens - u.forced_tokens, "forced_tokens": u.forced_tokens,
                    "prompt_tokens": u.prompt_tokens - u.cached_tokens})
    return out


def summary(rows: dict[str, list[dict]]) -> dict:
    n = len(rows["forced"])
    per = {}
    for way in WAYS:
        r = rows[way]
        per[way] = {"cpu_per_fill": round(sum(x["cpu"] for x in r) / n, 3),
                    "sampled_tokens_per_fill": round(sum(x["sampled_tokens"] for x in r) / n, 1),
                    "forced_tokens_per_fill": round(sum(x["forced_tokens"] for x in r) / n, 1)}
    pairs = list(zip(rows["sampled"], rows["forced"]))
    return {"fills": n, **per, "cpu_ratio": round(per["forced"]["cpu_per_fill"] / per["sampled"]["cpu_per_fill"], 3),
            "identical_text": sum(a["text"] == b["text"] for a, b in pairs),
            "identical_arguments": sum(a["arguments"] == b["arguments"] for a, b in pairs),
            "differences": [{"question": a["question"], "sampled": a["text"], "forced": b["text"]}
                            for a, b in pairs if a["text"] != b["text"]]}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("tools", nargs="+", help="tool names in the tool store (family folder = name with _ for -)")
    ap.add_argument("--n", type=int, default=50)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--replies", type=Path, help="write every reply both ways to this JSONL file")
    args = ap.parse_args()
    model = local_model("executor", None, args.threads)
    results, replies = {}, []
    with ToolStore() as store:
        for name in args.tools:
            tool = store.get(name)
            folder = ROOT / "samples" / name.replace("-", "_")
            lines = (folder / "test.jsonl").read_text().splitlines()[: args.n]
            questions = [json.loads(line)["question"] for line in lines]
            warm_up = json.loads((folder / "examples.jsonl").read_text().splitlines()[0])["question"]
            rows = {way: run_way(model, tool.card, warm_up, questions, way == "forced") for way in WAYS}
            results[name] = summary(rows)
            replies += [{"tool": name, "way": way, **r} for way in WAYS for r in rows[way]]
    if args.replies:
        args.replies.write_text("".join(json.dumps(r) + "\n" for r in replies))
    if args.json:
        print(json.dumps(results, indent=2))
        return
    for name, r in results.items():
        s, f = r["sampled"], r["forced"]
        print(f"{name}: {r['fills']} fills; CPU s per fill sampled {s['cpu_per_fill']}, forced {f['cpu_per_fill']} "
              f"(ratio {r['cpu_ratio']}); tokens sampled per fill {s['sampled_tokens_per_fill']} -> "
              f"{f['sampled_tokens_per_fill']} (+{f['forced_tokens_per_fill']} forced); identical replies "
              f"{r['identical_text']}/{r['fills']}, identical arguments {r['identical_arguments']}/{r['fills']}")
        for d in r["differences"][:5]:
            print(f"  differs: {d['question'][:70]!r}\n    sampled {d['sampled'][:110]}\n    forced  {d['forced'][:110]}")


if __name__ == "__main__":
    main()
