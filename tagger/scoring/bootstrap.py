"""How precise a span F1 is: a bootstrap interval over the sentences it was measured on.

On a small test set one figure hides how much it depends on which sentences happened to be
chosen ("96.00 over 26 spans"). The percentile bootstrap answers that: draw as many sentences as
there are, with replacement, `resamples` times (from a seeded generator, so the interval is the
same on every run); score each draw's pooled span counts; the interval holds the central `level`
share of those F1 values. Sentences, not spans, are what is drawn, because a sentence's errors
come together (one misread word can cost two spans).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from itertools import zip_longest
from typing import Any

import numpy as np

from tagger.data.schemes import Span
from tagger.errors import DataError

RESAMPLES = 1000
LEVEL = 0.95
SEED = 16014  # any fixed number: the interval must not change from one run to the next
_CELLS_PER_BLOCK = 1_000_000  # sentences drawn at once (memory: 24 bytes each)


def sentence_counts(
    gold_spans: Iterable[Iterable[Span]], pred_spans: Iterable[Iterable[Span]]
) -> np.ndarray:
    """(sentences, 3): each sentence's correct, predicted and gold span counts (as
    `tagger.scoring.metrics.count_sentence` counts them: a repeated span counts once)."""
    rows = []
    for gold, pred in zip_longest(gold_spans, pred_spans):
        if gold is None or pred is None:
            raise DataError("the gold and predicted span lists hold different numbers of sentences")
        g, p = set(gold), set(pred)
        rows.append((len(g & p), len(p), len(g)))
    return np.asarray(rows, dtype=np.int64).reshape(-1, 3)


def f1_interval(
    counts: np.ndarray | Sequence[tuple[int, int, int]],
    resamples: int = RESAMPLES,
    level: float = LEVEL,
    seed: int = SEED,
) -> dict[str, Any] | None:
    """The percentile bootstrap interval of micro span F1 over sentences, from per-sentence
    (correct, predicted, gold) counts; None when there is no sentence or no resample.

    Returns {"low", "high", "level", "resamples", "seed", "sentences"} (F1 as fractions)."""
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1; got {level!r}")
    table = np.asarray(counts, dtype=np.int64).reshape(-1, 3)
    n = len(table)
    if n == 0 or resamples < 1:
        return None
    rng = np.random.default_rng(seed)
    scores = np.empty(resamples)
    block = max(1, _CELLS_PER_BLOCK // n)
    for first in range(0, resamples, block):
        size = min(block, resamples - first)
        drawn = table[rng.integers(0, n, size=(size, n))].sum(axis=1)  # (size, 3)
        correct, predicted, gold = drawn[:, 0], drawn[:, 1], drawn[:, 2]
        pooled = predicted + gold
        # 2PR / (P + R) written with counts; a draw without spans scores 0, as in metrics
        scores[first : first + size] = np.where(
            pooled > 0, 2 * correct / np.maximum(pooled, 1), 0.0
        )
    tail = (1.0 - level) / 2
    low, high = np.quantile(scores, [tail, 1.0 - tail])
    return {
        "low": float(low),
        "high": float(high),
        "level": level,
        "resamples": resamples,
        "seed": seed,
        "sentences": n,
    }
