"""What a JSON grammar costs the builder on the shape step: the same shape prompt answered free and under a
free-form JSON grammar (any object), at the temperatures the build uses.

For each family given, the builder answers the shape prompt of its drafting examples both ways with the same
seeds; prints CPU seconds per generated token each way, the ratio, and how many free replies were JSON anyway.
This is the measurement behind the build asking for shapes without a grammar.

    .venv/bin/python bench/shape_grammar.py departures working_days [--samples 3] [--threads 1] [--json]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from runner.build import Builder, BuildSettings, load_family, parse_arguments_reply  # noqa: E402
from runner.runloop import local_model  # noqa: E402

ANY_OBJECT = {"type": "object"}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("families", nargs="+", help="family folders under samples/")
    ap.add_argument("--samples", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    builder = local_model("builder", None, args.threads)
    results = {}
    for name in args.families:
        family = load_family(ROOT / "samples" / name / "examples.jsonl")
        msgs = Builder(family, builder=builder, executor=builder, sandbox=None, settings=BuildSettings()).shape_messages()
        budget = 100 + sum(len(e.question) for e in family.examples[:3])
        row = {}
        for mode, schema in (("free", None), ("grammar", ANY_OBJECT)):
            cpu, tokens, parsed = 0.0, 0, 0
            for i in range(args.samples):
                r = builder.chat(msgs, seed=100 + i, temperature=0.2 if i == 0 else 0.7, max_tokens=budget,
                                 schema=schema)
                cpu += r.usage.cpu_seconds - 0.0
                tokens += r.usage.completion_tokens
                parsed += parse_arguments_reply(r.text) is not None
            row[mode] = {"cpu_seconds": round(cpu, 1), "generated_tokens": tokens,
                         "cpu_per_generated_token": round(cpu / max(tokens, 1), 4), "replies_read_as_arguments": parsed}
        results[name] = row
    if args.json:
        print(json.dumps(results, indent=2))
        return
    for name, row in results.items():
        f, g = row["free"], row["grammar"]
        print(f"{name}: {args.samples} shape replies each way; CPU s per generated token free "
              f"{f['cpu_per_generated_token']}, under a JSON grammar {g['cpu_per_generated_token']} "
              f"(ratio {g['cpu_per_generated_token'] / max(f['cpu_per_generated_token'], 1e-9):.1f}); replies read as "
              f"argument objects: free {f['replies_read_as_arguments']}/{args.samples}, "
              f"grammar {g['replies_read_as_arguments']}/{args.samples}")


if __name__ == "__main__":
    main()
