"""The same token sequence labelled differently in one file: as spans of different types, or as a
span in one place and wholly outside spans in another. Part of the `check` report.

Only sequences that are a span somewhere are followed, and only up to MAX_SPAN_TOKENS tokens and
MAX_SEQUENCES distinct sequences, so memory grows with the number of distinct short spans, not
with the file. The file is read twice: the first pass (`add_spans`) records every span's token
sequence and type; the second (`add_outside`) looks for those sequences among tokens that lie
outside every span. An occurrence inside a longer or overlapping span (the "New York" of a "New
York Times" span) is neither: it is a different span, not the same sequence labelled otherwise.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from tagger.data.findings import sentence_text

Span = tuple[str, int, int]  # (type, start, end), half-open token indices

# Longer spans rarely recur token for token (common practice, not a measured threshold).
MAX_SPAN_TOKENS = 5
# Distinct sequences followed at most; spans seen after that are counted as not followed.
MAX_SEQUENCES = 200_000
OUTSIDE = "O"


@dataclass
class _Occurrences:
    """How one token sequence was labelled: span types and outside occurrences, each with its
    count and first line."""

    types: Counter[str] = field(default_factory=Counter)
    type_lines: dict[str, int] = field(default_factory=dict)
    outside: int = 0
    outside_line: int | None = None

    def disagreeing(self) -> int:
        """Occurrences labelled otherwise than the sequence's most frequent labelling."""
        counts = [*self.types.values(), self.outside]
        return sum(counts) - max(counts)


@dataclass
class SpanLabelling:
    """How the short spans of one file are labelled wherever their tokens occur."""

    sequences: dict[tuple[str, ...], _Occurrences] = field(default_factory=dict)
    first_tokens: set[str] = field(default_factory=set)
    not_followed: int = 0  # spans longer than MAX_SPAN_TOKENS or past MAX_SEQUENCES

    def add_spans(
        self, tokens: Sequence[str], spans: Sequence[Span], line_numbers: Sequence[int]
    ) -> None:
        """First pass: record the token sequence and type of each span of a sentence."""
        for kind, start, end in spans:
            key = tuple(tokens[start:end])
            found = self.sequences.get(key)
            if found is None:
                if end - start > MAX_SPAN_TOKENS or len(self.sequences) >= MAX_SEQUENCES:
                    self.not_followed += 1
                    continue
                found = self.sequences[key] = _Occurrences()
                self.first_tokens.add(key[0])
            found.types[kind] += 1
            found.type_lines.setdefault(kind, line_numbers[start])

    def add_outside(
        self, tokens: Sequence[str], labels: Sequence[str], line_numbers: Sequence[int]
    ) -> None:
        """Second pass: count the recorded sequences found among a sentence's O-labelled tokens."""
        length = len(tokens)
        index = 0
        while index < length:
            if labels[index] != OUTSIDE:
                index += 1
                continue
            run_end = index
            while run_end < length and labels[run_end] == OUTSIDE:
                run_end += 1
            for start in range(index, run_end):
                if tokens[start] not in self.first_tokens:
                    continue
                for end in range(start + 1, min(run_end, start + MAX_SPAN_TOKENS) + 1):
                    found = self.sequences.get(tuple(tokens[start:end]))
                    if found is not None:
                        found.outside += 1
                        if found.outside_line is None:
                            found.outside_line = line_numbers[start]
            index = run_end

    def as_dict(self, limit: int) -> dict[str, Any]:
        """{"types_differ", "span_or_not"} as {"count", "examples"}, and "not_followed".

        Examples come most disagreeing first (occurrences labelled otherwise than the sequence's
        usual labelling), then in file order; each gives the sequence's text and, per labelling,
        its count and first line.
        """
        types_differ: list[tuple[int, int, dict[str, Any]]] = []
        span_or_not: list[tuple[int, int, dict[str, Any]]] = []
        for key, found in self.sequences.items():
            several_types = len(found.types) > 1
            if not several_types and not found.outside:
                continue
            first = min(found.type_lines.values())
            example = {
                "text": sentence_text(key),
                "types": {
                    kind: {"count": n, "line": found.type_lines[kind]}
                    for kind, n in sorted(found.types.items(), key=lambda kv: (-kv[1], kv[0]))
                },
                "outside": {"count": found.outside, "line": found.outside_line},
            }
            order = (-found.disagreeing(), first)
            if several_types:
                types_differ.append((*order, example))
            if found.outside:
                span_or_not.append((*order, example))
        return {
            "types_differ": _found(types_differ, limit),
            "span_or_not": _found(span_or_not, limit),
            "not_followed": self.not_followed,
        }


def _found(items: list[tuple[int, int, dict[str, Any]]], limit: int) -> dict[str, Any]:
    items.sort(key=lambda item: item[:2])
    return {"count": len(items), "examples": [example for _, _, example in items[:limit]]}
