"""The word vectors file `tagger learn-vectors` writes and a training config names.

It is the model file's container (safetensors with our JSON metadata, verified by a digest, never
unpickled; `tagger.network.modelfile`) holding two tensors, "word_vectors" (words, dim) and
"ngram_vectors" (buckets, dim), and metadata:

    kind        "word-vectors"
    words       the raw text's vocabulary, most frequent first; counts: how often each occurred
    subwords    min_n, max_n, buckets, lowercase, digits_to_zero (`SubwordSettings`)
    tokenizer   the tokenizer settings the raw text was cut with (training refuses a mismatch)
    learnt      what it was learnt from and how: sentences, tokens, seconds, dim, window, ...

Beside it, `save_word2vec_text` writes the words' vectors in the word2vec text format for other
programs (that format has no n-grams, so unseen words get no vector there).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import torch

from tagger.data.atomic import atomic_output
from tagger.errors import DataError
from tagger.network.modelfile import save_model_file
from tagger.text.subword import SubwordSettings, SubwordVectors
from tagger.unannotated.container import read_container

KIND = "word-vectors"
MAX_N = 32  # n-grams longer than this help nothing and cost a lot


def save_vectors(path: str | Path, vectors: SubwordVectors) -> None:
    """Write `vectors` atomically (the old file or the whole new one)."""
    tensors = {
        "word_vectors": torch.from_numpy(np.ascontiguousarray(vectors.word_vectors)),
        "ngram_vectors": torch.from_numpy(np.ascontiguousarray(vectors.ngram_vectors)),
    }
    metadata = {
        "kind": KIND,
        "words": vectors.words,
        "counts": vectors.counts,
        "subwords": vectors.settings.to_dict(),
        "tokenizer": vectors.tokenizer,
        "learnt": vectors.summary,
    }
    save_model_file(path, tensors, metadata)


def save_word2vec_text(path: str | Path, vectors: SubwordVectors) -> None:
    """The words' vectors as word2vec text: "count dim", then a word and its numbers per line."""
    with atomic_output(path, "w") as out:
        out.write(f"{len(vectors.words)} {vectors.dim}\n")
        for word, row in zip(vectors.words, vectors.word_vectors, strict=True):
            out.write(word + " " + " ".join(f"{x:.6g}" for x in row.tolist()) + "\n")


def is_vectors_file(path: str | Path) -> bool:
    """Does `path` start like a file of ours (the container), rather than a text format?"""
    try:
        with open(path, "rb") as handle:
            head = handle.read(64)
    except OSError:
        return False
    # safetensors: an 8-byte header length, then the JSON header; text formats start with words
    return len(head) >= 9 and head[8:9] == b"{" and int.from_bytes(head[:8], "little") > 1


def load_vectors(path: str | Path) -> SubwordVectors:
    """Read and check a vectors file; every problem is a one-line DataError naming it."""
    name = str(path)
    tensors, meta = read_container(path, "word vectors file")
    if meta.get("kind") != KIND:
        raise DataError("a tagger model file, not a word vectors file", name)

    def refuse(what: str) -> DataError:
        return DataError(f"word vectors file is damaged: {what}", name)

    words, counts = meta.get("words"), meta.get("counts")
    if not isinstance(words, list) or not all(isinstance(w, str) and w for w in words):
        raise refuse("its word list is not a list of words")
    if len(set(words)) != len(words):
        raise refuse("its word list repeats a word")
    if not isinstance(counts, list) or len(counts) != len(words):
        raise refuse("its counts do not match its words")
    if not all(type(c) is int and c > 0 for c in counts):
        raise refuse("a count is not a whole number above 0")
    settings = _settings(meta.get("subwords"), refuse)
    if not isinstance(meta.get("tokenizer"), dict):
        raise refuse("the tokenizer settings are missing")
    word_vectors = _matrix(tensors, "word_vectors", refuse)
    ngram_vectors = _matrix(tensors, "ngram_vectors", refuse)
    if word_vectors.shape[0] != len(words):
        raise refuse(f"{word_vectors.shape[0]:,} word vectors for {len(words):,} words")
    if ngram_vectors.shape[0] != settings.buckets:
        raise refuse(f"{ngram_vectors.shape[0]:,} n-gram vectors for {settings.buckets:,} buckets")
    if word_vectors.shape[1] != ngram_vectors.shape[1] or word_vectors.shape[1] == 0:
        raise refuse("its two tables differ in width")
    summary = meta.get("learnt") if isinstance(meta.get("learnt"), dict) else {}
    return SubwordVectors(
        words, counts, word_vectors, ngram_vectors, settings, meta["tokenizer"], summary
    )


def _matrix(tensors: dict[str, torch.Tensor], key: str, refuse: Any) -> np.ndarray:
    tensor = tensors.get(key)
    if tensor is None or tensor.dim() != 2 or tensor.dtype != torch.float32:
        raise refuse(f"{key} is missing or not a float32 matrix")
    array = tensor.numpy()
    if not np.isfinite(array).all():
        raise refuse(f"{key} holds a value that is not a finite number")
    return array


def _settings(value: Any, refuse: Any) -> SubwordSettings:
    if not isinstance(value, dict):
        raise refuse("the subword settings are missing")
    try:
        settings = SubwordSettings(**value)
    except TypeError:
        raise refuse("the subword settings hold an unknown key") from None
    numbers = (settings.min_n, settings.max_n, settings.buckets)
    if not all(type(n) is int for n in numbers) or not all(
        isinstance(flag, bool) for flag in (settings.lowercase, settings.digits_to_zero)
    ):
        raise refuse("a subword setting has the wrong type")
    if not (1 <= settings.min_n <= settings.max_n <= MAX_N) or settings.buckets < 0:
        raise refuse("the n-gram sizes or the bucket count are out of range")
    return settings
