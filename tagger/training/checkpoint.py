"""The checkpoint: everything needed to resume a run after its last finished epoch.

It is the run folder's resume-state.tagger (`tagger.training.records`). One model file (tensors + JSON, never pickled) holds

    net.*           the live network's weights
    optimizer.*     the optimizer's tensors; its other values in the JSON as "optimizer"
    average.*       the weight average (torch's AveragedModel state: module.*, n_averaged), if on
    JSON "schedule" the learning-rate scheduler's state ({} without one)
    JSON "state"    the run so far (`RunState`): epochs done, history, best epoch, dev scores,
                    epochs without improvement and the wall-clock seconds used

with the config and data fingerprint it was made with. Resuming on other data is refused, and so
is a config that differs in any key but those of `tagger.config.RESUMABLE_KEYS` (the epoch limit,
patience, the time budget, threads): the refusal names the keys. Every epoch seeds its own random streams from (seed, epoch), so resuming from
the checkpoint of epoch k replays epochs k+1... exactly as an uninterrupted run would.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import torch
from torch.optim.lr_scheduler import LRScheduler

from tagger.config import Config
from tagger.errors import ConfigError, ModelFileError
from tagger.network.modelfile import load_model_file, save_model_file
from tagger.training.config_changes import RESUMABLE_KEYS, config_changes
from tagger.training.schedule import load_schedule_state, schedule_state
from tagger.training.step import StepTools

# Checkpoints of an earlier layout (fingerprints of file bytes, a hand-made schedule and average)
# cannot be resumed by this trainer.
CHECKPOINT_FORMAT = 2


@dataclass
class RunState:
    """How far a run has got; what a checkpoint restores besides the tensors."""

    epoch: int = 0  # the last finished epoch
    history: list[dict[str, Any]] = field(default_factory=list)
    best_f1: float = -1.0
    best_epoch: int = 0  # 0: no model saved yet
    best_dev: dict[str, Any] = field(default_factory=dict)
    bad_epochs: int = 0  # epochs since dev F1 last improved
    seconds_used: float = 0.0  # wall-clock seconds up to the end of `epoch`

    def score(self, epoch: int, dev: dict[str, Any]) -> bool:
        """Take in an epoch's dev scores; True if its span F1 is the best so far."""
        f1 = dev["micro"]["f1"]
        if f1 > self.best_f1:
            self.best_f1, self.best_epoch, self.best_dev, self.bad_epochs = f1, epoch, dev, 0
            return True
        self.bad_epochs += 1
        return False

    @property
    def stop(self) -> str:
        """Why the run stopped at its last epoch ("" if it had not)."""
        return self.history[-1]["stop"] if self.history else ""


def save_checkpoint(
    path: Path,
    config: Config,
    fingerprint: str,
    tools: StepTools,
    schedule: LRScheduler | None,
    state: RunState,
) -> None:
    tensors = {f"net.{k}": v for k, v in tools.net.state_dict().items()}
    optimizer_tensors, optimizer_meta = _optimizer_to_file(tools.optimizer)
    tensors.update(optimizer_tensors)
    if tools.average is not None:
        tensors.update({f"average.{k}": v for k, v in tools.average.state_dict().items()})
    save_model_file(
        path,
        tensors,
        {
            "kind": "checkpoint",
            "checkpoint_format": CHECKPOINT_FORMAT,
            "config": config.to_dict(),
            "fingerprint": fingerprint,
            "optimizer": optimizer_meta,
            "schedule": schedule_state(schedule),
            "state": asdict(state),
        },
    )


def restore_checkpoint(
    path: Path,
    config: Config,
    fingerprint: str,
    tools: StepTools,
    schedule: LRScheduler | None,
    note: Callable[[str], None] | None = None,
) -> RunState:
    """Load a checkpoint into the network, optimizer, average and schedule; returns the run's
    state. Refuses (ModelFileError) a checkpoint of other data or layout, or of a config that
    differs in keys other than RESUMABLE_KEYS, naming those keys. `note` is told of the
    resumable keys that differ: the run goes on with their new values."""
    tensors, meta = load_model_file(path)
    if meta.get("checkpoint_format") != CHECKPOINT_FORMAT:
        raise ModelFileError(
            f"{path}: the checkpoint was written by an earlier version of the trainer and cannot "
            "be resumed; start again in a new run folder"
        )
    _check_changes(path, meta.get("config"), config, note)
    if meta.get("fingerprint") != fingerprint:
        raise ModelFileError(
            f"{path}: the checkpoint was made with other data (the training or dev sentences, "
            "or a lexicon, differ); resume with the same files, or choose a new run folder"
        )
    try:
        tools.net.load_state_dict(_part(tensors, "net."))
        if tools.average is not None:
            tools.average.load_state_dict(_part(tensors, "average."))
        tools.optimizer.load_state_dict(
            _optimizer_from_file(_part(tensors, "optimizer."), meta["optimizer"])
        )
        load_schedule_state(schedule, meta["schedule"])
        return RunState(**meta["state"])
    except (RuntimeError, KeyError, TypeError, ValueError) as error:
        raise ModelFileError(f"{path}: the checkpoint does not fit this run ({error})") from None


def _check_changes(
    path: Path, saved: Any, config: Config, note: Callable[[str], None] | None
) -> None:
    """Refuse a config that differs from the checkpoint's in keys a resumed run may not change."""
    try:
        changes = config_changes(saved if isinstance(saved, dict) else None, config)
    except ConfigError as error:
        raise ModelFileError(
            f"{path}: the checkpoint was made with another config, which cannot be read ({error}); "
            "choose a new run folder"
        ) from None
    refused = [change for change in changes if change.key not in RESUMABLE_KEYS]
    if refused:
        raise ModelFileError(
            f"{path}: the checkpoint was made with another config: "
            f"{'; '.join(map(str, refused))}. Only {', '.join(RESUMABLE_KEYS)} may change on "
            "--resume; resume with the checkpoint's values, or choose a new run folder"
        )
    if changes and note is not None:
        note(f"resuming with {'; '.join(map(str, changes))}")


def _part(tensors: dict[str, torch.Tensor], prefix: str) -> dict[str, torch.Tensor]:
    return {k[len(prefix) :]: v for k, v in tensors.items() if k.startswith(prefix)}


def _optimizer_to_file(optimizer: torch.optim.Optimizer) -> tuple[dict[str, torch.Tensor], dict]:
    """Split an optimizer state into tensors and JSON (safetensors holds only tensors)."""
    state = optimizer.state_dict()
    tensors: dict[str, torch.Tensor] = {}
    plain: dict[str, dict[str, Any]] = {}
    for index, values in state["state"].items():
        for key, value in values.items():
            if isinstance(value, torch.Tensor):
                tensors[f"optimizer.{index}.{key}"] = value
            else:
                plain.setdefault(str(index), {})[key] = value
    return tensors, {"param_groups": state["param_groups"], "plain": plain}


def _optimizer_from_file(tensors: dict[str, torch.Tensor], saved: dict) -> dict:
    """The optimizer state `_optimizer_to_file` split; tensor names arrive without "optimizer."."""
    state: dict[int, dict[str, Any]] = {}
    for name, value in tensors.items():
        index, key = name.split(".", 1)
        state.setdefault(int(index), {})[key] = value
    for index, values in saved["plain"].items():
        state.setdefault(int(index), {}).update(values)
    return {"state": state, "param_groups": saved["param_groups"]}
