"""Near-duplicate sentences: how alike two sentences are, by the character n-grams they share.

A sentence is reduced to the set of its character n-grams (``NGRAM`` characters of its tokens
joined by single spaces, lowercased, digits read as 0, with a space at either end so that short
words count); two sentences are as alike as the Jaccard similarity of their sets (shared n-grams
over all n-grams of either). Templated text (reports that differ in a date, a serial number or
one word) scores high; sentences that only share common words score low.

`DistinctPicker` keeps a batch free of near-duplicates: it takes candidates best first and passes
over any candidate at least ``threshold`` alike to one already taken, so annotation time is not
spent twice on the same sentence.
"""

from __future__ import annotations

from collections.abc import Sequence

NGRAM = 4  # characters per n-gram: long enough to carry word order, short enough for inflection
THRESHOLD = 0.7  # default similarity at and above which two sentences count as near-duplicates


def shingles(tokens: Sequence[str], n: int = NGRAM) -> frozenset[str]:
    """The character n-grams of a sentence (see the module docstring)."""
    text = " " + " ".join(tokens).lower() + " "
    text = "".join("0" if c.isdigit() else c for c in text)
    if len(text) <= n:
        return frozenset([text])
    return frozenset(text[i : i + n] for i in range(len(text) - n + 1))


def similarity(a: frozenset[str], b: frozenset[str]) -> float:
    """The Jaccard similarity of two n-gram sets: 1.0 for equal sets, 0.0 for disjoint ones."""
    if not a and not b:
        return 1.0
    shared = len(a & b)
    return shared / (len(a) + len(b) - shared)


class DistinctPicker:
    """Takes sentences one at a time, refusing one too alike to any taken before.

    Each offer is compared with the taken sentences only (a batch is small), those sharing no
    n-gram skipped through an index from n-gram to taken sentences."""

    def __init__(self, threshold: float = THRESHOLD) -> None:
        if not 0.0 < threshold <= 1.0:
            raise ValueError(f"threshold must be in (0, 1], not {threshold}")
        self.threshold = threshold
        self._taken: list[frozenset[str]] = []
        self._by_ngram: dict[str, list[int]] = {}

    def offer(self, tokens: Sequence[str]) -> bool:
        """Take the sentence unless it is a near-duplicate of one taken; True if taken."""
        grams = shingles(tokens)
        seen: set[int] = set()
        for gram in grams:
            for index in self._by_ngram.get(gram, ()):
                if index in seen:
                    continue
                seen.add(index)
                if similarity(grams, self._taken[index]) >= self.threshold:
                    return False
        index = len(self._taken)
        self._taken.append(grams)
        for gram in grams:
            self._by_ngram.setdefault(gram, []).append(index)
        return True
