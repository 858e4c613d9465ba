"""The choices of `pick` that the command line offers: the uncertainty measure and how sentence
length enters it (`tagger.apply.uncertainty` defines both). Kept apart from the torch work, so
that the command line can list them without loading torch."""

from __future__ import annotations

from enum import StrEnum


class Measure(StrEnum):
    """What makes a sentence uncertain (see `tagger.apply.uncertainty`)."""

    LEAST_CONFIDENCE = "least-confidence"
    ENTROPY = "entropy"


class LengthNorm(StrEnum):
    """How a sentence's length enters its uncertainty (see `tagger.apply.uncertainty`)."""

    NONE = "none"
    PER_TOKEN = "per-token"
    SQRT = "sqrt"
