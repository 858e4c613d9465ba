"""Exported-model benchmark: tagging tokens/s of the torch backend, the onnx backend and the onnx
backend with int8 weights, side by side at 1 thread, with the span F1 of each on the demo test
split and how far the onnx backend's labels and confidences are from torch's.

    .venv/bin/python scripts/bench_onnx.py [MODEL] [--rounds 3] [--epochs 3]

MODEL defaults to runs/demo/model.tagger (made by `bash scripts/demo.sh`); when it is absent, a
model with configs/default.toml is trained on the demo data for `--epochs` epochs first. The
model is exported twice (float32 and int8 weights) into a temporary folder.

What is timed is `predict_sentences` on the test split's token lists, scores included (what
`tag` runs per chunk, without reading, tokenising and writing), in `--rounds` rounds in which
the three take turns, each keeping its median: a slow spell of a shared machine then does not
land on one of them alone. Results go to benchmarks/onnx.json and benchmarks/onnx.md.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_tagging import DEFAULT_MODEL, demo_data, ensure_model  # noqa: E402
from benchlib import machine, portable_command, portable_path  # noqa: E402

from tagger.apply.exported import ExportedTagger  # noqa: E402
from tagger.apply.exporting import export_model  # noqa: E402
from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.data.corpus import read_sentences  # noqa: E402
from tagger.scoring.metrics import count_tag_sequences, summarise  # noqa: E402

RESULTS_DIR = ROOT / "benchmarks"
TARGETS = {"onnx_times_torch": 1.3, "int8_times_torch": 1.8, "int8_f1_points": 0.3}


def span_f1(tagger: Tagger, tokens: list[list[str]], gold: list[list[str]]) -> float:
    predicted = tagger.predict_labels(tokens)
    return summarise(count_tag_sequences(gold, predicted))["micro"]["f1"]


def agreement(expected: Tagger, other: Tagger, tokens: list[list[str]]) -> dict:
    """Sentences whose spans differ, and the largest confidence difference where they agree."""
    a = expected.predict_sentences(tokens)
    b = other.predict_sentences(tokens)
    differ = 0
    largest = 0.0
    for x, y in zip(a, b, strict=True):
        if [s[:3] for s in x.spans] != [s[:3] for s in y.spans]:
            differ += 1
            continue
        for p, q in zip(x.spans, y.spans, strict=True):
            largest = max(largest, abs(p[3] - q[3]))
        largest = max(largest, abs(x.certainty - y.certainty))
    return {"sentences_with_other_spans": differ, "largest_confidence_difference": largest}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("model", nargs="?", type=Path, default=DEFAULT_MODEL)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--epochs", type=int, default=3, help="when a model must be trained")
    args = parser.parse_args()
    data = demo_data(None)
    model = ensure_model(args.model, data, args.epochs)
    sentences = read_sentences(data / "test.txt")
    tokens = [s.tokens for s in sentences]
    gold = [s.labels for s in sentences]
    total = sum(len(t) for t in tokens)
    with tempfile.TemporaryDirectory() as folder:
        exports = {
            "onnx": Path(folder, "float32.tagexport"),
            "onnx-int8": Path(folder, "int8.tagexport"),
        }
        sizes = {
            name: export_model(model, path, int8=name.endswith("int8"))
            for name, path in exports.items()
        }
        taggers: dict[str, Tagger] = {"torch": Tagger.load(model, threads=1)}
        for name, path in exports.items():
            taggers[name] = ExportedTagger.load(path, threads=1)
        for tagger in taggers.values():  # warm up: first-call allocations, kernel choices
            tagger.predict_sentences(tokens[:200])
        seconds: dict[str, list[float]] = {name: [] for name in taggers}
        for _ in range(args.rounds):
            for name, tagger in taggers.items():
                started = time.perf_counter()
                tagger.predict_sentences(tokens)
                seconds[name].append(time.perf_counter() - started)
        f1 = {name: span_f1(tagger, tokens, gold) for name, tagger in taggers.items()}
        agree = {name: agreement(taggers["torch"], taggers[name], tokens) for name in exports}
    rate = {name: total / statistics.median(times) for name, times in seconds.items()}
    result = {
        "date": time.strftime("%Y-%m-%d %H:%M"),
        "machine": machine(),
        "command": portable_command(sys.argv),
        "model": portable_path(model),
        "test_sentences": len(tokens),
        "test_tokens": total,
        "rounds": args.rounds,
        "tokens_per_second": rate,
        "seconds": seconds,
        "times_torch": {name: rate[name] / rate["torch"] for name in rate},
        "span_f1": f1,
        "f1_change_points": {name: 100 * (f1[name] - f1["torch"]) for name in f1},
        "agreement_with_torch": agree,
        "graph_bytes": sizes,
        "targets": TARGETS,
    }
    RESULTS_DIR.mkdir(exist_ok=True)
    (RESULTS_DIR / "onnx.json").write_text(json.dumps(result, indent=2) + "\n")
    lines = [
        "# Exported model: torch vs onnx vs onnx with int8 weights",
        "",
        f"{result['date']}, `{result['command']}`, model `{result['model']}`, demo test split "
        f"({len(tokens):,} sentences, {total:,} tokens), 1 thread, median of {args.rounds} "
        "rounds taken in turns. The machine was shared with other jobs while this ran: the "
        "ratios are indicative, not clean.",
        "",
        "| backend | tokens/s | x torch | span F1 | F1 change (points) | sentences with other "
        "spans than torch | largest confidence difference |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for name in taggers:
        other = agree.get(
            name, {"sentences_with_other_spans": 0, "largest_confidence_difference": 0.0}
        )
        lines.append(
            f"| {name} | {rate[name]:,.0f} | {result['times_torch'][name]:.2f} | "
            f"{100 * f1[name]:.2f} | {result['f1_change_points'][name]:+.2f} | "
            f"{other['sentences_with_other_spans']} | {other['largest_confidence_difference']:.1e} |"
        )
    lines += [
        "",
        f"Targets (issue 14): onnx >= {TARGETS['onnx_times_torch']}x torch, int8 >= "
        f"{TARGETS['int8_times_torch']}x with span F1 within {TARGETS['int8_f1_points']} points.",
        "",
    ]
    (RESULTS_DIR / "onnx.md").write_text("\n".join(lines))
    print("\n".join(lines))


if __name__ == "__main__":
    main()
