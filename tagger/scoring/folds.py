"""Span F1 across the folds of a cross-validation: per type and over all spans, the mean and the
standard deviation over folds.

Each fold's scores are `tagger.scoring.metrics.summarise` of its held-out part. A type with no
gold span in a fold's held-out part has no recall there, so its F1 in that fold is left out of its
mean rather than counted as 0 (which would mix "not tested" with "all wrong"), and a warning names
the folds; a type the model also predicted there still counts its false alarms in the micro F1.
The standard deviation is the sample one (divided by n - 1): folds are a sample of the ways the
corpus could have been cut; with a single value it is not defined (None).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any


def mean_and_sd(values: Sequence[float]) -> tuple[float | None, float | None]:
    """(mean, sample standard deviation) of the values; None where not defined."""
    if not values:
        return None, None
    mean = sum(values) / len(values)
    if len(values) < 2:
        return mean, None
    variance = sum((v - mean) ** 2 for v in values) / (len(values) - 1)
    return mean, math.sqrt(variance)


def _summary(values: list[float | None]) -> dict[str, Any]:
    present = [v for v in values if v is not None]
    mean, sd = mean_and_sd(present)
    return {
        "f1_per_fold": values,
        "mean": mean,
        "sd": sd,
        "min": min(present) if present else None,
        "max": max(present) if present else None,
    }


def summarise_folds(fold_scores: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """Per type and micro: F1 per fold, its mean, standard deviation, min and max, and the gold
    spans over all folds; ``warnings`` names types missing from some folds' held-out parts.

    ``fold_scores`` are `summarise` dicts, one per fold, in fold order."""
    types = sorted({t for scores in fold_scores for t in scores["per_type"]})
    per_type: dict[str, Any] = {}
    warnings: list[str] = []
    for type_ in types:
        values: list[float | None] = []
        missing: list[int] = []
        gold = 0
        for number, scores in enumerate(fold_scores, start=1):
            found = scores["per_type"].get(type_)
            if found is None or found["gold"] == 0:
                values.append(None)
                missing.append(number)
            else:
                values.append(found["f1"])
                gold += found["gold"]
        per_type[type_] = {**_summary(values), "gold": gold}
        if missing:
            folds = ", ".join(str(n) for n in missing)
            warnings.append(
                f"type {type_} has no gold span in the held-out part of fold"
                f"{'s' if len(missing) > 1 else ''} {folds}: its mean is over the other folds"
                if len(missing) < len(fold_scores)
                else f"type {type_} has no gold span in any held-out part (only predicted)"
            )
    micro = _summary([scores["micro"]["f1"] for scores in fold_scores])
    micro["gold"] = sum(scores["micro"]["gold"] for scores in fold_scores)
    return {"per_type": per_type, "micro": micro, "warnings": warnings}
