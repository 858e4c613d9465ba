"""Evaluating a model on gold column files, for error analysis. Scoring two files without a
model is `tagger.scoring.files`.

Each gold file is tagged and gets (and, with several files, so do all of them together):

* the span scores of `tagger.scoring.metrics.summarise`, with the confusion of types;
* a bootstrap interval of span F1 over its sentences (`tagger.scoring.bootstrap`);
* the calibration of span scores, and what the review flag raises (`tagger.scoring.calibration`,
  `tagger.apply.review`): how many sentences, and how many of those holding an error;
* per file only, example sentences of each kind of error (`tagger.scoring.examples`);
* on request (``worst``), over all files, the sentences holding the most errors (for the page).

Files written on request, several gold files one after another in each:

* ``predictions``: the gold files with their label column replaced by the tagger's labels;
* ``side_by_side``: one token per line, TAB-separated: the token, the gold label, the tagged label
  and ``same`` or ``DIFF``; a blank line after each sentence (`-DOCSTART-` lines kept).

Each gold file is checked before the model sees it: labels must be span tags and sentences no
longer than the model's sentence limit (data.max_sentence_tokens of its training config), each
refusal naming the file and line.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.apply.review import REVIEW_BELOW, ScoredSentence, needs_review
from tagger.data.corpus import ColumnFormat, Sentence, read_columns, write_columns
from tagger.data.guards import check_sentences
from tagger.data.io import input_name
from tagger.data.schemes import Span, spans_lenient, spans_to_tags
from tagger.errors import DataError
from tagger.scoring.bootstrap import RESAMPLES, f1_interval
from tagger.scoring.calibration import reliability, review_catch
from tagger.scoring.examples import PER_KIND, PairedSentence, error_examples, worst_sentences
from tagger.scoring.metrics import SpanCounts, count_sentence, summarise

if TYPE_CHECKING:
    from tagger.apply.tagger import Tagger

SAME, DIFFERENT = "same", "DIFF"  # the side-by-side file's last column


@dataclass
class _Judged:
    """What one gold file (or all of them) adds up to, sentence by sentence."""

    counts: SpanCounts = field(default_factory=SpanCounts)
    per_sentence: list[tuple[int, int, int]] = field(default_factory=list)  # right, tagged, gold
    scores: list[float] = field(default_factory=list)  # of every tagged span
    right: list[bool] = field(default_factory=list)  # is that span in gold?
    flagged: list[bool] = field(default_factory=list)  # per sentence
    erroneous: list[bool] = field(default_factory=list)  # per sentence

    def add(self, other: _Judged) -> None:
        self.counts.update(other.counts)
        for name in ("per_sentence", "scores", "right", "flagged", "erroneous"):
            getattr(self, name).extend(getattr(other, name))

    def summary(self, resamples: int, review_below: float) -> dict[str, Any]:
        return {
            **summarise(self.counts),
            "f1_interval": f1_interval(self.per_sentence, resamples),
            "calibration": reliability(self.scores, self.right),
            "review": {
                "review_below": review_below,
                **review_catch(self.flagged, self.erroneous),
            },
        }


def evaluate_files(
    tagger: Tagger,
    paths: Sequence[str | Path],
    fmt: ColumnFormat = ColumnFormat(),
    predictions: str | Path | None = None,
    side_by_side: str | Path | None = None,
    examples: int = PER_KIND,
    resamples: int = RESAMPLES,
    review_below: float = REVIEW_BELOW,
    max_sentence_tokens: int | None = None,
    worst: int = 0,
) -> dict[str, Any]:
    """Tag each gold file with the model and score it for error analysis (see the module
    docstring); ``examples`` sentences per kind of error (0: none), ``resamples`` for the F1
    interval (0: none), the review flag read at ``review_below``, and (``worst`` > 0) a "worst"
    list of that many sentences with the most errors over all files. Sentences longer than ``max_sentence_tokens``
    (None: the model's limit) and labels that are not span tags are refused with a DataError
    naming the file and line."""
    limit = max_sentence_tokens or tagger.config.data.max_sentence_tokens
    remedy = "evaluate with a model trained with a higher data.max_sentence_tokens"
    per_file: list[dict[str, Any]] = []
    total = _Judged()
    predicted_sentences: list[Sentence] = []
    side_sentences: list[Sentence] = []
    all_paired: list[PairedSentence] = []
    for path in paths:
        sentences = list(read_columns(path, fmt))
        if not sentences:  # scores over nothing would read as a model that finds nothing
            raise DataError("the gold file holds no sentences to score", input_name(path))
        check_sentences(sentences, input_name(path), limit, remedy)
        scored = tagger.predict_sentences(
            [s.tokens for s in sentences], rows=[s.rows for s in sentences]
        )
        judged, tagged_labels, paired = _judge(
            tagger, input_name(path), sentences, scored, review_below
        )
        total.add(judged)
        if worst > 0:
            all_paired.extend(paired)
        per_file.append(
            {
                "file": str(path),
                "sentences": len(sentences),
                **judged.summary(resamples, review_below),
                "examples": error_examples(paired, examples),
            }
        )
        if predictions is not None:
            predicted_sentences.extend(
                s.with_labels(labels) for s, labels in zip(sentences, tagged_labels, strict=True)
            )
        if side_by_side is not None:
            side_sentences.extend(
                _side_by_side(s, labels) for s, labels in zip(sentences, tagged_labels, strict=True)
            )
    if predictions is not None:
        write_columns(predictions, predicted_sentences)
    if side_by_side is not None:
        write_columns(side_by_side, side_sentences)
    overall = total.summary(resamples, review_below) if len(per_file) > 1 else per_file[0]
    result = {
        "files": per_file,
        "overall": overall,
        "model_scheme": tagger.scheme,
        "input_scheme": tagger.input_scheme,
        "temperature": tagger.temperature,
        "temperature_fit": tagger.meta.get("calibration"),  # when training fitted one
    }
    if worst > 0:
        result["worst"] = worst_sentences(all_paired, worst)
    return result


def _judge(
    tagger: Tagger,
    name: str,
    sentences: Sequence[Sentence],
    scored: Sequence[ScoredSentence],
    review_below: float,
) -> tuple[_Judged, list[list[str]], list[PairedSentence]]:
    """Counts of one file, the tagged labels (in the training files' scheme) of each sentence,
    and the sentences paired with their gold and tagged spans for the examples."""
    judged = _Judged()
    all_labels: list[list[str]] = []
    paired: list[PairedSentence] = []
    for sentence, found in zip(sentences, scored, strict=True):
        tokens, gold_labels = sentence.tokens, sentence.labels
        model_spans: list[Span] = [span[:3] for span in found.spans]
        labels = spans_to_tags(model_spans, len(tokens), tagger.input_scheme)
        # Both sides read from labels in one scheme, as `score` reads two files.
        gold, tagged = spans_lenient(gold_labels), spans_lenient(labels)
        count_sentence(judged.counts, gold, tagged, gold_labels, labels)
        gold_set, tagged_set = set(gold), set(tagged)
        judged.per_sentence.append((len(gold_set & tagged_set), len(tagged_set), len(gold_set)))
        judged.erroneous.append(gold_set != tagged_set)
        judged.flagged.append(needs_review(found.certainty, review_below))
        for kind, start, end, score in found.spans:
            judged.scores.append(score)
            judged.right.append((kind, start, end) in gold_set)
        all_labels.append(labels)
        paired.append(PairedSentence(name, sentence.first_line or 0, tokens, gold, tagged))
    return judged, all_labels, paired


def _side_by_side(sentence: Sentence, tagged: Sequence[str]) -> Sentence:
    rows = tuple(
        (token, gold, label, SAME if gold == label else DIFFERENT)
        for token, gold, label in zip(sentence.tokens, sentence.labels, tagged, strict=True)
    )
    return Sentence(
        rows=rows,
        line_numbers=sentence.line_numbers,
        token_column=0,
        label_column=1,
        document=sentence.document,
        prefix_lines=sentence.prefix_lines,
    )


def score_sentences(
    tagger: Tagger, sentences: Sequence[Sentence], gold: Sequence[list[Span]]
) -> dict:
    """Scores of the model on labelled sentences (the dev pass of training): the spans it finds
    against `gold`, and token accuracy over the labels in the training files' scheme, as
    `evaluate_files` counts them."""
    rows = [s.rows for s in sentences] if tagger.needs_columns else None
    predicted = tagger.predict_spans([s.tokens for s in sentences], rows=rows)
    counts = SpanCounts()
    for sentence, gold_spans, spans in zip(sentences, gold, predicted, strict=True):
        gold_labels, labels = _labels_of_both(sentence, gold_spans, spans, tagger.input_scheme)
        count_sentence(counts, gold_spans, spans, gold_labels, labels)
    return summarise(counts)


def _labels_of_both(
    sentence: Sentence, gold: Sequence[Span], predicted: Sequence[Span], scheme: str
) -> tuple[Sequence[str], list[str]]:
    """The gold labels and the predicted spans as labels, in one scheme: the training files'
    own, or BIOES for both when that scheme cannot hold the predicted spans (IO, and touching
    spans of one type), so that a dev pass never stops a run."""
    try:
        return sentence.labels, spans_to_tags(predicted, len(sentence), scheme)
    except DataError:
        return (
            spans_to_tags(gold, len(sentence), "BIOES"),
            spans_to_tags(predicted, len(sentence), "BIOES"),
        )
