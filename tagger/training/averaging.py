"""An exponential moving average of a network's weights, used for scoring and saving.

Averaging the weights of the last few thousand updates (Polyak & Juditsky 1992) smooths out the
noise of the final steps; the trainer scores dev with the average and saves it as the model. The
decay ramps up from 0 as min(decay, (1 + steps) / (10 + steps)), so early averages are not held
back by the random initial weights.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import torch


class WeightAverage:
    """The running average of every parameter of `net`, updated after each optimizer step."""

    def __init__(self, net: torch.nn.Module, decay: float) -> None:
        self.decay = decay
        self.steps = 0
        self.params = [p for p in net.parameters() if p.requires_grad]
        self.averaged = [p.detach().clone() for p in self.params]
        self._live = [p.detach() for p in self.params]  # views: they follow every update

    def update(self) -> None:
        self.steps += 1
        decay = min(self.decay, (1 + self.steps) / (10 + self.steps))
        with torch.no_grad():
            torch._foreach_lerp_(self.averaged, self._live, 1.0 - decay)

    @contextmanager
    def swapped_in(self) -> Iterator[None]:
        """Run the block with the averaged weights in the network, then put the live ones back."""
        live = [p.detach().clone() for p in self.params]
        with torch.no_grad():
            torch._foreach_copy_(self.params, self.averaged)
        try:
            yield
        finally:
            with torch.no_grad():
                torch._foreach_copy_(self.params, live)

    def state(self) -> tuple[dict[str, torch.Tensor], int]:
        """Tensors and step count for a checkpoint."""
        return {f"average.{i}": t for i, t in enumerate(self.averaged)}, self.steps

    def load_state(self, tensors: dict[str, torch.Tensor], steps: int) -> None:
        if len(tensors) != len(self.averaged):
            raise ValueError(
                f"the checkpoint holds {len(tensors)} averaged tensors; the network has "
                f"{len(self.averaged)} parameters"
            )
        with torch.no_grad():
            for i, target in enumerate(self.averaged):
                target.copy_(tensors[f"average.{i}"])
        self.steps = steps
