from __future__ import annotations

import json
import random
from pathlib import Path

import pytest
import torch

from tagger.apply.evaluate import evaluate_files
from tagger.apply.tagger import Tagger
from tagger.config import Config, config_from_dict
from tagger.network.modelfile import load_model_file
from tagger.network.net import TaggerNet
from tagger.training.loop import train

TINY = [
    [
        ("Crew", "O"),
        ("B", "O"),
        ("swapped", "O"),
        ("the", "O"),
        ("pitch", "B-COMP"),
        ("bearing", "I-COMP"),
        ("on", "O"),
        ("T-14", "B-ASSET"),
    ],
    [("Oil", "B-DEF"), ("leak", "I-DEF"), ("at", "O"), ("T-3", "B-ASSET")],
    [("vibration", "O"), ("hit", "O"), ("7.2", "B-READ"), ("mm/s", "I-READ")],
    [("replaced", "O"), ("yaw", "B-COMP"), ("drive", "I-COMP"), ("motor", "I-COMP")],
    [("T-9", "B-ASSET"), ("gearbox", "B-COMP"), ("overheating", "B-DEF")],
    [("no", "O"), ("fault", "O"), ("found", "O")],
]


def write_columns_file(path: Path, sentences: list[list[tuple[str, str]]]) -> Path:
    path.write_text(
        "".join("".join(f"{token}\t{label}\n" for token, label in s) + "\n" for s in sentences),
        encoding="utf-8",
    )
    return path


def small_config(train_path: Path, dev_path: Path | None, **sections: dict) -> Config:
    raw = {
        "data": {"train": str(train_path), "dev": str(dev_path) if dev_path else ""},
        "model": {
            "hidden_size": 24,
            "layers": 1,
            "word_dim": 16,
            "char_dim": 8,
            "char_features": 12,
            "dropout": 0.0,
        },
        "train": {
            "epochs": 40,
            "batch_size": 4,
            "learning_rate": 0.02,
            "patience": 100,
            "threads": 1,
            "unknown_replace": 0.0,
            "lr_schedule": "constant",
        },
    }
    for name, values in sections.items():
        raw[name] = {**raw.get(name, {}), **values}
    return config_from_dict(raw)


@pytest.fixture(scope="module")
def tiny_files(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("tiny")
    write_columns_file(folder / "train.txt", TINY)
    return folder


@pytest.mark.parametrize("output", ["crf", "softmax"])
def test_overfits_a_tiny_set(tiny_files: Path, tmp_path: Path, output: str) -> None:
    # Common practice: a network that cannot fit six sentences perfectly has a bug.
    data = tiny_files / "train.txt"
    result = train(small_config(data, data, model={"output": output}), tmp_path / "run")
    assert result.best_dev["micro"]["f1"] == 1.0
    tagger = Tagger.load(result.model_path)
    report = evaluate_files(tagger, [data])
    assert report["overall"]["micro"]["f1"] == 1.0


def _later_token_task(seed: int, sentences: int) -> list[list[tuple[str, str]]]:
    """'a' is an entity only when the NEXT token is 'x': only a model reading right-to-left can know."""
    rng = random.Random(seed)
    data = []
    for _ in range(sentences):
        tokens = [rng.choice("abxy") for _ in range(rng.randint(3, 9))]
        labels = [
            "B-T" if t == "a" and i + 1 < len(tokens) and tokens[i + 1] == "x" else "O"
            for i, t in enumerate(tokens)
        ]
        data.append(list(zip(tokens, labels, strict=True)))
    return data


@pytest.mark.parametrize("bidirectional", [True, False])
def test_a_label_that_depends_on_a_later_token(tmp_path: Path, bidirectional: bool) -> None:
    train_path = write_columns_file(tmp_path / "train.txt", _later_token_task(1, 300))
    dev_path = write_columns_file(tmp_path / "dev.txt", _later_token_task(2, 100))
    config = small_config(
        train_path,
        dev_path,
        model={"bidirectional": bidirectional, "char_encoder": "none", "output": "softmax"},
        train={"epochs": 12, "batch_size": 16, "learning_rate": 0.01},
    )
    f1 = train(config, tmp_path / "run").best_dev["micro"]["f1"]
    if bidirectional:
        assert f1 > 0.95
    else:
        assert f1 < 0.6  # at best it guesses "entity" for every 'a': precision about 1/4


def test_same_config_and_data_give_the_same_run(tiny_files: Path, tmp_path: Path) -> None:
    data = tiny_files / "train.txt"
    config = small_config(
        data, data, model={"dropout": 0.3}, train={"epochs": 4, "unknown_replace": 0.3}
    )
    first = train(config, tmp_path / "a").history
    second = train(config, tmp_path / "b").history
    strip = [
        {k: v for k, v in row.items() if k not in ("train_tokens_per_second", "epoch_seconds")}
        for row in first
    ]
    assert strip == [
        {k: v for k, v in row.items() if k not in ("train_tokens_per_second", "epoch_seconds")}
        for row in second
    ]


def test_training_uses_one_thread_unless_the_config_asks_for_more(
    tiny_files: Path, tmp_path: Path
) -> None:
    # Two threads on a shared 2-core machine ran several times slower than one
    # (benchmarks/threads.md), so a config that says nothing about threads trains on one.
    data = tiny_files / "train.txt"
    raw = small_config(data, data, train={"epochs": 1}).to_dict()
    del raw["train"]["threads"]
    before = torch.get_num_threads()
    try:
        torch.set_num_threads(2)
        train(config_from_dict(raw), tmp_path / "default")
        assert torch.get_num_threads() == 1
        train(small_config(data, data, train={"epochs": 1, "threads": 2}), tmp_path / "two")
        assert torch.get_num_threads() == 2
    finally:
        torch.set_num_threads(before)


class _KillAt:
    def __init__(self, epoch: int, batch: int) -> None:
        self.epoch, self.batch = epoch, batch

    def __call__(self, event: dict) -> None:
        if event["event"] == "batch" and (event["epoch"], event["batch"]) == (
            self.epoch,
            self.batch,
        ):
            raise KeyboardInterrupt


def test_resume_after_a_kill_equals_an_uninterrupted_run(tiny_files: Path, tmp_path: Path) -> None:
    data = tiny_files / "train.txt"
    config = small_config(
        data,
        data,
        model={"dropout": 0.3},
        train={"epochs": 5, "unknown_replace": 0.3, "lr_schedule": "exponential"},
    )
    whole = train(config, tmp_path / "whole")
    with pytest.raises(KeyboardInterrupt):
        train(config, tmp_path / "cut", progress=_KillAt(epoch=3, batch=1))
    assert [row["epoch"] for row in json.loads((tmp_path / "cut" / "epochs.json").read_text())] == [
        1,
        2,
    ]
    resumed = train(config, tmp_path / "cut", resume=True)
    assert [r["train_loss_per_token"] for r in resumed.history] == [
        r["train_loss_per_token"] for r in whole.history
    ]
    final_whole, _ = load_model_file(tmp_path / "whole" / "resume-state.tagger")
    final_resumed, _ = load_model_file(tmp_path / "cut" / "resume-state.tagger")
    for name, tensor in final_whole.items():
        assert torch.equal(tensor, final_resumed[name]), name


def test_resume_refuses_a_changed_config(tiny_files: Path, tmp_path: Path) -> None:
    data = tiny_files / "train.txt"
    train(small_config(data, data, train={"epochs": 1}), tmp_path / "run")
    from tagger.errors import ModelFileError

    with pytest.raises(ModelFileError, match="another config"):
        train(
            small_config(data, data, train={"epochs": 1, "learning_rate": 0.5}),
            tmp_path / "run",
            resume=True,
        )


def test_non_finite_loss_stops_and_keeps_the_last_good_model(
    tiny_files: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    data = tiny_files / "train.txt"
    calls = {"n": 0}
    real_loss = TaggerNet.loss

    def poisoned(self: TaggerNet, *args: torch.Tensor) -> torch.Tensor:
        calls["n"] += 1
        loss = real_loss(self, *args)
        return (
            loss * float("nan") if calls["n"] > 4 else loss
        )  # 2 batches per epoch: breaks in epoch 3

    monkeypatch.setattr(TaggerNet, "loss", poisoned)
    result = train(small_config(data, data, train={"epochs": 10}), tmp_path / "run")
    assert result.diverged
    assert "epoch 3, batch 1" in result.stop_reason and "keeps epoch" in result.stop_reason
    assert len(result.history) == 2
    assert Tagger.load(result.model_path).meta["epoch"] == result.best_epoch


def test_without_a_dev_file_a_seeded_part_of_train_is_held_out(tmp_path: Path) -> None:
    data = write_columns_file(tmp_path / "train.txt", TINY * 5)
    result = train(
        small_config(data, None, data={"dev_fraction": 0.2}, train={"epochs": 1}), tmp_path / "run"
    )
    assert any("held out" in note and "6 of 30" in note for note in result.notes)
    meta = json.loads((tmp_path / "run" / "outcome.json").read_text())
    assert meta["notes"] == result.notes


def test_types_seen_only_in_dev_are_scored_not_a_crash(tiny_files: Path, tmp_path: Path) -> None:
    dev = write_columns_file(
        tmp_path / "dev.txt", TINY + [[("new", "B-UNSEEN"), ("thing", "I-UNSEEN")]]
    )
    result = train(
        small_config(tiny_files / "train.txt", dev, train={"epochs": 2}), tmp_path / "run"
    )
    assert result.best_dev["per_type"]["UNSEEN"]["gold"] == 1
    assert result.best_dev["per_type"]["UNSEEN"]["correct"] == 0


def test_run_folder_holds_config_epochs_and_outcome(tiny_files: Path, tmp_path: Path) -> None:
    data = tiny_files / "train.txt"
    train(small_config(data, data, train={"epochs": 2}), tmp_path / "run")
    names = {p.name for p in (tmp_path / "run").iterdir()}
    assert names == {
        "README.txt",
        "resolved-config.toml",
        "epochs.json",
        "epochs.csv",
        "outcome.json",
        "model.tagger",
        "resume-state.tagger",
    }
    from tagger.config import load_config

    assert load_config(tmp_path / "run" / "resolved-config.toml") == small_config(
        data, data, train={"epochs": 2}
    )
    assert (tmp_path / "run" / "epochs.csv").read_text().count("\n") == 3


@pytest.mark.parametrize("header", [True, False], ids=["word2vec", "glove"])
def test_pretrained_vectors_initialise_the_embedding(
    tiny_files: Path, tmp_path: Path, header: bool
) -> None:
    lines = ["bearing " + " ".join(["0.5"] * 16), "leak " + " ".join(["-0.25"] * 16)]
    text = ("2 16\n" if header else "") + "\n".join(lines) + "\n"
    (tmp_path / "vectors.txt").write_text(text)
    data = tiny_files / "train.txt"
    config = small_config(
        data,
        data,
        model={"pretrained_vectors": str(tmp_path / "vectors.txt"), "vectors_use": "initialise"},
        train={"epochs": 1, "learning_rate": 0.0},
    )
    result = train(config, tmp_path / "run")
    tagger = Tagger.load(result.model_path)
    weight = tagger.net.words.weight
    assert torch.allclose(weight[tagger.vocabs.words.index("bearing")], torch.full((16,), 0.5))
    assert torch.allclose(weight[tagger.vocabs.words.index("leak")], torch.full((16,), -0.25))
    assert tagger.net.fixed_vectors is None


def test_by_default_text_vectors_become_a_frozen_table(tiny_files: Path, tmp_path: Path) -> None:
    lines = ["bearing " + " ".join(["0.5"] * 16), "unseen " + " ".join(["-0.25"] * 16)]
    (tmp_path / "vectors.txt").write_text("\n".join(lines) + "\n")
    data = tiny_files / "train.txt"
    config = small_config(data, data, model={"pretrained_vectors": str(tmp_path / "vectors.txt")})
    tagger = Tagger.load(train(config, tmp_path / "run").model_path)
    table = tagger.net.fixed_vectors.table
    (encoded,) = tagger.encode([["unseen", "bearing", "gasket"]])
    # a word of the file that train lacks reads its row; a word in neither reads zeros
    assert torch.equal(table[encoded.bags[0]].mean(0), torch.full((16,), -0.25))
    assert torch.equal(table[encoded.bags[1]].mean(0), torch.full((16,), 0.5))
    assert encoded.bags[2] == []


def test_with_weight_averaging_the_model_file_holds_the_average(
    tiny_files: Path, tmp_path: Path
) -> None:
    data = tiny_files / "train.txt"
    # One epoch: its dev score is the first, so the model saved is that epoch's average.
    train(small_config(data, data, train={"epochs": 1, "weight_average": 0.9}), tmp_path / "run")
    tensors, _ = load_model_file(tmp_path / "run" / "resume-state.tagger")
    # torch's AveragedModel counts the starting weights as the first model averaged.
    assert int(tensors["average.n_averaged"]) == 1 + 2  # 6 sentences in batches of 4: 2 steps
    saved = dict(Tagger.load(tmp_path / "run" / "model.tagger").net.named_parameters())
    averaged = {k[len("average.module.") :]: v for k, v in tensors.items() if "module." in k}
    assert set(averaged) >= set(saved) and saved
    for name, kept in saved.items():
        assert torch.equal(kept.detach(), averaged[name]), name
    assert not all(torch.equal(averaged[name], tensors[f"net.{name}"]) for name in saved)


def test_resume_with_weight_averaging_equals_an_uninterrupted_run(
    tiny_files: Path, tmp_path: Path
) -> None:
    data = tiny_files / "train.txt"
    config = small_config(
        data, data, model={"dropout": 0.3}, train={"epochs": 4, "weight_average": 0.95}
    )
    train(config, tmp_path / "whole")
    with pytest.raises(KeyboardInterrupt):
        train(config, tmp_path / "cut", progress=_KillAt(epoch=3, batch=1))
    train(config, tmp_path / "cut", resume=True)
    whole, _ = load_model_file(tmp_path / "whole" / "resume-state.tagger")
    resumed, _ = load_model_file(tmp_path / "cut" / "resume-state.tagger")
    assert any(name.startswith("average.") for name in whole)
    for name, tensor in whole.items():
        assert torch.equal(tensor, resumed[name]), name
    for name in ("whole", "cut"):
        model = load_model_file(tmp_path / name / "model.tagger")[0]
        assert all(
            torch.equal(t, model[k])
            for k, t in load_model_file(tmp_path / "whole" / "model.tagger")[0].items()
        )


def test_a_second_run_in_a_busy_folder_is_refused(tiny_files: Path, tmp_path: Path) -> None:
    from tagger.data.atomic import exclusive_folder
    from tagger.errors import FolderBusyError

    data = tiny_files / "train.txt"
    run = tmp_path / "run"
    run.mkdir()
    with exclusive_folder(run), pytest.raises(FolderBusyError, match="another process"):
        train(small_config(data, data, train={"epochs": 1}), run)
    assert not (run / "model.tagger").exists()
    train(small_config(data, data, train={"epochs": 1}), run)  # free again afterwards
    assert (run / "model.tagger").exists()


def test_a_checkpoint_from_before_a_new_config_key_still_resumes(
    tiny_files: Path, tmp_path: Path
) -> None:
    from tagger.network.modelfile import save_model_file

    data = tiny_files / "train.txt"
    config = small_config(data, data, train={"epochs": 2})
    train(config, tmp_path / "run")
    checkpoint = tmp_path / "run" / "resume-state.tagger"
    tensors, meta = load_model_file(checkpoint)
    del meta["config"]["train"]["weight_average"]  # as written before the key existed
    save_model_file(checkpoint, tensors, meta)
    resumed = train(config, tmp_path / "run", resume=True)
    assert [row["epoch"] for row in resumed.history] == [1, 2]  # taken over, nothing retrained
    meta["config"]["train"]["learning_rate"] = 0.5  # a real difference is still refused
    save_model_file(checkpoint, tensors, meta)
    from tagger.errors import ModelFileError

    with pytest.raises(ModelFileError, match="another config"):
        train(config, tmp_path / "run", resume=True)


def test_the_configs_tokenizer_table_travels_in_the_model(tiny_files: Path, tmp_path: Path) -> None:
    data = tiny_files / "train.txt"
    config = small_config(data, data, train={"epochs": 1}, tokenizer={"split_hyphens": True})
    tagger = Tagger.load(train(config, tmp_path / "run").model_path)
    assert tagger.tokenizer_settings.split_hyphens
    # the stored settings are the ones tagging uses: "T-14" is cut at its hyphen
    words = [t.text for s in tagger.tokenize("Crew checked T-14 today.") for t in s.tokens]
    assert words[:5] == ["Crew", "checked", "T", "-", "14"]


# --- resuming with a changed config --------------------------------------------------------------


def _notes(into: list[str]):
    def progress(event: dict) -> None:
        if event["event"] == "note":
            into.append(event["message"])

    return progress


def _losses(history: list[dict]) -> list[float]:
    return [row["train_loss_per_token"] for row in history]


def test_resume_names_every_changed_key_it_refuses(tiny_files: Path, tmp_path: Path) -> None:
    from tagger.errors import ModelFileError

    data = tiny_files / "train.txt"
    train(small_config(data, data, train={"epochs": 1}), tmp_path / "run")
    changed = small_config(
        data, data, model={"hidden_size": 30}, train={"epochs": 3, "learning_rate": 0.5}
    )
    with pytest.raises(ModelFileError) as error:
        train(changed, tmp_path / "run", resume=True)
    message = str(error.value)
    assert "model.hidden_size 24 -> 30; train.learning_rate 0.02 -> 0.5." in message
    assert "train.epochs" not in message.split("Only")[0]  # allowed, so not among the refused
    assert (
        "Only train.epochs, train.patience, train.max_minutes, train.threads may change" in message
    )


def test_resume_with_more_epochs_goes_on_as_one_longer_run(
    tiny_files: Path, tmp_path: Path
) -> None:
    data = tiny_files / "train.txt"
    config = small_config(data, data, model={"dropout": 0.3}, train={"epochs": 4})
    whole = train(config, tmp_path / "whole")
    train(small_config(data, data, model={"dropout": 0.3}, train={"epochs": 2}), tmp_path / "cut")
    notes: list[str] = []
    resumed = train(config, tmp_path / "cut", resume=True, progress=_notes(notes))
    assert [row["epoch"] for row in resumed.history] == [1, 2, 3, 4]
    assert _losses(resumed.history) == _losses(whole.history)
    assert "resuming with train.epochs 2 -> 4" in notes
    from tagger.config import load_config

    assert load_config(tmp_path / "cut" / "resolved-config.toml").train.epochs == 4


def test_resume_with_more_patience_continues_a_run_patience_stopped(
    tiny_files: Path, tmp_path: Path
) -> None:
    data = tiny_files / "train.txt"
    # Nothing is learnt at learning rate 0, so dev F1 never improves after epoch 1.
    frozen = {"epochs": 10, "learning_rate": 0.0, "patience": 1, "threads": 1}
    stopped = train(small_config(data, data, train=frozen), tmp_path / "run")
    assert [row["epoch"] for row in stopped.history] == [1, 2]
    assert stopped.stop_reason == "no better dev F1 for 1 epochs (train.patience=1)"
    again = train(small_config(data, data, train=frozen), tmp_path / "run", resume=True)
    assert [row["epoch"] for row in again.history] == [1, 2]  # the same patience: still stopped
    patient = {**frozen, "patience": 3, "threads": 2}
    notes: list[str] = []
    resumed = train(
        small_config(data, data, train=patient),
        tmp_path / "run",
        resume=True,
        progress=_notes(notes),
    )
    assert [row["epoch"] for row in resumed.history] == [1, 2, 3, 4]
    assert resumed.stop_reason == "no better dev F1 for 3 epochs (train.patience=3)"
    assert "resuming with train.patience 1 -> 3; train.threads 1 -> 2" in notes


def test_resume_without_the_time_budget_continues_a_run_it_stopped(
    tiny_files: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from tagger.training import budget

    clock = {"now": 500.0}

    def tick(event: dict) -> None:  # every epoch takes 40 seconds of the fake clock
        if event["event"] == "batch" and event["batch"] == 1:
            clock["now"] += 40.0

    monkeypatch.setattr(budget, "now", lambda: clock["now"])
    data = tiny_files / "train.txt"
    frozen = {"epochs": 4, "learning_rate": 0.0, "max_minutes": 1.0}
    stopped = train(small_config(data, data, train=frozen), tmp_path / "run", progress=tick)
    # 40, 80 seconds: the minute is used after epoch 2; epoch 1 was the best (nothing is learnt),
    # so the reason does not say dev F1 was still improving.
    assert [row["epoch"] for row in stopped.history] == [1, 2]
    assert stopped.stop_reason == "time budget of train.max_minutes=1.0 used"
    unbounded = {**frozen, "max_minutes": 0.0}
    resumed = train(
        small_config(data, data, train=unbounded), tmp_path / "run", resume=True, progress=tick
    )
    assert [row["epoch"] for row in resumed.history] == [1, 2, 3, 4]
    assert resumed.stop_reason == "reached train.epochs=4"


def test_a_config_with_relative_paths_trains_from_any_folder(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from typer.testing import CliRunner

    from tagger.cli import app
    from tagger.config import load_config

    project = tmp_path / "project"
    for folder in ("data", "configs"):
        (project / folder).mkdir(parents=True)
    write_columns_file(project / "data" / "t.txt", TINY)
    (project / "configs" / "c.toml").write_text(
        '[data]\ntrain = "../data/t.txt"\ndev = "../data/t.txt"\n'
        "[model]\nhidden_size = 8\nlayers = 1\nword_dim = 8\nchar_encoder = 'none'\n"
        "[train]\nepochs = 1\nthreads = 1\n"
    )
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    runner = CliRunner()
    result = runner.invoke(app, ["train", "--config", "../project/configs/c.toml", "--out", "run"])
    assert result.exit_code == 0, result.stderr
    # A file named on the command line is read from the current folder; the run folder's
    # resolved-config.toml names every file absolutely, so it reads back from anywhere too.
    write_columns_file(elsewhere / "mine.txt", TINY)
    result = runner.invoke(
        app,
        ["train", "--config", "../project/configs/c.toml", "--train", "mine.txt", "--out", "r2"],
    )
    assert result.exit_code == 0, result.stderr
    monkeypatch.chdir(tmp_path)
    saved = load_config(elsewhere / "r2" / "resolved-config.toml")
    assert saved.data.train == str(elsewhere / "mine.txt")
    assert saved.data.dev == str(project / "data" / "t.txt")


def test_the_final_scores_count_dev_tokens_as_evaluate_does(
    tiny_files: Path, tmp_path: Path
) -> None:
    from tagger.training.records import OUTCOME_NAME

    data = tiny_files / "train.txt"
    result = train(small_config(data, data, train={"epochs": 3}), tmp_path / "run")
    dev = json.loads((tmp_path / "run" / OUTCOME_NAME).read_text())["dev"]
    assert dev["tokens"] == sum(len(sentence) for sentence in TINY)
    assert dev == result.best_dev
    evaluated = evaluate_files(Tagger.load(result.model_path), [data])["overall"]
    assert evaluated["tokens"] == dev["tokens"]
    assert dev["token_accuracy"] == pytest.approx(evaluated["token_accuracy"])
    assert dev["token_accuracy"] > 0
