"""k-fold cross-validation of a config on its training file: how good the model is, and how much
that depends on which sentences it happened to be tested on, when the corpus is too small for a
test set of its own.

The sentences of data.train are cut into folds (`tagger.training.folds`); for each fold a model
is trained on the other folds (`train_on_sentences`, in the run folder OUT/fold-N, dev held out of
its training part as data.dev_fraction says, or data.dev when the config names one) and scored on
the held-out fold as `evaluate` scores. `tagger.scoring.folds` turns the folds' scores into mean
and standard deviation per type. OUT/cross-validation.json keeps every fold's scores and the
summary.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from tagger.apply.evaluate import score_sentences
from tagger.apply.tagger import Tagger
from tagger.config import Config
from tagger.data.atomic import atomic_output
from tagger.data.guards import check_sentences
from tagger.data.schemes import detect_scheme, tags_to_spans
from tagger.errors import DataError
from tagger.scoring.folds import summarise_folds
from tagger.training.data import read_training_files
from tagger.training.folds import Folds, split_folds
from tagger.training.loop import train_on_sentences

SUMMARY_NAME = "cross-validation.json"
FOLD_FOLDER = "fold-{}"  # the run folder of each fold, numbered from 1

Progress = Callable[[dict[str, Any]], None]


@dataclass
class CrossValidation:
    """The folds' scores and their summary (`tagger.scoring.folds.summarise_folds`)."""

    source: str  # the training file
    folds: Folds
    sentences: int
    per_fold: list[dict[str, Any]]  # per fold: sizes, best epoch, run folder, scores
    summary: dict[str, Any]
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {
            "training_file": self.source,
            "folds": self.folds.k,
            "sentences": self.sentences,
            "documents": self.folds.documents,
            "documents_kept_whole": self.folds.by_documents,
            "per_fold": self.per_fold,
            "summary": self.summary,
            "notes": self.notes,
        }


def cross_validate(
    config: Config,
    out: str | Path,
    k: int,
    progress: Callable[[int], Progress] | None = None,
    overwrite: bool = False,
) -> CrossValidation:
    """Train and score one model per fold (see the module docstring).

    ``progress(fold)`` gives the progress callback of fold ``fold`` (1-based). Raises DataError
    for a training file that cannot be cut into ``k`` folds, before any training."""
    train, dev = read_training_files(config)
    source = config.data.train
    check_sentences(train, source, config.data.max_sentence_tokens)
    folds = split_folds(train, k, config.train.seed, source)
    scheme = detect_scheme(s.labels for s in train).candidates[0]
    gold = [tags_to_spans(s.labels, scheme) for s in train]
    out = Path(out)
    per_fold: list[dict[str, Any]] = []
    notes: list[str] = []
    for fold in range(k):
        trained_on, held = folds.parts(fold)
        result = train_on_sentences(
            [train[i] for i in trained_on],
            dev,
            config,
            out / FOLD_FOLDER.format(fold + 1),
            progress=None if progress is None else progress(fold + 1),
            overwrite=overwrite,
        )
        if result.diverged or not result.model_path.exists():
            raise DataError(f"fold {fold + 1} of {k} made no model ({result.stop_reason})", source)
        tagger = Tagger.load(result.model_path)
        scores = score_sentences(tagger, [train[i] for i in held], [gold[i] for i in held])
        per_fold.append(
            {
                "fold": fold + 1,
                "trained_on": len(trained_on),
                "held_out": len(held),
                "best_epoch": result.best_epoch,
                "run_folder": str(result.run_dir),
                "scores": scores,
            }
        )
        notes.extend(n for n in result.notes if n not in notes)
    summary = summarise_folds([f["scores"] for f in per_fold])
    done = CrossValidation(source, folds, len(train), per_fold, summary, notes)
    with atomic_output(out / SUMMARY_NAME) as handle:
        json.dump(done.to_dict(), handle, indent=2)
    return done
