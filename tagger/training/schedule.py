"""The learning-rate schedule, one of torch's schedulers stepped once after every epoch.

    constant      no scheduler: the rate stays train.learning_rate
    exponential   ExponentialLR: the rate is multiplied by train.lr_decay after every epoch
    plateau       ReduceLROnPlateau on dev span F1: multiplied by train.lr_decay after every epoch
                  whose dev F1 is not above the best so far (patience 0, absolute threshold 0)

Its state travels in the checkpoint, so a resumed run goes on with the same rates.
"""

from __future__ import annotations

from typing import Any

import torch
from torch.optim.lr_scheduler import ExponentialLR, LRScheduler, ReduceLROnPlateau

from tagger.config import Config
from tagger.errors import ConfigError


def new_schedule(config: Config, optimizer: torch.optim.Optimizer) -> LRScheduler | None:
    """The scheduler train.lr_schedule names, or None when the rate never changes."""
    train = config.train
    if train.lr_schedule == "exponential":
        return ExponentialLR(optimizer, gamma=train.lr_decay)
    if train.lr_schedule == "plateau" and train.lr_decay != 1.0:
        if train.lr_decay > 1.0:
            raise ConfigError(
                f"train.lr_decay must be at most 1 with train.lr_schedule = plateau "
                f"(the rate falls on a plateau); got {train.lr_decay}"
            )
        return ReduceLROnPlateau(
            optimizer,
            mode="max",
            factor=train.lr_decay,
            patience=0,  # every epoch without a better dev F1 lowers the rate
            threshold=0.0,
            threshold_mode="abs",  # better means higher, by any amount
            eps=0.0,  # lower the rate however small it already is
        )
    return None


def end_epoch(schedule: LRScheduler | None, dev_f1: float) -> None:
    """Step the schedule after an epoch scored `dev_f1` on dev."""
    if isinstance(schedule, ReduceLROnPlateau):
        schedule.step(dev_f1)
    elif schedule is not None:
        schedule.step()


def learning_rate(optimizer: torch.optim.Optimizer) -> float:
    """The rate the next step will use (one rate for all parameters)."""
    return float(optimizer.param_groups[0]["lr"])


def schedule_state(schedule: LRScheduler | None) -> dict[str, Any]:
    """The scheduler's state as JSON-ready values ({} without a scheduler)."""
    return {} if schedule is None else dict(schedule.state_dict())


def load_schedule_state(schedule: LRScheduler | None, state: dict[str, Any]) -> None:
    if schedule is not None:
        schedule.load_state_dict(state)
