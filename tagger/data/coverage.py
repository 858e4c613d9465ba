"""How well a lexicon covers the annotated spans of a file: of the gold spans, how many one of
its chosen matches covers exactly (and with the same type), how many it only overlaps, how many it
misses; and how many of its matches lie outside every gold span. Part of the `check` report.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from tagger.text.lexicon import Lexicon


@dataclass
class LexiconCoverage:
    """How one lexicon's matches (tagger.text.lexicon) meet the gold spans of one file."""

    lexicon: Lexicon
    exact: Counter[str] = field(default_factory=Counter)  # per gold type
    same_type: Counter[str] = field(default_factory=Counter)  # exact, and of the gold type
    partial: Counter[str] = field(default_factory=Counter)
    missed: Counter[str] = field(default_factory=Counter)
    matches: int = 0
    outside: int = 0  # matches that overlap no gold span

    def add(self, tokens: Sequence[str], spans: Sequence[tuple[str, int, int]]) -> None:
        matches = self.lexicon.match(tokens)
        self.matches += len(matches)
        for start, end, _ in matches:
            if not any(start < b and a < end for _, a, b in spans):
                self.outside += 1
        for kind, a, b in spans:
            exact = [types for start, end, types in matches if (start, end) == (a, b)]
            if exact:
                self.exact[kind] += 1
                self.same_type[kind] += any(kind in types for types in exact)
            elif any(start < b and a < end for start, end, _ in matches):
                self.partial[kind] += 1
            else:
                self.missed[kind] += 1

    def as_dict(self) -> dict[str, Any]:
        types = sorted(set(self.exact) | set(self.partial) | set(self.missed))
        per_type = {
            kind: {
                "spans": self.exact[kind] + self.partial[kind] + self.missed[kind],
                "exact": self.exact[kind],
                "exact_same_type": self.same_type[kind],
                "partial": self.partial[kind],
                "none": self.missed[kind],
            }
            for kind in types
        }
        return {
            "lexicon": self.lexicon.name,
            "entries": len(self.lexicon),
            "spans": sum(t["spans"] for t in per_type.values()),
            "exact": sum(self.exact.values()),
            "exact_same_type": sum(self.same_type.values()),
            "partial": sum(self.partial.values()),
            "none": sum(self.missed.values()),
            "matches": self.matches,
            "matches_outside_spans": self.outside,
            "per_type": per_type,
        }
