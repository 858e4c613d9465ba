"""Tagging speed of several models side by side, in one process, in interleaved rounds: for asking
what a model's extra inputs (a frozen vector table, a character language model) cost at tagging.

    .venv/bin/python scripts/bench_model_speed.py TEST_FILE NAME=MODEL [NAME=MODEL ...] --out F

Each round tags every model once on the sentences of TEST_FILE (a column file; its tokens, as
`Tagger.predict_scored_spans` takes them, with scores) at one thread, in a rotating order; the
median tokens/s over the rounds is kept, with the ratio to the first model. Run it on an idle
machine: the record says how busy the machine was when it started. Writes F.json and F.md.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

import torch  # noqa: E402
from benchlib import machine, portable_path  # noqa: E402

from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.data.corpus import read_sentences  # noqa: E402


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("test", type=Path)
    parser.add_argument("models", nargs="+", help="NAME=MODEL")
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--out", type=Path, required=True)
    args = parser.parse_args()
    torch.set_num_threads(1)
    sentences = [list(s.tokens) for s in read_sentences(args.test)]
    tokens = sum(len(s) for s in sentences)
    taggers = {}
    for item in args.models:
        name, _, path = item.partition("=")
        taggers[name] = (Tagger.load(path), path)
    load = os.getloadavg()[0]
    speeds: dict[str, list[float]] = {name: [] for name in taggers}
    names = list(taggers)
    for round_ in range(args.rounds):
        for name in names[round_ % len(names) :] + names[: round_ % len(names)]:
            started = time.perf_counter()
            taggers[name][0].predict_scored_spans(sentences)
            speeds[name].append(tokens / (time.perf_counter() - started))
    first = statistics.median(speeds[names[0]])
    record = {
        "machine": machine(),
        "load_at_start": load,
        "test": portable_path(args.test),
        "tokens": tokens,
        "rounds": args.rounds,
        "models": {
            name: {
                "model": portable_path(taggers[name][1]),
                "tokens_per_second": round(statistics.median(speeds[name])),
                "ratio": round(statistics.median(speeds[name]) / first, 3),
                "rounds": [round(s) for s in speeds[name]],
            }
            for name in names
        },
    }
    lines = [
        "# Tagging speed side by side",
        "",
        f"Written by `scripts/bench_model_speed.py`: {tokens:,} tokens of "
        f"`{record['test']}` tagged with scores at one thread, {args.rounds} interleaved rounds, "
        f"median; load average {load:.2f} when it started.",
        "",
        "| model | tokens/s | ratio to the first |",
        "|---|---|---|",
    ]
    for name, entry in record["models"].items():
        lines.append(f"| {name} | {entry['tokens_per_second']:,} | {entry['ratio']:.2f} |")
    lines += ["", f"Machine: {json.dumps(record['machine'])}", ""]
    args.out.with_suffix(".json").write_text(json.dumps(record, indent=2) + "\n")
    args.out.with_suffix(".md").write_text("\n".join(lines))
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
