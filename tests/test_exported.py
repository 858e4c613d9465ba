"""The exported model (tagger.apply.exporting, export_file, exported): the onnx backend tags as
the torch backend does (same labels, confidences within 1e-4) for every network part it
exports, through the library and the `export` and `tag --backend onnx` commands, without torch
installed, and refuses what it cannot read. Models reading a vector table or a character
language model: test_exported_inputs.py."""

from __future__ import annotations

import json
import random
from pathlib import Path

import pytest
import torch
from model_files import tiny_tagger
from test_tagging import (
    _detokenised,
    _sentences,
    model,  # noqa: F401 - a fixture: the tiny tagger trained once
)
from typer.testing import CliRunner
from without_torch import assert_same_records, assert_same_scored, tag_without_torch

from tagger.apply.export_file import read_export_file
from tagger.apply.exported import ExportedTagger
from tagger.apply.exporting import export_model
from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.errors import ModelFileError

runner = CliRunner()
WORDS = ["Anna", "met", "Bob", "in", "Oslo", ".", "Tromsø", "unseen", "X-1", "a" * 40]

# (model settings, lexicon features): every cell (the minimal gated cell, which has no fused
# kernel, as an ONNX Loop), every character encoder, the softmax output, the feature slots.
NETWORKS = [
    ({"cell": "lstm", "char_encoder": "cnn"}, False),
    ({"cell": "gru", "char_encoder": "rnn", "layers": 2}, False),
    ({"cell": "rnn", "char_encoder": "none", "bidirectional": False}, False),
    ({"cell": "lstm", "output": "softmax"}, False),
    ({"cell": "gru"}, True),
    ({"cell": "minimal", "char_encoder": "rnn", "layers": 2}, False),
]


def _token_lists(seed: int, count: int = 40) -> list[list[str]]:
    rng = random.Random(seed)
    return [[rng.choice(WORDS) for _ in range(rng.randint(0, 12))] for _ in range(count)]


def _both(tmp_path: Path, settings: dict, lexicon: bool, seed: int) -> tuple[Tagger, Tagger]:
    torch.manual_seed(seed)
    tagger = tiny_tagger(settings, lexicon=lexicon, seed=seed)
    with torch.no_grad():  # larger weights than the initial ones: decisive, varied labels
        for parameter in tagger.net.parameters():
            parameter.mul_(3.0)
    tagger.save(tmp_path / "model.tagger")
    export_model(tmp_path / "model.tagger", tmp_path / "model.tagexport")
    return Tagger.load(tmp_path / "model.tagger"), ExportedTagger.load(tmp_path / "model.tagexport")


@pytest.mark.parametrize(("settings", "lexicon"), NETWORKS, ids=lambda v: str(v))
def test_the_two_backends_find_the_same_spans_and_scores(
    tmp_path: Path, settings: dict, lexicon: bool
) -> None:
    torch_tagger, onnx_tagger = _both(tmp_path, settings, lexicon, seed=3)
    token_lists = _token_lists(5)
    expected = torch_tagger.predict_sentences(token_lists, batch_size=7)
    assert_same_scored(expected, onnx_tagger.predict_sentences(token_lists, batch_size=7))
    assert sum(len(s.spans) for s in expected) > 10  # the comparison covers real spans
    for temperature in (0.6, 2.0):
        assert_same_scored(
            torch_tagger.predict_sentences(token_lists, temperature=temperature),
            onnx_tagger.predict_sentences(token_lists, temperature=temperature),
        )


def test_the_export_file_holds_the_model_metadata_and_crf(tmp_path: Path) -> None:
    torch_tagger, _ = _both(tmp_path, {"cell": "lstm"}, False, seed=1)
    header, graphs = read_export_file(tmp_path / "model.tagexport")
    assert set(graphs) == {"characters", "words"}
    assert header["weights"] == "float32"
    assert header["model"]["vocabularies"] == torch_tagger.vocabs.to_dict()
    crf = torch_tagger.net.crf
    assert header["decoding"]["transitions_ok"] == crf.trans_ok.tolist()
    assert header["decoding"]["start"] == pytest.approx(crf.start.tolist())


def test_int8_weights_make_a_smaller_words_graph_that_still_tags(tmp_path: Path) -> None:
    tagger = tiny_tagger({"hidden_size": 64, "word_dim": 32})
    tagger.save(tmp_path / "model.tagger")
    full = export_model(tmp_path / "model.tagger", tmp_path / "full.tagexport")
    small = export_model(tmp_path / "model.tagger", tmp_path / "int8.tagexport", int8=True)
    assert small["words"] < full["words"] / 2
    exported = ExportedTagger.load(tmp_path / "int8.tagexport")
    assert exported.weights == "int8"
    (sentence,) = exported.predict_sentences([["Anna", "met", "Bob"]])
    assert 0.0 < sentence.certainty <= 1.0


def test_export_and_tag_commands_give_the_torch_output(
    model: Path,  # noqa: F811 - the fixture
    tmp_path: Path,
) -> None:
    exported = tmp_path / "model.tagexport"
    result = runner.invoke(app, ["export", str(model), str(exported)])
    assert result.exit_code == 0, result.output
    assert "float32 weights" in result.stderr
    texts = [_detokenised(s) for s in _sentences(9, 30, unseen=True)]
    docs = tmp_path / "docs.jsonl"
    docs.write_text("".join(json.dumps({"text": t}) + "\n" for t in texts), encoding="utf-8")
    outputs = {}
    runs = (("torch", model, "1"), ("onnx", exported, "1"), ("onnx-workers", exported, "2"))
    for name, path, workers in runs:
        out = tmp_path / f"{name}.jsonl"
        backend = name.split("-")[0]
        args = ["tag", str(path), str(docs), "-o", str(out), "--backend", backend]
        result = runner.invoke(app, [*args, "--workers", workers, "--chunk-chars", "2000"])
        assert result.exit_code == 0, result.output
        outputs[name] = [json.loads(line) for line in out.read_text().splitlines()]
    assert outputs["onnx-workers"] == outputs["onnx"]  # worker processes load the same file
    assert sum(len(r["mentions"]) for r in outputs["torch"]) >= 30
    assert_same_records(outputs["torch"], outputs["onnx"])


def test_the_onnx_backend_tags_where_torch_cannot_be_imported(
    model: Path,  # noqa: F811 - the fixture
    tmp_path: Path,
) -> None:
    exported = tmp_path / "model.tagexport"
    export_model(model, exported)
    texts = [_detokenised(s) for s in _sentences(4, 6)]
    expected = [[m.to_record() for m in found] for found in Tagger.load(model).tag(texts)]
    got, torch_loaded = tag_without_torch(exported, texts)
    assert not torch_loaded
    assert [[(m["type"], m["at"]) for m in doc] for doc in got] == [
        [(m["type"], m["at"]) for m in doc] for doc in expected
    ]


def _edited(source: Path, target: Path, edit) -> Path:  # noqa: ANN001 - a bytes -> bytes function
    target.write_bytes(edit(source.read_bytes()))
    return target


def test_export_file_refusals_name_the_file_and_the_fault(tmp_path: Path) -> None:
    tiny_tagger().save(tmp_path / "model.tagger")
    good = tmp_path / "model.tagexport"
    export_model(tmp_path / "model.tagger", good)
    cases = [
        (lambda b: b.replace(b'"version": 1', b'"version": 7', 1), "format version 7"),
        (lambda b: b + b"\0", "1 bytes after the last graph"),
        (lambda b: b[:20], "it ends inside its header"),
        (lambda b: b[:60], "its header runs past the end"),
        (lambda b: b.replace(b'"weights": "float32"', b'"weights": "float64"', 1), "digest"),
    ]
    for number, (edit, fragment) in enumerate(cases):
        bad = _edited(good, tmp_path / f"bad{number}.tagexport", edit)
        with pytest.raises(ModelFileError) as caught:
            ExportedTagger.load(bad)
        assert str(caught.value).startswith(f"{bad}: ")
        assert fragment in str(caught.value)


def test_a_missing_runtime_says_what_to_install(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import importlib.util

    tiny_tagger().save(tmp_path / "model.tagger")
    monkeypatch.setattr(importlib.util, "find_spec", lambda name, *rest: None)
    for args in (
        ["export", str(tmp_path / "model.tagger"), str(tmp_path / "out.tagexport")],
        ["tag", str(tmp_path / "model.tagger"), "--backend", "onnx"],
    ):
        result = runner.invoke(app, args, input="Anna met Bob.")
        assert result.exit_code == 1
        assert "pip install 'tagger[onnx]'" in result.stderr
    assert not (tmp_path / "out.tagexport").exists()
