"""The learning-rate schedule (tagger.training.schedule): torch's schedulers with our rules."""

from __future__ import annotations

import json

import pytest
import torch

from tagger.config import Config, config_from_dict
from tagger.errors import ConfigError
from tagger.training.schedule import (
    end_epoch,
    learning_rate,
    load_schedule_state,
    new_schedule,
    schedule_state,
)


def _config(schedule: str, decay: float = 0.5) -> Config:
    return config_from_dict(
        {"train": {"lr_schedule": schedule, "lr_decay": decay, "learning_rate": 0.1}}
    )


def _optimizer() -> torch.optim.Optimizer:
    return torch.optim.SGD([torch.nn.Parameter(torch.zeros(2))], lr=0.1)


def _rates(config: Config, dev_f1s: list[float]) -> list[float]:
    """The rate each epoch trains with, given each epoch's dev F1."""
    optimizer = _optimizer()
    schedule = new_schedule(config, optimizer)
    rates = []
    for f1 in dev_f1s:
        rates.append(learning_rate(optimizer))
        optimizer.step()  # an epoch of training
        end_epoch(schedule, f1)
    return rates


def test_exponential_multiplies_after_every_epoch() -> None:
    # Halving is exact in binary: 0.1, 0.05, 0.025, 0.0125 by hand.
    assert _rates(_config("exponential"), [0.5, 0.9, 0.1, 0.2]) == [
        0.1,
        0.1 * 0.5,
        0.1 * 0.5 * 0.5,
        0.1 * 0.5 * 0.5 * 0.5,
    ]


def test_plateau_multiplies_after_every_epoch_without_a_better_dev_f1() -> None:
    # Worked by hand: epochs 1 and 2 improve; 3 ties (not better) and 4 is worse, each lowering
    # the rate for the next epoch; 5 improves (keeps it); 6 ties again.
    f1s = [0.5, 0.6, 0.6, 0.55, 0.7, 0.7, 0.0]
    assert _rates(_config("plateau"), f1s) == [0.1, 0.1, 0.1, 0.05, 0.025, 0.025, 0.0125]


def test_constant_never_changes_the_rate() -> None:
    assert new_schedule(_config("constant"), _optimizer()) is None
    assert _rates(_config("constant"), [0.5, 0.1, 0.1]) == [0.1, 0.1, 0.1]


def test_plateau_without_decay_is_constant_and_a_rising_rate_is_refused() -> None:
    assert new_schedule(_config("plateau", 1.0), _optimizer()) is None
    with pytest.raises(ConfigError, match="train.lr_decay must be at most 1"):
        new_schedule(_config("plateau", 1.5), _optimizer())


@pytest.mark.parametrize("schedule", ["exponential", "plateau"])
def test_a_saved_schedule_goes_on_as_if_never_stopped(schedule: str) -> None:
    config = _config(schedule)
    f1s = [0.5, 0.4, 0.6, 0.6, 0.3, 0.8]
    whole = _rates(config, f1s)

    optimizer = _optimizer()
    first = new_schedule(config, optimizer)
    for f1 in f1s[:3]:
        optimizer.step()
        end_epoch(first, f1)
    # Through JSON, as the checkpoint stores it.
    saved = json.loads(json.dumps(schedule_state(first)))
    saved_optimizer = optimizer.state_dict()

    optimizer = _optimizer()
    second = new_schedule(config, optimizer)
    optimizer.load_state_dict(saved_optimizer)
    load_schedule_state(second, saved)
    rates = []
    for f1 in f1s[3:]:
        rates.append(learning_rate(optimizer))
        optimizer.step()
        end_epoch(second, f1)
    assert rates == whole[3:]
