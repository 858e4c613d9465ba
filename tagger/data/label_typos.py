"""Labels that look like typos: a name seen once or twice next to a close, much more frequent one
("PRE" beside "PER", "0" beside "O", "Person" beside "person"). Part of the `check` report.

Span tags are compared by their type, so "B-PRE" and "I-PRE" count together and a rare prefix of
a frequent type ("I-X" when spans of X are mostly one token) is never taken for a typo; labels
that are not span tags are compared whole with every frequent label ("B_PER" beside "B-PER").
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from tagger.data.findings import split_or_none

# Seen at most this many times: "seen once or twice".
RARE = 2
# A close name counts as the one meant when it is this many times as frequent, and at least
# FREQUENT_MIN times (common practice, not a measured threshold).
FREQUENT_FACTOR = 5
FREQUENT_MIN = 5
# Names this long or longer may be two edits apart; shorter ones one ("PER"/"ORG" are three).
TWO_EDITS_FROM = 6
# With more distinct labels than this the label column is not a tag set (a wrong column can
# hold a vocabulary) and comparing every pair would be slow: no typos are looked for.
MAX_LABELS = 1_000


@dataclass(frozen=True)
class LikelyTypo:
    """A rare name, the frequent one it is close to, and the labels to find it by."""

    name: str
    kind: str  # "type" (of span tags) or "label" (a label that is not a span tag)
    count: int  # tokens
    near: str
    near_count: int
    how: str  # "case" or "1 edit" / "2 edits"
    labels: frozenset[str]

    def as_dict(self, lines: Mapping[str, Sequence[int]]) -> dict[str, Any]:
        """JSON-ready, with the file lines of its labels (`lines`: label -> lines)."""
        return {
            "name": self.name,
            "kind": self.kind,
            "count": self.count,
            "lines": sorted(line for label in self.labels for line in lines.get(label, ())),
            "near": self.near,
            "near_count": self.near_count,
            "how": self.how,
        }


def likely_typos(label_counts: Mapping[str, int]) -> list[LikelyTypo]:
    """The rare types and labels of a file that are close to a much more frequent one.

    `label_counts` counts each label's tokens. Returns them sorted by name; empty when there are
    more than MAX_LABELS distinct labels.
    """
    if len(label_counts) > MAX_LABELS:
        return []
    type_counts: Counter[str] = Counter()
    type_labels: dict[str, set[str]] = {}
    others: dict[str, int] = {}
    for label, n in label_counts.items():
        parsed = split_or_none(label)
        if parsed is None:
            others[label] = n
        elif parsed[1]:
            type_counts[parsed[1]] += n
            type_labels.setdefault(parsed[1], set()).add(label)
    found: list[LikelyTypo] = []
    for name, n in type_counts.items():
        typo = _closest(name, n, type_counts, "type", frozenset(type_labels[name]))
        if typo is not None:
            found.append(typo)
    for name, n in others.items():
        typo = _closest(name, n, label_counts, "label", frozenset((name,)))
        if typo is not None:
            found.append(typo)
    return sorted(found, key=lambda typo: (typo.name, typo.kind))


def _closest(
    name: str, n: int, counts: Mapping[str, int], kind: str, labels: frozenset[str]
) -> LikelyTypo | None:
    if n > RARE:
        return None
    enough = max(FREQUENT_MIN, FREQUENT_FACTOR * n)
    best: tuple[int, int, str] | None = None  # (edits, -count, name): fewest edits, most frequent
    for other, m in counts.items():
        if m < enough or other == name:
            continue
        edits = 0 if other.lower() == name.lower() else _edits_within(name, other)
        if edits is None:
            continue
        candidate = (edits, -m, other)
        if best is None or candidate < best:
            best = candidate
    if best is None:
        return None
    edits, minus_count, near = best
    how = "case" if edits == 0 else f"{edits} edit" + ("s" if edits > 1 else "")
    return LikelyTypo(name, kind, n, near, -minus_count, how, labels)


def _edits_within(a: str, b: str) -> int | None:
    """The edit distance of two names when it is small enough to suggest a typo, else None."""
    allowed = 2 if min(len(a), len(b)) >= TWO_EDITS_FROM else 1
    if abs(len(a) - len(b)) > allowed:
        return None
    distance = edit_distance(a, b)
    return distance if distance <= allowed else None


def edit_distance(a: str, b: str) -> int:
    """Insertions, deletions, substitutions and swaps of two neighbouring characters that turn
    `a` into `b` (the optimal string alignment distance: "PRE" -> "PER" is one swap)."""
    previous2: list[int] = []
    previous = list(range(len(b) + 1))
    for i in range(1, len(a) + 1):
        current = [i] + [0] * len(b)
        for j in range(1, len(b) + 1):
            cost = 0 if a[i - 1] == b[j - 1] else 1
            current[j] = min(previous[j] + 1, current[j - 1] + 1, previous[j - 1] + cost)
            if i > 1 and j > 1 and a[i - 1] == b[j - 2] and a[i - 2] == b[j - 1]:
                current[j] = min(current[j], previous2[j - 2] + 1)
        previous2, previous = previous, current
    return previous[len(b)]
