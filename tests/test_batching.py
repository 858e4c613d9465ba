from __future__ import annotations

import random

import torch

from tagger.network.batching import bucketed_batches, collate, encode_sentence
from tagger.text.vocab import (
    MAX_TOKEN_CHARS,
    Vocab,
    Vocabularies,
    build_vocabularies,
    normalise_word,
)


def _vocabs() -> Vocabularies:
    vocabs, counts = build_vocabularies(
        [["Pitch", "bearing", "T-14"], ["bearing", "at", "7.2"]],
        ["O", "B-X", "I-X"],
        lowercase=True,
        digits_to_zero=True,
    )
    assert counts["bearing"] == 2 and counts["0.0"] == 1
    return vocabs


def test_normalisation_rules() -> None:
    assert normalise_word("T-14", lowercase=True, digits_to_zero=True) == "t-00"
    assert normalise_word("T-14", lowercase=False, digits_to_zero=False) == "T-14"
    assert normalise_word("٣.٥", lowercase=False, digits_to_zero=True) == "0.0"  # any Unicode digit


def test_vocab_round_trip_and_unknown() -> None:
    vocabs = _vocabs()
    again = Vocabularies.from_dict(vocabs.to_dict())
    assert again.words.itos == vocabs.words.itos and again.labels.itos == ["O", "B-X", "I-X"]
    assert vocabs.words.index("never-seen") == 1 and vocabs.words.itos[:2] == ["<pad>", "<unk>"]
    assert Vocab(["a", "b", "a"], specials=False).itos == ["a", "b"]


def test_encoding_uses_normalised_words_but_raw_characters() -> None:
    vocabs = _vocabs()
    encoded = encode_sentence(["PITCH", "T-99"], vocabs, ["B-X", "B-UNSEEN"])
    assert encoded.words == [vocabs.words.index("pitch"), vocabs.words.index("t-00")]
    assert encoded.chars[0] == [vocabs.chars.index(c) for c in "PITCH"]
    assert encoded.labels == [1, 0]  # a label outside the vocabulary is read as O


def test_long_tokens_keep_their_first_and_last_characters() -> None:
    vocabs = _vocabs()
    token = "b" * 40 + "T-14"
    chars = encode_sentence([token], vocabs).chars[0]
    assert len(chars) == MAX_TOKEN_CHARS
    assert chars[-4:] == [vocabs.chars.index(c) for c in "T-14"]


def test_collate_pads_right_and_masks() -> None:
    vocabs = _vocabs()
    sentences = [
        encode_sentence(t, vocabs, ["O"] * len(t)) for t in (["a"], ["Pitch", "bearing", "at"])
    ]
    batch = collate(sentences, [1, 0])
    assert batch.lengths.tolist() == [3, 1] and batch.indices == [1, 0]
    assert batch.mask.tolist() == [[True, True, True], [True, False, False]]
    assert batch.words[1, 1:].tolist() == [0, 0] and batch.chars.shape == (2, 3, 7)
    assert torch.equal(batch.chars[1, 1:], torch.zeros(2, 7, dtype=torch.long))
    assert batch.tokens == 4


def test_buckets_cover_every_sentence_once_and_are_seeded() -> None:
    lengths = [(i * 37) % 50 + 1 for i in range(101)]
    batches = bucketed_batches(lengths, 8, random.Random(1))
    assert sorted(i for b in batches for i in b) == list(range(101))
    assert batches == bucketed_batches(lengths, 8, random.Random(1))
    assert batches != bucketed_batches(lengths, 8, random.Random(2))
    spread = max(max(lengths[i] for i in b) - min(lengths[i] for i in b) for b in batches)
    assert spread <= 4  # neighbours in length order share a batch
    ordered = bucketed_batches(lengths, 8)
    assert [lengths[b[0]] for b in ordered] == sorted(lengths[b[0]] for b in ordered)


def test_batches_trained_side_by_side_are_about_as_long() -> None:
    lengths = [(i * 37) % 50 + 1 for i in range(101)]  # 13 batches of 8: six pairs and one left
    alone = bucketed_batches(lengths, 8, random.Random(1))
    paired = bucketed_batches(lengths, 8, random.Random(1), group=2)
    assert sorted(i for b in paired for i in b) == list(range(101))
    assert paired == bucketed_batches(lengths, 8, random.Random(1), group=2)

    def longest(batch: list[int]) -> int:
        return max(lengths[i] for i in batch)

    def mismatch(batches: list[list[int]]) -> int:
        return sum(
            abs(longest(a) - longest(b)) for a, b in zip(batches[:-1:2], batches[1::2], strict=True)
        )

    # the pairs are neighbours in length order, shuffled as pairs; the odd batch out stays last
    assert mismatch(paired) <= 6 * 4 < mismatch(alone)
    assert sorted(lengths[i] for i in paired[-1]) == sorted(lengths)[-len(paired[-1]) :]
    assert [longest(b) for b in paired[:-1:2]] != sorted(longest(b) for b in paired[:-1:2])
