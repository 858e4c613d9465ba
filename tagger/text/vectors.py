"""Pretrained word vectors from the word2vec and GloVe text formats (read, never downloaded)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from tagger.data.io import input_name, read_lines, shortened
from tagger.errors import DataError


def read_word_vectors(path: str | Path) -> tuple[list[str], np.ndarray]:
    """Words and a (words, dim) float32 matrix.

    word2vec text files start with a "count dim" line; GloVe files do not. Every other line is a
    word followed by dim numbers, separated by single spaces. A repeated word keeps its first vector.
    Lines are read by `tagger.data.io` (a leading byte-order mark is dropped, "-" is standard
    input); every problem is a DataError naming the file and line.
    """
    where = input_name(path)
    words: list[str] = []
    rows: list[np.ndarray] = []
    seen: set[str] = set()
    dim: int | None = None
    for number, line in read_lines(path):
        parts = line.rstrip(" ").split(" ")
        if number == 1 and len(parts) == 2 and all(p.isdigit() for p in parts):
            dim = int(parts[1])
            continue
        if len(parts) < 2:
            if line.strip():
                raise DataError(
                    f"expected a word and its numbers, found {shortened(line)}", where, number
                )
            continue
        dim = dim or len(parts) - 1
        if len(parts) - 1 != dim:
            raise DataError(
                f"expected {dim} numbers after the word, found {len(parts) - 1}", where, number
            )
        try:
            vector = np.asarray(parts[1:], dtype=np.float32)
        except ValueError:
            raise DataError(f"not a number in {shortened(line)}", where, number) from None
        if parts[0] not in seen:
            seen.add(parts[0])
            words.append(parts[0])
            rows.append(vector)
    if not rows:
        raise DataError("no vectors found", where)
    return words, np.stack(rows)
