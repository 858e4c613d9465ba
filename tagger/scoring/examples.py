"""Example sentences for each kind of error, so that a report can show what the figures count.

The kinds are the outcomes of the error breakdown in `tagger.scoring.metrics` other than an exact
match: ``wrong_type``, ``boundary``, ``type_and_boundary``, ``missed`` (gold side) and
``spurious`` (tagged side). A sentence holds a kind when one of its gold or tagged spans lands
there; the spans that do are its *focus* for that kind.

Which sentences are shown: up to `per_kind` of those holding the kind, spread evenly over the
file (the first, the last, and evenly spaced ones between), so the examples do not all come from
one stretch of it and the same files always give the same examples.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from tagger.data.schemes import Span
from tagger.scoring.metrics import span_outcome

ERROR_KINDS: tuple[str, ...] = ("wrong_type", "boundary", "type_and_boundary", "missed", "spurious")
PER_KIND = 3


@dataclass(frozen=True)
class PairedSentence:
    """A gold sentence and what the tagger found in it; ``line`` is its first line in ``file``."""

    file: str
    line: int
    tokens: Sequence[str]
    gold: Sequence[Span]
    tagged: Sequence[Span]


def sentence_errors(gold: Sequence[Span], tagged: Sequence[Span]) -> dict[str, list[list[Span]]]:
    """{kind: [gold spans of that kind, tagged spans of that kind]} for the kinds the sentence
    holds (spans sorted by position)."""
    gold_set, tagged_set = set(gold), set(tagged)
    found: dict[str, list[list[Span]]] = {}
    for side, spans, others, unmatched in (
        (0, gold_set, tagged_set, "missed"),
        (1, tagged_set, gold_set, "spurious"),
    ):
        for span in sorted(spans, key=lambda s: (s[1], s[2], s[0])):
            kind = span_outcome(span, others, unmatched)
            if kind != "exact":
                found.setdefault(kind, [[], []])[side].append(span)
    return found


def spread(count: int, wanted: int) -> list[int]:
    """`wanted` positions out of range(count), evenly spread, first and last included."""
    if wanted <= 0 or count <= 0:
        return []
    if count <= wanted:
        return list(range(count))
    if wanted == 1:
        return [0]
    return sorted({round(k * (count - 1) / (wanted - 1)) for k in range(wanted)})


def error_examples(
    sentences: Sequence[PairedSentence], per_kind: int = PER_KIND
) -> dict[str, dict[str, Any]]:
    """Per kind of error found: {"sentences": how many hold it, "examples": [{"file", "line",
    "tokens", "gold", "tagged", "gold_focus", "tagged_focus"}, ...]} with spans as [type, start,
    end] lists; kinds that no sentence holds are left out."""
    holding: dict[str, list[tuple[int, list[list[Span]]]]] = {kind: [] for kind in ERROR_KINDS}
    for index, sentence in enumerate(sentences):
        for kind, focus in sentence_errors(sentence.gold, sentence.tagged).items():
            holding[kind].append((index, focus))
    result: dict[str, dict[str, Any]] = {}
    for kind in ERROR_KINDS:
        found = holding[kind]
        if not found:
            continue
        examples = []
        for position in spread(len(found), per_kind):
            index, (gold_focus, tagged_focus) = found[position]
            sentence = sentences[index]
            examples.append(
                {
                    "file": sentence.file,
                    "line": sentence.line,
                    "tokens": list(sentence.tokens),
                    "gold": _listed(sentence.gold),
                    "tagged": _listed(sentence.tagged),
                    "gold_focus": _listed(gold_focus),
                    "tagged_focus": _listed(tagged_focus),
                }
            )
        result[kind] = {"sentences": len(found), "examples": examples}
    return result


def _listed(spans: Sequence[Span]) -> list[list[Any]]:
    return [[t, s, e] for t, s, e in sorted(set(spans), key=lambda x: (x[1], x[2], x[0]))]


def worst_sentences(sentences: Sequence[PairedSentence], wanted: int) -> list[dict[str, Any]]:
    """The `wanted` sentences with the most spans that are not exact matches (gold spans and
    tagged spans counted alike), most first, ties in file order; sentences without an error are
    never listed. Each: {"file", "line", "tokens", "gold", "tagged", "errors"} with spans as
    [type, start, end] lists."""
    ranked = []
    for index, sentence in enumerate(sentences):
        gold, tagged = set(sentence.gold), set(sentence.tagged)
        errors = len(gold ^ tagged)  # a span on one side only is one error
        if errors:
            ranked.append((-errors, index))
    return [
        {
            "file": sentences[index].file,
            "line": sentences[index].line,
            "tokens": list(sentences[index].tokens),
            "gold": _listed(sentences[index].gold),
            "tagged": _listed(sentences[index].tagged),
            "errors": -negative,
        }
        for negative, index in sorted(ranked)[: max(wanted, 0)]
    ]
