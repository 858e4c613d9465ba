"""Evaluating a model on gold column files: tag them, score the spans, optionally write the
predicted columns. Scoring two files without a model is `tagger.scoring.files`.

Each gold file is checked before the model sees it: labels must be span tags and sentences no
longer than the model's sentence limit (data.max_sentence_tokens of its training config), each
refusal naming the file and line.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.data.corpus import ColumnFormat, Sentence, read_columns, write_columns
from tagger.data.guards import check_sentences
from tagger.data.io import input_name
from tagger.scoring.metrics import SpanCounts, count_tag_sequences, summarise

if TYPE_CHECKING:
    from tagger.apply.tagger import Tagger


def evaluate_files(
    tagger: Tagger,
    paths: Sequence[str | Path],
    fmt: ColumnFormat = ColumnFormat(),
    predictions: str | Path | None = None,
    max_sentence_tokens: int | None = None,
) -> dict[str, Any]:
    """Tag each gold file with the model and score it; ``predictions`` receives the predicted columns.

    With several files the predictions are written one after another into the same file.
    Sentences longer than ``max_sentence_tokens`` (None: the model's limit) and labels that are
    not span tags are refused with a DataError naming the file and line.
    """
    limit = max_sentence_tokens or tagger.config.data.max_sentence_tokens
    remedy = "evaluate with a model trained with a higher data.max_sentence_tokens"
    per_file: list[dict[str, Any]] = []
    total = SpanCounts()
    predicted_sentences: list[Sentence] = []
    for path in paths:
        sentences = list(read_columns(path, fmt))
        check_sentences(sentences, input_name(path), limit, remedy)
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
