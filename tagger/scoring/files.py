"""Scoring a predicted column file against a gold one, both read from disk (no model, no torch).

Spans are read the way the CoNLL evaluation does, so a predictions file written by `evaluate`
and scored here gives the same figures.
"""

from __future__ import annotations

from collections.abc import Iterator
from itertools import zip_longest
from pathlib import Path
from typing import Any

from tagger.data.corpus import ColumnFormat, Sentence, read_columns
from tagger.data.io import input_name, is_stdio
from tagger.errors import ConfigError, DataError
from tagger.scoring.metrics import count_tag_sequences, summarise


def _paired(
    gold_path: str | Path, pred_path: str | Path, gold_fmt: ColumnFormat, pred_fmt: ColumnFormat
) -> Iterator[tuple[Sentence, Sentence]]:
    """Sentences of both files side by side; the tokens must agree exactly."""
    gold_name, pred_name = input_name(gold_path), input_name(pred_path)
    gold_iter = read_columns(gold_path, gold_fmt)
    pred_iter = read_columns(pred_path, pred_fmt)
    for gold, pred in zip_longest(gold_iter, pred_iter):
        if gold is None or pred is None:
            shorter, longer = (gold_name, pred_name) if gold is None else (pred_name, gold_name)
            extra = pred if gold is None else gold
            raise DataError(
                f"{shorter} ends here but {longer} goes on with a sentence at line {extra.line_numbers[0]}",
                shorter,
            )
        if gold.tokens != pred.tokens:
            pairs = enumerate(zip_longest(gold.tokens, pred.tokens))
            i, (g, p) = next((k, pair) for k, pair in pairs if pair[0] != pair[1])
            gold_line = gold.line_numbers[min(i, len(gold.tokens) - 1)]
            pred_line = pred.line_numbers[min(i, len(pred.tokens) - 1)]
            raise DataError(
                f"token {g!r} here but {p!r} at {pred_name}:{pred_line}: both files must hold the same tokens",
                gold_name,
                gold_line,
            )
        yield gold, pred


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
