"""Span metrics: counting matches kept apart from dividing them into scores.

This module owns span-level scoring. :class:`SpanCounts` holds additive counts (per-type correct,
predicted and gold spans, token agreement, and an error breakdown), so counts from several files
or batches merge with ``+``. :func:`summarise` turns counts into precision, recall and F1 per type,
micro- and macro-averaged, as a plain JSON-ready dict; `tagger.reports.scores` lays that dict out
as text.

A span is correct only when its type, start and end all equal a gold span's (strict matching).
Spans never cross sentences: each sentence is read and matched on its own.

Error breakdown: every gold span lands in exactly one outcome, the first of these that applies:

1. ``exact``: a predicted span has the same type and boundaries;
2. ``wrong_type``: a predicted span has the same boundaries but another type;
3. ``boundary``: it overlaps a predicted span of the same type (boundaries differ);
4. ``type_and_boundary``: it overlaps predicted spans, all of other types and other boundaries;
5. ``missed``: no predicted span overlaps it.

Every predicted span is classified the same way against the gold spans, with ``spurious`` (no
gold span overlaps it) in place of ``missed``. Outcomes are counted under the span's own type.

Type confusion: each ``wrong_type`` gold span is paired with the predicted span that has its edges
(a tag sequence holds at most one; among several in a span list, the first type in sorted order)
and the pair (gold type, tagged type) is counted, so a report can say which type a span got
instead of its own. The pairs add up to the ``wrong_type`` count of the gold spans.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from itertools import zip_longest
from typing import Any

from tagger.data.schemes import Span, spans_lenient
from tagger.errors import DataError

GOLD_OUTCOMES: tuple[str, ...] = ("exact", "wrong_type", "boundary", "type_and_boundary", "missed")
PREDICTED_OUTCOMES: tuple[str, ...] = (
    "exact",
    "wrong_type",
    "boundary",
    "type_and_boundary",
    "spurious",
)


@dataclass
class SpanCounts:
    """Additive span and token counts; merge with ``a + b`` or ``a.update(b)``.

    ``correct``, ``predicted`` and ``gold`` count spans per type. ``gold_outcomes`` and
    ``predicted_outcomes`` count ``(type, outcome)`` pairs of the error breakdown (see the module
    docstring). ``type_confusion`` counts ``(gold type, tagged type)`` pairs of spans with the
    same edges and different types. ``token_correct`` / ``token_total`` count tokens whose
    predicted tag equals the gold tag, over sentences scored with their tags.
    """

    correct: Counter[str] = field(default_factory=Counter)
    predicted: Counter[str] = field(default_factory=Counter)
    gold: Counter[str] = field(default_factory=Counter)
    gold_outcomes: Counter[tuple[str, str]] = field(default_factory=Counter)
    predicted_outcomes: Counter[tuple[str, str]] = field(default_factory=Counter)
    type_confusion: Counter[tuple[str, str]] = field(default_factory=Counter)
    token_correct: int = 0
    token_total: int = 0
    sentences: int = 0

    def update(self, other: SpanCounts) -> SpanCounts:
        """Add ``other``'s counts into this one; returns ``self``."""
        self.correct.update(other.correct)
        self.predicted.update(other.predicted)
        self.gold.update(other.gold)
        self.gold_outcomes.update(other.gold_outcomes)
        self.predicted_outcomes.update(other.predicted_outcomes)
        self.type_confusion.update(other.type_confusion)
        self.token_correct += other.token_correct
        self.token_total += other.token_total
        self.sentences += other.sentences
        return self

    def __add__(self, other: SpanCounts) -> SpanCounts:
        if not isinstance(other, SpanCounts):
            return NotImplemented
        return SpanCounts().update(self).update(other)

    @property
    def types(self) -> list[str]:
        """Sorted span types seen in the gold or the predicted spans."""
        return sorted(
            t for t in set(self.gold) | set(self.predicted) if self.gold[t] or self.predicted[t]
        )


def _overlaps(a: Span, b: Span) -> bool:
    return a[1] < b[2] and b[1] < a[2]


def span_outcome(span: Span, others: set[Span], unmatched: str) -> str:
    """Where ``span`` lands against the other side's spans (precedence: module docstring)."""
    if span in others:
        return "exact"
    touching = [o for o in others if _overlaps(span, o)]
    if any(o[1] == span[1] and o[2] == span[2] for o in touching):
        return "wrong_type"
    if any(o[0] == span[0] for o in touching):
        return "boundary"
    if touching:
        return "type_and_boundary"
    return unmatched


def count_sentence(
    counts: SpanCounts,
    gold_spans: Iterable[Span],
    pred_spans: Iterable[Span],
    gold_tags: Sequence[str] | None = None,
    pred_tags: Sequence[str] | None = None,
) -> None:
    """Add one sentence's spans (and, when both are given, its tags) into ``counts``.

    Repeated spans count once. Raises DataError if the two tag sequences differ in length.
    """
    if (gold_tags is None) != (pred_tags is None):
        raise ValueError("give both gold_tags and pred_tags, or neither")
    if gold_tags is not None and pred_tags is not None and len(gold_tags) != len(pred_tags):
        raise DataError(f"{len(gold_tags)} gold tags but {len(pred_tags)} predicted tags")
    gold = {(t, s, e) for t, s, e in gold_spans}
    pred = {(t, s, e) for t, s, e in pred_spans}
    counts.sentences += 1
    counts.gold.update(t for t, _, _ in gold)
    counts.predicted.update(t for t, _, _ in pred)
    counts.correct.update(t for t, _, _ in gold & pred)
    counts.gold_outcomes.update((g[0], span_outcome(g, pred, "missed")) for g in gold)
    counts.predicted_outcomes.update((p[0], span_outcome(p, gold, "spurious")) for p in pred)
    tagged_type: dict[tuple[int, int], str] = {}
    for t, s, e in sorted(pred, reverse=True):  # spans from a list may share edges: first type
        tagged_type[s, e] = t
    counts.type_confusion.update(
        (t, tagged_type[s, e]) for t, s, e in gold - pred if (s, e) in tagged_type
    )
    if gold_tags is not None and pred_tags is not None:
        counts.token_total += len(gold_tags)
        counts.token_correct += sum(g == p for g, p in zip(gold_tags, pred_tags, strict=True))


_MISSING = object()


def count_tag_sequences(
    gold_seqs: Iterable[Sequence[str]], pred_seqs: Iterable[Sequence[str]]
) -> SpanCounts:
    """Counts for paired gold and predicted tag sequences, one pair per sentence.

    Spans are read with :func:`tagger.data.schemes.spans_lenient` sentence by sentence. Raises
    DataError if the numbers of sentences or the lengths of a pair differ.
    """
    counts = SpanCounts()
    for index, (gold, pred) in enumerate(zip_longest(gold_seqs, pred_seqs, fillvalue=_MISSING)):
        if gold is _MISSING or pred is _MISSING:
            shorter = "gold" if gold is _MISSING else "predicted"
            raise DataError(
                f"the {shorter} sequences end after {index} sentences; the other goes on"
            )
        if len(gold) != len(pred):
            raise DataError(
                f"sentence {index + 1}: {len(gold)} gold tags but {len(pred)} predicted tags"
            )
        count_sentence(counts, spans_lenient(gold), spans_lenient(pred), gold, pred)
    return counts


def count_spans(
    gold_spans: Iterable[Iterable[Span]], pred_spans: Iterable[Iterable[Span]]
) -> SpanCounts:
    """Counts for paired gold and predicted span lists, one pair per sentence (no token counts).

    Raises DataError if the numbers of sentences differ.
    """
    counts = SpanCounts()
    for index, (gold, pred) in enumerate(zip_longest(gold_spans, pred_spans, fillvalue=_MISSING)):
        if gold is _MISSING or pred is _MISSING:
            shorter = "gold" if gold is _MISSING else "predicted"
            raise DataError(
                f"the {shorter} span lists end after {index} sentences; the other goes on"
            )
        count_sentence(counts, gold, pred)
    return counts


def _ratio(numerator: float, denominator: float) -> float:
    """The one zero-division policy: a ratio with a zero denominator is 0.0."""
    return numerator / denominator if denominator else 0.0


def _scores(correct: int, predicted: int, gold: int) -> dict[str, Any]:
    return {
        "precision": _ratio(correct, predicted),
        "recall": _ratio(correct, gold),
        # 2PR / (P + R) written with counts: the same value, and no 0/0 to guard
        "f1": _ratio(2 * correct, predicted + gold),
        "gold": gold,
        "predicted": predicted,
        "correct": correct,
    }


def summarise(counts: SpanCounts) -> dict[str, Any]:
    """Scores from counts, as a plain JSON-serialisable dict.

    Keys: ``per_type`` ({type: precision, recall, f1, gold, predicted, correct}), ``micro`` (the
    same over all spans pooled), ``macro`` (unweighted means of the per-type precision, recall and
    F1 over the types seen in gold or predictions), ``token_accuracy``, ``tokens``, ``sentences``
    ``breakdown`` ({"gold": {outcome: n}, "predicted": {outcome: n}, "per_type": {type:
    {"gold": {...}, "predicted": {...}}}}) and ``type_confusion`` ({gold type: {tagged type: n}}
    over spans with the right edges and the wrong type; types without such spans are left out).
    """
    types = counts.types
    per_type = {t: _scores(counts.correct[t], counts.predicted[t], counts.gold[t]) for t in types}
    micro = _scores(
        sum(counts.correct.values()), sum(counts.predicted.values()), sum(counts.gold.values())
    )
    macro = {
        key: _ratio(sum(s[key] for s in per_type.values()), len(per_type))
        for key in ("precision", "recall", "f1")
    }
    macro["types"] = len(per_type)

    def outcomes(
        counter: Counter[tuple[str, str]], names: tuple[str, ...], type_: str | None
    ) -> dict[str, int]:
        return {
            name: sum(n for (t, o), n in counter.items() if o == name and type_ in (None, t))
            for name in names
        }

    breakdown = {
        "gold": outcomes(counts.gold_outcomes, GOLD_OUTCOMES, None),
        "predicted": outcomes(counts.predicted_outcomes, PREDICTED_OUTCOMES, None),
        "per_type": {
            t: {
                "gold": outcomes(counts.gold_outcomes, GOLD_OUTCOMES, t),
                "predicted": outcomes(counts.predicted_outcomes, PREDICTED_OUTCOMES, t),
            }
            for t in types
        },
    }
    return {
        "per_type": per_type,
        "micro": micro,
        "macro": macro,
        "token_accuracy": _ratio(counts.token_correct, counts.token_total),
        "tokens": counts.token_total,
        "sentences": counts.sentences,
        "breakdown": breakdown,
        "type_confusion": confusion_table(counts.type_confusion),
    }


def confusion_table(pairs: Counter[tuple[str, str]]) -> dict[str, dict[str, int]]:
    """{gold type: {tagged type: n}} from (gold type, tagged type) counts, both levels sorted."""
    table: dict[str, dict[str, int]] = {}
    for (gold, tagged), n in sorted(pairs.items()):
        if n:
            table.setdefault(gold, {})[tagged] = n
    return table
