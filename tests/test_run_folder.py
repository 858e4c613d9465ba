"""Tests for starting a run (tagger.training.run_folder, through `train`): what is checked before any
work, a run folder holding a run is not trained into by accident, a failed start leaves nothing
behind, a finished run leaves no lock file; the folder's README.txt, and folders written under
the earlier file names."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from tagger.config import Config, config_from_dict
from tagger.data.atomic import LOCK_NAME
from tagger.data.corpus import Sentence
from tagger.errors import ConfigError, DataError, OutputError
from tagger.training.loop import train, train_on_sentences
from tagger.training.records import EARLIER_NAMES, GUIDE_NAME
from tagger.training.run_folder import RUN_FILES, check_named_files

ROWS = [
    [("Crew", "O"), ("swapped", "O"), ("pitch", "B-COMP"), ("bearing", "I-COMP")],
    [("Oil", "B-DEF"), ("leak", "I-DEF"), ("at", "O"), ("T-3", "B-ASSET")],
    [("replaced", "O"), ("yaw", "B-COMP"), ("drive", "I-COMP")],
    [("no", "O"), ("fault", "O"), ("found", "O")],
]


def _columns(path: Path, rows: list[list[tuple[str, str]]] = ROWS) -> Path:
    path.write_text("".join("".join(f"{t}\t{y}\n" for t, y in s) + "\n" for s in rows))
    return path


def _config(train_file: Path, epochs: int = 1, **model: object) -> Config:
    return config_from_dict(
        {
            "data": {"train": str(train_file), "dev": str(train_file)},
            "model": {"hidden_size": 8, "layers": 1, "word_dim": 8, "char_dim": 4,
                      "char_features": 4, **model},
            "train": {"epochs": epochs, "batch_size": 2, "threads": 1, "patience": 100},
        }
    )  # fmt: skip


@pytest.fixture()
def data(tmp_path: Path) -> Path:
    return _columns(tmp_path / "train.txt")


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


# --- a folder that holds a run ---------------------------------------------------------------------


def test_a_finished_run_is_not_replaced_without_overwrite(data: Path, tmp_path: Path) -> None:
    run = tmp_path / "run"
    train(_config(data), run)
    before = _snapshot(run)
    assert "outcome.json" in before and LOCK_NAME not in before  # finished: no lock file
    with pytest.raises(OutputError) as refused:
        train(_config(data, epochs=2), run)
    message = str(refused.value)
    assert message.startswith(f"{run} holds a finished run (model.tagger, resume-state.tagger")
    assert "--overwrite" in message and "another folder with --out" in message
    assert "--resume" not in message  # a finished run has nothing to continue
    assert _snapshot(run) == before


def test_an_unfinished_run_is_refused_naming_resume(data: Path, tmp_path: Path) -> None:
    run = tmp_path / "run"

    def stop_in_epoch_two(event: dict) -> None:
        if event["event"] == "batch" and event["epoch"] == 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        train(_config(data, epochs=3), run, progress=stop_in_epoch_two)
    assert not (run / "outcome.json").exists() and not (run / LOCK_NAME).exists()
    with pytest.raises(OutputError, match="holds an unfinished run") as refused:
        train(_config(data, epochs=3), run)
    assert "continue it with --resume" in str(refused.value)
    resumed = train(_config(data, epochs=3), run, resume=True)  # resuming still works
    assert [row["epoch"] for row in resumed.history] == [1, 2, 3]
    assert not (run / LOCK_NAME).exists()


def test_overwrite_replaces_the_run_and_keeps_other_files(data: Path, tmp_path: Path) -> None:
    run = tmp_path / "run"
    train(_config(data, epochs=2), run)
    (run / "notes.txt").write_text("mine")
    result = train(_config(data, epochs=1), run, overwrite=True)
    assert [row["epoch"] for row in result.history] == [1]
    assert len(json.loads((run / "epochs.json").read_text())) == 1
    assert (run / "notes.txt").read_text() == "mine"
    assert {p.name for p in run.iterdir()} == {"notes.txt", *RUN_FILES}


def test_overwrite_that_fails_to_start_keeps_the_earlier_run(data: Path, tmp_path: Path) -> None:
    run = tmp_path / "run"
    train(_config(data), run)
    before = _snapshot(run)
    vectors = tmp_path / "vectors.txt"
    vectors.write_text("pitch 0.5 0.5\nbearing 0.5\n")  # readable, but not word vectors
    with pytest.raises(DataError, match="expected 2 numbers"):
        train(_config(data, pretrained_vectors=str(vectors)), run, overwrite=True)
    assert _snapshot(run) == before


def test_resume_and_overwrite_exclude_each_other(data: Path, tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="choose one"):
        train(_config(data), tmp_path / "run", resume=True, overwrite=True)
    assert not (tmp_path / "run").exists()


def test_a_model_alone_in_the_folder_is_not_replaced(data: Path, tmp_path: Path) -> None:
    run = tmp_path / "run"
    run.mkdir()
    (run / "model.tagger").write_bytes(b"someone's model")
    with pytest.raises(OutputError, match=r"holds a model \(model.tagger\)"):
        train(_config(data), run)
    assert (run / "model.tagger").read_bytes() == b"someone's model"


# --- a failed start leaves nothing behind ----------------------------------------------------------


def test_a_bad_training_file_leaves_no_folder_and_no_lock(data: Path, tmp_path: Path) -> None:
    bad = tmp_path / "bad.txt"
    bad.write_text("Crew\tO\nswapped\tO\textra\n\n")
    run = tmp_path / "new" / "nested" / "run"
    with pytest.raises(DataError, match=f"{bad}:2"):
        train(_config(bad), run)
    assert not (tmp_path / "new").exists()  # every folder the run made, and only those


def test_a_failed_start_in_an_existing_folder_keeps_the_folder(tmp_path: Path) -> None:
    run = tmp_path / "run"
    run.mkdir()
    with pytest.raises(ConfigError, match="no training file"):
        train(Config(), run)
    empty = tmp_path / "empty.txt"
    empty.write_text("")
    with pytest.raises(DataError, match="holds no sentences"):
        train(_config(empty), run)
    assert run.is_dir() and list(run.iterdir()) == []  # the user's folder, and no lock file


@pytest.mark.parametrize("key", ["lexicons", "pretrained_vectors", "train", "dev"])
def test_a_file_the_config_names_is_checked_before_anything_is_made(
    data: Path, tmp_path: Path, key: str
) -> None:
    missing = tmp_path / "missing.txt"
    config = _config(data)
    raw = config.to_dict()
    section = "data" if key in ("train", "dev") else "model"
    raw[section][key] = [str(missing)] if key == "lexicons" else str(missing)
    with pytest.raises(DataError) as refused:
        train(config_from_dict(raw), tmp_path / "run")
    assert str(refused.value).startswith(f"{missing}: cannot open the ")
    assert "No such file" in str(refused.value)
    assert not (tmp_path / "run").exists()


def test_sentences_in_memory_need_no_files_but_named_ones_are_checked(tmp_path: Path) -> None:
    sentences = [Sentence.from_tokens([t for t, _ in s], [y for _, y in s]) for s in ROWS]
    config = _config(tmp_path / "never-read.txt")
    train_on_sentences(sentences, sentences, config, tmp_path / "run")
    assert not (tmp_path / "run" / LOCK_NAME).exists()
    raw = config.to_dict()
    raw["model"]["lexicons"] = [str(tmp_path / "gone.txt")]
    with pytest.raises(DataError, match="cannot open the lexicon"):
        train_on_sentences(sentences, sentences, config_from_dict(raw), tmp_path / "other")
    assert not (tmp_path / "other").exists()


def test_a_named_folder_is_not_a_readable_file(data: Path, tmp_path: Path) -> None:
    raw = _config(data).to_dict()
    raw["model"]["pretrained_vectors"] = str(tmp_path)
    with pytest.raises(DataError, match="cannot open the word vectors file: it is a folder"):
        check_named_files(config_from_dict(raw))


def test_a_run_folder_that_cannot_be_made_is_one_error(data: Path, tmp_path: Path) -> None:
    blocker = tmp_path / "taken"
    blocker.write_text("a file")
    with pytest.raises(OutputError, match="cannot make the run folder: a file has that name"):
        train(_config(data), blocker)
    with pytest.raises(OutputError, match="cannot make the run folder: Not a directory"):
        train(_config(data), blocker / "run")
    assert blocker.read_text() == "a file"


def test_a_run_folder_in_a_read_only_folder(
    data: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def refused(self: Path, *args: object, **kwargs: object) -> None:
        raise PermissionError(13, os.strerror(13), str(self))

    monkeypatch.setattr(Path, "mkdir", refused)  # as a folder without write permission answers
    with pytest.raises(OutputError) as found:
        train(_config(data), tmp_path / "run")
    assert str(found.value) == f"{tmp_path / 'run'}: cannot make the run folder: Permission denied"


def test_the_lock_is_held_while_training(data: Path, tmp_path: Path) -> None:
    run = tmp_path / "run"
    seen = []

    def look(event: dict) -> None:
        if event["event"] == "epoch":
            seen.append((run / LOCK_NAME).read_text())

    train(_config(data, epochs=2), run, progress=look)
    assert seen == [str(os.getpid())] * 2
    assert not (run / LOCK_NAME).exists()


@pytest.mark.parametrize(
    ("key", "value"),
    [("learning_rate", "nan"), ("clip_norm", "inf"), ("lr_decay", "-inf"), ("max_minutes", "nan")],
)
def test_config_values_must_be_finite(key: str, value: str) -> None:
    with pytest.raises(ConfigError, match=f"train.{key} must be a finite number"):
        config_from_dict({"train": {key: float(value)}})
    # No time budget may be spelt as an infinite one.
    assert config_from_dict({"train": {"max_minutes": float("inf")}}).train.max_minutes > 1e308


# --- the folder's file names, its README.txt and folders of the earlier names ----------------------


def _stop_in_epoch_two(event: dict) -> None:
    if event["event"] == "batch" and event["epoch"] == 2:
        raise KeyboardInterrupt


def _to_earlier_names(run: Path) -> list[str]:
    """Give a run folder the names the release before this one wrote (the contents are alike)."""
    (run / GUIDE_NAME).unlink()  # that release wrote no README.txt
    present = []
    for earlier, now in EARLIER_NAMES.items():
        if (run / now).exists():
            (run / now).rename(run / earlier)
            present.append(earlier)
    return present


def test_readme_lists_every_file_and_says_how_the_run_ended(data: Path, tmp_path: Path) -> None:
    stopped, finished = tmp_path / "stopped", tmp_path / "finished"
    with pytest.raises(KeyboardInterrupt):
        train(_config(data, epochs=3), stopped, progress=_stop_in_epoch_two)
    result = train(_config(data, epochs=2), finished)
    for run in (stopped, finished):
        lines = (run / "README.txt").read_text().splitlines()
        assert all(len(line) <= 88 for line in lines)
        # A line that starts at the margin names a file; its description may wrap under it.
        listed = [line.split()[0] for line in lines[2:] if line and not line[0].isspace()]
        assert listed[: len(RUN_FILES)] == [
            "README.txt",
            "resolved-config.toml",
            "epochs.json",
            "epochs.csv",
            "outcome.json",
            "resume-state.tagger",
            "model.tagger",
        ]
        assert sorted(listed[: len(RUN_FILES)]) == sorted(RUN_FILES)
    last = {
        run: " ".join((run / "README.txt").read_text().split("\n\n")[-1].split())
        for run in (stopped, finished)
    }
    assert "the same train command with --resume continues it" in last[stopped]
    assert last[finished] == f"The run has ended: {result.stop_reason}."
    assert result.stop_reason == "reached train.epochs=2"


def test_a_folder_of_the_earlier_names_resumes_and_is_renamed(data: Path, tmp_path: Path) -> None:
    run = tmp_path / "run"
    with pytest.raises(KeyboardInterrupt):
        train(_config(data, epochs=3), run, progress=_stop_in_epoch_two)
    earlier = _to_earlier_names(run)
    assert earlier == ["config.toml", "history.json", "history.csv", "checkpoint.tagger"]
    with pytest.raises(OutputError, match=r"holds an unfinished run \(model.tagger, checkpoint"):
        train(_config(data, epochs=3), run)  # still a run, under its earlier names
    events: list[dict] = []
    resumed = train(_config(data, epochs=3), run, resume=True, progress=events.append)
    notes = [e["message"] for e in events if e["event"] == "note"]
    assert notes[0] == (
        f"{run} uses the earlier file names (config.toml, history.json, history.csv, "
        "checkpoint.tagger); they are renamed once to the new names (resolved-config.toml, "
        "epochs.json, epochs.csv, resume-state.tagger)"
    )
    assert any(n.startswith("resuming after epoch 1 from ") for n in notes)
    # Only epochs 2 and 3 ran: the earlier checkpoint and history were read, not started over.
    assert [e["epoch"] for e in events if e["event"] == "epoch"] == [2, 3]
    assert [row["epoch"] for row in resumed.history] == [1, 2, 3]
    assert {p.name for p in run.iterdir()} == set(RUN_FILES)
    assert len(json.loads((run / "epochs.json").read_text())) == 3


def test_a_finished_run_of_the_earlier_names_is_refused_or_replaced(
    data: Path, tmp_path: Path
) -> None:
    run = tmp_path / "run"
    train(_config(data), run)
    _to_earlier_names(run)
    (run / "notes.txt").write_text("mine")
    with pytest.raises(OutputError) as refused:
        train(_config(data), run)
    assert str(refused.value).startswith(
        f"{run} holds a finished run (model.tagger, checkpoint.tagger, metrics.json)"
    )
    train(_config(data), run, overwrite=True)
    assert {p.name for p in run.iterdir()} == {"notes.txt", *RUN_FILES}
