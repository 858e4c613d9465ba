"""Plain text: one document read in bounded pieces, and cut into sentences.

A plain-text input is one document however long it is, but it is never held whole: it is read in
pieces of about `piece_chars` characters, and a piece ends only where the whole text has a
sentence boundary, so that the tokens and sentences of the pieces are exactly those of the whole
text and a piece's offset plus a position in it indexes the whole decoded text. A piece ends

1. after a blank line (only whitespace between two line breaks), which always ends a sentence;
   when a line break ends every sentence (the "sentence-lines" input), after any line break;
2. failing that, before a sentence that the tokenizer starts after a sentence end and a space,
   found in the last `SEARCH_CHARS` characters before the piece's end;
3. failing that, after the last blank line (or line break) anywhere in the piece.

Tokens never hold a separator and every tokenizer rule looks at most a character or two past
its token, so text on either side of such a place tokenizes the same alone as in the whole. When
none of these is found a piece grows (by its size, doubling, by at most `SEARCH_CHARS` / 2
characters at a time) and the search is made again at its new end; a text with no
such place in `SENTENCE_ROOM` characters past the piece size holds a sentence far longer than
any tagger takes, and stops with DataError.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import BinaryIO

from tagger.data.io import decoded_blocks
from tagger.errors import DataError
from tagger.text.sentences import split_sentences
from tagger.text.tokenizer import TextSentence, TokenizerSettings

SEARCH_CHARS = 8_192  # how far back from a piece's end a sentence start is looked for
SENTENCE_ROOM = 100_000  # how far past its size a piece grows to reach a sentence boundary

_BLANK_LINE = re.compile(r"\n[^\S\n]*\n")  # a line break then a blank line; the cut goes after
_LINE_BREAK = re.compile(r"\n")
_SEPARATOR = re.compile(r"[\s\x00-\x1f\x7f-\x9f]")  # the tokenizer's separators


@dataclass(frozen=True)
class TextPiece:
    """A piece of a plain-text document: `text` starts `offset` characters into the document,
    on `line` (1-based); `last` is set on the final piece (which may be empty)."""

    text: str
    offset: int
    line: int
    last: bool


def text_pieces(
    stream: BinaryIO,
    name: str,
    piece_chars: int,
    settings: TokenizerSettings,
    line_breaks_end_sentences: bool = False,
) -> Iterator[TextPiece]:
    """The pieces of the plain text in `stream`, in order (see the module docstring).

    Raises DataError for bytes that are not UTF-8 and for a text without a place to cut; the
    pieces before the problem arrive first.
    """
    breaks = _LINE_BREAK if line_breaks_end_sentences else _BLANK_LINE
    buffer = ""
    offset, line = 0, 1
    end = piece_chars  # where the piece being read should end, if a place to cut is found
    for _, text in decoded_blocks(stream, name):
        buffer += text
        while len(buffer) >= end:
            cut = _place_to_cut(buffer, end, breaks, settings)
            if cut is None:
                if end >= piece_chars + SENTENCE_ROOM:
                    raise DataError(_no_place_to_cut(end, offset, breaks), name, line)
                # Grow by the piece size, doubling what it has grown by, but never past half
                # the search window, so that successive searches overlap.
                end += min(SEARCH_CHARS // 2, max(piece_chars, end - piece_chars))
                continue
            piece, buffer = buffer[:cut], buffer[cut:]
            yield TextPiece(piece, offset, line, last=False)
            offset += cut
            line += piece.count("\n")
            end = piece_chars
    yield TextPiece(buffer, offset, line, last=True)


def _no_place_to_cut(chars: int, offset: int, breaks: re.Pattern[str]) -> str:
    where = "line break" if breaks is _LINE_BREAK else "blank line"
    return (
        f"no sentence end or {where} in {chars:,} characters from character {offset:,} of the "
        "document (plain text is read in pieces cut there); if a line break ends each record "
        "or sentence of this text, read it with --input-format lines (a document per line) or "
        "sentence-lines (a sentence per line)"
    )


def _place_to_cut(
    text: str, end: int, breaks: re.Pattern[str], settings: TokenizerSettings
) -> int | None:
    """The latest place at or before `end` where the whole text has a sentence boundary, or None."""
    tail = max(0, end - SEARCH_CHARS)
    found = _last_end(breaks, text, tail, end)
    if found is None:
        found = _sentence_start(text, tail, end, settings)
    if found is None and tail > 0:
        found = _last_end(breaks, text, 0, end)
    return found


def _last_end(pattern: re.Pattern[str], text: str, start: int, end: int) -> int | None:
    last = None
    for match in pattern.finditer(text, start, end):
        last = match.end()
    return last


def _sentence_start(text: str, start: int, end: int, settings: TokenizerSettings) -> int | None:
    """The start of the last sentence in text[start:end] that follows a sentence end and a
    separator and begins inside it, as the tokenizer finds it in the whole text; or None."""
    if start > 0:
        # Begin at a separator, where tokens begin as they do in the whole text.
        separator = _SEPARATOR.search(text, start, end)
        if separator is None:
            return None
        start = separator.start()
    sentences = split_sentences(text[start:end], settings)
    for before, after in zip(reversed(sentences[:-1]), reversed(sentences[1:]), strict=True):
        # A sentence cut for length is no boundary; nor is one glued to the next (no separator
        # between them), where the tokenizer's look-ahead could reach past a cut.
        if not before.cut and after.start > before.end:
            return start + after.start
    return None


def document_sentences(
    text: str, settings: TokenizerSettings, line_breaks_end_sentences: bool = False
) -> Iterator[tuple[int, TextSentence]]:
    """(shift, sentence) for the sentences of a document's text: a sentence's offsets plus
    `shift` index `text`. A line break ends a sentence when `line_breaks_end_sentences`."""
    if not line_breaks_end_sentences:
        for sentence in split_sentences(text, settings):
            yield 0, sentence
        return
    shift = 0
    for line in text.split("\n"):
        for sentence in split_sentences(line, settings):
            yield shift, sentence
        shift += len(line) + 1
