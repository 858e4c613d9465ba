"""Rewriting a column file's labels in another tagging scheme (the `convert` command), every
other column and the file's layout kept, and never a span changed without saying so: a file
ill-formed in its scheme is refused, or with `repair` converted with its ill-formed sentences
listed.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any

from tagger.data.corpus import ColumnFormat, ColumnSource, Sentence, write_columns
from tagger.data.findings import Examples
from tagger.data.io import input_name
from tagger.data.schemes import (
    SchemeGuess,
    convert_tags,
    detect_scheme,
    ill_formed_transitions,
    normalise_scheme_name,
    split_tag,
)
from tagger.errors import DataError

_ANY_FORMAT = ColumnFormat()  # the defaults: detect the delimiter, token first, label last
# How the command line names the choice to repair ill-formed sentences (said in the refusal).
REPAIR_OPTION = "--repair"
# Ill-formed sentences an error message quotes (the summary of a repair lists more).
SHOWN_IN_REFUSAL = 3


def convert_file(
    src: str | Path,
    dst: str | Path,
    target_scheme: str,
    fmt: ColumnFormat = _ANY_FORMAT,
    source_scheme: str | None = None,
    repair: bool = False,
    max_examples: int = 5,
) -> dict[str, Any]:
    """Rewrite the label column of `src` in `target_scheme` into `dst`, other columns untouched.

    The source scheme is detected when not given (the first candidate; all candidates read
    well-formed data the same way). Sentences that are ill-formed in the source scheme are
    refused with a DataError that counts them and gives the first lines (and, when the scheme was
    given, the schemes the file does fit), unless `repair`: they are then read the lenient CoNLL
    way, rewritten well-formed and listed in the summary. Nothing is written before the whole file
    has been checked. The output keeps the source's delimiter, document marks and comments. `dst`
    is replaced only when the whole file is written. `src` "-" reads standard input (kept in
    memory, as it is read more than once), `dst` "-" writes standard output.
    Returns {"file", "output", "sentences", "tokens", "source_scheme", "target_scheme",
    "scheme_given", "changed_labels", "ill_formed_sentences", "repaired" ({"count", "examples":
    [{"line", "message"}]}), "note"}.
    """
    if not fmt.has_labels:
        raise DataError("converting needs a label column (has_labels is False)", str(src))
    target = normalise_scheme_name(target_scheme)
    source = ColumnSource(src, fmt)
    note = ""
    if source_scheme is None:
        guess = _detect(source, src)
        if not guess.candidates:
            raise DataError(f"cannot tell the tagging scheme: {guess.note}", str(src))
        chosen = guess.candidates[0]
        note = guess.note
    else:
        chosen = normalise_scheme_name(source_scheme)

    ill_formed, sentences_read = _ill_formed(source, src, chosen, max_examples)
    if ill_formed.count and not repair:
        raise DataError(
            _refusal(source, src, chosen, source_scheme is not None, ill_formed, sentences_read),
            input_name(src),
        )

    counts = {"sentences": 0, "tokens": 0, "changed": 0}

    def converted() -> Iterator[Sentence]:
        for sentence in source.sentences():
            labels = sentence.labels
            with _located(src, sentence.first_line):
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
        "scheme_given": source_scheme is not None,
        "changed_labels": counts["changed"],
        "ill_formed_sentences": ill_formed.count,
        "repaired": ill_formed.as_dict(),
        "note": note,
    }


def _detect(source: ColumnSource, src: str | Path) -> SchemeGuess:
    return detect_scheme(_span_tags(source, src))


def _span_tags(source: ColumnSource, src: str | Path) -> Iterator[list[str]]:
    """Each sentence's labels, a label that is not a span tag refused with its line."""
    for sentence in source.sentences():
        for label, line in zip(sentence.labels, sentence.line_numbers, strict=True):
            with _located(src, line):
                split_tag(label)
        yield sentence.labels


def _ill_formed(
    source: ColumnSource, src: str | Path, scheme: str, limit: int
) -> tuple[Examples, int]:
    """The sentences ill-formed in `scheme` (each with the line and message of its first
    problem), and how many sentences were read."""
    found = Examples(limit)
    sentences = 0
    for sentence in source.sentences():
        sentences += 1
        with _located(src, sentence.first_line):
            problems = ill_formed_transitions(sentence.labels, scheme)
        if problems:
            index, message = problems[0]
            line = sentence.line_numbers[min(index, len(sentence) - 1)]
            found.add(lambda line=line, message=message: {"line": line, "message": message})
    return found, sentences


def _refusal(
    source: ColumnSource,
    src: str | Path,
    scheme: str,
    given: bool,
    ill_formed: Examples,
    sentences: int,
) -> str:
    """Why a file is not converted: its ill-formed sentences, and what would convert it."""
    shown = ill_formed.examples[:SHOWN_IN_REFUSAL]
    where = "; ".join(f"line {e['line']}: {e['message']}" for e in shown)
    more = ill_formed.count - len(shown)
    if more:
        where += f"; and {more:,} more"
    named = "the scheme given" if given else "the nearest scheme found"
    text = (
        f"{ill_formed.count:,} of {sentences:,} sentences are ill-formed in {scheme}, {named} "
        f"({where})."
    )
    if given:
        fitting = [
            name
            for name in _detect(source, src).candidates
            if name != scheme and not _ill_formed(source, src, name, 0)[0].count
        ]
        if fitting:
            text += f" The file is well-formed in {' and '.join(fitting)}."
    return text + f" {REPAIR_OPTION} reads them the lenient CoNLL way and rewrites them well-formed"


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
