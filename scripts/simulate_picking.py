"""The annotation loop simulated on an annotated corpus: does annotating the sentences `pick`
ranks first pay more than annotating sentences at random?

    .venv/bin/python scripts/simulate_picking.py --quick                  # the demo, tiny: it runs
    .venv/bin/python scripts/simulate_picking.py --full                   # CoNLL-2000, about an hour
    .venv/bin/python scripts/simulate_picking.py --full --corpus bc5cdr   # BC5CDR, sparse mentions

The training file's labels are hidden and it becomes the pool (CoNLL-2000 has no dev file: the
last 10% of its train is kept apart as the fixed dev set, as configs/conll2000.toml holds it out;
for BC5CDR the first 1,000 sentences of devel.tsv, since scoring all 4,581 every epoch of 30
models would cost more than the training). Each seed draws a start set of 10% of the pool at random; then for
ROUNDS rounds a model is trained on what is annotated so far and scored on the test file, and
another 10% of the pool is "annotated" (its gold labels revealed): the sentences the model is
least sure of (`tagger.apply.uncertainty`, entropy, no length normalisation, near-duplicates
passed over as `pick` does), or a random draw. Both strategies start from the same set, so their
curves part only by what they choose. Everything is seeded: the start set and the random draws
by the seed, each model by train.seed = the seed.

Full mode's model and schedule (FULL_SETTINGS, recorded with the results): the corpus config
with a smaller network (100 units a direction, 1 layer, 50-dimensional words, the character CNN
kept) trained for at most 12 epochs, stopping after 3 without a better dev F1, the epoch with the
best dev F1 kept. Why: the loop trains 30 models (3 seeds x 5 rounds x 2 strategies) on 10-50%
of the pool, and a fixed epoch bound (rather than a wall-clock one) makes the models the same on
a busy machine and an idle one. Sized from one timed round on CoNLL-2000 at one thread, on the
shared 2-core machine: 804 sentences, 12 epochs, 30 s (about 14k training tokens/s), scoring test
2 s, ranking the rest of the pool 6 s; the 5 rounds of one seed and strategy train on 15x that
round's sentences, so about 8 minutes, 50-60 for the whole run. The rounds' models are smaller
and shorter-trained than the corpus benchmark's (test F1 about 80 at 804 sentences, still rising
at epoch 12): the comparison is between the strategies under one budget, not a record F1.

Records per strategy and seed the span F1 on test at each round, and for each seed the smallest
share of random picking's final-round sentences at which ranked picking reaches random's final
F1 (looked up at the rounds measured; the target: at most 70% of random's sentences, median of
the seeds; a seed that never reaches it counts as above every share). Full mode writes
benchmarks/picking.json and benchmarks/picking.md (benchmarks/picking_bc5cdr.* for BC5CDR);
quick mode prints only, its figures meaning nothing beyond "it runs". Runs live in
runs/picking/MODE/ (git ignores runs/).
"""

from __future__ import annotations

import argparse
import json
import math
import random
import statistics
import sys
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, portable_path  # noqa: E402

from tagger.apply.evaluate import score_sentences  # noqa: E402
from tagger.apply.pick_options import LengthNorm, Measure  # noqa: E402
from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.apply.uncertainty import uncertainties  # noqa: E402
from tagger.config import apply_overrides, load_config  # noqa: E402
from tagger.data.corpus import Sentence, read_sentences  # noqa: E402
from tagger.data.schemes import detect_scheme, tags_to_spans  # noqa: E402
from tagger.text.near_duplicates import DistinctPicker  # noqa: E402
from tagger.training.loop import train_on_sentences  # noqa: E402

CORPORA = ROOT.parent / "shared" / "corpora"
STEP = 0.1  # share of the pool annotated at the start and added each round
ROUNDS = 5
TARGET = 0.7  # ranked picking should reach random's final F1 with this share of its sentences

# The full runs' model and schedule (see the module docstring for why).
FULL_SETTINGS = [
    "model.hidden_size=100",
    "model.layers=1",
    "model.word_dim=50",
    "train.epochs=12",
    "train.patience=3",
]
FULL_WHY = (
    "a smaller network (100 units a direction, 1 layer, 50-dimensional words, character CNN "
    "kept), at most 12 epochs with early stopping after 3 without a better dev F1: an epoch "
    "bound, so the models do not depend on the machine's load, sized from one timed round so "
    "that the 30 models train in about an hour at one thread on 2 shared cores"
)

MODES = {
    "quick": {
        "config": ROOT / "configs" / "default.toml",
        "train": ROOT / "data" / "demo" / "train.txt",
        "dev": ROOT / "data" / "demo" / "dev.txt",
        "test": ROOT / "data" / "demo" / "test.txt",
        "pool_size": 400,  # the first sentences of train only
        "dev_size": 100,
        "seeds": [1],
        "rounds": 3,
        "set": ["train.epochs=2", "model.hidden_size=16", "model.layers=1", "model.word_dim=16"],
        "record": None,
    },
    "conll2000": {
        "config": ROOT / "configs" / "conll2000.toml",
        "train": CORPORA / "conll2000" / "train.txt",
        "dev": None,  # the last 10% of train, as configs/conll2000.toml holds it out
        "test": CORPORA / "conll2000" / "test.txt",
        "pool_size": None,
        "dev_size": None,
        "seeds": [1, 2, 3],
        "rounds": ROUNDS,
        "set": FULL_SETTINGS,
        "record": "picking",
    },
    "bc5cdr": {
        "config": ROOT / "configs" / "bc5cdr.toml",
        "train": CORPORA / "bc5cdr" / "train.tsv",
        "dev": CORPORA / "bc5cdr" / "devel.tsv",
        "test": CORPORA / "bc5cdr" / "test.tsv",
        "pool_size": None,
        "dev_size": 1000,  # devel.tsv's first 1,000 of 4,581: it only picks the epoch to keep
        "seeds": [1, 2, 3],
        "rounds": ROUNDS,
        "set": FULL_SETTINGS,
        "record": "picking_bc5cdr",
    },
}


def ranked_choice(model: Path, pool: list[Sentence], remaining: list[int], size: int) -> list[int]:
    """The ``size`` remaining pool sentences the model is least sure of, near-duplicates passed
    over, as `tagger pick` chooses them."""
    tagger = Tagger.load(model)
    found = uncertainties(
        tagger, [pool[i].tokens for i in remaining], Measure.ENTROPY, LengthNorm.NONE, 64
    )
    order = sorted(range(len(remaining)), key=lambda j: (-(found[j].score if found[j] else 0.0), j))
    distinct = DistinctPicker()
    chosen: list[int] = []
    for j in order:
        if len(chosen) == size:
            break
        if distinct.offer(pool[remaining[j]].tokens):
            chosen.append(remaining[j])
    return chosen


def simulate(mode: str, folder: Path) -> dict:
    settings = MODES[mode]
    began_run = time.monotonic()
    config = load_config(settings["config"])
    config = apply_overrides(config, [*settings["set"], "train.threads=1"])
    train = read_sentences(settings["train"])
    if settings["dev"] is None:
        cut = len(train) - max(1, len(train) // 10)
        pool, dev = train[:cut], train[cut:]
    else:
        pool = train[: settings["pool_size"]]
        dev = read_sentences(settings["dev"])[: settings["dev_size"]]
    test = read_sentences(settings["test"])
    scheme = detect_scheme(s.labels for s in test).candidates[0]
    test_spans = [tags_to_spans(s.labels, scheme) for s in test]
    step = max(1, round(STEP * len(pool)))
    curves: dict[str, dict[int, list[dict]]] = {"ranked": {}, "random": {}}
    for seed in settings["seeds"]:
        seeded = replace(config, train=replace(config.train, seed=seed))
        start = sorted(random.Random(seed).sample(range(len(pool)), step))
        for strategy in curves:
            annotated = list(start)
            draw = random.Random(1000 + seed)
            points = []
            for round_number in range(1, settings["rounds"] + 1):
                run = folder / f"{strategy}-seed{seed}-round{round_number}"
                began = time.monotonic()
                result = train_on_sentences(
                    [pool[i] for i in annotated], dev, seeded, run, overwrite=True
                )
                scores = score_sentences(Tagger.load(result.model_path), test, test_spans)
                points.append(
                    {
                        "round": round_number,
                        "sentences": len(annotated),
                        "tokens": sum(len(pool[i].tokens) for i in annotated),
                        "share": len(annotated) / len(pool),
                        "f1": scores["micro"]["f1"],
                        "best_epoch": result.best_epoch,
                        "seconds": round(time.monotonic() - began, 1),
                    }
                )
                print(
                    f"{strategy:>6} seed {seed} round {round_number}: "
                    f"{len(annotated):,} sentences, F1 {100 * scores['micro']['f1']:.2f} "
                    f"({points[-1]['seconds']:.0f} s)",
                    flush=True,
                )
                if round_number == settings["rounds"]:
                    break
                chosen = set(annotated)
                remaining = [i for i in range(len(pool)) if i not in chosen]
                size = min(step, len(remaining))
                if strategy == "random":
                    annotated += draw.sample(remaining, size)
                else:
                    annotated += ranked_choice(result.model_path, pool, remaining, size)
            curves[strategy][seed] = points
    return {
        "mode": mode,
        "train": portable_path(settings["train"]),
        "dev_file": None if settings["dev"] is None else portable_path(settings["dev"]),
        "test": portable_path(settings["test"]),
        "config": portable_path(settings["config"]),
        "settings": [*settings["set"], "train.threads=1"],
        "why": FULL_WHY if settings["record"] else "smoke run: shows the loop runs",
        "pool": len(pool),
        "dev": len(dev),
        "step": step,
        "epochs": config.train.epochs,
        "curves": curves,
        "reach": reach(curves),
        "minutes": round((time.monotonic() - began_run) / 60, 1),
        "machine": machine(),
    }


def reach(curves: dict[str, dict[int, list[dict]]]) -> dict:
    """Per seed, the smallest share of random's final sentences with which ranked picking
    reaches random's final F1 (None: it never does), their median (a seed that never reaches it
    counts as above every share; None when the median falls on such a seed) and whether the
    median meets the target."""
    per_seed = {}
    for seed, random_points in curves["random"].items():
        final = random_points[-1]
        reached = next(
            (p for p in curves["ranked"][seed] if p["f1"] >= final["f1"]),
            None,
        )
        per_seed[seed] = None if reached is None else reached["sentences"] / final["sentences"]
    middle = statistics.median(math.inf if v is None else v for v in per_seed.values())
    median = None if math.isinf(middle) else middle
    return {
        "per_seed": per_seed,
        "median": median,
        "target": TARGET,
        "met": median is not None and median <= TARGET,
    }


def round_medians(points_by_seed: dict[int, list[dict]]) -> list[float]:
    """The median over seeds of the F1 at each round."""
    rounds = zip(*points_by_seed.values(), strict=True)
    return [statistics.median(p["f1"] for p in same_round) for same_round in rounds]


def table(result: dict) -> str:
    curves = result["curves"]
    seeds = list(curves["random"])
    sentences = [p["sentences"] for p in curves["random"][seeds[0]]]
    lines = [
        f"pool {result['pool']:,} sentences ({result['train']}), dev {result['dev']:,}, "
        f"test {result['test']}",
        f"start: {sentences[0]:,} sentences at random (the same for both ways of choosing), "
        f"then {result['step']:,} more a round",
        f"model: {result['config']} with {' '.join(result['settings'])}",
        "",
        "span F1 % on test after each round, by the sentences annotated so far",
        "",
        "  chosen by        seed " + "".join(f"{n:>9,}" for n in sentences),
    ]
    for strategy, by_seed in curves.items():
        for seed, points in by_seed.items():
            cells = "".join(f"{100 * p['f1']:9.2f}" for p in points)
            lines.append(f"  {strategy:<14}{seed:>7} {cells}")
        cells = "".join(f"{100 * f:9.2f}" for f in round_medians(by_seed))
        lines.append(f"  {strategy:<14} median {cells}")
    gaps = [
        r - q
        for r, q in zip(
            round_medians(curves["ranked"]), round_medians(curves["random"]), strict=True
        )
    ]
    lines += ["", "ranked minus random, median F1 by round (points):"]
    lines.append("  " + "  ".join(f"{100 * g:+.2f}" for g in gaps))
    lines += ["", "ranked tokens annotated / random tokens annotated, by round (median of seeds):"]
    ratios = []
    for same_round in zip(
        *(zip(curves["ranked"][s], curves["random"][s], strict=True) for s in seeds), strict=True
    ):
        ratios.append(statistics.median(r["tokens"] / q["tokens"] for r, q in same_round))
    lines.append("  " + "  ".join(f"{r:.2f}" for r in ratios))
    models = [p for by_seed in curves.values() for points in by_seed.values() for p in points]
    epochs = result.get("epochs")
    if epochs and all("best_epoch" in p for p in models):
        last = sum(p["best_epoch"] == epochs for p in models)
        lines.append("")
        lines.append(
            f"models whose best dev F1 came at the last epoch allowed ({epochs}): {last} of "
            f"{len(models)}" + (" (still improving when stopped)" if last else "")
        )
    per_seed = result["reach"]["per_seed"]
    shares = ", ".join(
        f"seed {seed}: " + ("not reached" if v is None else f"{100 * v:.0f}%")
        for seed, v in per_seed.items()
    )
    median = result["reach"]["median"]
    verdict = "MET" if result["reach"]["met"] else "NOT MET"
    lines += [
        "",
        f"share of random's {sentences[-1]:,} final-round sentences at which ranked picking first "
        f"reaches random's final-round F1 (rounds measured only): {shares}",
        "target: ranked picking reaches it with at most "
        f"{100 * TARGET:.0f}% of random's sentences, median of {len(seeds)} seeds: "
        + ("median not reached" if median is None else f"median {100 * median:.0f}%")
        + f", {verdict}",
        f"run time {result['minutes']:.0f} min, finished {result['machine']['date']} (commit "
        f"{result['machine']['commit']}, {result['machine']['cores']} cores, 1 training thread, "
        f"load average {result['machine']['load_before']} then)",
    ]
    return "\n".join(lines)


def write_record(result: dict, record: str) -> None:
    """benchmarks/RECORD.json and its page, benchmarks/RECORD.md."""
    (ROOT / "benchmarks" / f"{record}.json").write_text(json.dumps(result, indent=2) + "\n")
    (ROOT / "benchmarks" / f"{record}.md").write_text(
        "# What to annotate next: the sentences the model is least sure of, or a random draw\n\n"
        f"Written by `{result['machine']['command']}`. The annotation loop simulated on an "
        "annotated corpus whose labels are revealed only for the sentences chosen; settings: "
        f"{result['why']}.\n\n```text\n" + table(result) + "\n```\n"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    which = parser.add_mutually_exclusive_group(required=True)
    which.add_argument("--quick", action="store_true", help="the demo, tiny (a few minutes)")
    which.add_argument("--full", action="store_true", help="a public corpus, 3 seeds (an hour)")
    which.add_argument(
        "--rewrite", action="store_true", help="the --corpus record's page again from its JSON"
    )
    parser.add_argument(
        "--corpus",
        choices=["conll2000", "bc5cdr"],
        default="conll2000",
        help="the corpus of --full (default conll2000)",
    )
    args = parser.parse_args()
    mode = "quick" if args.quick else args.corpus
    record = MODES[mode]["record"]
    if args.rewrite:
        path = ROOT / "benchmarks" / f"{record}.json"
        write_record(json.loads(path.read_text()), record)
        return
    result = simulate(mode, ROOT / "runs" / "picking" / mode)
    print(table(result))
    if record:
        write_record(result, record)


if __name__ == "__main__":
    main()
