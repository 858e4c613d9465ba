"""The progress events a training run reports, as the plain dicts the command line reads.

note   {"event": "note", "message"}
batch  {"event": "batch", "epoch", "epochs", "batch", "batches", "loss", "tokens_per_second",
        "epoch_seconds_left", "run_seconds_left", "best_dev_f1"}
epoch  {"event": "epoch", **the epoch's history row, "best_dev_f1", "best_epoch"}
"""

from __future__ import annotations

from typing import Any


def note(message: str) -> dict[str, Any]:
    return {"event": "note", "message": message}


def batch(
    epoch: int,
    epochs: int,
    number: int,
    batches: int,
    loss_per_token: float,
    tokens_per_second: float,
    seconds_left: tuple[float, float],
    best_dev_f1: float,
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
    }


def epoch(row: dict[str, Any], best_dev_f1: float, best_epoch: int) -> dict[str, Any]:
    return {"event": "epoch", **row, "best_dev_f1": best_dev_f1, "best_epoch": best_epoch}
