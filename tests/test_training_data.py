"""What a run trains on (tagger.training.data): sentences from files or from memory, the dev set
held out of train, and the data fingerprint that guards --resume."""

from __future__ import annotations

import json
import random
from pathlib import Path

import pytest
from test_train import TINY, small_config, write_columns_file

from tagger.config import Config, apply_overrides, config_from_dict, load_config
from tagger.data.corpus import Sentence
from tagger.errors import ModelFileError
from tagger.network.modelfile import load_model_file
from tagger.training.data import data_fingerprint, hold_out_dev
from tagger.training.loop import train, train_on_sentences

TIMING = ("train_tokens_per_second", "epoch_seconds")


def _sentences(sizes: list[int]) -> list[Sentence]:
    """Documents of the given numbers of sentences; each sentence names its document."""
    return [
        Sentence.from_tokens([f"d{document}", f"s{i}"], ["B-DOC", "O"], document=document)
        for document, size in enumerate(sizes)
        for i in range(size)
    ]


def _holdout_config(holdout: str = "random", seed: int = 1, fraction: float = 0.2) -> Config:
    return config_from_dict(
        {"data": {"dev_holdout": holdout, "dev_fraction": fraction}, "train": {"seed": seed}}
    )


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
def test_with_documents_whole_documents_are_held_out(seed: int) -> None:
    train = _sentences([3, 4, 2, 5, 6])
    kept, dev, note = hold_out_dev(train, _holdout_config(seed=seed))
    held_documents = {s.document for s in dev}
    assert held_documents.isdisjoint(s.document for s in kept)
    assert len(kept) + len(dev) == 20
    assert len(dev) >= 4  # round(20 * 0.2) sentences at least
    assert kept  # a document always stays to train on
    # Documents are added until the target is reached: without the last one it was not.
    sizes = [3, 4, 2, 5, 6]
    assert any(len(dev) - sizes[document] < 4 for document in held_documents)
    assert f"a random draw (seed {seed}) of {len(held_documents)} of 5 documents" in note
    assert f"{len(dev)} of 20 training sentences" in note and "whole documents" in note
    assert hold_out_dev(train, _holdout_config(seed=seed)) == (kept, dev, note)  # seeded


def test_different_seeds_draw_different_documents() -> None:
    train = _sentences([3, 4, 2, 5, 6])
    draws = {
        frozenset(s.document for s in hold_out_dev(train, _holdout_config(seed=seed))[1])
        for seed in range(1, 9)
    }
    assert len(draws) > 1


def test_the_last_documents_are_held_out_when_asked() -> None:
    kept, dev, note = hold_out_dev(_sentences([3, 4, 2, 5, 6]), _holdout_config("last"))
    assert {s.document for s in dev} == {4}  # its 6 sentences reach the target of 4 alone
    assert "the last 1 of 5 documents" in note


def test_without_document_marks_sentences_are_drawn_one_by_one() -> None:
    train = _sentences([20])
    kept, dev, note = hold_out_dev(train, _holdout_config(seed=7))
    order = list(range(20))
    random.Random(7).shuffle(order)  # the documented draw: a seeded shuffle, the last 4 held
    assert dev == [s for i, s in enumerate(train) if i in set(order[-4:])]
    assert kept == [s for i, s in enumerate(train) if i not in set(order[-4:])]
    assert note == (
        "no dev file: held out a random draw (seed 7) of 4 of 20 training sentences "
        "(data.dev_fraction=0.2) to choose the best epoch"
    )


def test_a_training_file_with_documents_holds_out_whole_documents(tmp_path: Path) -> None:
    documents = [TINY[:3], TINY[3:], TINY[:2], TINY[2:5]]
    text = "".join(
        "-DOCSTART- O\n\n" + "".join("".join(f"{t}\t{lab}\n" for t, lab in s) + "\n" for s in doc)
        for doc in documents
    )
    (tmp_path / "train.txt").write_text(text, encoding="utf-8")
    config = small_config(tmp_path / "train.txt", None, train={"epochs": 1})
    result = train(config, tmp_path / "run")
    assert any("of 4 documents" in note and "whole documents" in note for note in result.notes)


def test_the_fingerprint_follows_tokens_labels_and_documents() -> None:
    train = _sentences([2, 2])
    base = data_fingerprint(train, None, [])
    assert data_fingerprint(_sentences([2, 2]), None, []) == base
    relabelled = [train[0].with_labels(["O", "O"]), *train[1:]]
    retokenised = [Sentence.from_tokens(["x", "s0"], ["B-DOC", "O"]), *train[1:]]
    regrouped = _sentences([1, 3])  # the same sentence texts, other document marks
    assert data_fingerprint(relabelled, None, []) != base
    assert data_fingerprint(retokenised, None, []) != base
    assert data_fingerprint(regrouped, None, []) != base
    assert data_fingerprint(train, [], []) != base  # an empty dev set is not a held-out one
    assert data_fingerprint(train[:2], train[2:], []) != data_fingerprint(train, None, [])


def test_sentences_in_memory_train_as_the_same_file_does(tmp_path: Path) -> None:
    path = write_columns_file(tmp_path / "train.txt", TINY)
    config = small_config(path, path, model={"dropout": 0.3}, train={"epochs": 3})
    from_file = train(config, tmp_path / "file")
    in_memory = [Sentence.from_tokens([t for t, _ in s], [lab for _, lab in s]) for s in TINY]
    from_memory = train_on_sentences(in_memory, in_memory, config, tmp_path / "memory")

    def strip(history: list[dict]) -> list[dict]:
        return [{k: v for k, v in row.items() if k not in TIMING} for row in history]

    assert strip(from_memory.history) == strip(from_file.history)
    fingerprints = [
        load_model_file(tmp_path / run / "model.tagger")[1]["training_data"]["fingerprint"]
        for run in ("file", "memory")
    ]
    assert fingerprints[0] == fingerprints[1]  # the same tokens and labels


def test_in_memory_resume_refuses_other_sentences(tmp_path: Path) -> None:
    config = small_config(Path("unused.txt"), None, train={"epochs": 1})
    sentences = [Sentence.from_tokens([t for t, _ in s], [lab for _, lab in s]) for s in TINY * 2]
    result = train_on_sentences(sentences, None, config, tmp_path / "run")
    assert any("held out" in note for note in result.notes)
    changed = [sentences[0].with_labels(["O"] * len(sentences[0])), *sentences[1:]]
    with pytest.raises(ModelFileError, match="other data"):
        train_on_sentences(changed, None, config, tmp_path / "run", resume=True)
    resumed = train_on_sentences(sentences, None, config, tmp_path / "run", resume=True)
    assert resumed.history == result.history  # the same data: taken over, nothing retrained


def test_an_infinite_time_budget_round_trips_through_the_resolved_config(tmp_path: Path) -> None:
    data = write_columns_file(tmp_path / "train.txt", TINY)
    config = apply_overrides(
        small_config(data, data, train={"epochs": 1}), ["train.max_minutes=inf"]
    )
    assert config.train.max_minutes == float("inf")
    result = train(config, tmp_path / "run")
    assert result.stop_reason == "reached train.epochs=1"
    assert load_config(tmp_path / "run" / "resolved-config.toml") == config


def test_the_shipped_default_config_holds_a_tenth_of_train_out(tmp_path: Path) -> None:
    # The README's promise: without a dev file a tenth of train is held out. The shipped config
    # names no dev file of its own that could take that place.
    data = write_columns_file(tmp_path / "train.txt", TINY * 10)
    config = apply_overrides(
        load_config(Path(__file__).resolve().parents[1] / "configs" / "default.toml"),
        [
            f"data.train={json.dumps(str(data))}",
            *("model.hidden_size=8", "model.layers=1", "model.word_dim=8", "model.char_dim=4"),
            *("model.char_features=4", "train.epochs=1", "train.threads=1"),
        ],
    )
    result = train(config, tmp_path / "run")
    assert any("held out" in note and "6 of 60 training sentences" in note for note in result.notes)
    assert "no dev file" in result.notes[0]


def test_train_and_dev_without_a_shared_entity_type_are_noted(tmp_path: Path) -> None:
    data = write_columns_file(tmp_path / "train.txt", TINY)
    dev = write_columns_file(tmp_path / "dev.txt", [[("wind", "B-WEATHER"), ("gust", "O")]])
    result = train(small_config(data, dev, train={"epochs": 1}), tmp_path / "run")
    shared = [note for note in result.notes if "share no entity type" in note]
    assert shared == [
        "train and dev share no entity type (train: ASSET, COMP, DEF, READ; dev: WEATHER): dev F1 "
        "will be 0 and cannot tell epochs apart; is the dev file the one meant for this training "
        "file?"
    ]
    sharing = write_columns_file(tmp_path / "dev2.txt", [[("T-7", "B-ASSET"), ("wind", "B-W")]])
    result = train(small_config(data, sharing, train={"epochs": 1}), tmp_path / "run2")
    assert not any("share no entity type" in note for note in result.notes)


def test_a_held_out_dev_set_without_spans_is_refused(tmp_path: Path) -> None:
    from tagger.errors import DataError

    data = write_columns_file(tmp_path / "train.txt", TINY)  # its last sentence is all O
    config = small_config(data, None, data={"dev_holdout": "last", "dev_fraction": 0.1})
    with pytest.raises(DataError) as error:
        train(config, tmp_path / "run")
    assert str(error.value) == (
        f"{data}: the dev set held out of it (1 sentence) holds no spans (every label is O), so "
        "dev F1 would be 0 every epoch and choose nothing; give a dev file (--dev) or raise "
        "data.dev_fraction"
    )
    assert not (tmp_path / "run").exists()
    config = small_config(data, None, data={"dev_holdout": "last", "dev_fraction": 0.3})
    assert train(config, tmp_path / "run").best_epoch >= 1  # two held out, one with spans
