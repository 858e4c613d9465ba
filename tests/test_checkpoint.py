"""The checkpoint (tagger.training.checkpoint): what it restores, what it refuses, and the time
budget it carries across --resume."""

from __future__ import annotations

import functools
from pathlib import Path

import pytest
import torch
from test_train import TINY, small_config, write_columns_file

from tagger.config import Config
from tagger.errors import ModelFileError
from tagger.network.modelfile import load_model_file, save_model_file
from tagger.training import budget
from tagger.training.averaging import new_average
from tagger.training.checkpoint import RunState, restore_checkpoint, save_checkpoint
from tagger.training.loop import train
from tagger.training.step import RareItems, StepTools


class _FakeClock:
    """A wall clock the test moves by hand."""

    def __init__(self, start: float) -> None:
        self.time = start

    def __call__(self) -> float:
        return self.time


def _epochs_take_25_seconds(clock: _FakeClock, event: dict, kill_at: int = 0) -> None:
    if event["event"] == "batch" and event["batch"] == 1:
        clock.time += 25.0
        if event["epoch"] == kill_at:
            raise KeyboardInterrupt


def test_a_resumed_run_counts_the_time_used_before_it_was_interrupted(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    clock = _FakeClock(1000.0)
    monkeypatch.setattr(budget, "now", clock)
    data = write_columns_file(tmp_path / "train.txt", TINY)
    config = small_config(data, data, train={"epochs": 10, "max_minutes": 1.0})
    progress = functools.partial(_epochs_take_25_seconds, clock)

    whole = train(config, tmp_path / "whole", progress=progress)
    # 25, 50, 75 seconds: the minute is used up after epoch 3.
    assert [row["epoch"] for row in whole.history] == [1, 2, 3]
    assert whole.stop_reason == (
        "time budget of train.max_minutes=1.0 used; dev F1 was still improving (best at the last "
        "epoch, 3), so more epochs may do better: raise or remove train.max_minutes"
    )

    with pytest.raises(KeyboardInterrupt):
        train(config, tmp_path / "cut", progress=functools.partial(progress, kill_at=3))
    _, meta = load_model_file(tmp_path / "cut" / "resume-state.tagger")
    assert meta["state"]["seconds_used"] == 50.0
    clock.time = 90_000.0  # another session, another reading of the clock
    notes: list[str] = []

    def resumed_progress(event: dict) -> None:
        progress(event)
        if event["event"] == "note":
            notes.append(event["message"])

    resumed = train(config, tmp_path / "cut", resume=True, progress=resumed_progress)
    # Counting from zero again would have run to epoch 5 (25, 50, 75 s after resuming).
    assert [row["epoch"] for row in resumed.history] == [1, 2, 3]
    assert resumed.stop_reason == whole.stop_reason
    assert any("0.8 of train.max_minutes=1.0 used before" in note for note in notes)


def test_a_checkpoint_of_an_earlier_layout_is_refused(tmp_path: Path) -> None:
    data = write_columns_file(tmp_path / "train.txt", TINY)
    config = small_config(data, data, train={"epochs": 1})
    train(config, tmp_path / "run")
    checkpoint = tmp_path / "run" / "resume-state.tagger"
    tensors, meta = load_model_file(checkpoint)
    del meta["checkpoint_format"]
    save_model_file(checkpoint, tensors, meta)
    with pytest.raises(ModelFileError, match="earlier version of the trainer"):
        train(config, tmp_path / "run", resume=True)


def _tools(inputs: int) -> StepTools:
    net = torch.nn.Linear(inputs, 1)
    optimizer = torch.optim.Adam(net.parameters(), lr=0.1)
    net(torch.ones(1, inputs)).sum().backward()
    optimizer.step()  # so that the optimizer has state to save
    return StepTools(
        net,  # type: ignore[arg-type]  # any module's state travels the same way
        optimizer,
        new_average(net, 0.9),
        RareItems(torch.zeros(1, dtype=torch.bool)),
        unknown_replace=0.0,
        clip_norm=0.0,
    )


def test_restore_brings_back_weights_average_optimizer_and_state(tmp_path: Path) -> None:
    torch.manual_seed(1)
    saved = _tools(2)
    saved.average.update_parameters(saved.net)
    state = RunState(epoch=3, best_f1=0.5, best_epoch=2, bad_epochs=1, seconds_used=12.5)
    path = tmp_path / "checkpoint.tagger"
    save_checkpoint(path, Config(), "data-1", saved, None, state)

    torch.manual_seed(2)
    restored = _tools(2)
    assert restore_checkpoint(path, Config(), "data-1", restored, None) == state
    for name, tensor in saved.net.state_dict().items():
        assert torch.equal(restored.net.state_dict()[name], tensor), name
    for name, tensor in saved.average.state_dict().items():
        assert torch.equal(restored.average.state_dict()[name], tensor), name
    assert int(restored.average.n_averaged) == 2
    before, after = saved.optimizer.state_dict(), restored.optimizer.state_dict()
    assert torch.equal(before["state"][0]["exp_avg"], after["state"][0]["exp_avg"])

    with pytest.raises(ModelFileError, match="other data"):
        restore_checkpoint(path, Config(), "data-2", _tools(2), None)


def test_an_average_of_another_network_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "checkpoint.tagger"
    save_checkpoint(path, Config(), "data", _tools(2), None, RunState(epoch=1))
    with pytest.raises(ModelFileError, match="does not fit this run"):
        restore_checkpoint(path, Config(), "data", _tools(3), None)
