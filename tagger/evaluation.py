"""Score predictions against gold column files: `score` compares two files, `evaluate` runs a model first.

Both read spans the way the CoNLL evaluation does, so a predictions file written by `evaluate`
and scored with `score` gives the same figures.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from itertools import zip_longest
from pathlib import Path
from typing import Any

from tagger.corpus import ColumnFormat, Sentence, read_columns, write_columns
from tagger.errors import DataError
from tagger.metrics import SpanCounts, count_tag_sequences, summarise
from tagger.predict import TrainedTagger


def _paired(
    gold_path: str | Path, pred_path: str | Path, gold_fmt: ColumnFormat, pred_fmt: ColumnFormat
) -> Iterator[tuple[Sentence, Sentence]]:
    """Sentences of both files side by side; the tokens must agree exactly."""
    gold_iter = read_columns(gold_path, gold_fmt)
    pred_iter = read_columns(pred_path, pred_fmt)
    for gold, pred in zip_longest(gold_iter, pred_iter):
        if gold is None or pred is None:
            shorter, longer = (gold_path, pred_path) if gold is None else (pred_path, gold_path)
            extra = pred if gold is None else gold
            raise DataError(
                f"{shorter} ends here but {longer} goes on with a sentence at line {extra.line_numbers[0]}",
                str(shorter),
            )
        if gold.tokens != pred.tokens:
            pairs = enumerate(zip_longest(gold.tokens, pred.tokens))
            i, (g, p) = next((k, pair) for k, pair in pairs if pair[0] != pair[1])
            gold_line = gold.line_numbers[min(i, len(gold.tokens) - 1)]
            pred_line = pred.line_numbers[min(i, len(pred.tokens) - 1)]
            raise DataError(
                f"token {g!r} here but {p!r} at {pred_path}:{pred_line}: both files must hold the same tokens",
                str(gold_path),
                gold_line,
            )
        yield gold, pred


def score_files(
    gold_path: str | Path,
    pred_path: str | Path,
    gold_fmt: ColumnFormat = ColumnFormat(),
    pred_fmt: ColumnFormat | None = None,
) -> dict[str, Any]:
    """Span scores of a predicted column file against a gold one (streams both files)."""
    pairs = list(_paired(gold_path, pred_path, gold_fmt, pred_fmt or gold_fmt))
    counts = count_tag_sequences([g.labels for g, _ in pairs], [p.labels for _, p in pairs])
    return {
        "gold": str(gold_path),
        "predicted": str(pred_path),
        "sentences": len(pairs),
        **summarise(counts),
    }


def evaluate_files(
    tagger: TrainedTagger,
    paths: Sequence[str | Path],
    fmt: ColumnFormat = ColumnFormat(),
    predictions: str | Path | None = None,
) -> dict[str, Any]:
    """Tag each gold file with the model and score it; ``predictions`` receives the predicted columns.

    With several files the predictions are written one after another into the same file.
    """
    per_file: list[dict[str, Any]] = []
    total = SpanCounts()
    predicted_sentences: list[Sentence] = []
    for path in paths:
        sentences = list(read_columns(path, fmt))
        predicted = tagger.predict_labels(
            [s.tokens for s in sentences], rows=[s.rows for s in sentences]
        )
        counts = count_tag_sequences([s.labels for s in sentences], predicted)
        total = total + counts
        per_file.append({"file": str(path), "sentences": len(sentences), **summarise(counts)})
        if predictions is not None:
            predicted_sentences.extend(
                s.with_labels(p) for s, p in zip(sentences, predicted, strict=True)
            )
    if predictions is not None:
        write_columns(predictions, predicted_sentences)
    overall = summarise(total) if len(per_file) > 1 else per_file[0]
    return {
        "files": per_file,
        "overall": overall,
        "model_scheme": tagger.scheme,
        "input_scheme": tagger.input_scheme,
    }
