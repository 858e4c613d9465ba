"""Scoring a predicted column file against a gold one, both read from disk (no model, no torch).

Spans are read the way the CoNLL evaluation does, so a predictions file written by `evaluate`
and scored here gives the same figures. A label that is not a span tag, or a token that differs
between the files, is refused naming the file and line (and, for tokens, what each file holds).
"""

from __future__ import annotations

from collections.abc import Iterator
from itertools import zip_longest
from pathlib import Path
from typing import Any

from tagger.data.corpus import ColumnFormat, Sentence, read_columns
from tagger.data.guards import check_labels
from tagger.data.io import input_name, is_stdio
from tagger.errors import ConfigError, DataError, quoted
from tagger.scoring.metrics import count_tag_sequences, summarise


def _paired(
    gold_path: str | Path, pred_path: str | Path, gold_fmt: ColumnFormat, pred_fmt: ColumnFormat
) -> Iterator[tuple[Sentence, Sentence]]:
    """Sentences of both files side by side; the tokens must agree exactly."""
    gold_name, pred_name = input_name(gold_path), input_name(pred_path)
    gold_iter = read_columns(gold_path, gold_fmt)
    pred_iter = read_columns(pred_path, pred_fmt)
    for number, (gold, pred) in enumerate(zip_longest(gold_iter, pred_iter), start=1):
        if gold is None or pred is None:
            shorter, longer = (gold_name, pred_name) if gold is None else (pred_name, gold_name)
            extra = pred if gold is None else gold
            raise DataError(
                f"{shorter} ends here but {longer} goes on with a sentence at line {extra.line_numbers[0]}",
                shorter,
            )
        if gold.tokens != pred.tokens:
            raise _token_mismatch(gold, pred, gold_name, pred_name)
        check_labels(gold, gold_name, number)
        check_labels(pred, pred_name, number)
        yield gold, pred


def _token_mismatch(gold: Sentence, pred: Sentence, gold_name: str, pred_name: str) -> DataError:
    """The error for the first token where two paired sentences differ, located in the gold file
    and saying what each file holds there."""
    index = next(k for k, (g, p) in enumerate(zip_longest(gold.tokens, pred.tokens)) if g != p)
    if index >= len(gold):  # the gold sentence ended first
        line = gold.line_numbers[-1]
        found = f"the sentence ends after this line, but {pred_name}:{pred.line_numbers[index]} "
        found += f"goes on with {quoted(pred.tokens[index])}"
    else:
        line = gold.line_numbers[index]
        found = f"token {quoted(gold.tokens[index])}, but "
        if index < len(pred):
            found += f"{pred_name}:{pred.line_numbers[index]} holds {quoted(pred.tokens[index])}"
        else:
            found += (
                f"in {pred_name} the sentence has already ended (its last token is on line "
                f"{pred.line_numbers[-1]})"
            )
    return DataError(
        f"{found}; both files must hold the same tokens in the same sentences", gold_name, line
    )


def score_files(
    gold_path: str | Path,
    pred_path: str | Path,
    gold_fmt: ColumnFormat = ColumnFormat(),
    pred_fmt: ColumnFormat | None = None,
) -> dict[str, Any]:
    """Span scores of a predicted column file against a gold one (streams both files).

    Either file, not both, may be standard input ("-").
    """
    if is_stdio(gold_path) and is_stdio(pred_path):
        raise ConfigError("standard input ('-') can be read only once: give one of the files")
    pairs = list(_paired(gold_path, pred_path, gold_fmt, pred_fmt or gold_fmt))
    counts = count_tag_sequences([g.labels for g, _ in pairs], [p.labels for _, p in pairs])
    return {
        "gold": str(gold_path),
        "predicted": str(pred_path),
        "sentences": len(pairs),
        **summarise(counts),
    }
