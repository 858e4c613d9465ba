"""Will more annotation pay: models trained on growing fractions of data.train, each scored on
the same sentences, and an inverse power law through their span F1
(`tagger.scoring.learning_curve`) saying what twice the annotation is expected to give.

Which sentences a fraction trains on: for each seed, one shuffle of data.train (by that seed);
a fraction takes the first round(fraction * sentences) of it, so within a seed every fraction
holds the smaller ones and the curve measures more data rather than other data. Each model is
trained with that seed (train.seed) in OUT/FOLDER (`POINT_FOLDER`), dev as data.dev says (held
out of the fraction's sentences when there is none), and scored on `score_on` (data.dev when not
given) as `evaluate` scores. Models may train in parallel processes (`jobs`), one thread each.

A fraction whose sentences hold no example of a type the whole file has is trained all the
same, and the run's warnings say so (that type's F1 is then 0 for it); a fraction with no span
at all is left out with a warning. OUT/learning-curve.json keeps every point, the fit and the
warnings.
"""

from __future__ import annotations

import json
import random
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, replace
from multiprocessing import get_context
from pathlib import Path
from typing import Any

from tagger.apply.evaluate import score_sentences
from tagger.apply.tagger import Tagger
from tagger.config import Config
from tagger.data.atomic import atomic_output
from tagger.data.corpus import Sentence
from tagger.data.guards import check_sentences
from tagger.data.schemes import Span, detect_scheme, tags_to_spans
from tagger.errors import ConfigError, DataError
from tagger.scoring.learning_curve import MIN_SIZES, expect_doubling
from tagger.training.data import column_format, read_sentences, read_training_files
from tagger.training.loop import train_on_sentences

FRACTIONS = (0.1, 0.2, 0.4, 0.7, 1.0)
SUMMARY_NAME = "learning-curve.json"
POINT_FOLDER = "{percent:g}pc-seed-{seed}"  # e.g. 40pc-seed-1

Progress = Callable[[dict[str, Any]], None]


@dataclass(frozen=True)
class Point:
    """One model to train: a fraction of train under one seed, and the sentences it holds."""

    fraction: float
    seed: int
    indices: tuple[int, ...]

    @property
    def folder(self) -> str:
        return POINT_FOLDER.format(percent=round(100 * self.fraction, 2), seed=self.seed)


def check_fractions(fractions: Sequence[float]) -> list[float]:
    """Sorted distinct fractions; ConfigError for one outside (0, 1] or for none."""
    if not fractions:
        raise ConfigError("give at least one share of the training sentences")
    for fraction in fractions:
        if not 0 < fraction <= 1:
            raise ConfigError(
                f"a share of the training sentences lies above 0 % and at most 100 %; "
                f"got {100 * fraction:g} %"
            )
    return sorted(set(fractions))


def plan_points(sentences: int, fractions: Sequence[float], seeds: Sequence[int]) -> list[Point]:
    """Every (fraction, seed) with its sentences: the first round(fraction * sentences) of the
    seed's shuffle, at least one."""
    points = []
    for seed in seeds:
        order = list(range(sentences))
        random.Random(seed).shuffle(order)
        for fraction in fractions:
            size = max(1, round(fraction * sentences))
            points.append(Point(fraction, seed, tuple(sorted(order[:size]))))
    return points


def missing_types(all_types: set[str], spans: Sequence[Sequence[Span]]) -> list[str]:
    """The types of `all_types` that no span of `spans` has, sorted."""
    present = {span[0] for sentence in spans for span in sentence}
    return sorted(all_types - present)


def _train_and_score(
    point: Point,
    train: Sequence[Sentence],
    dev: Sequence[Sentence] | None,
    scored: Sequence[Sentence],
    gold: Sequence[Sequence[Span]],
    config: Config,
    out: Path,
    overwrite: bool,
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Train one point's model and score it; the point's record."""
    point_config = replace(config, train=replace(config.train, seed=point.seed))
    result = train_on_sentences(
        [train[i] for i in point.indices],
        dev,
        point_config,
        out / point.folder,
        progress=progress,
        overwrite=overwrite,
    )
    if result.diverged or not result.model_path.exists():
        raise DataError(
            f"the model of {point.fraction:.0%} under seed {point.seed} made no model "
            f"({result.stop_reason})",
            str(out / point.folder),
        )
    scores = score_sentences(Tagger.load(result.model_path), scored, [list(g) for g in gold])
    return {
        "fraction": point.fraction,
        "seed": point.seed,
        "sentences": len(point.indices),
        "best_epoch": result.best_epoch,
        "run_folder": str(result.run_dir),
        "f1": scores["micro"]["f1"],
        "scores": scores,
    }


def _in_worker(arguments: tuple) -> dict[str, Any]:
    return _train_and_score(*arguments)


def learning_curve(
    config: Config,
    out: str | Path,
    fractions: Sequence[float] = FRACTIONS,
    seeds: int = 1,
    jobs: int = 1,
    score_on: str | Path | None = None,
    progress: Callable[[Point], Progress | None] | None = None,
    done: Callable[[dict[str, Any]], None] | None = None,
    overwrite: bool = False,
) -> dict[str, Any]:
    """Train and score a model per fraction and seed, fit the curve (see the module docstring).

    Seeds are train.seed, train.seed + 1, ... (`seeds` of them). ``progress(point)`` gives a
    training progress callback (used when ``jobs`` is 1); ``done(record)`` hears of each point
    scored. Raises ConfigError when there is nothing to score on, DataError for unusable files,
    before any training."""
    fractions = check_fractions(fractions)
    if seeds < 1 or jobs < 1:
        raise ConfigError("seeds and jobs must be at least 1")
    train, dev = read_training_files(config)
    source = config.data.train
    limit = config.data.max_sentence_tokens
    check_sentences(train, source, limit)
    if score_on is not None:
        scored = read_sentences(score_on, column_format(config))
        if not scored:
            raise DataError("the file to score on holds no sentences", str(score_on))
        scored_name = str(score_on)
    elif dev is not None:
        scored, scored_name = dev, config.data.dev
    else:
        raise ConfigError("name the sentences to score each model on: --score-on FILE or data.dev")
    check_sentences(scored, scored_name, limit)
    scheme = detect_scheme([s.labels for s in train] + [s.labels for s in scored]).candidates[0]
    train_spans = [tags_to_spans(s.labels, scheme) for s in train]
    gold = [tags_to_spans(s.labels, scheme) for s in scored]
    all_types = {span[0] for sentence in train_spans for span in sentence}
    out = Path(out)
    warnings: list[str] = []
    points: list[Point] = []
    first_seed = config.train.seed
    for point in plan_points(len(train), fractions, range(first_seed, first_seed + seeds)):
        lacking = missing_types(all_types, [train_spans[i] for i in point.indices])
        where = f"{point.fraction:.0%} ({len(point.indices):,} sentences, seed {point.seed})"
        if lacking == sorted(all_types):
            warnings.append(f"{where} holds no span at all: left out")
            continue
        if lacking:
            warnings.append(
                f"{where} holds no example of {', '.join(lacking)}: its F1 on "
                f"{'that type' if len(lacking) == 1 else 'those types'} is 0"
            )
        points.append(point)

    records: list[dict[str, Any]] = []
    if jobs == 1:
        for point in points:
            record = _train_and_score(
                point, train, dev, scored, gold, config, out, overwrite,
                None if progress is None else progress(point),
            )  # fmt: skip
            records.append(record)
            if done is not None:
                done(record)
    else:
        # One thread per process, so that `jobs` processes share the cores rather than fight.
        single = replace(config, train=replace(config.train, threads=1))
        work = [(p, train, dev, scored, gold, single, out, overwrite) for p in points]
        with ProcessPoolExecutor(max_workers=jobs, mp_context=get_context("spawn")) as pool:
            for record in pool.map(_in_worker, work):
                records.append(record)
                if done is not None:
                    done(record)

    summary = {
        "training_file": source,
        "scored_file": scored_name,
        "training_sentences": len(train),
        "fractions": fractions,
        "seeds": seeds,
        "points": records,
        "fit": None,
        "doubling": None,
        "answer": "",
        "warnings": warnings,
    }
    sizes = [r["sentences"] for r in records]
    if len(set(sizes)) >= MIN_SIZES:
        curve, doubling = expect_doubling(sizes, [r["f1"] for r in records])
        summary["fit"] = {"a": curve.a, "b": curve.b, "c": curve.c, "sse": curve.sse}
        summary["doubling"] = {
            "sentences": doubling.sentences,
            "now": doubling.now,
            "doubled": doubling.doubled,
            "gain": doubling.gain,
            "low": doubling.low,
            "high": doubling.high,
            "level": doubling.level,
            "resamples": doubling.resamples,
        }
        summary["answer"] = doubling.sentence()
        if curve.a > 1:  # F1 cannot pass 1: the points lie where the curve still bends upward
            warnings.append(
                f"the curve's ceiling is {100 * curve.a:.0f} %, above what F1 can reach: the "
                "models are still far from where more data stops helping, or too few epochs "
                "were trained; read the expected gain as rough"
            )
    else:
        summary["answer"] = (
            f"No curve: it needs models trained on at least {MIN_SIZES} different numbers of "
            f"sentences, and these were {len(set(sizes))}; give more fractions."
        )
    out.mkdir(parents=True, exist_ok=True)
    with atomic_output(out / SUMMARY_NAME) as handle:
        json.dump(summary, handle, indent=2)
    return summary
