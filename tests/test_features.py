"""Tests for tagger.text.features and its path through config, batching, model, training, prediction,
tagging and check: extra input columns, lexicon matches and word shapes as features."""

from __future__ import annotations

import json
import random
from pathlib import Path

import pytest
import torch
from typer.testing import CliRunner

from tagger import Tagger
from tagger.apply.evaluate import evaluate_files
from tagger.cli import app
from tagger.config import Config, apply_overrides, config_from_dict
from tagger.data.check import check_files
from tagger.data.corpus import read_sentences
from tagger.data.schemes import tags_to_spans
from tagger.errors import ConfigError, DataError, ModelFileError
from tagger.network.batching import EncodedSentence, collate
from tagger.network.modelfile import load_model_file
from tagger.network.net import TaggerNet, build_net
from tagger.reports.check import format_check
from tagger.scoring.files import score_files
from tagger.scoring.metrics import count_spans, summarise
from tagger.text.features import (
    SHAPE_IDS,
    ColumnFeature,
    FeatureInputError,
    FeatureSpec,
    WordShape,
    shape_id,
    word_shape,
)
from tagger.text.lexicon import BEGIN, END, NO_MATCH, SINGLE, Lexicon
from tagger.text.vocab import Vocab
from tagger.training.loop import train

runner = CliRunner()

Row = tuple[str, ...]


def write_rows(path: Path, sentences: list[list[Row]]) -> Path:
    path.write_text("".join("".join("\t".join(r) + "\n" for r in s) + "\n" for s in sentences))
    return path


def tiny_config(train_path: Path, dev_path: Path, **model: object) -> Config:
    return config_from_dict(
        {
            "data": {"train": str(train_path), "dev": str(dev_path)},
            "model": {"hidden_size": 16, "layers": 1, "word_dim": 8, "char_dim": 8,
                      "char_features": 8, "dropout": 0.0, **model},
            "train": {"epochs": 6, "batch_size": 16, "learning_rate": 0.02, "threads": 1,
                      "lr_schedule": "constant", "patience": 100},
        }
    )  # fmt: skip


# --- config --------------------------------------------------------------------------------------


def test_list_valued_keys_are_read_checked_and_written_back(tmp_path: Path) -> None:
    path = tmp_path / "c.toml"
    path.write_text('[model]\nfeature_columns = [1, 3]\nlexicons = ["a.tsv", "b.tsv"]\n')
    from tagger.config import load_config

    config = load_config(path)
    assert config.model.feature_columns == (1, 3)
    # relative lexicon paths are read from the config file's folder
    assert config.model.lexicons == (str(tmp_path / "a.tsv"), str(tmp_path / "b.tsv"))
    assert config.to_dict()["model"]["feature_columns"] == [1, 3]  # JSON-ready lists
    assert config_from_dict(json.loads(json.dumps(config.to_dict()))) == config
    assert apply_overrides(Config(), ["model.feature_columns=[2]"]).model.feature_columns == (2,)


@pytest.mark.parametrize(
    ("values", "fragment"),
    [
        ({"feature_columns": 1}, "model.feature_columns must be a list of int, got 1"),
        ({"feature_columns": [1, "2"]}, "model.feature_columns must be a list of int"),
        ({"feature_columns": [True]}, "model.feature_columns must be a list of int"),
        ({"feature_columns": [-1]}, "model.feature_columns must hold column numbers of 0 or more"),
        ({"feature_columns": [2, 2]}, "model.feature_columns lists a column twice"),
        ({"lexicons": "a.tsv"}, "model.lexicons must be a list of str"),
        ({"lexicons": [""]}, "model.lexicons must hold file paths"),
        ({"lexicon_case": "upper"}, "model.lexicon_case must be one of ignore, exact, smart"),
        ({"feature_dim": 0}, "model.feature_dim must be at least 1"),
        ({"word_shape": "yes"}, "model.word_shape must be bool"),
    ],
)
def test_bad_feature_keys_name_the_key(values: dict, fragment: str) -> None:
    with pytest.raises(ConfigError, match=fragment.replace("[", r"\[")):
        config_from_dict({"model": values})


# --- word shapes ---------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("token", "shape"),
    [  # hand-worked
        ("gearbox", ("lower", "none", "none", "7-10")),
        ("Gearbox", ("title", "none", "none", "7-10")),
        ("UPS", ("upper", "none", "none", "2-3")),
        ("McKay", ("mixed", "none", "none", "4-6")),
        ("T-14", ("upper", "some", "some", "4-6")),
        ("t-14", ("lower", "some", "some", "4-6")),
        ("1,450", ("none", "some", "some", "4-6")),
        ("2024", ("none", "all", "none", "4-6")),
        (".", ("none", "none", "all", "1")),
        ("mm/s", ("lower", "none", "some", "4-6")),
        ("85°C", ("upper", "some", "some", "4-6")),
        ("風車", ("uncased", "none", "none", "2-3")),
        ("electroluminescent", ("lower", "none", "none", "11+")),
    ],
)
def test_word_shapes_of_hand_examples(token: str, shape: tuple[str, str, str, str]) -> None:
    assert word_shape(token) == WordShape(*shape)


def test_shape_ids_are_distinct_and_leave_padding_and_unknown_free() -> None:
    from itertools import product

    from tagger.text.features import SHAPE_AMOUNTS, SHAPE_CASES, SHAPE_LENGTHS

    ids = [
        WordShape(*s).id for s in product(SHAPE_CASES, SHAPE_AMOUNTS, SHAPE_AMOUNTS, SHAPE_LENGTHS)
    ]
    assert sorted(ids) == list(range(2, SHAPE_IDS))
    assert shape_id("T-14") == word_shape("T-14").id != shape_id("gearbox")


# --- feature ids and batches ---------------------------------------------------------------------


def test_a_sentence_becomes_feature_ids_slot_by_slot() -> None:
    spec = FeatureSpec(
        [ColumnFeature(1, Vocab(["NN", "VB"]))],
        [Lexicon("parts", [(["pitch", "bearing"], "C"), (["leak"], "D")])],
        shape=True,
    )
    tokens = ["pitch", "bearing", "leak", "ok"]
    rows = [
        ("pitch", "NN", "B-C"),
        ("bearing", "NN", "I-C"),
        ("leak", "VB", "O"),
        ("ok", "JJ", "O"),
    ]
    assert spec.slot_names == ["column 1", "parts/C", "parts/D", "shape"]
    columns, component, defect, shape = spec.encode(tokens, rows)
    # Hand-worked: NN and VB are ids 2 and 3 (0 padding, 1 unknown); JJ was never seen.
    assert columns == [2, 2, 3, 1]
    assert component == [BEGIN, END, NO_MATCH, NO_MATCH]
    assert defect == [NO_MATCH, NO_MATCH, SINGLE, NO_MATCH]
    assert shape == [shape_id(t) for t in tokens]
    with pytest.raises(FeatureInputError, match="column 1"):
        spec.encode(tokens)  # no rows: the column is not there to read
    with pytest.raises(DataError, match="reads column 1 as a feature, but the line has 1 column"):
        spec.encode(tokens, [(t,) for t in tokens])
    again = FeatureSpec.from_dict(json.loads(json.dumps(spec.to_dict())))
    assert again.encode(tokens, rows) == spec.encode(tokens, rows)


def test_collate_lays_feature_ids_out_token_by_token() -> None:
    sentences = [
        EncodedSentence([2, 3, 4], [[1], [1], [1]], features=[[5, 6, 7], [8, 9, 10]]),
        EncodedSentence([2], [[1]], features=[[11], [12]]),
    ]
    batch = collate(sentences, [0, 1])
    assert batch.features is not None
    # Hand-worked: (batch, time, slots), padding 0.
    assert batch.features.tolist() == [[[5, 8], [6, 9], [7, 10]], [[11, 12], [0, 0], [0, 0]]]
    assert collate([EncodedSentence([2], [[1]])], [0]).features is None


def test_a_network_without_features_draws_the_same_weights_as_before() -> None:
    config = config_from_dict({"model": {"output": "softmax"}}).model
    torch.manual_seed(3)
    plain = TaggerNet(config, 20, 10, 5)
    torch.manual_seed(3)
    featured = TaggerNet(config, 20, 10, 5, feature_slots=[(7, 4), (6, 2)])
    assert not any(name.startswith("features.") for name in plain.state_dict())
    # The feature embeddings are made last, so the word and character modules drawn before
    # them start equal; the encoder's first layer is wider by the feature sizes (4 + 2).
    assert torch.equal(plain.words.weight, featured.words.weight)
    assert torch.equal(plain.chars.embed.weight, featured.chars.embed.weight)  # type: ignore[union-attr]
    assert featured.features is not None
    assert [tuple(e.weight.shape) for e in featured.features] == [(7, 4), (6, 2)]
    assert all(not e.weight[:2].any() for e in featured.features)  # padding and "unknown" rows


# --- extra columns -------------------------------------------------------------------------------


def column_task(seed: int, sentences: int, values: str = "xy") -> list[list[Row]]:
    """The label is set by the second column alone: a token is an entity when it reads "x"."""
    rng = random.Random(seed)
    data = []
    for _ in range(sentences):
        rows = []
        for _ in range(rng.randint(3, 8)):
            value = rng.choice(values)
            rows.append((rng.choice("abcd"), value, "B-T" if value == "x" else "O"))
        data.append(rows)
    return data


@pytest.fixture(scope="module")
def column_runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """One model trained with the column as a feature, one without (a few seconds in all)."""
    folder = tmp_path_factory.mktemp("columns")
    train_path = write_rows(folder / "train.txt", column_task(1, 200))
    dev_path = write_rows(folder / "dev.txt", column_task(2, 60))
    runs = {"folder": folder, "train": train_path, "dev": dev_path}
    for name, columns in (("with", [1]), ("without", [])):
        config = tiny_config(
            train_path, dev_path, char_encoder="none", output="softmax", feature_columns=columns
        )
        runs[name] = train(config, folder / name).model_path
    return runs


def test_a_label_set_by_an_extra_column_is_learnt_only_with_it(
    column_runs: dict[str, Path],
) -> None:
    with_column = Tagger.load(column_runs["with"])
    without = Tagger.load(column_runs["without"])
    assert with_column.meta["dev_metrics"]["micro"]["f1"] == 1.0
    # Tokens are random, so without the column the best guess is poor.
    assert without.meta["dev_metrics"]["micro"]["f1"] < 0.8
    stored = load_model_file(column_runs["with"])[1]["features"]
    assert [c["column"] for c in stored["columns"]] == [1]
    assert sorted(stored["columns"][0]["values"]["items"]) == ["x", "y"]
    assert "features" not in load_model_file(column_runs["without"])[1]


def test_evaluate_reads_the_feature_column_and_agrees_with_score(
    column_runs: dict[str, Path], tmp_path: Path
) -> None:
    tagger = Tagger.load(column_runs["with"])
    predictions = tmp_path / "pred.txt"
    report = evaluate_files(tagger, [column_runs["dev"]], predictions=predictions)
    assert report["overall"]["micro"]["f1"] == 1.0
    assert score_files(column_runs["dev"], predictions)["micro"] == report["overall"]["micro"]


def test_tagging_a_column_file_reads_the_column_and_survives_unseen_values(
    column_runs: dict[str, Path], tmp_path: Path
) -> None:
    gold = write_rows(tmp_path / "gold.conll", column_task(3, 40, values="xyz"))
    out = tmp_path / "pred.conll"
    result = runner.invoke(app, ["tag", str(column_runs["with"]), str(gold), "--output-format",
                                 "columns", "--out", str(out)])  # fmt: skip
    assert result.exit_code == 0, result.stderr
    predicted = read_sentences(out)
    gold_sentences = read_sentences(gold)
    assert [s.rows[0][:3] for s in predicted] == [s.rows[0] for s in gold_sentences]
    # "z" never occurs in train: read as the unknown value, whose embedding starts at zero and
    # is trained on values seen once; whatever the model says there, the known values decide
    # the rest, so every "x" token is still found.
    found = {
        (i, start)
        for i, s in enumerate(predicted)
        for _, start, _ in tags_to_spans(s.labels, "IOB2")
    }
    wanted = {
        (i, t)
        for i, s in enumerate(gold_sentences)
        for t, row in enumerate(s.rows)
        if row[1] == "x"
    }
    assert wanted <= found
    assert not any(gold_sentences[i].rows[t][1] == "y" for i, t in found)
    scored = score_files(gold, out, pred_fmt=read_format_with_label(-1))
    assert scored["micro"]["recall"] == 1.0


def read_format_with_label(column: int):  # the predicted label is appended as the last column
    from tagger.data.corpus import ColumnFormat

    return ColumnFormat(label_column=column)


@pytest.mark.parametrize("suffix", [".txt", ".jsonl"])
def test_text_and_jsonl_input_are_refused_for_a_column_model(
    column_runs: dict[str, Path], tmp_path: Path, suffix: str
) -> None:
    source = tmp_path / f"in{suffix}"
    source.write_text(json.dumps({"text": "a b c"}) + "\n" if suffix == ".jsonl" else "a b c\n")
    out = tmp_path / "out" / "tagged"
    out.parent.mkdir()
    result = runner.invoke(app, ["tag", str(column_runs["with"]), str(source), "--out", str(out)])
    assert result.exit_code == 1
    assert result.stderr.startswith(f"tagger: error: {source}")
    assert "column 1 as features" in result.stderr and "--input-format columns" in result.stderr
    assert result.stderr.count("\n") == 1  # one line, no traceback
    assert list(out.parent.iterdir()) == []
    piped = runner.invoke(app, ["tag", str(column_runs["with"])], input="a b c\n")
    assert piped.exit_code == 1 and "<stdin>" in piped.stderr
    with pytest.raises(FeatureInputError, match="raw text"):
        Tagger.load(column_runs["with"]).tag(["a b c"])
    with pytest.raises(FeatureInputError):
        Tagger.load(column_runs["with"]).predict_spans([["a", "b"]])
    # A model without column features tags the same text.
    assert runner.invoke(app, ["tag", str(column_runs["without"]), str(source)]).exit_code == 0


def test_a_column_file_without_the_feature_column_stops_at_its_line(
    column_runs: dict[str, Path], tmp_path: Path
) -> None:
    source = tmp_path / "short.conll"
    source.write_text("\n\na\nb\n\nc\n")
    result = runner.invoke(app, ["tag", str(column_runs["with"]), str(source)])
    assert result.exit_code == 1
    assert f"{source}:3: the model reads column 1 as a feature, but the line has 1 column" in (
        result.stderr
    )


def test_training_checks_the_feature_columns(column_runs: dict[str, Path], tmp_path: Path) -> None:
    train_path, dev_path = column_runs["train"], column_runs["dev"]
    with pytest.raises(ConfigError, match="holds 2, which is the label column"):
        train(tiny_config(train_path, dev_path, feature_columns=[2]), tmp_path / "a")
    with pytest.raises(DataError, match="reads column 3 as a feature") as error:
        train(tiny_config(train_path, dev_path, feature_columns=[3]), tmp_path / "b")
    assert error.value.path == str(train_path) and error.value.line == 1
    short_dev = write_rows(tmp_path / "dev.txt", [[("a", "B-T")]])  # dev needs a span
    with pytest.raises(DataError, match="reads column 1") as error:
        train(tiny_config(train_path, short_dev, feature_columns=[1]), tmp_path / "c")
    assert error.value.path == str(short_dev)


def test_check_reports_the_values_of_extra_columns(tmp_path: Path) -> None:
    data = write_rows(
        tmp_path / "pos.txt",
        [
            [("The", "DT", "x", "O"), ("pump", "NN", "x", "B-C"), ("leaks", "VBZ", "y", "O")],
            [("A", "DT", "x", "O"), ("fan", "NN", "x", "B-C"), ("hums", "VBZ", "x", "O"),
             ("now", "RB", "x", "O"), (".", ".", "x", "O"), ("Ok", "UH", "x", "O"),
             ("then", "RB", "z", "O")],
        ],
    )  # fmt: skip
    (entry,) = check_files([data])["files"]
    # Hand-counted: column 1 holds 6 distinct values (DT NN VBZ RB . UH); the 5 most frequent,
    # ties in value order.
    assert entry["extra_columns"] == [
        {
            "column": 1,
            "distinct": 6,
            "most_frequent": [
                {"value": "DT", "count": 2},
                {"value": "NN", "count": 2},
                {"value": "RB", "count": 2},
                {"value": "VBZ", "count": 2},
                {"value": ".", "count": 1},
            ],
        },
        {
            "column": 2,
            "distinct": 3,
            "most_frequent": [
                {"value": "x", "count": 8},
                {"value": "y", "count": 1},
                {"value": "z", "count": 1},
            ],
        },
    ]
    text = format_check(check_files([data]))
    assert (
        "column 1" in text and "6 distinct values: DT=2, NN=2, RB=2, VBZ=2, .=1, and 1 more" in text
    )


# --- lexicons and shapes -------------------------------------------------------------------------

PARTS = ["pitch bearing", "yaw drive", "main shaft", "gearbox", "brake pad", "slip ring"]
FAULTS = ["oil leak", "hairline crack", "pitting", "overheating"]


def report_task(seed: int, sentences: int, parts: list[str], faults: list[str]) -> list[list[Row]]:
    """Short invented service notes with COMPONENT and DEFECT spans (IOB2)."""
    rng = random.Random(seed)
    templates = ["found {D} on the {C}", "{C} replaced after {D}", "checked {C} , no {D}",
                 "the {C} at T-{N} shows {D}", "{D} near {C}"]  # fmt: skip
    data = []
    for _ in range(sentences):
        rows: list[Row] = []
        for piece in rng.choice(templates).split(" "):
            if piece in ("{C}", "{D}"):
                kind = "COMPONENT" if piece == "{C}" else "DEFECT"
                words = rng.choice(parts if kind == "COMPONENT" else faults).split(" ")
                rows += [(w, ("B-" if i == 0 else "I-") + kind) for i, w in enumerate(words)]
            elif "{N}" in piece:
                rows.append((piece.replace("{N}", str(rng.randint(1, 40))), "O"))
            else:
                rows.append((piece, "O"))
        data.append(rows)
    return data


@pytest.fixture(scope="module")
def lexicon_run(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("lexicon")
    train_path = write_rows(folder / "train.txt", report_task(1, 80, PARTS[:4], FAULTS[:3]))
    lexicon_path = folder / "catalogue.tsv"
    lexicon_path.write_text("".join(f"{p}\tCOMPONENT\n" for p in PARTS)
                            + "".join(f"{f}\tDEFECT\n" for f in FAULTS))  # fmt: skip
    config = tiny_config(train_path, train_path, lexicons=[str(lexicon_path)], word_shape=True)
    config = apply_overrides(config, ["train.epochs=3"])
    run = train(config, folder / "run")
    return {"model": run.model_path, "lexicon": lexicon_path, "train": train_path}


def test_lexicons_travel_inside_the_model_file(lexicon_run: dict[str, Path]) -> None:
    model = lexicon_run["model"]
    token_lists = [[t for t, _ in s] for s in report_task(5, 30, PARTS, FAULTS)]
    token_lists += [["SLIP", "RING", "Pitting", "t-3"], []]
    before = Tagger.load(model).predict_scored_spans(token_lists)
    texts = [" ".join(tokens) for tokens in token_lists]
    tagged_before = Tagger.load(model).tag(texts)
    lexicon_run["lexicon"].unlink()  # tagging must not need the file
    reloaded = Tagger.load(model)
    assert reloaded.predict_scored_spans(token_lists) == before
    assert Tagger.load(model).tag(texts) == tagged_before
    assert reloaded.features is not None
    assert reloaded.features.slot_names == ["catalogue/COMPONENT", "catalogue/DEFECT", "shape"]
    (stored,) = load_model_file(model)[1]["features"]["lexicons"]
    assert stored["name"] == "catalogue" and len(stored["entries"]) == len(PARTS) + len(FAULTS)


def test_predicted_spans_with_features_equal_the_training_forward_pass(
    lexicon_run: dict[str, Path],
) -> None:
    # Prediction computes character features per distinct token and feature ids per sentence;
    # training runs TaggerNet.emissions on collated batches. Both must find the same spans.
    tagger = Tagger.load(lexicon_run["model"])
    token_lists = [[t for t, _ in s] for s in report_task(9, 40, PARTS, FAULTS)]
    token_lists += [["slip", "ring", "slip", "ring", "gearbox"], ["x" * 40]]
    encoded = tagger.encode(token_lists)
    expected = []
    with torch.no_grad():
        for i in range(len(token_lists)):
            batch = collate(encoded, [i])
            emissions = tagger.net.emissions(
                batch.words, batch.chars, batch.lengths, features=batch.features
            )
            (path,) = tagger.net.decode(emissions, batch.mask)
            expected.append(tags_to_spans([tagger.vocabs.labels.itos[j] for j in path], "BIOES"))
    assert tagger.predict_spans(token_lists, batch_size=8) == expected
    gold = [
        tags_to_spans([label for _, label in s], "IOB2") for s in report_task(9, 40, PARTS, FAULTS)
    ]
    assert summarise(count_spans(gold, expected[:40]))["micro"]["f1"] > 0.5  # it learnt something


def test_a_changed_lexicon_does_not_resume_an_old_checkpoint(tmp_path: Path) -> None:
    train_path = write_rows(tmp_path / "train.txt", report_task(1, 20, PARTS, FAULTS))
    lexicon_path = tmp_path / "parts.tsv"
    lexicon_path.write_text("gearbox\tCOMPONENT\n")
    config = apply_overrides(
        tiny_config(train_path, train_path, lexicons=[str(lexicon_path)]), ["train.epochs=1"]
    )
    train(config, tmp_path / "run")
    lexicon_path.write_text("gearbox\tCOMPONENT\nmain shaft\tCOMPONENT\n")
    with pytest.raises(ModelFileError, match="other data"):
        train(config, tmp_path / "run", resume=True)


def test_build_net_sizes_the_encoder_for_the_feature_slots(lexicon_run: dict[str, Path]) -> None:
    tagger = Tagger.load(lexicon_run["model"])
    model = tagger.config.model
    net = build_net(tagger.config, tagger.vocabs, tagger.features)
    assert net.features is not None
    # Two lexicon categories of lexicon_dim and one shape slot of shape_dim.
    assert [e.embedding_dim for e in net.features] == [model.lexicon_dim] * 2 + [model.shape_dim]
    plain = build_net(tagger.config, tagger.vocabs)
    extra = 2 * model.lexicon_dim + model.shape_dim
    assert net.encoder.input_size == plain.encoder.input_size + extra
    assert plain.features is None
