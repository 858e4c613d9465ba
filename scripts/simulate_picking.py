"""The annotation loop simulated on an annotated corpus: does annotating the sentences `pick`
ranks first pay more than annotating sentences at random?

    .venv/bin/python scripts/simulate_picking.py --quick      # the demo, tiny: shows it works
    .venv/bin/python scripts/simulate_picking.py --full       # CoNLL-2000, 3 seeds (many hours)

The training file's labels are hidden and it becomes the pool (in full mode its last 10% is kept
apart as the fixed dev set, as configs/conll2000.toml holds it out). Each seed draws a start set
of 10% of the pool at random; then for ROUNDS rounds a model is trained on what is annotated so
far and scored on the test file, and another 10% of the pool is "annotated" (its gold labels
revealed): the sentences the model is least sure of (`tagger.apply.uncertainty`, entropy, no
length normalisation, near-duplicates passed over as `pick` does), or a random draw. Both
strategies start from the same set, so their curves part only by what they choose.

Records per strategy and seed the span F1 on test at each round, and for each seed the smallest
share of the pool at which ranked picking reaches random picking's final F1 (the target: at most
70% of random's sentences, median of the seeds). Full mode writes benchmarks/picking.json and
benchmarks/picking.md; quick mode prints only, its figures meaning nothing beyond "it runs".
Runs live in runs/picking/MODE/ (git ignores runs/).
"""

from __future__ import annotations

import argparse
import json
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
    },
    "full": {
        "config": ROOT / "configs" / "conll2000.toml",
        "train": CORPORA / "conll2000" / "train.txt",
        "dev": None,  # the last 10% of train, as configs/conll2000.toml holds it out
        "test": CORPORA / "conll2000" / "test.txt",
        "pool_size": None,
        "dev_size": None,
        "seeds": [1, 2, 3],
        "rounds": ROUNDS,
        "set": ["train.max_minutes=45"],
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
                        "share": len(annotated) / len(pool),
                        "f1": scores["micro"]["f1"],
                        "seconds": round(time.monotonic() - began, 1),
                    }
                )
                print(
                    f"{strategy:>6} seed {seed} round {round_number}: "
                    f"{len(annotated):,} sentences, F1 {100 * scores['micro']['f1']:.2f}",
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
        "pool": len(pool),
        "dev": len(dev),
        "test": portable_path(settings["test"]),
        "curves": curves,
        "reach": reach(curves),
        "machine": machine(),
    }


def reach(curves: dict[str, dict[int, list[dict]]]) -> dict:
    """Per seed, the smallest share of random's final sentences with which ranked picking
    reaches random's final F1 (None: it never does), and their median."""
    per_seed = {}
    for seed, random_points in curves["random"].items():
        final = random_points[-1]
        reached = next(
            (p for p in curves["ranked"][seed] if p["f1"] >= final["f1"]),
            None,
        )
        per_seed[seed] = None if reached is None else reached["sentences"] / final["sentences"]
    values = [v for v in per_seed.values() if v is not None]
    median = statistics.median(values) if len(values) == len(per_seed) else None
    return {"per_seed": per_seed, "median": median, "target": TARGET}


def table(result: dict) -> str:
    lines = [
        f"Pool {result['pool']:,} sentences, dev {result['dev']:,}, test {result['test']}",
        "Span F1 % on test after each round (sentences annotated, random / ranked):",
        "",
    ]
    for strategy, by_seed in result["curves"].items():
        for seed, points in by_seed.items():
            cells = "   ".join(f"{p['sentences']:>6,}: {100 * p['f1']:6.2f}" for p in points)
            lines.append(f"  {strategy:<8} seed {seed}   {cells}")
    median = result["reach"]["median"]
    lines += [
        "",
        "ranked picking reaches random's final F1 with "
        + ("(not reached in every seed)" if median is None else f"{100 * median:.0f}%")
        + f" of random's sentences (median of seeds; target at most {100 * TARGET:.0f}%)",
    ]
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    which = parser.add_mutually_exclusive_group(required=True)
    which.add_argument("--quick", action="store_true", help="the demo, tiny (a few minutes)")
    which.add_argument("--full", action="store_true", help="CoNLL-2000, 3 seeds (many hours)")
    args = parser.parse_args()
    mode = "quick" if args.quick else "full"
    folder = ROOT / "runs" / "picking" / mode
    result = simulate(mode, folder)
    text = table(result)
    print(text)
    if mode == "full":
        (ROOT / "benchmarks" / "picking.json").write_text(json.dumps(result, indent=2) + "\n")
        (ROOT / "benchmarks" / "picking.md").write_text(
            "# Picking what to annotate next vs picking at random\n\n"
            "Written by `scripts/simulate_picking.py --full`.\n\n```text\n" + text + "\n```\n"
        )


if __name__ == "__main__":
    main()
