"""Review benchmark: how honest the span scores and the review flag are, and what keeping rare
words out of the model file costs, on the demo corpus.

    .venv/bin/python scripts/bench_review.py            # three training runs, ~15 min on 2 cores
    .venv/bin/python scripts/bench_review.py --min-word-counts 1 2

Each run trains configs/default.toml on data/demo (train and dev files, seed 1, one thread, no time
budget: epochs and patience stop it, so the result does not depend on the machine's load) with
model.min_word_count = K, into runs/review/kK; a finished run of the same config is reused.

Measured on the K=1 model (the default):

* the temperature fitted on dev (`tagger.apply.calibration`), and on dev and test, at temperature
  1 and at the fitted one: the reliability of span scores (10 bins of equal width) and their
  expected calibration error;
* the review flag on test and dev at several thresholds: the share of sentences it flags, and the
  share of the sentences holding an error among them; for the rule that reads span scores only
  (before) and the rule that reads every token (after), each at both temperatures.

For every K: the words the model file stores, test span F1, and its difference from K=1 with a
paired bootstrap interval (the same 1,000 seeded draws of test sentences for both models).

Writes benchmarks/review.json and benchmarks/review.md (date, machine, commit, command).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import torch

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine  # noqa: E402

from tagger.apply.calibration import fit_temperature  # noqa: E402
from tagger.apply.review import REVIEW_BELOW, ScoredSentence, needs_review  # noqa: E402
from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.config import Config, apply_overrides, load_config  # noqa: E402
from tagger.data.corpus import Sentence, read_sentences  # noqa: E402
from tagger.data.schemes import Span, spans_lenient  # noqa: E402
from tagger.scoring.bootstrap import SEED, f1_interval, sentence_counts  # noqa: E402
from tagger.scoring.calibration import reliability, review_catch  # noqa: E402
from tagger.training.config_changes import same_config  # noqa: E402
from tagger.training.loop import train  # noqa: E402

RESULTS = ROOT / "benchmarks" / "review.json"
SUMMARY = ROOT / "benchmarks" / "review.md"
RUNS = ROOT / "runs" / "review"
DEFAULT_REVIEW_BELOW = REVIEW_BELOW  # the `tag` command's default
THRESHOLDS = tuple(sorted({0.5, 0.7, DEFAULT_REVIEW_BELOW, 0.9, 0.95, 0.99}))
RESAMPLES = 1000


def run_config(min_word_count: int, threads: int) -> Config:
    """The demo run of configs/default.toml with paths relative to the repository root."""
    return apply_overrides(
        load_config(ROOT / "configs" / "default.toml"),
        [
            'data.train="data/demo/train.txt"',
            'data.dev="data/demo/dev.txt"',
            f"train.threads={threads}",
            "train.max_minutes=0",
            f"model.min_word_count={min_word_count}",
        ],
    )


def trained(config: Config, folder: Path) -> dict[str, Any]:
    """Train into `folder`, or reuse the finished run of the same config there (a folder of
    the earlier file names is resumed, which renames its files, and then reused)."""
    record = folder / "outcome.json"
    if record.exists() and (folder / "resolved-config.toml").exists():
        saved = tomllib.loads((folder / "resolved-config.toml").read_text(encoding="utf-8"))
        if same_config(saved, config):
            metrics = json.loads(record.read_text(encoding="utf-8"))
            history = json.loads((folder / "epochs.json").read_text(encoding="utf-8"))
            print(f"[{folder.name}] reused", file=sys.stderr, flush=True)
            return {
                "epochs": len(history),
                "best_epoch": metrics["best_epoch"],
                "stop": metrics["stop_reason"],
                "dev_f1": metrics["dev"]["micro"]["f1"],
            }
    started = time.monotonic()
    result = train(config, folder, resume=True)
    return {
        "epochs": len(result.history),
        "best_epoch": result.best_epoch,
        "stop": result.stop_reason,
        "dev_f1": result.best_dev["micro"]["f1"],
        "train_seconds": round(time.monotonic() - started, 1),
    }


# --- per-sentence facts ------------------------------------------------------------------------


def judged(
    tagger: Tagger, sentences: list[Sentence], temperature: float
) -> tuple[list[list[Span]], list[ScoredSentence]]:
    """Gold spans and the tagger's scored sentences at `temperature`."""
    gold = [spans_lenient(s.labels) for s in sentences]
    scored = tagger.predict_sentences([s.tokens for s in sentences], temperature=temperature)
    return gold, scored


def calibration(gold: list[list[Span]], scored: list[ScoredSentence]) -> dict[str, Any]:
    scores, right = [], []
    for g, found in zip(gold, scored, strict=True):
        truth = set(g)
        for kind, start, end, score in found.spans:
            scores.append(score)
            right.append((kind, start, end) in truth)
    return reliability(scores, right)


def review_table(gold: list[list[Span]], scored: list[ScoredSentence]) -> list[dict[str, Any]]:
    """Per threshold, what the span-only rule (before) and the every-token rule (after) flag."""
    erroneous = [
        set(g) != {s[:3] for s in found.spans} for g, found in zip(gold, scored, strict=True)
    ]
    rows = []
    for below in THRESHOLDS:
        spans_only = [any(s[3] < below for s in found.spans) for found in scored]
        every_token = [needs_review(found.certainty, below) for found in scored]
        rows.append(
            {
                "review_below": below,
                "spans_only": review_catch(spans_only, erroneous),
                "every_token": review_catch(every_token, erroneous),
            }
        )
    return rows


def paired_difference(base: np.ndarray, other: np.ndarray) -> dict[str, float]:
    """F1(other) - F1(base) on the same seeded draws of sentences: the 95% percentile interval."""
    rng = np.random.default_rng(SEED)
    n = len(base)
    picks = rng.integers(0, n, size=(RESAMPLES, n))

    def f1(table: np.ndarray) -> np.ndarray:
        drawn = table[picks].sum(axis=1)
        pooled = drawn[:, 1] + drawn[:, 2]
        return np.where(pooled > 0, 2 * drawn[:, 0] / np.maximum(pooled, 1), 0.0)

    differences = f1(other) - f1(base)
    low, high = np.quantile(differences, [0.025, 0.975])
    return {"low": float(low), "high": float(high)}


# --- report --------------------------------------------------------------------------------------


def pct(x: float) -> str:
    return f"{100 * x:.2f}"


def caught(entry: dict[str, Any]) -> str:
    share = entry["flagged_with_error"] / entry["with_error"] if entry["with_error"] else 0.0
    return f"{entry['flagged_with_error']}/{entry['with_error']} ({100 * share:.1f}%)"


def flagged(entry: dict[str, Any]) -> str:
    share = entry["flagged"] / entry["sentences"] if entry["sentences"] else 0.0
    return f"{entry['flagged']}/{entry['sentences']} ({100 * share:.1f}%)"


def render(entry: dict[str, Any]) -> str:
    m = entry["machine"]
    fit = entry["temperature_fit"]
    lines = [
        "# Review benchmark: calibrated span scores, the review flag, and rare words kept out",
        "",
        f"- date: {m['date']}; commit {m['commit']}; command: `{m['command']}`",
        f"- machine: {m['cores']} cores, {m['cpu']}; torch {m['torch']}, python {m['python']}, "
        f"{entry['threads']} torch thread(s)",
        "- runs: configs/default.toml on data/demo train/dev, seed 1, no time budget (epochs and "
        "patience stop it), model.min_word_count = K; scores on data/demo/test.txt",
        "",
        "## Calibration of span scores (K = 1)",
        "",
        f"Temperature fitted on dev ({fit['tokens']:,} tokens): **{fit['temperature']:.2f}**; mean "
        f"negative log-probability of the gold labels {fit['loss_before']:.4f} at 1, "
        f"{fit['loss_after']:.4f} at {fit['temperature']:.2f}.",
        "",
        "| split | temperature | tagged spans | ECE (points) | Brier score |",
        "|---|---|---|---|---|",
    ]
    for split, by_t in entry["calibration"].items():
        for name, c in by_t.items():
            lines.append(
                f"| {split} | {name} | {c['spans']:,} | {pct(c['ece'])} | {c['brier']:.4f} |"
            )
    for split, by_t in entry["calibration"].items():
        lines += [
            "",
            f"Reliability on {split} (spans by score: mean score % / right %, spans):",
            "",
            "| score | " + " | ".join(f"temperature {name}" for name in by_t) + " |",
            "|---|" + "---|" * len(by_t),
        ]
        bins: dict[str, dict[str, str]] = {}
        for name, c in by_t.items():
            for b in c["bins"]:
                label = f"{b['low']:.1f}-{b['high']:.1f}"
                cell = f"{pct(b['mean_score'])} / {pct(b['right'])}, {b['spans']:,}"
                bins.setdefault(label, {})[name] = cell
        for label in sorted(bins):
            lines.append(
                f"| {label} | " + " | ".join(bins[label].get(name, "") for name in by_t) + " |"
            )
    fitted = f"{fit['temperature']:.2f}"
    lines += [
        "",
        f"## Review flag before and after, at the default threshold {DEFAULT_REVIEW_BELOW}",
        "",
        "| split | before: span scores only, temperature 1 | after: every token, temperature "
        f"{fitted} |",
        "|---|---|---|",
    ]
    for split, by_t in entry["review"].items():
        before = next(r for r in by_t["1"] if r["review_below"] == DEFAULT_REVIEW_BELOW)
        after = next(r for r in by_t[fitted] if r["review_below"] == DEFAULT_REVIEW_BELOW)
        lines.append(
            f"| {split} | {flagged(before['spans_only'])} flagged, {caught(before['spans_only'])} "
            f"of the sentences with an error | {flagged(after['every_token'])} flagged, "
            f"{caught(after['every_token'])} of the sentences with an error |"
        )
    for split, by_t in entry["review"].items():
        lines += [
            "",
            f"## Review flag on {split} (K = 1): sentences flagged, and sentences holding an error "
            "among them",
            "",
            "| threshold | temperature | span scores only: flagged | errors caught "
            "| every token: flagged | errors caught |",
            "|---|---|---|---|---|---|",
        ]
        for name, rows in by_t.items():
            for row in rows:
                before, after = row["spans_only"], row["every_token"]
                lines.append(
                    f"| {row['review_below']} | {name} | {flagged(before)} | {caught(before)} "
                    f"| {flagged(after)} | {caught(after)} |"
                )
    lines += [
        "",
        "## Keeping rare words out of the model file (model.min_word_count = K)",
        "",
        "Words seen fewer than K times in train are not stored; they are read as the unknown word "
        "(characters and context only). F1 difference: the same 1,000 seeded draws of the test "
        "sentences for both models, 95% percentile interval.",
        "",
        "| K | words stored | epochs (best) | dev F1 | test F1 (95% interval) | test F1 - K=1 "
        "(95% interval) |",
        "|---|---|---|---|---|---|",
    ]
    for k, run in entry["min_word_count"].items():
        interval = run["test_f1_interval"]
        diff = run.get("difference")
        diff_text = (
            f"{100 * run['test_f1_difference']:+.2f} ({100 * diff['low']:+.2f} to "
            f"{100 * diff['high']:+.2f})"
            if diff
            else "-"
        )
        lines.append(
            f"| {k} | {run['words']:,} | {run['epochs']} ({run['best_epoch']}) | "
            f"{pct(run['dev_f1'])} | {pct(run['test_f1'])} ({pct(interval['low'])}-"
            f"{pct(interval['high'])}) | {diff_text} |"
        )
    return "\n".join(lines) + "\n"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--min-word-counts", type=int, nargs="+", default=[1, 2, 3])
    parser.add_argument("--threads", type=int, default=1)
    args = parser.parse_args()
    if 1 not in args.min_word_counts:
        parser.error(
            "--min-word-counts must include 1, the default the others are measured against"
        )
    os.chdir(ROOT)  # the configs name the demo files relative to the repository root
    torch.set_num_threads(args.threads)
    dev = read_sentences(ROOT / "data" / "demo" / "dev.txt")
    test = read_sentences(ROOT / "data" / "demo" / "test.txt")
    entry: dict[str, Any] = {
        "machine": machine(),
        "threads": args.threads,
        "min_word_count": {},
    }
    base_counts = None
    for k in sorted(args.min_word_counts):
        run = trained(run_config(k, args.threads), RUNS / f"k{k}")
        tagger = Tagger.load(RUNS / f"k{k}" / "model.tagger")
        gold, scored = judged(tagger, test, 1.0)
        counts = sentence_counts(gold, [[s[:3] for s in found.spans] for found in scored])
        totals = counts.sum(axis=0)
        run.update(
            words=len(tagger.vocabs.words) - 2,  # padding and the unknown word are not words
            test_f1=float(2 * totals[0] / max(totals[1] + totals[2], 1)),
            test_f1_interval=f1_interval(counts, RESAMPLES),
        )
        if k == 1:
            base_counts, base_f1 = counts, run["test_f1"]
            fit = fit_temperature(
                tagger, [s.tokens for s in dev], [spans_lenient(s.labels) for s in dev]
            )
            assert fit is not None
            entry["temperature_fit"] = fit.to_dict()
            temperatures = {"1": 1.0, f"{fit.temperature:.2f}": fit.temperature}
            entry["calibration"] = {"dev": {}, "test": {}}
            entry["review"] = {"test": {}, "dev": {}}
            for split, sentences in (("dev", dev), ("test", test)):
                for name, temperature in temperatures.items():
                    g, s = judged(tagger, sentences, temperature)
                    entry["calibration"][split][name] = calibration(g, s)
                    entry["review"][split][name] = review_table(g, s)
        else:
            assert base_counts is not None
            run["test_f1_difference"] = run["test_f1"] - base_f1
            run["difference"] = paired_difference(base_counts, counts)
        entry["min_word_count"][str(k)] = run
        print(f"K={k}: {json.dumps(run)}", file=sys.stderr, flush=True)
    RESULTS.parent.mkdir(exist_ok=True)
    RESULTS.write_text(json.dumps(entry, indent=2) + "\n", encoding="utf-8")
    SUMMARY.write_text(render(entry), encoding="utf-8")
    print(render(entry))
    return 0


if __name__ == "__main__":
    sys.exit(main())
