"""Does the learning curve predict full-train F1? Models trained on 10, 20 and 40% of a training
file, an inverse power law F1(n) = a - b n^-c fitted to them alone, and its F1 at the whole file
set against models trained on all of it.

    .venv/bin/python scripts/bench_learning_curve.py                     # the demo, then CoNLL-2000
    .venv/bin/python scripts/bench_learning_curve.py --corpus conll2000  # one of them (resumes a record)
    .venv/bin/python scripts/bench_learning_curve.py --quick             # tiny: prints only

Each corpus runs `learning-curve`'s own library (`tagger.training.learning_curve.learning_curve`)
once with the shares 10, 20, 40 and 100% and 3 seeds (train.seed 1, 2, 3: each seed shuffles train
once and a larger share holds the smaller ones), one model at a time on one thread, every model
scored on the test file. The curve is then fitted by `tagger.scoring.learning_curve.expect_at` to
the points of at most 40% only (9 points: 3 shares x 3 seeds), and its F1 at the whole file's
size, with the 95% interval of its bootstrap refits over those points, is set against the median
test F1 of the 3 models trained on 100%. The target (issue 12): within 1 point of F1.

- demo: data/demo/train.txt, dev data/demo/dev.txt, test data/demo/test.txt, configs/default.toml
  as it stands (at most 30 epochs, patience 6).
- conll2000: ../shared/corpora/conll2000/train.txt, test.txt, configs/conll2000.toml with
  train.epochs=15 (its own 40 would take three hours here); no dev file, so each share holds out
  its own last tenth as dev, as that config does. A point's sentence count is the share's before
  that tenth is held out, the same for every share, so the curve's n is comparable throughout.

Records go to benchmarks/learning_curve.json (one entry a corpus, merged: running one corpus keeps
the other's) and benchmarks/learning_curve.md, rendered from the JSON; quick mode (two epochs, a
tiny network, one seed) prints only. Runs live in runs/learning-curve-bench/CORPUS/ (git ignores
runs/).
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, portable_path  # noqa: E402

from tagger.config import apply_overrides, load_config  # noqa: E402
from tagger.data.atomic import atomic_output  # noqa: E402
from tagger.scoring.learning_curve import expect_at  # noqa: E402
from tagger.training.learning_curve import learning_curve  # noqa: E402

CORPORA = ROOT.parent / "shared" / "corpora"
SHARES = (0.1, 0.2, 0.4, 1.0)
FIT_UP_TO = 0.4  # the curve sees the shares up to this one, never the whole file
SEEDS = 3
TOLERANCE = 0.01  # the target: the prediction within 1 point of F1 of the measured median
RECORD = ROOT / "benchmarks" / "learning_curve"
FINISH = ".venv/bin/python scripts/bench_learning_curve.py --corpus {name}"

CORPUS_SETTINGS: dict[str, dict[str, Any]] = {
    "demo": {
        "what": "the bundled demo corpus (invented wind-farm service reports)",
        "config": ROOT / "configs" / "default.toml",
        "train": ROOT / "data" / "demo" / "train.txt",
        "dev": ROOT / "data" / "demo" / "dev.txt",
        "test": ROOT / "data" / "demo" / "test.txt",
        "set": [],
    },
    "conll2000": {
        "what": "CoNLL-2000 chunking, words only (Tjong Kim Sang & Buchholz 2000)",
        "config": ROOT / "configs" / "conll2000.toml",
        "train": CORPORA / "conll2000" / "train.txt",
        "dev": None,  # each share holds out its own last tenth, as the config says
        "test": CORPORA / "conll2000" / "test.txt",
        "set": ["train.epochs=15"],
    },
}

QUICK_SET = ["train.epochs=2", "model.hidden_size=16", "model.layers=1", "model.word_dim=16"]


def run_corpus(name: str, quick: bool) -> dict[str, Any]:
    """Train the shares of one corpus, fit the small ones and compare; the corpus's entry."""
    settings = CORPUS_SETTINGS[name]
    chosen = [*settings["set"], *(QUICK_SET if quick else []), "train.threads=1"]
    files = [f"data.train={settings['train']}"]
    if settings["dev"] is not None:
        files.append(f"data.dev={settings['dev']}")
    config = apply_overrides(load_config(settings["config"]), [*chosen, *files])
    folder = ROOT / "runs" / "learning-curve-bench" / (f"quick-{name}" if quick else name)
    began, setting = time.monotonic(), machine()
    summary = learning_curve(
        config,
        folder,
        SHARES,
        seeds=1 if quick else SEEDS,
        jobs=1,
        score_on=settings["test"],
        done=lambda r: print(
            f"{name}: {r['fraction']:.0%} ({r['sentences']:,} sentences), seed {r['seed']}: "
            f"test F1 {100 * r['f1']:.2f}, best epoch {r['best_epoch']}",
            flush=True,
        ),
        overwrite=True,
    )
    minutes = (time.monotonic() - began) / 60
    points = [
        {key: r[key] for key in ("fraction", "seed", "sentences", "best_epoch", "f1")}
        for r in summary["points"]
    ]
    small = [p for p in points if p["fraction"] <= FIT_UP_TO]
    whole = [p for p in points if p["fraction"] == 1.0]
    full_size = whole[0]["sentences"] if whole else summary["training_sentences"]
    curve, expected = expect_at(
        [p["sentences"] for p in small], [p["f1"] for p in small], full_size
    )
    measured = [p["f1"] for p in whole]
    median = statistics.median(measured)
    return {
        "corpus": name,
        "what": settings["what"],
        "config": portable_path(settings["config"]),
        "settings": chosen,
        "train": portable_path(settings["train"]),
        "dev": None if settings["dev"] is None else portable_path(settings["dev"]),
        "test": portable_path(settings["test"]),
        "points": points,
        "warnings": summary["warnings"],
        "fit": {
            "shares": sorted({p["fraction"] for p in small}),
            "a": curve.a,
            "b": curve.b,
            "c": curve.c,
            "sse": curve.sse,
        },
        "predicted": {
            "sentences": full_size,
            "f1": expected.f1,
            "low": expected.low,
            "high": expected.high,
            "level": expected.level,
            "resamples": expected.resamples,
        },
        "measured": {"median": median, "min": min(measured), "max": max(measured)},
        "difference": expected.f1 - median,
        "within_target": abs(expected.f1 - median) <= TOLERANCE,
        "minutes": round(minutes, 1),
        "machine": setting,
    }


def merged(entry: dict[str, Any]) -> dict[str, Any]:
    """The record (corpus -> entry) with `entry` in place of its corpus's earlier one."""
    path = RECORD.with_suffix(".json")
    record = json.loads(path.read_text()) if path.exists() else {}
    record[entry["corpus"]] = entry
    return record


def pct(value: float) -> str:
    return f"{100 * value:.2f}"


def render_entry(entry: dict[str, Any]) -> list[str]:
    shares = sorted({p["fraction"] for p in entry["points"]})
    seeds = sorted({p["seed"] for p in entry["points"]})
    by = {(p["fraction"], p["seed"]): p for p in entry["points"]}
    predicted, measured, fit = entry["predicted"], entry["measured"], entry["fit"]
    half_width = (predicted["high"] - predicted["low"]) / 2
    shown = [s for s in entry["settings"] if not s.startswith("train.threads=")]
    lines = [
        f"## {entry['corpus']}: {entry['what']}",
        "",
        f"Train {entry['train']}"
        + (f", dev {entry['dev']}" if entry["dev"] else ", each share's last tenth held out as dev")
        + f", scored on {entry['test']}; `{entry['config']}`"
        + (f" with {', '.join(shown)}" if shown else " as it stands")
        + ", one thread.",
        "",
        "| share of train | sentences | "
        + " | ".join(f"test F1, seed {s}" for s in seeds)
        + " | median | fitted |",
        "|---|---|" + "---|" * len(seeds) + "---|---|",
    ]
    for share in shares:
        row = [by[(share, s)] for s in seeds if (share, s) in by]
        cells = " | ".join(pct(p["f1"]) for p in row)
        fitted = "yes" if share in fit["shares"] else "no: predicted"
        lines.append(
            f"| {share:.0%} | {row[0]['sentences']:,} | {cells} | "
            f"{pct(statistics.median(p['f1'] for p in row))} | {fitted} |"
        )
    verdict = "MET" if entry["within_target"] else "NOT MET"
    lines += [
        "",
        f"Curve through the {len(fit['shares'])} smaller shares "
        f"({sum(1 for p in entry['points'] if p['fraction'] in fit['shares'])} points): "
        f"F1(n) = {fit['a']:.4f} - {fit['b']:.4f} n^-{fit['c']:.3f}.",
        "",
        f"- predicted at {predicted['sentences']:,} sentences: **{pct(predicted['f1'])}** "
        f"({predicted['level']:.0%} interval of {predicted['resamples']:,} bootstrap refits: "
        f"{pct(predicted['low'])} to {pct(predicted['high'])})",
        f"- measured, median of {len(seeds)} seeds: **{pct(measured['median'])}** "
        f"({pct(measured['min'])}-{pct(measured['max'])})",
        f"- prediction minus measurement: {100 * entry['difference']:+.2f} points; target within "
        f"{100 * TOLERANCE:.0f} point: **{verdict}**",
    ]
    if half_width > TOLERANCE:
        lines.append(
            f"- the interval is wide: +-{100 * half_width:.1f} points, more than the target's "
            "tolerance, so landing within it or not says little about the method here"
        )
    else:
        lines.append(f"- the interval's half-width: {100 * half_width:.1f} points")
    for warning in entry["warnings"]:
        lines.append(f"- warning: {warning}")
    m = entry["machine"]
    lines += [
        "",
        f"_{m['date']}, commit {m['commit']}, {m['cores']} cores ({m['cpu']}), torch "
        f"{m['torch']}, 1 training thread, models one at a time; load average "
        f"{m['load_before']} when it began; `{m['command']}`; {entry['minutes']:.0f} min._",
        "",
    ]
    return lines


def render(record: dict[str, Any]) -> str:
    lines = [
        "# Predicting full-train F1 from a learning curve of the smaller shares",
        "",
        "Written by `scripts/bench_learning_curve.py` from benchmarks/learning_curve.json. "
        "Models trained on 10, 20 and 40% of a training file (3 seeds each) fix an inverse power "
        "law F1(n) = a - b n^-c; its F1 at the whole file is set against models trained on all of "
        "it (3 seeds). The interval is the spread of refits to the 9 points drawn with "
        "replacement: it counts the seeds' noise but not the risk of extrapolating from three "
        "sizes, and is narrower than the truth's real spread (on curves with known parameters and "
        "noise it held the true value in 17 of 20 seeded trials at its nominal 95%; "
        "tests/test_learning_curve_fit.py). Target (issue 12): the prediction lands within 1 point "
        "of the measured median, on the demo and on CoNLL-2000.",
        "",
    ]
    for name in CORPUS_SETTINGS:
        if name in record:
            lines += render_entry(record[name])
        else:
            lines += [f"## {name}", "", "Not run yet: `" + FINISH.format(name=name) + "`.", ""]
    return "\n".join(lines).rstrip() + "\n"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument(
        "--corpus",
        choices=list(CORPUS_SETTINGS),
        action="append",
        help="run this corpus only (repeatable; default: all, in order)",
    )
    parser.add_argument("--quick", action="store_true", help="two epochs, a tiny network, 1 seed")
    args = parser.parse_args()
    for name in args.corpus or list(CORPUS_SETTINGS):
        entry = run_corpus(name, args.quick)
        print("\n".join(render_entry(entry)), flush=True)
        if args.quick:
            continue  # its figures mean nothing beyond "it runs": never recorded
        record = merged(entry)
        with atomic_output(RECORD.with_suffix(".json")) as out:
            out.write(json.dumps(record, indent=2) + "\n")
        with atomic_output(RECORD.with_suffix(".md")) as out:
            out.write(render(record))


if __name__ == "__main__":
    main()
