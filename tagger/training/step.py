"""One training step on one batch: the only place a batch trains the network.

The training loop, the training-speed benchmarks and the step profiler all run it, so a published
speed times the step training runs. A step is a fixed sequence of named phases over a `StepWork`
(the batch and what the phases hand each other):

    unknown words  singletons and rare feature values read as unknown, now and then
    forward        emissions, summed loss over the batch; a loss that is not finite stops here
    backward       gradients of the loss per sentence
    clipping       the gradient norm capped at train.clip_norm
    optimizer      the optimizer's update
    averaging      the moving average of the weights takes in the new weights (if on)

`train_step` runs them back to back; the profiler runs the same `STEP_PHASES` with a clock between
them.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import torch
from torch.optim.swa_utils import AveragedModel

from tagger.errors import TaggerError
from tagger.network.batching import Batch
from tagger.network.net import TaggerNet

UNKNOWN = 1  # the id of the unknown word and of a feature column's unknown value


class LossNotFinite(TaggerError):
    """The training loss became NaN or infinite: the network has diverged."""

    def __init__(self, value: float) -> None:
        self.value = value
        super().__init__(f"the training loss became {value}")


@dataclass
class RareItems:
    """What the step reads as unknown now and then, so that the unknown embeddings learn."""

    words: torch.Tensor  # (words,) True for words seen once in train
    # Per feature slot read from a column: (slot, (values,) True for values seen once in train).
    values: list[tuple[int, torch.Tensor]] = field(default_factory=list)


@dataclass
class StepTools:
    """Everything a step works with; built once per run (tagger.training.setup.step_tools)."""

    net: TaggerNet
    optimizer: torch.optim.Optimizer
    average: AveragedModel | None  # the moving average of the weights, or None when off
    rare: RareItems
    unknown_replace: float  # chance a rare item is read as unknown
    clip_norm: float  # 0: no clipping
    # Training on several processes (tagger.training.distributed): the batch loss wrapped so
    # that backward averages gradients over the ranks, and the sum of a number over the ranks.
    replica: torch.nn.Module | None = None
    total: Callable[[float], float] | None = None


@dataclass(frozen=True)
class StepShare:
    """One rank's part of a step that several processes train together."""

    ranks: int  # processes training together
    sentences: int  # sentences in the step's batches over all ranks


class BatchLoss(torch.nn.Module):
    """The summed loss of a batch as a module's forward, which DistributedDataParallel wraps."""

    def __init__(self, net: TaggerNet) -> None:
        super().__init__()
        self.net = net

    def forward(
        self,
        words: torch.Tensor,
        batch: Batch,
        features: torch.Tensor | None,
    ) -> torch.Tensor:
        return batch_loss(self.net, words, batch, features)


def batch_loss(
    net: TaggerNet, words: torch.Tensor, batch: Batch, features: torch.Tensor | None
) -> torch.Tensor:
    """The batch's summed loss, read with `words` and `features` (after unknown words)."""
    emissions = net.emissions(
        words, batch.chars, batch.lengths, features=features, fixed=batch.bags, lm=batch.lm
    )
    assert batch.labels is not None, "a training batch has labels"
    return net.loss(emissions, batch.labels, batch.mask)


@dataclass
class StepWork:
    """One step's batch and what its phases hand on to the next."""

    batch: Batch
    words: torch.Tensor | None = None  # (B, T) word ids after unknown-word replacement
    features: torch.Tensor | None = None  # (B, T, slots) feature ids after replacement
    loss: torch.Tensor | None = None  # summed over the batch's sentences
    loss_value: float = 0.0  # summed over the step's sentences (over every rank's batch)
    share: StepShare | None = None  # None: one process trains the step alone


def read_rare_as_unknown(tools: StepTools, work: StepWork) -> None:
    """Replace singletons (and feature values seen once) by the unknown id, each with chance
    train.unknown_replace. Never writes into the batch, so a batch may be trained on again."""
    batch, chance = work.batch, tools.unknown_replace
    words, features = batch.words, batch.features
    if chance > 0:
        drop = tools.rare.words[words] & (torch.rand(words.shape) < chance)  # (B, T)
        words = words.masked_fill(drop, UNKNOWN)
        if features is not None and tools.rare.values:
            features = features.clone()
            for slot, single in tools.rare.values:
                ids = features[:, :, slot]  # (B, T), a view into the copy
                rare = single[ids] & (torch.rand(ids.shape) < chance)
                ids.masked_fill_(rare, UNKNOWN)
    work.words, work.features = words, features


def forward(tools: StepTools, work: StepWork) -> None:
    """The summed loss of the batch; raises LossNotFinite when it is NaN or infinite (on any
    rank: every rank sees the sum over all, so all of them stop at the same step)."""
    assert work.words is not None, "read_rare_as_unknown runs first"
    if tools.replica is not None:
        work.loss = tools.replica(work.words, work.batch, work.features)
    else:
        work.loss = batch_loss(tools.net, work.words, work.batch, work.features)
    work.loss_value = work.loss.item()
    if tools.total is not None:
        work.loss_value = tools.total(work.loss_value)
    if not math.isfinite(work.loss_value):
        raise LossNotFinite(work.loss_value)


def backward(tools: StepTools, work: StepWork) -> None:
    """Gradients of the loss per sentence, so the step size does not grow with the batch.

    On several ranks, each scales its summed loss by ranks / (the step's sentences over all
    ranks): the average of the ranks' gradients is then the gradient of the mean loss over every
    sentence of the step, as one process trained on all the step's batches put together."""
    assert work.loss is not None, "forward runs first"
    tools.optimizer.zero_grad(set_to_none=True)
    if work.share is None:
        (work.loss / len(work.batch.indices)).backward()
    else:
        (work.loss * (work.share.ranks / work.share.sentences)).backward()


def clip_gradients(tools: StepTools, work: StepWork) -> None:
    if tools.clip_norm > 0:
        torch.nn.utils.clip_grad_norm_(tools.net.parameters(), tools.clip_norm)


def optimizer_step(tools: StepTools, work: StepWork) -> None:
    tools.optimizer.step()


def update_average(tools: StepTools, work: StepWork) -> None:
    if tools.average is not None:
        tools.average.update_parameters(tools.net)


Phase = Callable[[StepTools, StepWork], None]
STEP_PHASES: tuple[tuple[str, Phase], ...] = (
    ("unknown words", read_rare_as_unknown),
    ("forward", forward),
    ("backward", backward),
    ("clipping", clip_gradients),
    ("optimizer", optimizer_step),
    ("averaging", update_average),
)


def train_step(tools: StepTools, batch: Batch, share: StepShare | None = None) -> float:
    """Train on one batch; returns its summed loss (on several ranks, `share` says the step's
    size, and the loss is summed over every rank's batch). Raises LossNotFinite before any
    update when the loss is not finite. Random draws come from torch's global generator."""
    work = StepWork(batch, share=share)
    for _, phase in STEP_PHASES:
        phase(tools, work)
    return work.loss_value
