"""Whether scores mean what they say: span scores against how often those spans are right, and
how much of the error the review flag catches.

* Reliability: the predicted spans are put in bins by score (equal widths over [0, 1], the last
  bin closed); per bin, the mean score beside the share of exactly right spans. The expected
  calibration error (ECE) is the mean gap between the two, each bin weighted by its share of the
  spans (common practice: ten bins of equal width). A well calibrated model has scores of 0.9
  right about nine times in ten and an ECE near 0. The Brier score, the mean squared gap between
  each span's score and 1 (right) or 0 (wrong), needs no bins.
* Review: of the sentences holding an error (a gold span not found exactly, or a tagged span not
  in gold), what share the review flag raises, and what share of all sentences it raises (the
  work it asks of a person).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

BINS = 10


def reliability(scores: Sequence[float], right: Sequence[bool], bins: int = BINS) -> dict[str, Any]:
    """{"spans", "bins": [{"low", "high", "spans", "mean_score", "right"}, ...], "ece", "brier"}:
    the non-empty bins in score order ("right" is the share of exactly right spans)."""
    if len(scores) != len(right):
        raise ValueError(f"{len(scores)} scores but {len(right)} right/wrong marks")
    if bins < 1:
        raise ValueError(f"bins must be at least 1; got {bins!r}")
    totals = [[0, 0.0, 0] for _ in range(bins)]  # spans, summed score, right spans
    squared = 0.0
    for score, ok in zip(scores, right, strict=True):
        if not 0.0 <= score <= 1.0:
            raise ValueError(f"a score of {score!r} lies outside [0, 1]")
        squared += (score - bool(ok)) ** 2
        cell = totals[min(int(score * bins), bins - 1)]
        cell[0] += 1
        cell[1] += score
        cell[2] += bool(ok)
    n = len(scores)
    rows = []
    ece = 0.0
    for k, (count, summed, ok_count) in enumerate(totals):
        if count == 0:
            continue
        mean_score, share_right = summed / count, ok_count / count
        ece += count / n * abs(mean_score - share_right)
        rows.append(
            {
                "low": k / bins,
                "high": (k + 1) / bins,
                "spans": count,
                "mean_score": mean_score,
                "right": share_right,
            }
        )
    return {"spans": n, "bins": rows, "ece": ece, "brier": squared / n if n else 0.0}


def review_catch(flagged: Sequence[bool], erroneous: Sequence[bool]) -> dict[str, Any]:
    """What a review flag raises, from per-sentence marks: {"sentences", "flagged", "with_error",
    "flagged_with_error"}."""
    if len(flagged) != len(erroneous):
        raise ValueError(f"{len(flagged)} review marks but {len(erroneous)} error marks")
    return {
        "sentences": len(flagged),
        "flagged": sum(map(bool, flagged)),
        "with_error": sum(map(bool, erroneous)),
        "flagged_with_error": sum(bool(f and e) for f, e in zip(flagged, erroneous, strict=True)),
    }
