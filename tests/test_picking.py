"""Tests for tagger.apply.picking and the `pick` command, with a tiny model trained here on
sentences built so that it is sure of some and cannot be sure of one: "Kim" is a person in half
of its sentences and a place in the other half, in the same words around it."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tagger.apply.pick_options import LengthNorm, Measure
from tagger.apply.picking import pick_sentences
from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.config import config_from_dict
from tagger.data.corpus import Sentence, read_sentences
from tagger.data.pick_trace import trace_of
from tagger.training.loop import train_on_sentences

runner = CliRunner()

SURE = [
    (["met", "Anna", "today", "."], ["O", "B-PER", "O", "O"]),
    (["visited", "Oslo", "today", "."], ["O", "B-LOC", "O", "O"]),
]
TORN = [
    (["saw", "Kim", "today", "."], ["O", "B-PER", "O", "O"]),
    (["saw", "Kim", "today", "."], ["O", "B-LOC", "O", "O"]),
]
POOL = "met Anna today. saw Kim today. visited Oslo today. saw Kim today.\n"


@pytest.fixture(scope="module")
def model(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The tiny model, trained once for the module (a few seconds)."""
    sentences = [Sentence.from_tokens(t, lab) for t, lab in (SURE + TORN) * 15]
    config = config_from_dict(
        {
            "model": {"hidden_size": 8, "layers": 1, "word_dim": 8, "char_dim": 4,
                      "char_features": 4, "dropout": 0.0},
            "train": {"epochs": 25, "batch_size": 8, "learning_rate": 0.05, "threads": 1,
                      "lr_schedule": "constant", "unknown_replace": 0.0, "seed": 3},
        }
    )  # fmt: skip
    folder = tmp_path_factory.mktemp("pick-model")
    return train_on_sentences(sentences, sentences, config, folder / "run").model_path


@pytest.fixture(scope="module")
def pool(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("pool") / "pool.txt"
    path.write_text(POOL, encoding="utf-8")
    return path


@pytest.mark.parametrize("measure", list(Measure))
@pytest.mark.parametrize("norm", list(LengthNorm))
def test_the_sentence_the_model_cannot_be_sure_of_ranks_first(
    model: Path, pool: Path, measure: Measure, norm: LengthNorm
) -> None:
    picked = pick_sentences(Tagger.load(model), [pool], 3, measure, norm)
    first = picked.sentences[0]
    assert first.tokens == ["saw", "Kim", "today", "."]
    assert picked.traces[0].score > 2 * picked.traces[1].score
    assert picked.traces[1].score >= picked.traces[2].score
    assert [t.rank for t in picked.traces] == [1, 2, 3]
    assert picked.pool_sentences == 4


def test_a_repeat_is_kept_out_of_the_batch(model: Path, pool: Path) -> None:
    picked = pick_sentences(Tagger.load(model), [pool], 3)
    texts = [" ".join(s.tokens) for s in picked.sentences]
    assert texts.count("saw Kim today .") == 1  # the pool holds it twice
    assert len(texts) == 3 and picked.passed_over == 1
    assert set(texts) == {"saw Kim today .", "met Anna today .", "visited Oslo today ."}


def test_picked_sentences_carry_their_offsets_and_the_models_labels(
    model: Path, pool: Path
) -> None:
    tagger = Tagger.load(model)
    picked = pick_sentences(tagger, [pool], 3)
    for sentence, trace in zip(picked.sentences, picked.traces, strict=True):
        quoted = POOL[trace.start : trace.end]
        assert quoted.replace(".", " .").split() == sentence.tokens
        assert trace.file == str(pool) and trace.document == str(pool)
        assert sentence.labels == tagger.predict_labels([sentence.tokens])[0]
    anna = next(s for s in picked.sentences if s.tokens[1] == "Anna")
    assert anna.labels == ["O", "B-PER", "O", "O"]  # learnt: pre-filled right


def test_pick_writes_a_file_check_and_train_read_back(
    model: Path, pool: Path, tmp_path: Path
) -> None:
    out = tmp_path / "next.conll"
    result = runner.invoke(app, ["pick", str(model), str(pool), "--count", "2", "-o", str(out)])
    assert result.exit_code == 0, result.stderr
    said = " ".join(result.stderr.split())  # the report wraps its lines
    assert "Picked 2 sentences of 4 pool sentences" in said
    # the repeat of the first, as uncertain as it, came next and was passed over
    assert "passed over 1 sentence too alike" in said
    back = read_sentences(out)
    assert [trace_of(s.prefix_lines).rank for s in back] == [1, 2]
    assert back[0].tokens == ["saw", "Kim", "today", "."]
    checked = runner.invoke(app, ["check", str(out), "--json"])
    assert checked.exit_code == 0, checked.stderr
    assert json.loads(checked.stdout)["files"][0]["sentences"] == 2
    trained = runner.invoke(
        app,
        ["train", "--train", str(out), "--dev", str(out), "--out", str(tmp_path / "run"),
         "--set", "model.hidden_size=4", "--set", "train.epochs=1"],
    )  # fmt: skip
    assert trained.exit_code == 0, trained.stderr
    assert (tmp_path / "run" / "model.tagger").exists()


def test_pick_as_json_and_from_a_column_pool(model: Path, tmp_path: Path) -> None:
    pool = tmp_path / "pool.conll"
    pool.write_text("saw\tVBD\nKim\tNNP\n\nmet\tVBD\nAnna\tNNP\n\n", encoding="utf-8")
    out = tmp_path / "next.conll"
    result = runner.invoke(app, ["pick", str(model), str(pool), "-o", str(out), "--json"])
    assert result.exit_code == 0, result.stderr
    found = json.loads(result.stdout)
    assert [p["document"] for p in found["picked"]] == [f"{pool}:1", f"{pool}:4"]
    assert found["pool"] == 2
    rows = read_sentences(out)[0].rows  # the pool's own column kept, the label appended
    assert [row[:2] for row in rows] == [("saw", "VBD"), ("Kim", "NNP")]


def test_a_pool_in_another_script_gets_a_warning(model: Path, tmp_path: Path) -> None:
    pool = tmp_path / "greek.txt"
    pool.write_text("Η Άννα συνάντησε τον Μπομπ στο Όσλο σήμερα.\n", encoding="utf-8")
    result = runner.invoke(app, ["pick", str(model), str(pool), "-o", str(tmp_path / "n.conll")])
    assert result.exit_code == 0, result.stderr
    said = " ".join(result.stderr.split())  # the report wraps its lines
    assert "never occur in the training text: is the pool in another script?" in said


def test_json_to_stdout_beside_the_sentences_is_a_usage_error(model: Path, pool: Path) -> None:
    result = runner.invoke(app, ["pick", str(model), str(pool), "--json"])
    assert result.exit_code == 2
    assert "name a file with --out" in result.stderr
