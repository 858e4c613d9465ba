"""Domain lexicons: lists of known names, matched against tokenised sentences.

This module owns the lexicon file format, the matcher, and the per-token match tags the model
reads. No torch here: `tagger check` uses the same matcher to measure coverage.

A lexicon file is UTF-8 text with one entry per line, optionally followed by a TAB and a type:

    pitch bearing<TAB>COMPONENT
    oil leak<TAB>DEFECT
    anemometer

Blank lines and lines whose first character is "#" are skipped. An entry is cut into tokens by
`tagger.text.tokenizer.tokenize` (the tokeniser tagging uses), so "gbx oil-filter" matches the tokens the
tagger sees. The same entry may be listed with several types; it then marks each of them.

Each (lexicon, type) pair is a *category*; an entry without a type belongs to the category named
after the lexicon alone. Matching, per lexicon and sentence:

1. every occurrence of every entry is found by a hashed n-gram lookup: a table keyed by an
   entry's first token gives the entry lengths to try at a position, and a set of token tuples
   says which of those are entries (no scan over the entries);
2. occurrences are chosen longest first (ties: leftmost first), each skipped when it overlaps
   one already chosen, so a token belongs to at most one match of a lexicon;
3. each chosen match marks its tokens with BIOES tags in the category of each of its types (written
   by `tagger.data.schemes`, kept as ids).

Case handling (`case`): "exact" compares tokens as written; "ignore" compares them case-folded;
"smart" lets an all-lower-case entry match any casing ("gearbox" matches "GEARBOX") while an entry
holding a capital must match exactly ("UPS" does not match "ups").
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from enum import StrEnum
from pathlib import Path
from typing import Any

from tagger.data.io import input_name, is_stdio, read_lines
from tagger.data.schemes import OUTSIDE, SCHEMES, Span, span_prefixes
from tagger.errors import ConfigError, DataError, quoted
from tagger.text.tokenizer import TokenizerSettings, tokenize


class LexiconCase(StrEnum):
    """How lexicon entries meet tokens (see the module docstring)."""

    IGNORE = "ignore"
    EXACT = "exact"
    SMART = "smart"


CASE_MODES: tuple[str, ...] = tuple(mode.value for mode in LexiconCase)

# Tag ids of a category, as the model reads them: 0 is padding, 1 "no match".
PAD_ID, NO_MATCH, BEGIN, INSIDE, END, SINGLE = 0, 1, 2, 3, 4, 5
TAG_IDS = 6  # how many ids a category uses

MATCH_SCHEME = "BIOES"  # matches are written in it by the schemes module's own writer
_MARKS = SCHEMES[MATCH_SCHEME]
_TAG_ID_OF_PREFIX: dict[str | None, int] = {
    OUTSIDE: NO_MATCH,
    _MARKS.begin: BEGIN,
    _MARKS.inside: INSIDE,
    _MARKS.end: END,
    _MARKS.single: SINGLE,
}

Match = tuple[int, int, tuple[str, ...]]  # (start, end exclusive, types), token indices


@dataclass
class _Index:
    """Entries under one key function: token tuples -> type ids; first token -> lengths to try."""

    entries: dict[tuple[str, ...], tuple[int, ...]]
    lengths: dict[str, tuple[int, ...]]  # longest first

    @classmethod
    def build(cls, items: Iterable[tuple[tuple[str, ...], int]]) -> _Index:
        entries: dict[tuple[str, ...], list[int]] = {}
        for key, type_id in items:
            ids = entries.setdefault(key, [])
            if type_id not in ids:
                ids.append(type_id)
        lengths: dict[str, set[int]] = {}
        for key in entries:
            lengths.setdefault(key[0], set()).add(len(key))
        return cls(
            {k: tuple(sorted(v)) for k, v in entries.items()},
            {k: tuple(sorted(v, reverse=True)) for k, v in lengths.items()},
        )

    def find(self, keys: Sequence[str], out: dict[tuple[int, int], set[int]]) -> None:
        """Add every occurrence in `keys` to `out`: (start, end) -> type ids."""
        entries, lengths = self.entries, self.lengths
        n = len(keys)
        for start, key in enumerate(keys):
            tries = lengths.get(key)
            if tries is None:
                continue
            for length in tries:
                end = start + length
                if end > n:
                    continue
                found = entries.get(tuple(keys[start:end]))
                if found is not None:
                    out.setdefault((start, end), set()).update(found)


class Lexicon:
    """One lexicon: its entries (as token tuples with a type each) and a matcher over them."""

    def __init__(
        self,
        name: str,
        entries: Iterable[tuple[Sequence[str], str]],
        case: str = "ignore",
    ) -> None:
        if case not in CASE_MODES:
            raise ConfigError(f"lexicon case must be one of {', '.join(CASE_MODES)}; got {case!r}")
        if not name:
            raise ConfigError("a lexicon needs a name")
        self.name = name
        self.case = case
        seen: set[tuple[tuple[str, ...], str]] = set()
        self.entries: list[tuple[tuple[str, ...], str]] = []
        for tokens, type_ in entries:
            item = (tuple(tokens), type_)
            if not item[0]:
                raise ValueError("a lexicon entry needs at least one token")
            if item not in seen:
                seen.add(item)
                self.entries.append(item)
        self.types: tuple[str, ...] = tuple(sorted({t for _, t in self.entries}))
        self._type_id = type_id = {t: i for i, t in enumerate(self.types)}
        exact: list[tuple[tuple[str, ...], int]] = []
        folded: list[tuple[tuple[str, ...], int]] = []
        for tokens, type_ in self.entries:
            as_written = case == "exact" or (case == "smart" and _has_upper(tokens))
            if as_written:
                exact.append((tokens, type_id[type_]))
            else:
                folded.append((tuple(t.casefold() for t in tokens), type_id[type_]))
        self._exact = _Index.build(exact) if exact else None
        self._folded = _Index.build(folded) if folded else None

    def __len__(self) -> int:
        return len(self.entries)

    @property
    def categories(self) -> list[str]:
        """One name per type: "NAME/TYPE", or "NAME" for entries without a type."""
        return [f"{self.name}/{t}" if t else self.name for t in self.types]

    def _occurrences(self, tokens: Sequence[str]) -> dict[tuple[int, int], set[int]]:
        """(start, end) -> type ids of every occurrence of an entry in the sentence."""
        found: dict[tuple[int, int], set[int]] = {}
        if self._exact is not None:
            self._exact.find(tokens, found)
        if self._folded is not None:
            self._folded.find([t.casefold() for t in tokens], found)
        return found

    def _chosen(self, tokens: Sequence[str]) -> list[tuple[int, int, set[int]]]:
        """The occurrences kept, longest first (ties: leftmost), none overlapping; in any order."""
        found = self._occurrences(tokens)
        if len(found) < 2:
            return [(start, end, ids) for (start, end), ids in found.items()]
        chosen: list[tuple[int, int, set[int]]] = []
        # Longest first, then leftmost; a sentence holds few matches, so the overlap test
        # against those already chosen is cheaper than marking tokens.
        for (start, end), ids in sorted(found.items(), key=lambda kv: (kv[0][0] - kv[0][1], kv[0])):
            if all(end <= a or b <= start for a, b, _ in chosen):
                chosen.append((start, end, ids))
        return chosen

    def find(self, tokens: Sequence[str]) -> list[Match]:
        """Every occurrence of every entry in a sentence, overlapping ones included, in order."""
        types = self.types
        return [
            (start, end, tuple(types[i] for i in sorted(ids)))
            for (start, end), ids in sorted(self._occurrences(tokens).items())
        ]

    def match(self, tokens: Sequence[str]) -> list[Match]:
        """The matches chosen longest first (ties: leftmost), none overlapping, in sentence order."""
        types = self.types
        return [
            (start, end, tuple(types[i] for i in sorted(ids)))
            for start, end, ids in sorted(self._chosen(tokens), key=lambda m: m[0])
        ]

    def tags(self, tokens: Sequence[str]) -> list[list[int]]:
        """Per category (in `categories` order), one BIOES tag id per token."""
        n = len(tokens)
        matches: list[list[Span]] = [[] for _ in self.types]
        for start, end, ids in self._chosen(tokens):
            for i in ids:
                matches[i].append((self.types[i] or self.name, start, end))
        return [
            [_TAG_ID_OF_PREFIX[p] for p in span_prefixes(spans, n, MATCH_SCHEME)]
            if spans
            else [NO_MATCH] * n
            for spans in matches
        ]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: the entries as token lists, so that matching never depends on re-tokenising."""
        return {
            "name": self.name,
            "case": self.case,
            "types": list(self.types),
            "entries": [[list(tokens), self._type_id[t]] for tokens, t in self.entries],
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Lexicon:
        types = data["types"]
        return cls(data["name"], ((e[0], types[e[1]]) for e in data["entries"]), data["case"])


def _has_upper(tokens: Sequence[str]) -> bool:
    return any(ch.isupper() for token in tokens for ch in token)


def read_lexicon(
    path: str | Path,
    case: str = "ignore",
    settings: TokenizerSettings = TokenizerSettings(),
    name: str | None = None,
) -> Lexicon:
    """Read a lexicon file (see the module docstring); `name` defaults to the file's stem.

    Lines are read by `tagger.data.io` ("-" is standard input, named "stdin"). Raises DataError
    with file and line for a line that is not `entry` or `entry<TAB>type`, or not UTF-8.
    """
    where = input_name(path)
    entries: list[tuple[list[str], str]] = []
    for number, text in read_lines(path):
        if not text.strip() or text.startswith("#"):
            continue
        fields = text.split("\t")
        if len(fields) > 2:
            raise DataError(
                f"expected 'entry' or 'entry<TAB>type', found {len(fields)} TAB-separated fields",
                where,
                number,
            )
        type_ = fields[1].strip() if len(fields) == 2 else ""
        if len(fields) == 2 and not type_:
            raise DataError("empty type after the TAB", where, number)
        tokens = [t.text for t in tokenize(fields[0], settings)]
        if not tokens:
            raise DataError(f"the entry {quoted(fields[0])} holds no token", where, number)
        entries.append((tokens, type_))
    if not entries:
        raise DataError("the lexicon holds no entries", where)
    return Lexicon(name or ("stdin" if is_stdio(path) else Path(path).stem), entries, case)
