"""Training on several processes at once: torch.distributed, started by torchrun.

The same `train` runs in every process (a rank). torchrun sets RANK, WORLD_SIZE, MASTER_ADDR and
MASTER_PORT; `process_group` reads them and joins the gloo group (CPUs), or takes a group the
caller has made already. Each rank then

* reads the same files and builds the same network from the same seed;
* computes the same list of length-bucketed batches each epoch and trains on its own share of
  it (`rank_steps`): step s gives rank r batch s*WORLD_SIZE + r;
* scales its loss so that the gradients DistributedDataParallel averages are those of one
  process trained on the step's batches put together (the mean loss over all of them);
* leaves the run folder to rank 0, the only one that holds its lock and writes in it: the
  model, the checkpoint, the epochs and the outcome. Rank 0 scores dev and decides whether the
  run stops; the others take its decisions (`Ranks.share`), so every rank stops after the same
  epoch with the same best epoch.

    epoch's batches   b0 b1 b2 b3 b4          (the same list on every rank)
    padded            b0 b1 b2 b3 b4 b0       (a repeat from the start: every rank has 3 steps)
    rank 0            b0    b2    b4
    rank 1               b1    b3    b0
"""

from __future__ import annotations

import contextlib
import gc
import os
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path
from typing import Any, TypeVar

import torch
import torch.distributed as dist
from torch.nn.parallel import DistributedDataParallel

from tagger.errors import ConfigError, TaggerError
from tagger.network.net import TaggerNet
from tagger.training.step import BatchLoss

# How long a rank waits for the others at one exchange before the run fails: long enough for
# rank 0 to score a large dev set and write the model (torch's own default for gloo).
GROUP_TIMEOUT = timedelta(minutes=30)
TIMEOUT_VARIABLE = "TAGGER_GROUP_TIMEOUT"  # seconds, to fail faster than GROUP_TIMEOUT

T = TypeVar("T")


class RankError(TaggerError):
    """The processes of a run cannot join or reach each other."""


@dataclass(frozen=True)
class Ranks:
    """This process's place among the processes training together."""

    rank: int = 0
    world: int = 1

    @property
    def lead(self) -> bool:
        """Rank 0: the one that scores dev, decides and writes the run folder."""
        return self.rank == 0

    @property
    def spread(self) -> bool:
        return self.world > 1

    def share(self, value: T) -> T:
        """Rank 0's `value`, on every rank (what the others pass is ignored)."""
        if not self.spread:
            return value
        box: list[Any] = [value]
        dist.broadcast_object_list(box, src=0)
        return box[0]

    def total(self, value: float) -> float:
        """The sum of `value` over the ranks (NaN or infinite if it is so on any rank)."""
        if not self.spread:
            return value
        summed = torch.tensor([value], dtype=torch.float64)
        dist.all_reduce(summed)
        return float(summed.item())

    def replicate(self, net: TaggerNet) -> torch.nn.Module | None:
        """The network's batch loss wrapped so that backward averages gradients over the ranks;
        None in one process."""
        if not self.spread:
            return None
        # Buffers (the frozen vector table) are read from the same files on every rank and never
        # change: sent once when wrapping, not before every step.
        return DistributedDataParallel(BatchLoss(net), forward_sync_buffers=False)

    def seed(self, seed: int) -> int:
        """A seed of this rank's own from a seed all ranks share (the same in one process), so
        that dropout and unknown-word draws differ between ranks."""
        return seed * self.world + self.rank


def rank_steps(batches: list[list[int]], world: int) -> list[list[list[int]]]:
    """The epoch's batches grouped into steps of `world` batches, one per rank, in order; the
    last step is filled up with the first batches again, so every rank takes the same number of
    steps and every batch is trained on at least once. One process: a step per batch."""
    if not batches:
        return []
    steps = -(-len(batches) // world)
    padded = [batches[i % len(batches)] for i in range(steps * world)]
    return [padded[s * world : (s + 1) * world] for s in range(steps)]


def _group_timeout() -> timedelta:
    given = os.environ.get(TIMEOUT_VARIABLE)
    if not given:
        return GROUP_TIMEOUT
    try:
        seconds = float(given)
    except ValueError:
        seconds = 0.0
    if not seconds > 0:
        raise ConfigError(f"{TIMEOUT_VARIABLE}={given!r}: expected a number of seconds above 0")
    return timedelta(seconds=seconds)


def _world_size() -> int:
    given = os.environ.get("WORLD_SIZE", "1")
    try:
        return int(given)
    except ValueError:
        raise ConfigError(f"WORLD_SIZE={given!r}: expected a whole number of processes") from None


@contextlib.contextmanager
def process_group() -> Iterator[Ranks]:
    """This process's `Ranks` while the block runs.

    A process group made already (by the caller) is used as it is. Otherwise WORLD_SIZE above 1
    (torchrun sets it) joins the gloo group the environment describes, left when the block ends;
    without it the run is one process, as always."""
    if dist.is_available() and dist.is_initialized():
        yield Ranks(dist.get_rank(), dist.get_world_size())
        return
    world = _world_size()
    if world <= 1:
        yield Ranks()
        return
    missing = [name for name in ("RANK", "MASTER_ADDR", "MASTER_PORT") if not os.environ.get(name)]
    if missing:
        raise ConfigError(
            f"WORLD_SIZE={world} asks for {world} training processes but {', '.join(missing)} "
            "is not set: start them with torchrun (see the README)"
        )
    timeout = _group_timeout()
    try:
        dist.init_process_group("gloo", timeout=timeout)
    except (RuntimeError, ValueError) as error:
        first = str(error).strip().splitlines()[0] if str(error).strip() else type(error).__name__
        raise RankError(
            f"cannot join the {world} training processes at "
            f"{os.environ['MASTER_ADDR']}:{os.environ['MASTER_PORT']}: {first}"
        ) from None
    ranks = Ranks(dist.get_rank(), dist.get_world_size())
    try:
        yield ranks
        _leave_together()
    except RuntimeError as error:
        if not (isinstance(error, dist.DistError) or "gloo" in str(error)):
            raise
        said = " ".join(str(error).split())[:240]
        # A rank that dies cannot say so; each survivor says who it is and what it saw, so the
        # operator can tell from the lines which rank is missing.
        raise RankError(
            f"rank {ranks.rank} of {ranks.world}: another training process stopped or cannot be "
            f"reached ({said}); the run folder keeps the last finished epoch: continue with the "
            "same command and --resume"
        ) from None
    finally:
        dist.destroy_process_group()


def _leave_together() -> None:
    """Before a finished run leaves the group: free the DistributedDataParallel wrapper, which
    hooks into the network and so lives in a reference cycle until a garbage collection, and
    wait for every rank. A wrapper still alive when the group is destroyed, or freed at the
    interpreter's exit, aborted a rank now and then ("terminate called without an active
    exception", then SIGABRT) while rank 0 was still writing the model."""
    gc.collect()
    dist.barrier()


def shared_checkpoint(ranks: Ranks, path: Path, restore: Callable[[Path], T]) -> T | None:
    """`restore` of rank 0's checkpoint at `path` on every rank, or None when rank 0 has none.

    Rank 0 reads the file and sends its bytes, so ranks on other machines need not see the run
    folder; each restores the same bytes."""
    if not ranks.spread:
        return restore(path) if path.exists() else None
    data = ranks.share(path.read_bytes() if ranks.lead and path.exists() else None)
    if data is None:
        return None
    if ranks.lead:
        return restore(path)
    with tempfile.TemporaryDirectory(prefix="tagger-rank-") as folder:
        copy = Path(folder) / path.name
        copy.write_bytes(data)
        return restore(copy)
