"""An exponential moving average of a network's weights, used for scoring and saving.

Averaging the weights of the last few thousand updates (Polyak & Juditsky 1992) smooths out the
noise of the final steps; the trainer scores dev with the average and saves it as the model. The
average is torch's `AveragedModel` (a copy of the network beside the live one) with an averaging
function of our own: the decay ramps up from 0 as min(decay, (1 + steps) / (10 + steps)), so early
averages are not held back by the random initial weights.

The starting weights count as the first model averaged, so after `steps` training steps the
copy's `n_averaged` is steps + 1 and step t averages with decay min(decay, (1 + t) / (10 + t)).
"""

from __future__ import annotations

from collections.abc import Callable

import torch
from torch.optim.swa_utils import AveragedModel

AverageUpdate = Callable[[list[torch.Tensor], list[torch.Tensor], torch.Tensor | int], None]


def ramped_decay(decay: float, steps: int) -> float:
    """The decay applied at training step `steps` (1 for the first step)."""
    return min(decay, (1 + steps) / (10 + steps))


def ramped_update(decay: float) -> AverageUpdate:
    """An in-place averaging function for `AveragedModel(multi_avg_fn=...)`.

    torch passes the number of models averaged so far, which is the training step's number
    because the starting weights were the first."""

    def update(
        averaged: list[torch.Tensor], live: list[torch.Tensor], count: torch.Tensor | int
    ) -> None:
        weight = 1.0 - ramped_decay(decay, int(count))
        with torch.no_grad():
            for target, source in zip(averaged, live, strict=True):
                target.lerp_(source, weight)  # target + weight * (source - target)

    return update


def new_average(net: torch.nn.Module, decay: float) -> AveragedModel:
    """A moving average of `net` that starts from its current weights."""
    average = AveragedModel(net, multi_avg_fn=ramped_update(decay))
    average.update_parameters(net)  # the starting weights: copied, counted as the first model
    return average


def average_steps(average: AveragedModel) -> int:
    """How many training steps the average has taken in (the starting weights not counted)."""
    return int(average.n_averaged) - 1
