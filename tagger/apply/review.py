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

Nothing here needs torch; `tagger.apply.predict` computes the certainties.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

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
