"""The run's wall clock: the train.max_minutes budget and the estimate of the time left.

The time used is carried in the checkpoint, so a run resumed with --resume goes on counting from
where its last finished epoch left it (time spent after that epoch, in the epoch that was
interrupted, is not known to the checkpoint and is not counted).
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from typing import Any


def now() -> float:
    """Seconds on a monotonic clock: every duration of a run is read from here."""
    return time.monotonic()


class RunClock:
    """Time used by a run, counting the time its checkpoint says was used before."""

    def __init__(self, max_minutes: float, used_before: float = 0.0) -> None:
        self.max_minutes = max_minutes
        self.budget = max_minutes * 60  # seconds; 0: no budget
        self.started = now() - used_before

    def used(self) -> float:
        return now() - self.started

    def spent(self) -> bool:
        """Is there a budget, and has it been used up?"""
        return bool(self.budget) and self.used() >= self.budget

    def capped(self, estimate: float) -> float:
        """An estimate of the seconds left, no more than what the budget leaves."""
        if not self.budget:
            return estimate
        return min(estimate, max(0.0, self.budget - self.used()))


def seconds_left(
    history: Sequence[dict[str, Any]],
    elapsed: float,
    batch: int,
    batches: int,
    epochs_after: int,
) -> tuple[float, float]:
    """(seconds left in this epoch, seconds left in the run) after `batch` of `batches` batches
    took `elapsed` seconds, with `epochs_after` epochs to come.

    Later epochs are assumed to take as long as the finished ones did (dev scoring included),
    or as this one will."""
    epoch_left = elapsed / batch * (batches - batch)
    per_epoch = (
        sum(row["epoch_seconds"] for row in history) / len(history)
        if history
        else elapsed / batch * batches
    )
    return epoch_left, epoch_left + epochs_after * per_epoch
