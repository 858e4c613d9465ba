"""The progress events a training run reports, as the plain dicts the command line reads.

start    {"event": "start", **`tagger.training.overview.run_overview`}: before the first epoch
note     {"event": "note", "message"}
warning  {"event": "warning", "message"}: the data make the run pointless or its choice doubtful
batch    {"event": "batch", "epoch", "epochs", "batch", "batches", "loss", "tokens_per_second",
          "epoch_seconds_left", "run_seconds_left", "best_dev_f1", "may_stop_early"}
epoch    {"event": "epoch", **the epoch's history row, "best_dev_f1", "best_epoch"}

In a batch event "epochs" is the epoch limit; "may_stop_early" says whether patience or the
time budget may end the run before it, which makes the limit an upper bound and "run_seconds_left"
(already capped by the budget) an estimate of the most the run will take.
"""

from __future__ import annotations

from typing import Any


def start(overview: dict[str, Any]) -> dict[str, Any]:
    return {"event": "start", **overview}


def note(message: str) -> dict[str, Any]:
    return {"event": "note", "message": message}


def warning(message: str) -> dict[str, Any]:
    return {"event": "warning", "message": message}


def batch(
    epoch: int,
    epochs: int,
    number: int,
    batches: int,
    loss_per_token: float,
    tokens_per_second: float,
    seconds_left: tuple[float, float],
    best_dev_f1: float,
    may_stop_early: bool = False,
) -> dict[str, Any]:
    """`seconds_left` is (in this epoch, in the run)."""
    return {
        "event": "batch",
        "epoch": epoch,
        "epochs": epochs,
        "batch": number,
        "batches": batches,
        "loss": loss_per_token,
        "tokens_per_second": tokens_per_second,
        "epoch_seconds_left": seconds_left[0],
        "run_seconds_left": seconds_left[1],
        "best_dev_f1": best_dev_f1,
        "may_stop_early": may_stop_early,
    }


def epoch(row: dict[str, Any], best_dev_f1: float, best_epoch: int) -> dict[str, Any]:
    return {"event": "epoch", **row, "best_dev_f1": best_dev_f1, "best_epoch": best_epoch}
