"""Exported-model benchmark: tagging tokens/s of the torch backend, the onnx backend and the onnx
backend with int8 weights, side by side at 1 thread, with the span F1 of each on the demo test
split and how far the onnx backend's labels and confidences are from torch's.

    .venv/bin/python scripts/bench_onnx.py [MODEL] [--rounds 15] [--epochs 3]
    .venv/bin/python scripts/bench_onnx.py --corpus conll2000 [--epochs 2]
    .venv/bin/python scripts/bench_onnx.py runs/demo-minimal/model.tagger --label "demo, minimal cell"

With the demo corpus, MODEL defaults to runs/demo/model.tagger (made by `bash scripts/demo.sh`);
when it is absent, a model with configs/default.toml is trained on the demo data for `--epochs`
epochs first. With CoNLL-2000 (from ../shared/corpora), the model is configs/conll2000.toml
trained for `--epochs` epochs into runs/bench-onnx/conll2000 (a short schedule: its F1 is below
that of a full run; what matters here is the change int8 makes). The model is exported twice
(float32 and int8 weights) into a temporary folder.

What is timed is `predict_sentences` on the test split's token lists, scores included (what
`tag` runs per chunk, without reading, tokenising and writing), in `--rounds` rounds in which
the three take turns (the order rotating from round to round), each keeping its median and its
best: a slow spell of a shared machine then does not land on one of them alone, and the best
round is the one least disturbed by other work. Each round starts with the character features
that tagging remembers per token forgotten (`Tagger.token_rows`), so it computes them as the first
call on a text does; the word ids a tagger remembers are kept, as in the earlier records. Results go to benchmarks/onnx.json (by corpus)
and benchmarks/onnx.md.
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
CONLL2000 = ROOT.parent / "shared" / "corpora" / "conll2000"
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


def conll2000_model(epochs: int) -> Path:
    """configs/conll2000.toml trained on CoNLL-2000 for `epochs` epochs (once; reused after)."""
    path = ROOT / "runs" / "bench-onnx" / "conll2000" / "model.tagger"
    if path.exists():
        return path
    from tagger.config import apply_overrides, load_config
    from tagger.training.loop import train

    print(f"no model at {path}: training configs/conll2000.toml for {epochs} epochs", flush=True)
    config = apply_overrides(
        load_config(ROOT / "configs" / "conll2000.toml"),
        [
            f"data.train={json.dumps(str(CONLL2000 / 'train.txt'))}",
            f"train.epochs={epochs}",
            "train.threads=1",
        ],
    )
    return train(config, path.parent).model_path


def measure(model: Path, test: Path, rounds: int) -> dict:
    """Speed, span F1 and agreement with torch of the three backends on one test file."""
    sentences = read_sentences(test)
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
        names = list(taggers)
        for round_number in range(rounds):
            shift = round_number % len(names)
            for name in names[shift:] + names[:shift]:
                for store in taggers[name].token_rows.values():
                    store.clear()  # each round computes every token's character features
                started = time.perf_counter()
                taggers[name].predict_sentences(tokens)
                seconds[name].append(time.perf_counter() - started)
        f1 = {name: span_f1(tagger, tokens, gold) for name, tagger in taggers.items()}
        agree = {name: agreement(taggers["torch"], taggers[name], tokens) for name in exports}
    rate = {name: total / statistics.median(times) for name, times in seconds.items()}
    best = {name: total / min(times) for name, times in seconds.items()}
    return {
        "date": time.strftime("%Y-%m-%d %H:%M"),
        "machine": machine(),
        "command": portable_command(sys.argv),
        "model": portable_path(model),
        "test": portable_path(test),
        "test_sentences": len(tokens),
        "test_tokens": total,
        "rounds": rounds,
        "tokens_per_second": rate,
        "times_torch": {name: rate[name] / rate["torch"] for name in rate},
        "best_tokens_per_second": best,
        "best_times_torch": {name: best[name] / best["torch"] for name in best},
        "seconds": seconds,
        "span_f1": f1,
        "f1_change_points": {name: 100 * (f1[name] - f1["torch"]) for name in f1},
        "agreement_with_torch": agree,
        "graph_bytes": sizes,
        "targets": TARGETS,
    }


def _load(result: dict) -> str:
    load = result.get("machine", {}).get("load_before")
    return "" if load is None else f", load average {load} before the run"


def render(results: dict[str, dict]) -> str:
    lines = [
        "# Exported model: torch vs onnx vs onnx with int8 weights",
        "",
        "Tagging tokens/s of `predict_sentences` (scores included) at 1 thread, the three "
        "backends taking turns round by round (median and best round), with the span F1 of "
        "each on the test file and how far the onnx backends' spans and confidences are from "
        "torch's; each record gives the machine's load average before it ran (a record made "
        "above 1 on these 2 cores shared them with other work: read its ratios as indicative). "
        "Written by `scripts/bench_onnx.py`.",
    ]
    for corpus, result in results.items():
        lines += [
            "",
            f"## {corpus}",
            "",
            f"{result['date']}, `{result['command']}`, model `{result['model']}`, test "
            f"`{result['test']}` ({result['test_sentences']:,} sentences, "
            f"{result['test_tokens']:,} tokens), {result['rounds']} rounds" + _load(result) + ".",
            "",
            "| backend | tokens/s (median) | x torch | tokens/s (best) | x torch | span F1 | "
            "F1 change (points) | sentences with other spans than torch | largest "
            "confidence difference |",
            "|---|---:|---:|---:|---:|---:|---:|---:|---:|",
        ]
        for name, rate in result["tokens_per_second"].items():
            other = result["agreement_with_torch"].get(
                name, {"sentences_with_other_spans": 0, "largest_confidence_difference": 0.0}
            )
            lines.append(
                f"| {name} | {rate:,.0f} | {result['times_torch'][name]:.2f} | "
                f"{result['best_tokens_per_second'][name]:,.0f} | "
                f"{result['best_times_torch'][name]:.2f} | "
                f"{100 * result['span_f1'][name]:.2f} | "
                f"{result['f1_change_points'][name]:+.2f} | "
                f"{other['sentences_with_other_spans']} | "
                f"{other['largest_confidence_difference']:.1e} |"
            )
    lines += [
        "",
        f"Targets (issue 14): onnx >= {TARGETS['onnx_times_torch']}x torch, int8 >= "
        f"{TARGETS['int8_times_torch']}x with span F1 within {TARGETS['int8_f1_points']} points.",
        "",
    ]
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("model", nargs="?", type=Path, default=None)
    parser.add_argument("--corpus", choices=("demo", "conll2000"), default="demo")
    parser.add_argument("--rounds", type=int, default=15)
    parser.add_argument("--epochs", type=int, default=3, help="when a model must be trained")
    parser.add_argument(
        "--label", default=None, help="the record's name in onnx.json/md (default: the corpus)"
    )
    args = parser.parse_args()
    if args.corpus == "demo":
        data = demo_data(None)
        model = ensure_model(args.model or DEFAULT_MODEL, data, args.epochs)
        test = data / "test.txt"
    else:
        model = args.model or conll2000_model(args.epochs)
        test = CONLL2000 / "test.txt"
    saved = RESULTS_DIR / "onnx.json"
    results = json.loads(saved.read_text()) if saved.exists() else {}
    results[args.label or args.corpus] = measure(model, test, args.rounds)
    RESULTS_DIR.mkdir(exist_ok=True)
    saved.write_text(json.dumps(results, indent=2) + "\n")
    text = render(results)
    (RESULTS_DIR / "onnx.md").write_text(text)
    print(text)


if __name__ == "__main__":
    main()
