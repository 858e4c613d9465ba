"""How one line of a column file reads and writes: blank lines, document marks, the delimiter
(found from the first lines or given), splitting into columns, and whether a row would read back
as written. `tagger.data.corpus` states the format and builds sentences out of these lines.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Iterator
from enum import StrEnum

DOCSTART = "-DOCSTART-"

# How many content lines the delimiter detection looks at before deciding.
DETECT_LINES = 20


class DelimiterChoice(StrEnum):
    """How a column file separates its columns: found from its first lines, one TAB, or runs of
    spaces and TABs."""

    AUTO = "auto"
    TAB = "tab"
    SPACE = "space"


DELIMITERS = {DelimiterChoice.TAB.value: "\t", DelimiterChoice.SPACE.value: " "}
# ASCII whitespace only: Unicode spaces such as U+00A0 are tokens in some corpora.
BLANK_CHARS = " \t\r\f\v"
_SPACE_RUN = re.compile(r"[ \t]+")


def is_blank(text: str) -> bool:
    """Does the line end a sentence (nothing or only ASCII whitespace)?"""
    return not text.strip(BLANK_CHARS)


def is_docstart(text: str) -> bool:
    """Is the line a document mark (first column exactly -DOCSTART-)?"""
    return text.startswith(DOCSTART) and (
        len(text) == len(DOCSTART) or text[len(DOCSTART)] in " \t"
    )


def detect_delimiter(
    lines: Iterable[tuple[int, str]], comment: str | None
) -> tuple[Iterator[tuple[int, str]], str]:
    """Look at the first content lines: "tab" if any holds a TAB, else "space".

    Returns the lines again (the ones looked at first, then the rest) and the decision.
    """
    iterator = iter(lines)
    seen: list[tuple[int, str]] = []
    content = 0
    tab = False
    for item in iterator:
        seen.append(item)
        text = item[1]
        if (
            is_blank(text)
            or is_docstart(text)
            or (comment is not None and text.startswith(comment))
        ):
            continue
        content += 1
        if "\t" in text:
            tab = True
            break
        if content >= DETECT_LINES:
            break
    return _chain(seen, iterator), "tab" if tab else "space"


def _chain(
    first: list[tuple[int, str]], rest: Iterator[tuple[int, str]]
) -> Iterator[tuple[int, str]]:
    yield from first
    yield from rest


def splitter(delimiter: str) -> Callable[[str], list[str]]:
    """The function that cuts a line into columns for a "tab" or "space" file."""
    if delimiter == "tab":
        return lambda text: text.split("\t")
    return lambda text: _SPACE_RUN.split(text.strip(" \t"))


def writing_delimiter(delimiter: str) -> str:
    """The separator written between columns: "\\t" or " " (also given as "tab" or "space")."""
    separator = DELIMITERS.get(delimiter, delimiter)
    if separator not in ("\t", " "):
        raise ValueError(f"delimiter must be '\\t' or ' ' ('tab' or 'space'), not {delimiter!r}")
    return separator


def unwritable(row: tuple[str, ...], line: str, separator: str) -> str | None:
    """Why a row would not read back as the same columns, or None if it would."""
    for column, value in enumerate(row):
        if "\n" in value:
            return f"column {column} holds a line break"
        if separator in value:
            return f"column {column} holds the delimiter {separator!r}"
        if separator == " " and ("\t" in value or not value):
            return f"column {column} is empty or holds a TAB, which a space-separated file splits"
    if line.endswith("\r"):
        return "the last column ends in a carriage return, which reads as part of a line ending"
    if is_blank(line):
        return "the line would be blank"
    if is_docstart(line):
        return f"the line would read as a {DOCSTART} line"
    return None
