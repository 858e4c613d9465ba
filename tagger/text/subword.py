"""Word vectors with subword information: a vector for any word, seen in the raw text or not.

Vectors learnt with character n-grams (Bojanowski et al. 2017) keep two tables: one row per word
of the raw text's vocabulary, and one row per hash bucket of character n-grams. A word of the
vocabulary has its own row (already composed with its n-grams when learnt); any other word gets
the mean of its n-grams' bucket rows; a word with no n-gram gets zeros. The n-grams and their
hash are those of the learning library, so vectors built here equal its own (the tests compare):

    "<" + word + ">" cut into every run of min_n..max_n characters, as UTF-8 bytes
    bucket = FNV-1a over the bytes, each byte read as a signed char, modulo the bucket count

`SubwordIndex` is what a model keeps to find a token's rows; `SubwordVectors` is the whole of a
vectors file in memory. Reading and writing that file is `tagger.unannotated.vectors_file`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from tagger.text.vocab import normalise_word

_FNV_OFFSET = 2166136261
_FNV_PRIME = 16777619
_UINT32 = 0xFFFFFFFF
_CONTINUATION_MASK, _CONTINUATION = 0xC0, 0x80  # UTF-8 bytes that continue a character
BAG_CACHE = 200_000  # distinct tokens whose rows are remembered (a few tens of MB at most)


def ngram_hash(ngram: bytes) -> int:
    """FNV-1a over the bytes, each sign-extended first (as a C char is)."""
    h = _FNV_OFFSET
    for byte in ngram:
        h ^= byte | 0xFFFFFF00 if byte >= 0x80 else byte
        h = (h * _FNV_PRIME) & _UINT32
    return h


def ngrams(word: str, min_n: int, max_n: int) -> list[bytes]:
    """The character n-grams of "<word>" as UTF-8 bytes, n from min_n to max_n, in the order the
    learning library lists them (by start, then length); a lone "<" or ">" is not one."""
    data = f"<{word}>".encode()
    found = []
    for start in range(len(data)):
        if data[start] & _CONTINUATION_MASK == _CONTINUATION:
            continue
        end, n = start, 1
        while end < len(data) and n <= max_n:
            end += 1
            while end < len(data) and data[end] & _CONTINUATION_MASK == _CONTINUATION:
                end += 1
            if n >= min_n and not (n == 1 and (start == 0 or end == len(data))):
                found.append(data[start:end])
            n += 1
    return found


def ngram_buckets(word: str, min_n: int, max_n: int, buckets: int) -> list[int]:
    """The bucket of each n-gram of `word` (repeats kept: the mean counts each occurrence)."""
    if buckets <= 0:
        return []
    return [ngram_hash(g) % buckets for g in ngrams(word, min_n, max_n)]


@dataclass(frozen=True)
class SubwordSettings:
    """How words are cut into n-grams and looked up: fixed when the vectors are learnt."""

    min_n: int = 3
    max_n: int = 6
    buckets: int = 100_000
    lowercase: bool = False
    digits_to_zero: bool = False

    def key(self, token: str) -> str:
        return normalise_word(token, self.lowercase, self.digits_to_zero)

    def to_dict(self) -> dict[str, Any]:
        return {
            "min_n": self.min_n,
            "max_n": self.max_n,
            "buckets": self.buckets,
            "lowercase": self.lowercase,
            "digits_to_zero": self.digits_to_zero,
        }


@dataclass
class SubwordIndex:
    """Rows of a fixed vector table for any token: row 0 is zeros (padding, and a token with no
    n-gram), rows 1..len(words) the words, then one row per n-gram bucket."""

    words: list[str]
    settings: SubwordSettings
    dim: int
    _rows: dict[str, int] = field(init=False, repr=False)
    _bags: dict[str, list[int]] = field(init=False, repr=False, default_factory=dict)

    def __post_init__(self) -> None:
        self._rows = {word: row for row, word in enumerate(self.words, start=1)}

    @property
    def size(self) -> int:
        """Rows of the table, the zero row included."""
        return 1 + len(self.words) + self.settings.buckets

    def bag(self, token: str) -> list[int]:
        """The rows whose mean is the token's vector (empty: the zero vector)."""
        bag = self._bags.get(token)
        if bag is None:
            if len(self._bags) >= BAG_CACHE:
                self._bags.clear()
            key = self.settings.key(token)
            row = self._rows.get(key)
            if row is not None:
                bag = [row]
            else:
                s = self.settings
                first = 1 + len(self.words)
                bag = [first + b for b in ngram_buckets(key, s.min_n, s.max_n, s.buckets)]
            self._bags[token] = bag
        return bag

    def to_dict(self) -> dict[str, Any]:
        return {"words": list(self.words), "dim": self.dim, **self.settings.to_dict()}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> SubwordIndex:
        """The inverse of `to_dict`; a model's metadata is checked before it comes here."""
        settings = {k: v for k, v in data.items() if k not in ("words", "dim")}
        return cls(list(data["words"]), SubwordSettings(**settings), data["dim"])


@dataclass
class SubwordVectors:
    """A vectors file in memory: words (most frequent first) with their counts in the raw text,
    their vectors, the n-gram bucket vectors, the settings and what they were learnt from."""

    words: list[str]
    counts: list[int]
    word_vectors: np.ndarray  # (words, dim) float32
    ngram_vectors: np.ndarray  # (buckets, dim) float32
    settings: SubwordSettings
    tokenizer: dict[str, Any]  # the tokenizer settings the raw text was cut with
    summary: dict[str, Any] = field(default_factory=dict)  # sentences, tokens, seconds, ...

    @property
    def dim(self) -> int:
        return int(self.word_vectors.shape[1])

    def index(self, max_words: int | None = None) -> SubwordIndex:
        return SubwordIndex(self.words[:max_words], self.settings, self.dim)

    def table(self, max_words: int | None = None) -> np.ndarray:
        """(rows, dim): the zero row, the first `max_words` words' vectors, the bucket vectors,
        laid out as `index(max_words)` numbers its rows."""
        kept = self.word_vectors[:max_words]
        zero = np.zeros((1, self.dim), dtype=np.float32)
        return np.concatenate([zero, kept, self.ngram_vectors]).astype(np.float32, copy=False)

    def vectors(self, tokens: Sequence[str], max_words: int | None = None) -> np.ndarray:
        """(len(tokens), dim): each token's vector, as a model with this table computes it."""
        index, table = self.index(max_words), self.table(max_words)
        out = np.zeros((len(tokens), self.dim), dtype=np.float32)
        for i, token in enumerate(tokens):
            bag = index.bag(token)
            if bag:
                out[i] = table[bag].mean(axis=0)
        return out
