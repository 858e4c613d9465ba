"""The export of what a model reads beyond words and characters, and of its minimal gated cells
(tagger.apply.export_graphs, exported): models trained here on a frozen vector table (from a
vectors file written here), on a character language model (learnt here) and with minimal gated
cells tag on the onnx backend as on the torch backend (same labels, confidences within 1e-4)
on sentences with words seen nowhere, the table's vectors and the language model's states reach
the graphs as torch computes them, int8 exports still tag, and the export's refusals name the
file."""

from __future__ import annotations

import json
import random
from pathlib import Path

import numpy as np
import pytest
import torch
from typer.testing import CliRunner
from without_torch import assert_same_records, assert_same_scored, tag_without_torch

from tagger.apply.export_file import read_export_file, write_export_file
from tagger.apply.exported import ExportedTagger
from tagger.apply.exporting import export_model
from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.config import config_from_dict
from tagger.data.corpus import Sentence
from tagger.errors import ModelFileError
from tagger.network.batching import collate_lm
from tagger.text.subword import SubwordSettings, SubwordVectors
from tagger.text.tokenizer import TokenizerSettings
from tagger.training.loop import train_on_sentences
from tagger.unannotated.char_lm_training import CharLMSettings, learn_char_lm
from tagger.unannotated.vectors_file import save_vectors

pytest.importorskip("onnxruntime", reason="onnxruntime is not installed")
pytest.importorskip("onnx", reason="onnx is not installed")

runner = CliRunner()

PARTS = ["pump", "valve", "gearbox", "bearing", "blade"]
PEOPLE = ["Harriet", "Omar", "Ingrid", "Tomasz"]
TEMPLATES = [
    ("The {part} on unit {n} was leaking .", "O B-PART O O O O O O"),
    ("Technician {person} replaced the {part} .", "O B-PERSON O O B-PART O"),
    ("{person} checked the {part} and the {part} today .", "B-PERSON O O B-PART O O B-PART O O"),
]
# In the vectors file but never in the annotated sentences, and in neither: each gets its own
# row or its n-grams' rows, never the unknown word's vector.
VECTOR_ONLY = ["thermostat", "gearcase", "Ludmila", "impeller"]
NOWHERE = ["thermoswitch", "gearboxes", "Zbigniew", "pumpjack", "naïve", "X-17", "Ølstad"]
VECTOR_WORDS = 12  # model.vector_words: the table keeps these most frequent words


def _fill(template: str, rng: random.Random, parts: list[str], people: list[str]) -> str:
    text = template.replace("{n}", str(rng.randint(1, 9)))
    while "{part}" in text:
        text = text.replace("{part}", rng.choice(parts), 1)
    return text.replace("{person}", rng.choice(people))


def _annotated(seed: int = 1, count: int = 30) -> list[Sentence]:
    rng = random.Random(seed)
    sentences = []
    for _ in range(count):
        template, labels = rng.choice(TEMPLATES)
        text = _fill(template, rng, PARTS, PEOPLE)
        sentences.append(Sentence.from_tokens(text.split(), labels.split()))
    return sentences


def _to_tag(seed: int = 7, count: int = 36) -> list[list[str]]:
    """A few dozen sentences, many with words seen nowhere, one longer than any trained on."""
    rng = random.Random(seed)
    parts, people = PARTS + VECTOR_ONLY + NOWHERE, PEOPLE + ["Ludmila", "Zbigniew", "Ølstad"]
    lists = [_fill(rng.choice(TEMPLATES)[0], rng, parts, people).split() for _ in range(count)]
    lists.append([rng.choice(parts + people + ["the", "."]) for _ in range(70)])
    lists.append([])
    return lists


def _vectors_file(path: Path) -> SubwordVectors:
    """A small vectors file of seeded random vectors: what the export must carry is the table
    and the rows each token takes from it, whatever the numbers in it."""
    rng = np.random.default_rng(4)
    words = ["the", ".", "on", "unit", *PARTS[:3], *PEOPLE[:2], *VECTOR_ONLY, "was", "today"]
    vectors = SubwordVectors(
        words,
        list(range(len(words) + 10, 10, -1)),
        rng.normal(size=(len(words), 16)).astype(np.float32),
        rng.normal(size=(3000, 16)).astype(np.float32),
        SubwordSettings(min_n=3, max_n=5, buckets=3000),
        TokenizerSettings().to_dict(),
    )
    save_vectors(path, vectors)
    return vectors


def _train(folder: Path, model: dict) -> Path:
    settings = {
        "hidden_size": 8,
        "word_dim": 16,
        "char_dim": 4,
        "char_features": 6,
        "layers": 1,
        "dropout": 0.0,
        **model,
    }
    config = config_from_dict({"model": settings, "train": {"epochs": 6, "seed": 3}})
    sentences = _annotated()
    result = train_on_sentences(sentences, sentences[:6], config, folder / "run")
    return result.run_dir / "model.tagger"


@pytest.fixture(scope="module")
def raw(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Unannotated text that holds the words of both files above and more."""
    folder = tmp_path_factory.mktemp("raw")
    rng = random.Random(2)
    parts, people = PARTS + VECTOR_ONLY, PEOPLE + ["Ludmila"]
    lines = [_fill(rng.choice(TEMPLATES)[0], rng, parts, people) for _ in range(120)]
    (folder / "raw.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return folder / "raw.txt"


def _language_model(raw: Path, out: Path, cell: str) -> Path:
    torch.manual_seed(0)
    settings = CharLMSettings(
        hidden_size=12, char_dim=6, cell=cell, seq_len=40, batch_size=8, epochs=1, dropout=0.0
    )
    learn_char_lm([raw], out, settings, input_format="sentence-lines")
    return out


def _both_backends(model: Path, int8: bool = False) -> tuple[Tagger, ExportedTagger]:
    out = model.with_name("int8.tagexport" if int8 else "model.tagexport")
    export_model(model, out, int8=int8)
    return Tagger.load(model), ExportedTagger.load(out)


def _compare(model: Path) -> tuple[Tagger, ExportedTagger]:
    torch_tagger, onnx_tagger = _both_backends(model)
    token_lists = _to_tag()
    expected = torch_tagger.predict_sentences(token_lists, batch_size=8)
    assert_same_scored(expected, onnx_tagger.predict_sentences(token_lists, batch_size=8))
    assert sum(len(s.spans) for s in expected) >= 20  # the comparison covers real spans
    assert_same_scored(
        torch_tagger.predict_sentences(token_lists, temperature=1.7),
        onnx_tagger.predict_sentences(token_lists, temperature=1.7),
    )
    return torch_tagger, onnx_tagger


@pytest.mark.parametrize("use", ["fixed", "both"])
def test_a_model_reading_a_vector_table_tags_alike_on_both_backends(
    tmp_path: Path, use: str
) -> None:
    vectors = _vectors_file(tmp_path / "v.tagvec")
    model = _train(
        tmp_path,
        {
            "pretrained_vectors": str(tmp_path / "v.tagvec"),
            "vectors_use": use,
            "vector_words": VECTOR_WORDS,
        },
    )
    _, onnx_tagger = _compare(model)
    header, graphs = read_export_file(model.with_name("model.tagexport"))
    assert set(graphs) == {"characters", "vectors", "words"}
    # Each token's vector as the vectors graph gives it equals the one computed from the
    # vectors file alone: a kept word's row, and for words past the table's cut or seen nowhere
    # the mean of their n-grams' rows.
    tokens = ["pump", "Harriet", *VECTOR_ONLY, *NOWHERE]
    table = onnx_tagger._vector_table(tokens)
    assert table is not None and not table[0].any()
    np.testing.assert_allclose(
        table[1:], vectors.vectors(tokens, VECTOR_WORDS), rtol=1e-5, atol=1e-6
    )
    assert all(table[1 + tokens.index(t)].any() for t in NOWHERE)


@pytest.mark.parametrize("cell", ["lstm", "minimal"])
def test_a_model_reading_a_language_model_tags_alike_on_both_backends(
    raw: Path, tmp_path: Path, cell: str
) -> None:
    lm = _language_model(raw, tmp_path / "lm.tagclm", cell)
    model = _train(tmp_path, {"char_lm": str(lm), "cell": "gru"})
    torch_tagger, onnx_tagger = _compare(model)
    _, graphs = read_export_file(model.with_name("model.tagexport"))
    assert set(graphs) == {"characters", "char_lm", "words"}
    # the states each token reads, from both directions, as the torch model's language model
    # gives them for the same batch
    token_lists = _to_tag()[:9]
    reading = torch_tagger.vocabs.char_lm.encode
    batch = collate_lm([reading(tokens) for tokens in token_lists])
    with torch.no_grad():
        expected = torch_tagger.net.char_lm(batch.ids, batch.lengths, batch.starts, batch.ends)
    got = onnx_tagger._lm_states(token_lists)
    assert got is not None and got.shape == tuple(expected.shape)
    np.testing.assert_allclose(got, expected.numpy(), rtol=1e-4, atol=1e-5)


def test_a_model_of_minimal_gated_cells_tags_alike_on_both_backends(tmp_path: Path) -> None:
    model = _train(tmp_path, {"cell": "minimal", "char_encoder": "rnn", "layers": 2})
    _compare(model)
    import onnx

    _, graphs = read_export_file(model.with_name("model.tagexport"))
    for name in ("characters", "words"):  # a loop over time, not steps unrolled for one length
        kinds = {node.op_type for node in onnx.load_from_string(graphs[name]).graph.node}
        assert "Loop" in kinds, name


@pytest.fixture(scope="module")
def everything(raw: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A model of minimal gated cells reading a vector table and a language model."""
    folder = tmp_path_factory.mktemp("everything")
    _vectors_file(folder / "v.tagvec")
    lm = _language_model(raw, folder / "lm.tagclm", "lstm")
    return _train(
        folder,
        {
            "cell": "minimal",
            "pretrained_vectors": str(folder / "v.tagvec"),
            "vector_words": VECTOR_WORDS,
            "char_lm": str(lm),
        },
    )


def test_int8_exports_of_the_new_parts_still_tag(everything: Path) -> None:
    float_sizes = export_model(everything, everything.with_name("f.tagexport"))
    torch_tagger, onnx_tagger = _both_backends(everything, int8=True)
    assert onnx_tagger.weights == "int8"
    _, graphs = read_export_file(everything.with_name("int8.tagexport"))
    assert set(graphs) == set(float_sizes) == {"characters", "vectors", "char_lm", "words"}
    # the table is the vectors graph: int8 rows take a quarter of the float32 ones
    assert len(graphs["vectors"]) < float_sizes["vectors"] / 3
    token_lists = _to_tag()
    expected = torch_tagger.predict_sentences(token_lists)
    got = onnx_tagger.predict_sentences(token_lists)
    assert len(got) == len(expected)
    assert all(
        0.0 < s.certainty <= 1.0 for s, tokens in zip(got, token_lists, strict=True) if tokens
    )
    same = sum(
        [s[:3] for s in a.spans] == [s[:3] for s in b.spans]
        for a, b in zip(expected, got, strict=True)
    )
    assert same >= 0.8 * len(expected)  # rounding the weights moves a few labels, not most


def test_export_and_tag_commands_give_the_torch_output(everything: Path, tmp_path: Path) -> None:
    exported = tmp_path / "model.tagexport"
    result = runner.invoke(app, ["export", str(everything), str(exported)])
    assert result.exit_code == 0, result.output
    assert "vectors" in result.stderr and "char_lm" in result.stderr
    texts = [" ".join(tokens) for tokens in _to_tag(11, 20) if tokens]
    docs = tmp_path / "docs.jsonl"
    docs.write_text("".join(json.dumps({"text": t}) + "\n" for t in texts), encoding="utf-8")
    outputs = {}
    for backend, path in (("torch", everything), ("onnx", exported)):
        out = tmp_path / f"{backend}.jsonl"
        args = ["tag", str(path), str(docs), "-o", str(out), "--backend", backend]
        result = runner.invoke(app, args)
        assert result.exit_code == 0, result.output
        outputs[backend] = [json.loads(line) for line in out.read_text().splitlines()]
    assert sum(len(r["mentions"]) for r in outputs["torch"]) >= 10
    assert_same_records(outputs["torch"], outputs["onnx"])


def test_the_new_parts_tag_where_torch_cannot_be_imported(everything: Path) -> None:
    exported = everything.with_name("blocked.tagexport")
    export_model(everything, exported)
    texts = ["Technician Zbigniew replaced the thermoswitch .", "The pumpjack on unit 4 was ."]
    expected = [[m.to_record() for m in found] for found in Tagger.load(everything).tag(texts)]
    got, torch_loaded = tag_without_torch(exported, texts)
    assert not torch_loaded
    assert [[(m["type"], m["at"]) for m in doc] for doc in got] == [
        [(m["type"], m["at"]) for m in doc] for doc in expected
    ]


def test_an_export_file_without_a_part_its_model_reads_is_refused_naming_it(
    everything: Path, tmp_path: Path
) -> None:
    whole = tmp_path / "whole.tagexport"
    export_model(everything, whole)
    header, graphs = read_export_file(whole)
    for missing in ("vectors", "char_lm"):
        kept = {name: graph for name, graph in graphs.items() if name != missing}
        body = {k: v for k, v in header.items() if k in ("model", "decoding", "weights")}
        bad = tmp_path / f"without-{missing}.tagexport"
        write_export_file(bad, body, kept)  # a fresh digest: only the missing graph is wrong
        with pytest.raises(ModelFileError) as caught:
            ExportedTagger.load(bad)
        message = str(caught.value)
        assert message.startswith(f"{bad}: ") and "\n" not in message
        assert f"expected {sorted(graphs)}" in message


def test_a_vector_table_too_large_for_one_graph_is_refused_naming_the_model(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from model_files import tiny_tagger

    from tagger.apply import exporting
    from tagger.network.net import build_net
    from tagger.text.subword import SubwordIndex

    tagger = tiny_tagger()
    tagger.vocabs.subwords = SubwordIndex(["pump"], SubwordSettings(buckets=50), dim=4)
    tagger.net = build_net(tagger.config, tagger.vocabs)
    model = tmp_path / "model.tagger"
    tagger.save(model)
    table = tagger.net.fixed_vectors.table
    # the limit (2 GiB) brought down to just below this table's size
    monkeypatch.setattr(exporting, "MAX_TABLE_BYTES", table.numel() * 4 - 1)
    out = tmp_path / "out.tagexport"
    result = runner.invoke(app, ["export", str(model), str(out)])
    assert result.exit_code == 1
    (line,) = result.stderr.strip().splitlines()
    assert line.endswith("vector_words or vectors learnt with fewer n-gram buckets")
    assert line.startswith("tagger: error: ") and f"{model}: its frozen vector table" in line
    assert not out.exists()
