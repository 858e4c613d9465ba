"""The benchmark's training runs (scripts/bench_training.py): what a resumed benchmark reuses."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

SENTENCES = [
    [("Crew", "O"), ("replaced", "O"), ("the", "O"), ("yaw", "B-COMP"), ("motor", "I-COMP")],
    [("Oil", "B-DEF"), ("leak", "I-DEF"), ("at", "O"), ("T-3", "B-ASSET")],
    [("T-9", "B-ASSET"), ("gearbox", "B-COMP"), ("overheating", "B-DEF")],
]


@pytest.fixture(scope="module")
def bench_training(load_script):
    return load_script("bench_training")


@pytest.fixture
def setup(tmp_path: Path) -> tuple[Path, Path]:
    data = tmp_path / "train.txt"
    data.write_text(
        "".join("".join(f"{t}\t{label}\n" for t, label in s) + "\n" for s in SENTENCES),
        encoding="utf-8",
    )
    config = tmp_path / "tiny.toml"
    config.write_text(
        f'[data]\ntrain = "{data}"\ndev = "{data}"\n'
        "[model]\nhidden_size = 8\nlayers = 1\nword_dim = 8\nchar_dim = 4\nchar_features = 4\n"
        "[train]\nepochs = 2\nbatch_size = 2\nthreads = 1\n",
        encoding="utf-8",
    )
    return config, data


def test_a_finished_run_is_reused_and_a_changed_config_retrains(
    bench_training, setup: tuple[Path, Path], tmp_path: Path
) -> None:
    config, data = setup
    out = tmp_path / "run-seed1"
    first = bench_training.train_seed(config, [], 1, data, out)
    again = bench_training.train_seed(config, [], 1, data, out)
    assert (first["reused"], again["reused"]) == (False, True)
    assert again["test_f1"] == first["test_f1"] and again["epochs"] == 2
    changed = bench_training.train_seed(config, ["train.epochs=3"], 1, data, out)
    assert not changed["reused"] and changed["epochs"] == 3
    record = json.loads((out / bench_training.RUN_RECORD).read_text())
    assert record["config"]["train"]["epochs"] == 3


def test_an_interrupted_run_goes_on_from_its_checkpoint(
    bench_training, setup: tuple[Path, Path], tmp_path: Path
) -> None:
    config, data = setup
    out = tmp_path / "run-seed1"
    bench_training.train_seed(config, [], 1, data, out)
    (out / bench_training.RUN_RECORD).unlink()  # as if stopped before its record was written
    history = json.loads((out / "epochs.json").read_text())
    resumed = bench_training.train_seed(config, [], 1, data, out)
    assert not resumed["reused"]
    # The checkpoint had both epochs: nothing is trained again, the history is the same.
    assert json.loads((out / "epochs.json").read_text()) == history
    assert resumed["epochs"] == 2
