"""SIGTERM sent to a running `tagger` process: it unwinds as on Ctrl-C (the partial output's
temporary file removed, the run folder's lock released) and exits 143 with one line.

Each test runs the command line in a child process and signals it at a known point: while
tagging, when its output is open and it waits for more input on a FIFO; while
training, once an epoch is checkpointed. The waits poll for that state with a generous deadline that
only guards against a hang; nothing is timed."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
HANG_GUARD_SECONDS = 300

GOLD = "Crew\tO\nswapped\tO\npitch\tB-COMP\nbearing\tI-COMP\non\tO\nT-14\tB-ASSET\n\n"


def _tagger(*args: str, cwd: Path) -> subprocess.Popen[str]:
    environment = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen(
        [sys.executable, "-m", "tagger", *args],
        cwd=cwd,
        env=environment,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )


def _wait_for(condition: Callable[[], bool], process: subprocess.Popen[str], what: str) -> None:
    deadline = time.monotonic() + HANG_GUARD_SECONDS
    while not condition():
        if process.poll() is not None:
            pytest.fail(f"the command ended before {what}: {process.communicate()}")
        if time.monotonic() > deadline:
            process.kill()
            pytest.fail(f"no sign of {what} in {HANG_GUARD_SECONDS} s")
        time.sleep(0.05)


@contextmanager
def _ctrl_c_heard() -> Iterator[None]:
    """SIGINT handled, not ignored, while the block starts a process: a test run started in the
    background by a shell without job control inherits an ignored SIGINT, a child would inherit
    it too, and Python keeps an ignored SIGINT ignored (the command then never hears Ctrl-C)."""
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def _temporary_files(folder: Path) -> list[str]:
    return [p.name for p in folder.rglob("*") if p.name.endswith(".tmp")]


@pytest.fixture(scope="module")
def model(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from tagger.config import config_from_dict
    from tagger.training.loop import train

    folder = tmp_path_factory.mktemp("signals")
    data = folder / "train.txt"
    data.write_text(GOLD * 4, encoding="utf-8")
    config = config_from_dict(
        {
            "data": {"train": str(data), "dev": str(data)},
            "model": {"hidden_size": 8, "layers": 1, "word_dim": 8, "char_dim": 4,
                      "char_features": 4},
            "train": {"epochs": 1, "threads": 1},
        }
    )  # fmt: skip
    return train(config, folder / "run").model_path


@pytest.mark.slow
def test_sigterm_while_tagging_leaves_no_partial_output(model: Path, tmp_path: Path) -> None:
    feed = tmp_path / "in.jsonl"
    os.mkfifo(feed)
    out = tmp_path / "out.jsonl"
    process = _tagger(
        "tag", str(model), str(feed), "--out", str(out), "--chunk-chars", "1", cwd=tmp_path
    )
    with open(feed, "w", encoding="utf-8") as writer:  # opens once the command reads it
        writer.write(json.dumps({"id": "1", "text": "Crew swapped the pitch bearing."}) + "\n")
        writer.flush()

        # The output is open (written aside) and the command waits for the next line.
        _wait_for(lambda: bool(_temporary_files(tmp_path)), process, "the output being written")
        process.send_signal(signal.SIGTERM)
        _, stderr = process.communicate(timeout=HANG_GUARD_SECONDS)
    assert process.returncode == 143, stderr
    assert stderr == "tagger: terminated (SIGTERM); unfinished output files were removed\n"
    assert _temporary_files(tmp_path) == [] and not out.exists()


@pytest.mark.slow
def test_sigterm_while_training_keeps_the_last_epoch_and_no_lock(tmp_path: Path) -> None:
    gold = tmp_path / "gold.txt"
    gold.write_text(GOLD * 4, encoding="utf-8")
    run = tmp_path / "run"
    settings = [
        "model.hidden_size=8", "model.layers=1", "model.word_dim=8", "model.char_dim=4",
        "train.epochs=100000", "train.patience=100000", "train.threads=1",
    ]  # fmt: skip
    arguments = ["train", "--train", str(gold), "--dev", str(gold), "--out", str(run)]
    for setting in settings:
        arguments += ["--set", setting]
    process = _tagger(*arguments, cwd=tmp_path)
    _wait_for(lambda: (run / "resume-state.tagger").exists(), process, "a checkpoint")
    process.send_signal(signal.SIGTERM)
    _, stderr = process.communicate(timeout=HANG_GUARD_SECONDS)
    assert process.returncode == 143, stderr
    assert stderr.splitlines()[-1] == (
        f"tagger: terminated (SIGTERM): continue with the same command and --resume "
        f"(run folder {run})"
    )
    assert _temporary_files(tmp_path) == [] and not (run / ".lock").exists()
    assert (run / "resume-state.tagger").exists() and not (run / "outcome.json").exists()
    # The unfinished run is kept from a plain retrain, which names the way on.
    again = _tagger(*arguments, cwd=tmp_path)
    _, stderr = again.communicate(timeout=HANG_GUARD_SECONDS)
    assert again.returncode == 1
    assert "holds an unfinished run" in stderr and "continue it with --resume" in stderr


@pytest.mark.slow
def test_ctrl_c_while_workers_tag_is_one_line_and_exits_130(model: Path, tmp_path: Path) -> None:
    # Ctrl-C at a terminal signals the whole process group: the command and its two workers.
    # The input is generated and fed through a FIFO kept open, so the run cannot end before the
    # signal; it is sent once tagged output reaches the output's temporary file.
    feed = tmp_path / "in.jsonl"
    os.mkfifo(feed)
    out = tmp_path / "out.jsonl"
    environment = {**os.environ, "PYTHONPATH": str(ROOT)}
    arguments = ["tag", str(model), str(feed), "--out", str(out), "--workers", "2"]
    with _ctrl_c_heard():
        process = subprocess.Popen(
            [sys.executable, "-m", "tagger", *arguments, "--chunk-chars", "200"],
            cwd=tmp_path,
            env=environment,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            start_new_session=True,  # its own process group, as a terminal's foreground job has
        )
    record = json.dumps({"text": "Crew swapped the pitch bearing on T-14. Oil leak found."})

    def tagged_output_written() -> bool:
        writer.write((record + "\n") * 50)
        writer.flush()
        return any((tmp_path / name).stat().st_size for name in _temporary_files(tmp_path))

    with open(feed, "w", encoding="utf-8") as writer:
        _wait_for(tagged_output_written, process, "tagged output")
        os.killpg(process.pid, signal.SIGINT)
        _, stderr = process.communicate(timeout=HANG_GUARD_SECONDS)
    assert process.returncode == 130, stderr
    assert stderr == "tagger: interrupted; unfinished output files were removed\n"
    assert _temporary_files(tmp_path) == [] and not out.exists()
