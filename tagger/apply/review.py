"""The review flag: which sentences and documents a person should look at, and what it can catch.

A sentence's *certainty* is the lowest probability the model gives, at any of its tokens, to the
label it chose there: outside-of-span tokens count as much as the tokens of a span. A document
is flagged for review when one of its sentences is less certain than `review_below`.

What the flag catches: spans with a doubtful type or edge (a span's score is the lowest of the
same probabilities over its own tokens, so every span scoring below the threshold flags its
document), and also names the model nearly tagged but left out (the "O" chosen at such a token
gets a low probability). What it cannot catch: mistakes the model is sure of, such as a name of
a kind it never saw, read as plain text with high confidence. The share of erroneous sentences
it flags is measured in benchmarks/review.md.

The probabilities are the model's label marginals, sharpened or softened by the temperature the
training run fitted on dev (`tagger.apply.calibration`), so that a score of 0.9 is right about
nine times in ten.

Nothing here needs torch: both backends turn their label paths and probabilities into scored
sentences with `score_paths`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

import numpy as np

REVIEW_BELOW = 0.8  # the `tag` command's default threshold

ScoredSpan = tuple[str, int, int, float]  # (type, start, end, score), end exclusive


@dataclass(frozen=True)
class ScoredSentence:
    """The spans found in one sentence, and how sure the model is of the sentence as a whole.

    ``certainty`` is the lowest probability of the chosen label over all of the sentence's
    tokens (1.0 for an empty sentence, or when prediction ran without scores)."""

    spans: list[ScoredSpan]
    certainty: float = 1.0


def least_certain(sentences: Iterable[ScoredSentence]) -> float:
    """The certainty of a document: that of its least certain sentence (1.0 if it has none)."""
    return min((s.certainty for s in sentences), default=1.0)


def needs_review(certainty: float, review_below: float) -> bool:
    """Is a sentence or document of this certainty flagged at the threshold `review_below`?"""
    return certainty < review_below


def score_paths(
    paths: Sequence[Sequence[int]],
    probabilities: np.ndarray | None,
    real: np.ndarray,
    to_spans: Callable[[Sequence[int]], list[tuple[str, int, int]]],
) -> list[ScoredSentence]:
    """One batch's sentences: the spans ``to_spans`` reads from each label path, each scored by
    the lowest probability of its chosen labels, and each sentence's certainty. ``probabilities``
    (B, T, L) for ``real`` (B, T) positions; None scores every span 1.0 (prediction without
    scores)."""
    if probabilities is None:
        return [ScoredSentence([(t, s, e, 1.0) for t, s, e in to_spans(path)]) for path in paths]
    chosen = np.zeros(real.shape, dtype=np.int64)  # (B, T) chosen label ids
    for b, path in enumerate(paths):
        chosen[b, : len(path)] = path
    picked = np.take_along_axis(probabilities, chosen[:, :, None], axis=2)[:, :, 0]
    # exp() of a log-probability may overshoot 1 by a rounding error
    sure = np.minimum(picked, 1.0)  # (B, T)
    # Padding read as 1.0 leaves each sentence's minimum to its real tokens; taken here rather
    # than token by token in Python, where it was a visible share of tagging.
    certainty = np.where(real, sure, 1.0).min(axis=1).tolist()  # (B,)
    return [
        ScoredSentence([(t, s, e, min(p[s:e])) for t, s, e in to_spans(path)], least)
        for path, p, least in zip(paths, sure.tolist(), certainty, strict=True)
    ]
