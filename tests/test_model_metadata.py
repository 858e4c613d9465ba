"""Loading a tagger trusts nothing in its model file: the metadata is checked field by field, and
the file's tensors against the network it describes, before anything is built."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
import torch
from model_files import SENTENCE, read_parts, rewrite, tiny_tagger, write_old_format
from typer.testing import CliRunner

from tagger.apply.tagger import Tagger, model_tokenizer_settings
from tagger.cli import app
from tagger.config import config_from_dict
from tagger.data.schemes import labels_for_types
from tagger.errors import ModelFileError
from tagger.network import net as net_module
from tagger.network.cells import CELL_KINDS, make_cell
from tagger.network.metadata import read_stored_model
from tagger.network.modelfile import save_model_file
from tagger.network.net import build_net
from tagger.network.shapes import GATES, expected_tensors, tensor_count
from tagger.text.features import ColumnFeature, FeatureSpec
from tagger.text.lexicon import Lexicon
from tagger.text.tokenizer import TokenizerSettings
from tagger.text.vocab import Vocab, build_vocabularies

runner = CliRunner()


@pytest.fixture(scope="module")
def saved(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("model") / "tiny.tagger"
    tiny_tagger().save(path)
    return path


@pytest.fixture(scope="module")
def saved_with_lexicon(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("model") / "lexicon.tagger"
    tiny_tagger(lexicon=True).save(path)
    return path


@pytest.fixture
def nothing_built(monkeypatch: pytest.MonkeyPatch) -> None:
    """Building a network fails the test: refusals must come before it."""

    def refuse(*args: Any, **kwargs: Any) -> None:
        raise AssertionError("a network was built from a file that should have been refused")

    monkeypatch.setattr(net_module, "build_net", refuse)


def _refused(path: Path, *fragments: str) -> str:
    with pytest.raises(ModelFileError) as caught:
        Tagger.load(path)
    message = str(caught.value)
    assert message.startswith(f"{path}: ") and message.count(str(path)) == 1
    assert "\n" not in message and len(message) < len(str(path)) + 400
    for fragment in fragments:
        assert fragment in message
    return message


# --- the table of tensors the loader expects ---------------------------------------------------


@pytest.mark.parametrize("cell", CELL_KINDS)
@pytest.mark.parametrize("chars", ["cnn", "rnn", "none"])
@pytest.mark.parametrize(
    "output, bidirectional", [("crf", True), ("softmax", True), ("crf", False)]
)
def test_the_expected_tensors_are_those_build_net_makes(
    cell: str, chars: str, output: str, bidirectional: bool
) -> None:
    config = config_from_dict(
        {
            "model": {
                "cell": cell,
                "char_encoder": chars,
                "output": output,
                "bidirectional": bidirectional,
                "hidden_size": 6,
                "layers": 2,
                "word_dim": 5,
                "char_dim": 3,
                "char_features": 4,
                "char_kernel": 5,
                "feature_columns": [2],
                "lexicons": ["a.txt"],
                "word_shape": True,
            }
        }
    )
    labels = labels_for_types(["A", "B"], config.model.scheme)
    vocabs, _ = build_vocabularies([SENTENCE], labels, False, True)
    spec = FeatureSpec(
        [ColumnFeature(2, Vocab(["x", "y", "z"]))], [Lexicon("a", [(["Bob"], "P")])], True
    )
    made = build_net(config, vocabs, spec).state_dict()
    slots = spec.slot_sizes(config.model)
    expected = expected_tensors(
        config.model, len(vocabs.words), len(vocabs.chars), len(vocabs.labels), slots
    )
    assert expected == {
        k: (tuple(t.shape), str(t.dtype).removeprefix("torch.")) for k, t in made.items()
    }
    assert tensor_count(config.model, len(slots)) == len(made)


def test_gate_counts_are_the_cells_own() -> None:
    assert {kind: make_cell(kind, 2, 3).gates for kind in CELL_KINDS} == GATES


# --- a good file -------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["plain", "lexicon", "column"])
def test_a_saved_tagger_loads_with_its_predictions(tmp_path: Path, kind: str) -> None:
    tagger = tiny_tagger(lexicon=kind == "lexicon", column=kind == "column")
    tagger.save(tmp_path / "m.tagger")
    loaded = Tagger.load(tmp_path / "m.tagger")
    rows = [[[token, "NNP"] for token in SENTENCE]]
    assert loaded.predict_labels([SENTENCE], rows=rows) == tagger.predict_labels(
        [SENTENCE], rows=rows
    )
    assert loaded.vocabs.labels.itos == tagger.vocabs.labels.itos
    assert loaded.notes == []


# --- sizes bounded by the weights the file holds -------------------------------------------------


@pytest.mark.parametrize(
    "key, value",
    [
        ("word_dim", 1_000_000),
        ("hidden_size", 10**7),
        ("layers", 10**9),
        ("char_features", 10**6),
        ("char_kernel", 10**5),
    ],
)
@pytest.mark.parametrize("how", ["fresh", "old"])
def test_sizes_the_weights_do_not_hold_are_refused_before_building(
    saved: Path, tmp_path: Path, nothing_built: None, key: str, value: int, how: str
) -> None:
    def edit(meta: dict[str, Any]) -> None:
        meta["config"]["model"][key] = value

    path = rewrite(saved, tmp_path / "big.tagger", edit, how)
    assert path.stat().st_size < 100_000
    _refused(path, "the weights do not fit the stored config")


def test_a_bigger_vocabulary_than_the_embedding_is_refused(
    saved: Path, tmp_path: Path, nothing_built: None
) -> None:
    def edit(meta: dict[str, Any]) -> None:
        meta["vocabularies"]["words"]["items"].append("extra")

    message = _refused(rewrite(saved, tmp_path / "m.tagger", edit, "fresh"), "words.weight")
    assert "(8, 5) in the file" in message and "make it (9, 5)" in message


# --- every field's type ------------------------------------------------------------------------


def _set(path: list[Any], value: Any) -> Any:
    def edit(meta: dict[str, Any]) -> None:
        target = meta
        for key in path[:-1]:
            target = target[key]
        target[path[-1]] = value

    return edit


def _delete(key: str) -> Any:
    return lambda meta: meta.pop(key)


FIELD_CASES = [
    (_set(["config", "model", "digits_to_zero"], "yes"), "model.digits_to_zero must be bool"),
    (_set(["vocabularies", "digits_to_zero"], "yes"), "vocabularies.digits_to_zero must be true or false"),
    (_set(["vocabularies", "digits_to_zero"], False), "disagrees with the config's model.digits_to_zero"),
    (_set(["vocabularies", "lowercase"], 1), "vocabularies.lowercase must be true or false"),
    (_set(["config", "model", "cell"], "transformer"), "model.cell must be one of"),
    (_set(["config", "model", "dropout"], 2.0), "model.dropout must be in [0, 1)"),
    (_set(["config", "model", "char_dim"], 0), "model.char_dim"),
    (_set(["config"], []), "config is not a table"),
    (_delete("config"), "lacks 'config'"),
    (_delete("vocabularies"), "lacks 'vocabularies'"),
    (_set(["vocabularies", "words", "items"], "abc"), "vocabularies.words.items is not a list"),
    (_set(["vocabularies", "words", "items", 0], 7), "vocabularies.words.items[0] is not a string"),
    (_set(["vocabularies", "words", "items", 0], "<unk>"), "repeat the reserved"),
    (_set(["vocabularies", "chars", "specials"], False), "vocabularies.chars.specials must be true"),
    (_set(["vocabularies", "labels", "specials"], "no"), "must be true or false"),
    (_set(["vocabularies", "words", "extra"], 1), "unknown key 'extra'"),
    (_set(["input_scheme"], 3), "input_scheme must be a scheme name"),
    (_set(["input_scheme"], "IOXB"), "is not a tagging scheme"),
    (_set(["tokenizer"], {"split_hyphens": "yes"}), "tokenizer settings are invalid"),
    (_set(["tokenizer"], ["a"]), "tokenizer is not a table"),
    (_set(["config", "model", "word_shape"], True), "asks for features the metadata does not hold"),
    (_set(["features"], {"columns": [], "lexicons": [], "shape": False}), "holds features the stored config does not ask for"),
    (_set(["column_layout"], {"token_column": "0", "label_column": -1, "delimiter": "auto"}), "column_layout.token_column must be a whole number"),
    (_set(["column_layout"], {"token_column": 0, "label_column": -1, "delimiter": ";"}), "column_layout.delimiter must be one of"),
    (_set(["column_layout"], {"token_column": 0}), "column_layout lacks 'label_column'"),
    (_set(["calibration"], {"temperature": 0.0, "tokens": 9, "loss_before": 1.0, "loss_after": 0.5}), "calibration.temperature must be a finite number above 0"),
    (_set(["calibration"], {"temperature": "2", "tokens": 9, "loss_before": 1.0, "loss_after": 0.5}), "calibration.temperature must be a finite number above 0"),
    (_set(["calibration"], {"temperature": 1e400, "tokens": 9, "loss_before": 1.0, "loss_after": 0.5}), "calibration.temperature must be a finite number above 0"),
]  # fmt: skip


@pytest.mark.parametrize("edit, fragment", FIELD_CASES)
def test_every_field_is_checked_naming_the_model_file(
    saved: Path, tmp_path: Path, nothing_built: None, edit: Any, fragment: str
) -> None:
    _refused(rewrite(saved, tmp_path / "m.tagger", edit, "fresh"), fragment)


FEATURE_CASES = [
    (_set(["features", "shape"], "yes"), "features.shape must be true or false"),
    (_set(["features", "shape"], False), "disagrees with the config's model.word_shape"),
    (_set(["features", "lexicons"], []), "disagree with the config's model.lexicons"),
    (_set(["features", "lexicons", 0, "entries", 0, 1], 9), "must be [tokens, type number]"),
    (_set(["features", "lexicons", 0, "entries", 0, 0], []), "must be [tokens, type number]"),
    (_set(["features", "lexicons", 0, "entries", 0, 0], [3]), "is not a string"),
    (_set(["features", "lexicons", 0, "types"], ["", "PER", "LOC"]), "sorted types its entries use"),
    (_set(["features", "lexicons", 0, "case"], "loud"), "case must be one of"),
    (_set(["features", "lexicons", 0, "name"], ""), "name must be a non-empty string"),
    (_set(["features", "columns"], [{"column": 1, "values": {"items": [], "specials": True}}]), "disagree with the config's model.feature_columns"),
]  # fmt: skip


@pytest.mark.parametrize("edit, fragment", FEATURE_CASES)
def test_stored_features_are_checked(
    saved_with_lexicon: Path, tmp_path: Path, nothing_built: None, edit: Any, fragment: str
) -> None:
    _refused(rewrite(saved_with_lexicon, tmp_path / "m.tagger", edit, "fresh"), fragment)


# --- labels ------------------------------------------------------------------------------------


def _labels(edit_labels: Any) -> Any:
    def edit(meta: dict[str, Any]) -> None:
        edit_labels(meta["vocabularies"]["labels"]["items"])

    return edit


def _swap(i: int, j: int) -> Any:
    def swap(labels: list[str]) -> None:
        labels[i], labels[j] = labels[j], labels[i]

    return swap


LABEL_CASES = [
    (lambda labels: labels.__setitem__(1, "B-"), "'B-' is neither O nor PREFIX-TYPE"),
    (lambda labels: labels.__setitem__(1, "X-FOO"), "'X-FOO' is neither O nor PREFIX-TYPE"),
    (lambda labels: labels.__setitem__(1, "U-LOC"), "not a label of the model's scheme BIOES"),
    (lambda labels: labels.__setitem__(2, labels[1]), "lists 'B-LOC' twice"),
    (_swap(0, 1), "must start with O"),
    (_swap(1, 2), "out of order or incomplete"),  # B-LOC <-> B-PER
    (lambda labels: labels.pop(2), "out of order or incomplete"),
    (lambda labels: labels.__setitem__(3, 7), "is not a string"),
]  # fmt: skip


@pytest.mark.parametrize("edit_labels, fragment", LABEL_CASES)
@pytest.mark.parametrize("how", ["fresh", "old"])
def test_bad_stored_labels_name_the_model_file(
    saved: Path, tmp_path: Path, nothing_built: None, edit_labels: Any, fragment: str, how: str
) -> None:
    _refused(rewrite(saved, tmp_path / "m.tagger", _labels(edit_labels), how), fragment)


def test_swapped_label_names_are_a_corrupted_file(saved: Path, tmp_path: Path) -> None:
    # Renaming one type as another keeps the stored labels well formed and in order; only the
    # digest over the metadata tells the file was changed.
    def rename(labels: list[str]) -> None:
        labels[:] = [label.replace("PER", "ZZZ") for label in labels]

    _refused(rewrite(saved, tmp_path / "m.tagger", _labels(rename), "keep"), "corrupted")
    _refused(rewrite(saved, tmp_path / "m.tagger", _labels(_swap(1, 2)), "keep"), "corrupted")


def test_crf_rules_made_for_other_labels_are_refused(saved: Path, tmp_path: Path) -> None:
    tensors, meta = read_parts(saved)
    tensors["crf.trans_ok"] = tensors["crf.trans_ok"].clone()
    tensors["crf.trans_ok"][0, 0] = ~tensors["crf.trans_ok"][0, 0]
    save_model_file(tmp_path / "m.tagger", tensors, meta)
    _refused(tmp_path / "m.tagger", "transition rules were made for other labels")


@pytest.mark.parametrize(
    "change, fragment",
    [
        (lambda t: t["output.bias"].__setitem__(0, float("nan")), "not finite"),
        (lambda t: t.__setitem__("words.weight", t["words.weight"].double()), "holds float64"),
        (lambda t: t.pop("output.bias"), "holds 21 tensors"),
        (lambda t: t.__setitem__("spare", t.pop("output.bias")), "no tensor 'output.bias'"),
    ],
)
def test_weights_are_checked_against_the_stored_network(
    saved: Path, tmp_path: Path, nothing_built: None, change: Any, fragment: str
) -> None:
    tensors, meta = read_parts(saved)
    tensors = {name: t.clone() for name, t in tensors.items()}
    change(tensors)
    save_model_file(tmp_path / "m.tagger", tensors, meta)
    _refused(tmp_path / "m.tagger", fragment)


# --- files written before the metadata digest ---------------------------------------------------


def test_a_file_of_the_previous_format_loads_with_a_note(saved: Path, tmp_path: Path) -> None:
    tensors, meta = read_parts(saved)
    write_old_format(tmp_path / "old.tagger", tensors, meta)
    old = Tagger.load(tmp_path / "old.tagger")
    (note,) = old.notes
    assert (
        note.startswith(f"{tmp_path / 'old.tagger'}: ") and "predates the metadata digest" in note
    )
    assert old.predict_labels([SENTENCE]) == Tagger.load(saved).predict_labels([SENTENCE])
    # Saved again, it carries the digest over its metadata and loads without the note.
    old.save(tmp_path / "again.tagger")
    assert read_parts(tmp_path / "again.tagger")[1]["version"] == 2
    assert Tagger.load(tmp_path / "again.tagger").notes == []


def test_a_loaded_tagger_saved_with_new_metadata_gets_a_fresh_digest(
    saved: Path, tmp_path: Path
) -> None:
    # The metadata read from a file carries its digest; saving must not write that one back.
    Tagger.load(saved).save(tmp_path / "m.tagger", {"tokenizer": {"split_hyphens": True}})
    assert Tagger.load(tmp_path / "m.tagger").tokenizer_settings.split_hyphens


# --- the other readers of the metadata ----------------------------------------------------------


def test_tokenizer_settings_are_read_with_the_same_checks(saved: Path, tmp_path: Path) -> None:
    notes: list[str] = []
    assert model_tokenizer_settings(saved, notes) == TokenizerSettings() and notes == []
    bad = rewrite(saved, tmp_path / "m.tagger", _set(["tokenizer"], {"abbreviations": 3}), "fresh")
    with pytest.raises(ModelFileError, match=f"^{bad}: the stored tokenizer settings are invalid"):
        model_tokenizer_settings(bad)
    old = rewrite(saved, tmp_path / "old.tagger", lambda meta: None, "old")
    model_tokenizer_settings(old, notes)
    assert len(notes) == 1 and "predates the metadata digest" in notes[0]


def test_read_stored_model_refuses_a_metadata_that_is_no_table() -> None:
    with pytest.raises(ModelFileError, match="^m.tagger: the stored metadata is not a table"):
        read_stored_model(["config"], "m.tagger")


def test_commands_report_a_bad_model_in_one_line(saved: Path, tmp_path: Path) -> None:
    gold = tmp_path / "gold.txt"
    gold.write_text("".join(f"{token}\tO\n" for token in SENTENCE) + "\n")
    text = tmp_path / "t.txt"
    text.write_text("Anna met Bob.\n")
    pickled = tmp_path / "pickled.tagger"
    torch.save({"words.weight": torch.zeros(2, 2)}, pickled)
    big = rewrite(
        saved, tmp_path / "big.tagger", _set(["config", "model", "word_dim"], 10**6), "old"
    )
    for model, fragment in [(pickled, "not a tagger model file"), (big, "do not fit")]:
        for command in (
            ["evaluate", str(model), str(gold)],
            ["tag", str(model), str(text), "--out", str(tmp_path / "out.jsonl")],
            ["tokenize", str(text), "--model", str(model)],
        ):
            result = runner.invoke(app, command)
            assert result.exit_code == 1, (command, result.stderr)
            assert result.stderr.count("\n") == 1 and fragment in result.stderr
            assert result.stderr.startswith(f"tagger: error: {model}: ")


def test_commands_show_the_note_on_an_old_model_file(saved: Path, tmp_path: Path) -> None:
    gold = tmp_path / "gold.txt"
    gold.write_text("".join(f"{token}\tO\n" for token in SENTENCE) + "\n")
    text = tmp_path / "t.txt"
    text.write_text("Anna met Bob.\n")
    old = rewrite(saved, tmp_path / "old.tagger", lambda meta: None, "old")
    for command in (
        ["evaluate", str(old), str(gold)],
        ["tag", str(old), str(text), "--out", str(tmp_path / "out.jsonl")],
        ["tokenize", str(text), "--model", str(old)],
    ):
        result = runner.invoke(app, command)
        assert result.exit_code == 0, (command, result.stderr)
        notes = [line for line in result.stderr.splitlines() if "predates the metadata" in line]
        assert notes == [f"note: {old}: " + notes[0].split(f"{old}: ", 1)[1]]
