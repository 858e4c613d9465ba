"""The pieces a `check` report is made of: a finding counted with its first few examples, how
labels, tokens and sentences are judged and quoted in those examples, and which findings make
data unfit to train or score on.
"""

from __future__ import annotations

import unicodedata
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from tagger.data.schemes import split_tag
from tagger.errors import DataError

# Characters of a sentence shown in an example.
SHOWN_TEXT = 80


@dataclass
class Examples:
    """A count and the first few examples of one kind of finding."""

    limit: int
    count: int = 0
    examples: list[dict[str, Any]] = field(default_factory=list)

    def add(self, example: Callable[[], dict[str, Any]]) -> None:
        """Count one finding; `example` is called only while examples are still wanted."""
        self.count += 1
        if len(self.examples) < self.limit:
            self.examples.append(example())

    def as_dict(self) -> dict[str, Any]:
        return {"count": self.count, "examples": self.examples}


def first_non_tag(labels: Sequence[str]) -> int | None:
    """The index of the first label that is neither O nor PREFIX-TYPE, or None."""
    for index, label in enumerate(labels):
        if not _is_tag(label):
            return index
    return None


def all_tags(labels: Sequence[str]) -> bool:
    return first_non_tag(labels) is None


# Labels are few and repeat on every line, so each is judged once (up to a bound, in case a wrong
# label column holds a whole vocabulary).
_TAG_CACHE: dict[str, bool] = {}


def _is_tag(label: str) -> bool:
    known = _TAG_CACHE.get(label)
    if known is None:
        known = split_or_none(label) is not None
        if len(_TAG_CACHE) < 100_000:
            _TAG_CACHE[label] = known
    return known


def split_or_none(label: str) -> tuple[str, str] | None:
    """(prefix, type) of a span tag ("O" gives ("O", "")), or None for a label that is not one."""
    try:
        return split_tag(label)
    except DataError:
        return None


def invisible_example(token: str, line: int) -> dict[str, Any]:
    """A token holding characters one cannot see, with each such character named."""
    # str.isprintable() is False exactly for the Unicode "Other" (Cc, Cf, Cs, Co, Cn) and
    # "Separator" (Zs, Zl, Zp) categories, ASCII space excepted: controls, format characters such
    # as U+200B and U+FEFF, and unusual spaces.
    odd = dict.fromkeys(c for c in token if not c.isprintable())
    return {
        "line": line,
        "token": repr(token),
        "characters": [_describe_char(c) for c in odd],
    }


def _describe_char(char: str) -> str:
    name = unicodedata.name(char, "")
    category = unicodedata.category(char)
    return f"U+{ord(char):04X} {name} ({category})" if name else f"U+{ord(char):04X} ({category})"


def sentence_text(tokens: Sequence[str]) -> str:
    """A sentence's tokens joined by spaces, cut to SHOWN_TEXT characters."""
    text = " ".join(tokens)
    return text if len(text) <= SHOWN_TEXT else text[: SHOWN_TEXT - 3] + "..."


def gate_problems(
    files: Sequence[dict[str, Any]], comparisons: Sequence[dict[str, Any]]
) -> list[dict[str, Any]]:
    """The findings that make data unfit to train or score on, as [{"file", "finding", "count"}].

    "no_sentences": an empty file (or one of blank lines and comments alone); "ill_formed":
    transitions the file's scheme forbids; "not_span_tags": sentences holding labels
    that are neither O nor PREFIX-TYPE; "also_in_train": dev/test sentences that train holds too,
    counting those of `tagger.data.file_scan.LONG_SENTENCE` tokens or more only (shorter ones, such
    as "1 .", recur in any large corpus).
    """
    problems: list[dict[str, Any]] = []
    for entry in files:
        if not entry["sentences"]:  # an empty file passes no pipeline: nothing to learn or score
            problems.append({"file": entry["file"], "finding": "no_sentences", "count": 0})
        ill_formed = entry.get("ill_formed") or {"count": 0}
        not_tags = entry.get("not_span_tags") or {"count": 0}
        for finding, found in (("ill_formed", ill_formed), ("not_span_tags", not_tags)):
            if found["count"]:
                problems.append(
                    {"file": entry["file"], "finding": finding, "count": found["count"]}
                )
    for comparison in comparisons:
        if comparison["longer_sentences_also_in_train"]:
            problems.append(
                {
                    "file": comparison["file"],
                    "finding": "also_in_train",
                    "count": comparison["longer_sentences_also_in_train"],
                }
            )
    return problems
