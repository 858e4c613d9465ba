"""Word vectors learnt from unannotated text: the n-grams and hashes against gensim's own, what the
vectors must show on small invented texts, the vectors file, and models that read them."""

from __future__ import annotations

import gzip
import random
from pathlib import Path

import numpy as np
import pytest
import torch
from typer.testing import CliRunner

from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.config import config_from_dict
from tagger.data.corpus import Sentence
from tagger.errors import ConfigError, DataError
from tagger.network.net import build_net
from tagger.text.subword import (
    SubwordIndex,
    SubwordSettings,
    SubwordVectors,
    ngram_buckets,
    ngram_hash,
    ngrams,
)
from tagger.text.tokenizer import TokenizerSettings
from tagger.training.loop import train_on_sentences
from tagger.unannotated.vectors_file import load_vectors, save_vectors, save_word2vec_text
from tagger.unannotated.word_vectors import VectorSettings, learn_word_vectors

gensim_fasttext = pytest.importorskip("gensim.models.fasttext", reason="gensim is not installed")
gensim_inner = pytest.importorskip("gensim.models.fasttext_inner")

WORDS = ["aspirin", "naïve", "°C", "T-14", "x", "", "日本語", "🙂ok", "106.9°C", "pitch-bearing"]


@pytest.mark.parametrize("word", WORDS)
@pytest.mark.parametrize("sizes", [(3, 6), (1, 3), (2, 2)])
def test_ngrams_and_hashes_are_the_learning_librarys(word: str, sizes: tuple[int, int]) -> None:
    # reference: gensim's compute_ngrams_bytes and ft_hash_bytes (its port of the original C++)
    expected = gensim_inner.compute_ngrams_bytes(word, *sizes)
    assert ngrams(word, *sizes) == expected
    assert [ngram_hash(g) for g in expected] == [gensim_inner.ft_hash_bytes(g) for g in expected]
    assert ngram_buckets(word, *sizes, 1000) == gensim_fasttext.ft_ngram_hashes(word, *sizes, 1000)


# --- small invented raw texts ------------------------------------------------------------------

PUMPS = ["pump", "compressor", "blower", "impeller", "turbine"]
PEOPLE = ["Harriet", "Osman", "Mireille", "Tobiah", "Ingrid"]
THERMO = ["thermostat", "thermometer", "thermocouple", "thermistor"]
GEARS = ["gearbox", "gearing", "gearwheel", "gearshift"]


def raw_text(seed: int = 3, sentences: int = 1500) -> str:
    """Sentences where machine parts and people occur in contexts of their own, and the
    thermo- and gear- words in contexts of their own."""
    rng = random.Random(seed)
    lines = []
    for _ in range(sentences):
        kind = rng.randrange(4)
        if kind == 0:
            lines.append(f"The {rng.choice(PUMPS)} on unit {rng.randint(1, 40)} was leaking oil .")
        elif kind == 1:
            lines.append(f"Technician {rng.choice(PEOPLE)} signed the shift report today .")
        elif kind == 2:
            lines.append(f"Replaced the faulty {rng.choice(THERMO)} reading high temperature .")
        else:
            lines.append(f"Grease the {rng.choice(GEARS)} and check the teeth for wear .")
    return "\n".join(lines) + "\n"


def cosine(a: np.ndarray, b: np.ndarray) -> float:
    return float(a @ b / (np.linalg.norm(a) * np.linalg.norm(b) + 1e-12))


def mean_cosine(vectors: SubwordVectors, left: list[str], right: list[str]) -> float:
    a, b = vectors.vectors(left), vectors.vectors(right)
    pairs = [cosine(x, y) for i, x in enumerate(a) for j, y in enumerate(b) if left[i] != right[j]]
    return sum(pairs) / len(pairs)


SMALL = VectorSettings(dim=24, window=3, min_count=2, epochs=8, threads=1, seed=5, buckets=5000)


@pytest.fixture(scope="module")
def learnt(tmp_path_factory: pytest.TempPathFactory) -> SubwordVectors:
    folder = tmp_path_factory.mktemp("raw")
    (folder / "reports.txt").write_text(raw_text(), encoding="utf-8")
    return learn_word_vectors([folder / "reports.txt"], SMALL, input_format="sentence-lines")


def test_words_that_share_contexts_are_closer_than_words_that_do_not(
    learnt: SubwordVectors,
) -> None:
    # the distributional hypothesis: any word-embedding method must pass this
    assert mean_cosine(learnt, PUMPS, PUMPS) > mean_cosine(learnt, PUMPS, PEOPLE) + 0.1
    assert mean_cosine(learnt, PEOPLE, PEOPLE) > mean_cosine(learnt, PEOPLE, PUMPS) + 0.1


def test_an_unseen_word_lands_near_its_morphological_relatives(learnt: SubwordVectors) -> None:
    assert "thermoswitch" not in learnt.words and "gearcase" not in learnt.words
    unseen = learnt.vectors(["thermoswitch", "gearcase"])
    thermo, gears = learnt.vectors(THERMO), learnt.vectors(GEARS)
    assert np.mean([cosine(unseen[0], t) for t in thermo]) > np.mean(
        [cosine(unseen[0], g) for g in gears]
    )
    assert np.mean([cosine(unseen[1], g) for g in gears]) > np.mean(
        [cosine(unseen[1], t) for t in thermo]
    )


def test_vectors_of_any_word_equal_the_learning_librarys(tmp_path: Path) -> None:
    # reference: gensim's FastTextKeyedVectors.get_vector, for words in and out of its vocabulary
    corpus = tmp_path / "c.txt"
    corpus.write_text(raw_text(sentences=300), encoding="utf-8")
    model = gensim_fasttext.FastText(
        vector_size=8, window=2, min_count=2, bucket=997, min_n=2, max_n=4, epochs=1, workers=1
    )
    model.build_vocab(corpus_file=str(corpus))
    model.train(
        corpus_file=str(corpus),
        total_examples=model.corpus_count,
        total_words=model.corpus_total_words,
        epochs=1,
    )
    wv = model.wv
    ours = SubwordVectors(
        list(wv.index_to_key),
        [1] * len(wv.index_to_key),
        wv.vectors,
        wv.vectors_ngrams,
        SubwordSettings(min_n=2, max_n=4, buckets=997),
        {},
    )
    words = ["pump", "Harriet", "thermoswitch", "gearcase", "naïve", "ö", "日本"]
    np.testing.assert_allclose(ours.vectors(words), np.stack([wv[w] for w in words]), atol=1e-6)


def test_learning_is_repeatable_with_one_thread_and_a_seed(tmp_path: Path) -> None:
    (tmp_path / "r.txt").write_text(raw_text(sentences=200), encoding="utf-8")
    settings = VectorSettings(dim=8, min_count=1, epochs=1, threads=1, buckets=100)
    first = learn_word_vectors([tmp_path / "r.txt"], settings)
    second = learn_word_vectors([tmp_path / "r.txt"], settings)
    assert first.words == second.words
    np.testing.assert_array_equal(first.word_vectors, second.word_vectors)


def test_raw_text_is_cut_by_the_taggers_tokenizer_with_its_settings(tmp_path: Path) -> None:
    (tmp_path / "r.txt").write_text("Reset T-14 twice.\n" * 5, encoding="utf-8")
    whole = learn_word_vectors([tmp_path / "r.txt"], VectorSettings(dim=4, min_count=1))
    split = learn_word_vectors(
        [tmp_path / "r.txt"],
        VectorSettings(dim=4, min_count=1),
        TokenizerSettings(split_hyphens=True),
    )
    assert "T-14" in whole.words and "T-14" not in split.words and "14" in split.words
    assert whole.tokenizer["split_hyphens"] is False and split.tokenizer["split_hyphens"] is True


def test_compressed_jsonl_and_column_inputs_are_read(tmp_path: Path) -> None:
    with gzip.open(tmp_path / "notes.jsonl.gz", "wt", encoding="utf-8") as handle:
        handle.write('{"id": 1, "text": "Valve seized again."}\n' * 3)
    (tmp_path / "cols.conll").write_text("Valve\tO\nstuck\tO\n\n", encoding="utf-8")
    vectors = learn_word_vectors(
        [tmp_path / "notes.jsonl.gz", tmp_path / "cols.conll"], VectorSettings(dim=4, min_count=1)
    )
    assert {"Valve", "seized", "again", "stuck"} <= set(vectors.words)
    assert "O" not in vectors.words  # a column file's labels are not text
    assert vectors.summary["sentences"] == 4


def test_empty_or_binary_raw_text_is_refused_naming_the_file(tmp_path: Path) -> None:
    (tmp_path / "empty.txt").write_text("  \n\n", encoding="utf-8")
    (tmp_path / "binary.txt").write_bytes(b"\x00\xff\xfe\x80 abc")
    with pytest.raises(DataError, match="no words to learn from") as caught:
        learn_word_vectors([tmp_path / "empty.txt"], SMALL)
    assert "empty.txt" in str(caught.value)
    with pytest.raises(DataError) as caught:
        learn_word_vectors([tmp_path / "binary.txt"], SMALL)
    assert "binary.txt" in str(caught.value) and "UTF-8" in str(caught.value)


# --- the vectors file --------------------------------------------------------------------------


def test_the_vectors_file_round_trips_exactly(learnt: SubwordVectors, tmp_path: Path) -> None:
    save_vectors(tmp_path / "v.tagvec", learnt)
    again = load_vectors(tmp_path / "v.tagvec")
    assert again.words == learnt.words and again.counts == learnt.counts
    assert again.settings == learnt.settings and again.tokenizer == learnt.tokenizer
    np.testing.assert_array_equal(again.word_vectors, learnt.word_vectors)
    np.testing.assert_array_equal(again.ngram_vectors, learnt.ngram_vectors)


def test_the_word2vec_text_beside_it_holds_the_same_vectors(
    learnt: SubwordVectors, tmp_path: Path
) -> None:
    from tagger.text.vectors import read_word_vectors

    save_word2vec_text(tmp_path / "v.txt", learnt)
    assert (tmp_path / "v.txt").read_text().split("\n")[0] == f"{len(learnt.words)} {learnt.dim}"
    words, matrix = read_word_vectors(tmp_path / "v.txt")
    assert words == learnt.words
    np.testing.assert_allclose(matrix, learnt.word_vectors, rtol=1e-5, atol=1e-6)


def test_a_truncated_or_foreign_vectors_file_is_one_line_naming_it(
    learnt: SubwordVectors, tmp_path: Path
) -> None:
    save_vectors(tmp_path / "v.tagvec", learnt)
    blob = (tmp_path / "v.tagvec").read_bytes()
    (tmp_path / "cut.tagvec").write_bytes(blob[: len(blob) // 2])
    with pytest.raises(DataError) as caught:
        load_vectors(tmp_path / "cut.tagvec")
    message = str(caught.value)
    assert "cut.tagvec" in message and "\n" not in message and "word vectors" in message
    model = tmp_path / "m.tagger"
    tiny_model(model)
    with pytest.raises(DataError, match="a tagger model file, not a word vectors file"):
        load_vectors(model)


def tiny_model(path: Path) -> None:
    from model_files import tiny_tagger

    tiny_tagger().save(path)


# --- models that read the vectors ----------------------------------------------------------------

TRAIN = [
    ("Replaced the thermostat on unit 4 .", "O O B-PART O O O O"),
    ("Grease the gearbox today .", "O O B-PART O O"),
    ("The pump on unit 9 was leaking oil .", "O B-PART O O O O O O O"),
    ("Technician Harriet signed the report .", "O O O O O O"),
]


def sentences() -> list[Sentence]:
    return [Sentence.from_tokens(t.split(), labels.split()) for t, labels in TRAIN * 6]


def vector_config(path: Path, use: str, word_dim: int = 24) -> dict:
    return {
        "model": {
            "hidden_size": 8,
            "word_dim": word_dim,
            "char_dim": 4,
            "char_features": 6,
            "layers": 1,
            "pretrained_vectors": str(path),
            "vectors_use": use,
            "vector_words": 30,
        },
        "train": {"epochs": 2, "seed": 3},
    }


@pytest.mark.parametrize("use", ["fixed", "both", "initialise"])
def test_a_model_with_vectors_tags_the_same_after_saving_and_loading(
    learnt: SubwordVectors, tmp_path: Path, use: str
) -> None:
    save_vectors(tmp_path / "v.tagvec", learnt)
    config = config_from_dict(vector_config(tmp_path / "v.tagvec", use))
    result = train_on_sentences(sentences(), sentences()[:4], config, tmp_path / "run")
    loaded = Tagger.load(result.run_dir / "model.tagger")
    texts = [
        ["Replaced", "the", "thermoswitch", "on", "unit", "7", "."],
        ["Grease", "the", "gearcase", "and", "the", "pump", "."],
    ]
    loaded.save(tmp_path / "again.tagger")
    again = Tagger.load(tmp_path / "again.tagger")
    assert again.predict_scored_spans(texts) == loaded.predict_scored_spans(texts)
    has_table = loaded.net.fixed_vectors is not None
    assert has_table == (use != "initialise")
    if has_table:
        # the table holds the 30 most frequent words and every n-gram row, unchanged by training
        table = loaded.net.fixed_vectors.table.numpy()
        np.testing.assert_array_equal(table, learnt.table(30))
        # a word never seen anywhere gets its n-gram vector, not zeros or the unknown word's
        (encoded,) = loaded.encode([["thermoswitch"]])
        row = loaded.net.fixed_vectors(torch.tensor([encoded.bags[0]]))
        np.testing.assert_allclose(
            row.numpy()[0], learnt.vectors(["thermoswitch"])[0], rtol=1e-5, atol=1e-6
        )


def test_vectors_of_another_width_or_tokenizer_are_refused(
    learnt: SubwordVectors, tmp_path: Path
) -> None:
    save_vectors(tmp_path / "v.tagvec", learnt)
    narrow = config_from_dict(vector_config(tmp_path / "v.tagvec", "both", word_dim=10))
    with pytest.raises(ConfigError, match=r"word_dim is 10 but the pretrained vectors have 24"):
        train_on_sentences(sentences(), None, narrow, tmp_path / "run1")
    other = config_from_dict(
        {**vector_config(tmp_path / "v.tagvec", "fixed"), "tokenizer": {"split_hyphens": True}}
    )
    with pytest.raises(DataError, match="tokenizer setting split_hyphens"):
        train_on_sentences(sentences(), None, other, tmp_path / "run2")
    assert not (tmp_path / "run1" / "model.tagger").exists()


def test_learn_vectors_command_writes_both_files_and_a_summary(tmp_path: Path) -> None:
    (tmp_path / "r.txt").write_text(raw_text(sentences=100), encoding="utf-8")
    out = tmp_path / "r.tagvec"
    result = CliRunner().invoke(
        app,
        ["learn-vectors", str(tmp_path / "r.txt"), "--out", str(out), "--dim", "6"]
        + ["--epochs", "1", "--threads", "1", "--buckets", "50", "--min-count", "1"],
    )
    assert result.exit_code == 0, result.output
    assert load_vectors(out).dim == 6
    assert (tmp_path / "r.tagvec.txt").read_text().startswith(f"{len(load_vectors(out).words)} 6")
    assert "learnt" in result.output and "100 sentences" in result.output


def test_learn_vectors_on_bad_input_exits_1_with_one_line_and_no_file(tmp_path: Path) -> None:
    (tmp_path / "empty.txt").write_text("", encoding="utf-8")
    out = tmp_path / "e.tagvec"
    result = CliRunner().invoke(
        app, ["learn-vectors", str(tmp_path / "empty.txt"), "--out", str(out)]
    )
    assert result.exit_code == 1
    assert "no words to learn from" in result.output and "Traceback" not in result.output
    assert not out.exists() and not Path(f"{out}.txt").exists()


# --- what the loader checks ----------------------------------------------------------------------


def tagger_with_table(words: list[str]) -> Tagger:
    from model_files import tiny_tagger

    tagger = tiny_tagger()
    tagger.vocabs.subwords = small_index(words)
    tagger.net = build_net(tagger.config, tagger.vocabs)
    return tagger


def small_index(words: list[str]) -> SubwordIndex:
    return SubwordIndex(words, SubwordSettings(min_n=2, max_n=3, buckets=7), dim=3)


def test_the_expected_tensors_include_the_frozen_table() -> None:
    from tagger.network.shapes import expected_tensors, tensor_count

    tagger = tagger_with_table(["pump", "valve"])
    made = tagger.net.state_dict()
    vocabs = tagger.vocabs
    expected = expected_tensors(
        tagger.config.model,
        len(vocabs.words),
        len(vocabs.chars),
        len(vocabs.labels),
        (),
        (vocabs.subwords.size, 3),
    )
    assert expected["fixed_vectors.table"] == ((1 + 2 + 7, 3), "float32")
    assert expected == {
        k: (tuple(t.shape), str(t.dtype).removeprefix("torch.")) for k, t in made.items()
    }
    assert tensor_count(tagger.config.model, 0) + 1 == len(made)


@pytest.mark.parametrize(
    "edit, fragment",
    [
        (lambda s: s["words"].append("extra"), "shape"),
        (lambda s: s.update(buckets=-1), "buckets"),
        (lambda s: s.update(min_n=5, max_n=2), "n-gram sizes"),
        (lambda s: s.update(lowercase="yes"), "lowercase"),
        (lambda s: s.update(colour=1), "unknown key"),
    ],
)
def test_a_stored_table_that_does_not_fit_is_refused(tmp_path: Path, edit, fragment: str) -> None:
    from model_files import rewrite

    from tagger.errors import ModelFileError

    tagger_with_table(["pump", "valve"]).save(tmp_path / "m.tagger")
    Tagger.load(tmp_path / "m.tagger")  # the unedited file loads

    def change(meta: dict) -> None:
        edit(meta["vocabularies"]["subwords"])

    bad = rewrite(tmp_path / "m.tagger", tmp_path / "bad.tagger", change, "fresh")
    with pytest.raises(ModelFileError, match=fragment) as caught:
        Tagger.load(bad)
    assert str(caught.value).startswith(f"{bad}: ") and "\n" not in str(caught.value)


def test_a_vectors_file_given_as_a_model_is_named_for_what_it_is(
    learnt: SubwordVectors, tmp_path: Path
) -> None:
    from tagger.errors import ModelFileError

    save_vectors(tmp_path / "v.tagvec", learnt)
    with pytest.raises(ModelFileError, match="word vectors file .* not a model"):
        Tagger.load(tmp_path / "v.tagvec")
