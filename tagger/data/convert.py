"""Rewriting a column file's labels in another tagging scheme (the `convert` command), every
other column and the file's layout kept.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any

from tagger.data.corpus import ColumnFormat, ColumnSource, Sentence, write_columns
from tagger.data.schemes import (
    convert_tags,
    detect_scheme,
    ill_formed_transitions,
    normalise_scheme_name,
)
from tagger.errors import DataError

_ANY_FORMAT = ColumnFormat()  # the defaults: detect the delimiter, token first, label last


def convert_file(
    src: str | Path,
    dst: str | Path,
    target_scheme: str,
    fmt: ColumnFormat = _ANY_FORMAT,
    source_scheme: str | None = None,
) -> dict[str, Any]:
    """Rewrite the label column of `src` in `target_scheme` into `dst`, other columns untouched.

    The source scheme is detected when not given (the first candidate; all candidates read
    well-formed data the same way). Sentences that are ill-formed in the source scheme are read
    the lenient CoNLL way and counted in the summary. The output keeps the source's delimiter,
    document marks and comments. `dst` is replaced only when the whole file is written. `src`
    "-" reads standard input (kept in memory when the scheme must be detected first), `dst` "-"
    writes standard output.
    Returns {"file", "output", "sentences", "tokens", "source_scheme", "target_scheme",
    "changed_labels", "ill_formed_sentences", "note"}.
    """
    if not fmt.has_labels:
        raise DataError("converting needs a label column (has_labels is False)", str(src))
    target = normalise_scheme_name(target_scheme)
    source = ColumnSource(src, fmt)
    note = ""
    if source_scheme is None:
        with _located(src):
            guess = detect_scheme(s.labels for s in source.sentences())
        if not guess.candidates:
            raise DataError(f"cannot tell the tagging scheme: {guess.note}", str(src))
        chosen = guess.candidates[0]
        note = guess.note
    else:
        chosen = normalise_scheme_name(source_scheme)

    counts = {"sentences": 0, "tokens": 0, "changed": 0, "ill_formed": 0}

    def converted() -> Iterator[Sentence]:
        for sentence in source.sentences():
            labels = sentence.labels
            with _located(src, sentence.first_line):
                if ill_formed_transitions(labels, chosen):
                    counts["ill_formed"] += 1
                new = convert_tags(labels, chosen, target)
            counts["sentences"] += 1
            counts["tokens"] += len(labels)
            counts["changed"] += sum(a != b for a, b in zip(labels, new, strict=True))
            yield sentence.with_labels(new)

    sentences = converted()
    first = next(sentences, None)  # reading the first sentence settles the delimiter
    delimiter = fmt.delimiter or source.stats.delimiter or "tab"
    if first is None:
        write_columns(dst, [], delimiter)
    else:
        write_columns(dst, _prepend(first, sentences), delimiter)
    return {
        "file": str(src),
        "output": str(dst),
        "sentences": counts["sentences"],
        "tokens": counts["tokens"],
        "source_scheme": chosen,
        "target_scheme": target,
        "changed_labels": counts["changed"],
        "ill_formed_sentences": counts["ill_formed"],
        "note": note,
    }


def _prepend(first: Sentence, rest: Iterable[Sentence]) -> Iterator[Sentence]:
    yield first
    yield from rest


@contextlib.contextmanager
def _located(path: str | Path, line: int | None = None) -> Iterator[None]:
    """Give a DataError raised without a place the file (and line) it concerns."""
    try:
        yield
    except DataError as error:
        if error.path is not None:
            raise
        raise DataError(error.message, str(path), line) from error
