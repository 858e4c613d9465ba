"""Training on several processes: each rank's share of the batches, and two ranks on loopback
started by torchrun (torch's own launcher, `torch.distributed.run`) training exactly what one
process trains on each step's batches put together."""

from __future__ import annotations

import json
import os
import random
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
import torch

from tagger.config import load_config
from tagger.network.batching import collate
from tagger.network.modelfile import load_model_file
from tagger.training.data import prepare_sentences, read_training_files
from tagger.training.distributed import TIMEOUT_VARIABLE, Ranks, rank_steps
from tagger.training.loop import epoch_batches
from tagger.training.records import CHECKPOINT_NAME, MODEL_NAME
from tagger.training.setup import new_network, setup_training, step_tools
from tagger.training.step import train_step

ROOT = Path(__file__).resolve().parents[1]
RUN_SECONDS = 90  # a torchrun that has not ended by then has hung: the test fails
GROUP_SECONDS = "20"  # how long a rank waits for the other at one exchange

WORDS = ["pitch", "bearing", "on", "T-14", "oil", "leak", "at", "gearbox", "hot", "no", "fault"]
TYPES = {"pitch": "COMP", "bearing": "COMP", "gearbox": "COMP", "T-14": "ASSET", "leak": "DEF"}


@pytest.mark.parametrize(
    ("batches", "world", "expected"),
    [
        # hand-worked: five batches on two ranks, the last step filled up with the first batch
        (5, 2, [[0, 1], [2, 3], [4, 0]]),
        (4, 2, [[0, 1], [2, 3]]),
        (1, 3, [[0, 0, 0]]),
        (3, 1, [[0], [1], [2]]),
        (0, 2, []),
    ],
)
def test_rank_steps_give_every_rank_as_many_steps_and_every_batch(
    batches: int, world: int, expected: list[list[int]]
) -> None:
    lists = [[10 * b, 10 * b + 1] for b in range(batches)]
    steps = rank_steps(lists, world)
    assert steps == [[lists[b] for b in step] for step in expected]
    assert all(len(step) == world for step in steps)
    assert {tuple(b) for step in steps for b in step} == {tuple(b) for b in lists}


def test_one_process_is_rank_zero_of_one() -> None:
    ranks = Ranks()
    assert ranks.lead and not ranks.spread
    assert ranks.share({"f1": 0.5}) == {"f1": 0.5}
    assert ranks.total(2.5) == 2.5
    assert ranks.seed(7) == 7  # the seeds of one process stay those of earlier releases
    # two ranks draw from different seeds, and no two (seed, rank) pairs share one
    seeds = {Ranks(rank, 2).seed(s) for s in range(5) for rank in range(2)}
    assert len(seeds) == 10


def _write_data(folder: Path) -> Path:
    """Seeded sentences of varied length (so batches differ in size and padding), and a config
    that reads them: no dropout and no unknown-word draws, the only randomness a rank draws
    on its own."""
    rng = random.Random(13)
    lines = []
    for _ in range(30):
        for _ in range(rng.randint(2, 9)):
            word = rng.choice(WORDS)
            lines.append(f"{word}\t{'B-' + TYPES[word] if word in TYPES else 'O'}\n")
        lines.append("\n")
    (folder / "train.txt").write_text("".join(lines), encoding="utf-8")
    (folder / "dev.txt").write_text("".join(lines[:40]) + "\n", encoding="utf-8")
    config = folder / "small.toml"
    config.write_text(
        '[data]\ntrain = "train.txt"\ndev = "dev.txt"\n'
        "[model]\nhidden_size = 16\nlayers = 1\nword_dim = 8\nchar_dim = 4\n"
        "char_features = 6\ndropout = 0.0\n"
        "[train]\nepochs = 2\nbatch_size = 3\nunknown_replace = 0.0\n"
        'lr_schedule = "constant"\nthreads = 1\nseed = 5\n',
        encoding="utf-8",
    )
    return config


def _train_command(config: Path, out: Path, *extra: str) -> list[str]:
    return ["-m", "tagger", "train", "--config", str(config), "--out", str(out), *extra]


def _torchrun(config: Path, out: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    """`tagger train` on two ranks, as the README starts it."""
    environment = {**os.environ, "PYTHONPATH": str(ROOT), TIMEOUT_VARIABLE: GROUP_SECONDS}
    launcher = ["-m", "torch.distributed.run", "--standalone", "--nproc-per-node", "2"]
    result = subprocess.run(
        [sys.executable, *launcher, *_train_command(config, out, *extra)],
        capture_output=True,
        text=True,
        timeout=RUN_SECONDS,
        env=environment,
        cwd=out.parent,
    )
    assert result.returncode == 0, result.stderr[-3000:]
    return result


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _start_ranks(config: Path, out: Path, *extra: str) -> list[subprocess.Popen[str]]:
    """The two ranks of `_two_ranks`, started and left running."""
    shared = {
        **os.environ,
        "PYTHONPATH": str(ROOT),
        TIMEOUT_VARIABLE: GROUP_SECONDS,
        "WORLD_SIZE": "2",
        "MASTER_ADDR": "127.0.0.1",
        "MASTER_PORT": str(_free_port()),
        "OMP_NUM_THREADS": "1",
    }
    return [
        subprocess.Popen(
            [sys.executable, *_train_command(config, out, *extra)],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            text=True,
            env={**shared, "RANK": str(rank), "LOCAL_RANK": str(rank)},
            cwd=out.parent,
        )
        for rank in range(2)
    ]


def _two_ranks(config: Path, out: Path, *extra: str) -> list[str]:
    """`tagger train` on two ranks started by hand with the variables torchrun sets (quicker
    than the launcher); returns each rank's stderr."""
    ranks = _start_ranks(config, out, *extra)
    errors = []
    try:
        for process in ranks:
            _, stderr = process.communicate(timeout=RUN_SECONDS)
            assert process.returncode == 0, stderr[-3000:]
            errors.append(stderr)
    finally:
        for process in ranks:
            if process.poll() is None:
                process.kill()
                process.wait()
    return errors


def _one_process_on_steps_put_together(config_path: Path) -> dict[str, torch.Tensor]:
    """The network one process trains when each step is one batch: both ranks' batches of the
    step put together, the loss their mean, with the run's seeds."""
    config = load_config(config_path)
    train_sentences, dev_sentences = read_training_files(config)
    data = prepare_sentences(config, train_sentences, dev_sentences)
    threads = torch.get_num_threads()
    torch.set_num_threads(1)
    try:
        torch.manual_seed(config.train.seed)
        random.seed(config.train.seed)
        setup = setup_training(config, data)
        net, _ = new_network(config, setup)
        # the rate two ranks take: the config's, times 2 (train.scale_rate_with_processes)
        tools = step_tools(config, setup, net, processes=2)
        net.train()
        for epoch in range(1, config.train.epochs + 1):
            for step in rank_steps(epoch_batches(setup.encoded, config, epoch, 2), 2):
                train_step(tools, collate(setup.encoded, [i for batch in step for i in batch]))
    finally:
        torch.set_num_threads(threads)
    return {name: tensor.detach().clone() for name, tensor in net.state_dict().items()}


def _weights(path: Path, prefix: str = "") -> dict[str, torch.Tensor]:
    tensors, _ = load_model_file(path)
    return {k[len(prefix) :]: v for k, v in tensors.items() if k.startswith(prefix)}


@pytest.mark.slow
def test_two_ranks_train_what_one_process_trains_on_each_step_put_together(
    tmp_path: Path,
) -> None:
    config = _write_data(tmp_path)
    run = _torchrun(config, tmp_path / "run")
    # rank 0 alone tells the progress and the outcome
    assert run.stderr.count("stopped: reached train.epochs=2") == 1
    assert "training on 2 processes" in run.stderr
    assert "each step holds 2 batches, so the learning rate is" in run.stderr
    assert run.stderr.count("epoch   2") == 1

    # float32 on both sides: the ranks' gradients are summed in another order than one batch's,
    # so the weights agree to rounding (1e-7 seen after eight Adam steps), not to the bit.
    trained = _weights(tmp_path / "run" / CHECKPOINT_NAME, "net.")
    expected = _one_process_on_steps_put_together(config)
    assert trained.keys() == expected.keys()
    for name, tensor in expected.items():
        torch.testing.assert_close(trained[name], tensor, rtol=0, atol=1e-6, msg=name)

    # The same seed again, stopped after epoch 1 and resumed: the model's weights byte for byte.
    again = tmp_path / "again"
    first = _two_ranks(config, again, "--set", "train.epochs=1")
    assert "stopped: reached train.epochs=1" in first[0]
    assert "stopped:" not in first[1]  # the other rank is quiet
    _two_ranks(config, again, "--resume")
    model, rerun = _weights(tmp_path / "run" / MODEL_NAME), _weights(again / MODEL_NAME)
    assert model.keys() == rerun.keys()
    for name, tensor in model.items():
        assert tensor.numpy().tobytes() == rerun[name].numpy().tobytes(), name
    assert sorted(path.name for path in again.iterdir()) == sorted(
        path.name for path in (tmp_path / "run").iterdir()
    )


@pytest.mark.slow
def test_a_rank_that_dies_ends_the_run_and_the_checkpoint_resumes(tmp_path: Path) -> None:
    config = _write_data(tmp_path)
    out = tmp_path / "run"
    # Far more epochs than the run lives: the other rank is killed as soon as rank 0 has
    # written its first checkpoint, so the run cannot end on its own first.
    ranks = _start_ranks(config, out, "--set", "train.epochs=500", "--set", "train.patience=500")
    try:
        checkpoint = out / CHECKPOINT_NAME
        rank_0 = ranks[0]
        hung = time.monotonic() + RUN_SECONDS  # no checkpoint by then: the run has hung
        while not checkpoint.exists():
            assert rank_0.poll() is None, rank_0.communicate()[1][-3000:]
            assert time.monotonic() < hung, "no checkpoint was written"
            time.sleep(0.02)
        ranks[1].kill()  # abruptly, mid-epoch: no chance to say anything
        _, stderr = rank_0.communicate(timeout=RUN_SECONDS)
    finally:
        for process in ranks:
            if process.poll() is None:
                process.kill()
            process.communicate()
    assert rank_0.returncode == 1, stderr[-3000:]
    last = stderr.splitlines()[-1]
    said = "tagger: error: rank 0 of 2: another training process stopped"
    assert last.startswith(said), stderr[-3000:]
    assert last.endswith("continue with the same command and --resume"), stderr[-3000:]

    # The checkpoint left behind loads, and --resume on two ranks goes on from its epoch.
    finished = len(json.loads((out / "epochs.json").read_text(encoding="utf-8")))
    assert finished >= 1
    assert _weights(checkpoint, "net.")
    more = str(finished + 1)
    resumed = _two_ranks(config, out, "--resume", "--set", f"train.epochs={more}")
    assert f"stopped: reached train.epochs={more}" in resumed[0]
    epochs = json.loads((out / "epochs.json").read_text(encoding="utf-8"))
    assert [row["epoch"] for row in epochs] == list(range(1, finished + 2))


@pytest.mark.slow
def test_a_diverged_run_on_two_ranks_names_its_scaled_rate(tmp_path: Path) -> None:
    config = _write_data(tmp_path)
    # Adam moves each weight by about the rate a step: at 1e30 the loss is infinite at once
    ranks = _start_ranks(config, tmp_path / "run", "--set", "train.learning_rate=1e30")
    said = []
    try:
        for process in ranks:
            said.append(process.communicate(timeout=RUN_SECONDS)[1])
    finally:
        for process in ranks:
            if process.poll() is None:
                process.kill()
                process.wait()
    assert "the training loss became" in said[0], said[0][-3000:]
    assert "(the rate was 1e+30 x 2 processes = 2e+30;" in said[0], said[0][-3000:]
    assert "the training loss became" not in said[1]  # rank 0 alone tells the outcome
