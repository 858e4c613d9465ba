"""Tests for tagger.training.folds (cutting a corpus into folds) and tagger.scoring.folds (mean
and standard deviation over folds, checked against Python's `statistics` module)."""

from __future__ import annotations

import statistics
from collections import Counter

import pytest

from tagger.data.corpus import Sentence
from tagger.errors import DataError
from tagger.scoring.folds import mean_and_sd, summarise_folds
from tagger.training.folds import split_folds


def _corpus(documents: list[int]) -> list[Sentence]:
    """Sentences of documents of the given sizes, in order (document index as read)."""
    return [
        Sentence.from_tokens([f"w{d}_{i}"], ["O"], document=d)
        for d, size in enumerate(documents)
        for i in range(size)
    ]


@pytest.mark.parametrize("k", [2, 3, 5])
def test_documents_stay_whole_and_every_sentence_is_held_out_once(k: int) -> None:
    sentences = _corpus([3, 1, 7, 2, 2, 5, 1, 4])
    folds = split_folds(sentences, k, seed=1, source="train.txt")
    assert folds.by_documents and folds.documents == 8
    assert len(folds.held_out_in) == len(sentences)
    assert set(folds.held_out_in) == set(range(k))  # every fold holds something out
    fold_of_document: dict[int, set[int]] = {}
    for sentence, fold in zip(sentences, folds.held_out_in, strict=True):
        fold_of_document.setdefault(sentence.document, set()).add(fold)
    assert all(len(f) == 1 for f in fold_of_document.values())
    held = [i for fold in range(k) for i in folds.parts(fold)[1]]
    assert sorted(held) == list(range(len(sentences)))  # each sentence held out exactly once
    for fold in range(k):
        trained, held_out = folds.parts(fold)
        assert not set(trained) & set(held_out)
        assert len(trained) + len(held_out) == len(sentences)


def test_without_documents_sentences_are_dealt_evenly_and_by_the_seed() -> None:
    sentences = _corpus([10])
    one = split_folds(sentences, 3, seed=1, source="train.txt")
    assert not one.by_documents
    assert sorted(Counter(one.held_out_in).values()) == [3, 3, 4]
    assert split_folds(sentences, 3, seed=1, source="x").held_out_in == one.held_out_in
    others = [split_folds(sentences, 3, seed=s, source="x").held_out_in for s in range(2, 6)]
    assert any(o != one.held_out_in for o in others)  # shuffled, not cut in file order


def test_more_folds_than_documents_is_refused_naming_the_file() -> None:
    with pytest.raises(DataError, match=r"5 folds need at least 5 documents.*marks 3") as caught:
        split_folds(_corpus([4, 4, 4]), 5, seed=1, source="train.txt")
    assert caught.value.path == "train.txt"
    assert "--folds 3 or fewer" in caught.value.message


def test_more_folds_than_sentences_is_refused() -> None:
    with pytest.raises(DataError, match="4 folds need at least 4 sentences"):
        split_folds(_corpus([3]), 4, seed=1, source="train.txt")


def test_mean_and_sd_against_the_statistics_module() -> None:
    values = [0.81, 0.77, 0.9, 0.62, 0.85]
    mean, sd = mean_and_sd(values)
    assert mean == pytest.approx(statistics.mean(values))
    assert sd == pytest.approx(statistics.stdev(values))  # the sample standard deviation
    assert mean_and_sd([0.5]) == (0.5, None)
    assert mean_and_sd([]) == (None, None)


def _scores(per_type: dict[str, tuple[float, int]], micro: float) -> dict:
    return {
        "per_type": {t: {"f1": f1, "gold": gold} for t, (f1, gold) in per_type.items()},
        "micro": {"f1": micro, "gold": sum(g for _, g in per_type.values())},
    }


def test_a_type_missing_from_a_fold_is_left_out_of_its_mean_and_named() -> None:
    folds = [
        _scores({"PER": (0.8, 10), "LOC": (0.5, 4)}, 0.7),
        _scores({"PER": (0.6, 12), "LOC": (0.0, 0)}, 0.55),  # LOC only predicted here
        _scores({"PER": (0.7, 8)}, 0.7),  # LOC neither in gold nor predicted
    ]
    summary = summarise_folds(folds)
    per = summary["per_type"]
    assert per["PER"]["mean"] == pytest.approx(0.7)
    assert per["PER"]["sd"] == pytest.approx(statistics.stdev([0.8, 0.6, 0.7]))
    assert per["PER"]["gold"] == 30
    assert per["LOC"]["f1_per_fold"] == [0.5, None, None]
    assert per["LOC"]["mean"] == 0.5 and per["LOC"]["sd"] is None
    assert summary["micro"]["mean"] == pytest.approx(statistics.mean([0.7, 0.55, 0.7]))
    (warning,) = summary["warnings"]
    assert "LOC" in warning and "folds 2, 3" in warning
