"""A column file to tag, checked a sentence at a time, so that one bad line costs only its sentence.

The column parser (`tagger.data.corpus`) stops at the first line it refuses. To tag the rest,
`CheckedColumnLines` stands between the file and the parser: it groups the lines into sentences
as the parser does (a blank or -DOCSTART- line ends one), checks each sentence against what the
parser would refuse mid-file (bytes that are not UTF-8, a number of columns other than that of
the file's first token line, an empty token), and hands the parser a sentence that fails as blank
lines, one per line, so line numbers stay true. The problem is kept, with its line, in `problems`.

The parser is given the delimiter found here, so both split lines alike; a token column outside
the first line's columns is left for the parser to refuse (the whole file is then bad).
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterator
from typing import BinaryIO

from tagger.data.column_lines import detect_delimiter, is_blank, is_docstart, splitter
from tagger.data.io import UTF8_BOM, decode_line, raw_lines, shortened
from tagger.errors import DataError

_CRLF = b"\r\n"  # appended to every line handed on: the parser removes exactly this ending


class CheckedColumnLines:
    """Byte lines of a column file for `ColumnReader._parse`; iterate once.

    `delimiter` ("tab" or "space") is decided from the first lines when the object is made;
    `problems` receives (line, message) for each sentence handed on as blank lines, in order.
    """

    def __init__(self, stream: BinaryIO, name: str, token_column: int) -> None:
        self.name = name
        self.token_column = token_column
        self.problems: deque[tuple[int, str]] = deque()
        self._undecodable: dict[int, str] = {}
        self._lines, self.delimiter = detect_delimiter(self._decoded(stream), None)
        self._split = splitter(self.delimiter)
        self._columns: int | None = None
        self._reference = 0  # the line that set the number of columns
        self._token: int | None = None  # the token column, resolved; None: left unchecked

    def _decoded(self, stream: BinaryIO) -> Iterator[tuple[int, str]]:
        for raw in raw_lines(stream):
            try:
                text = decode_line(raw, self.name)
            except DataError as error:
                self._undecodable[raw.number] = error.message
                text = raw.data.decode("utf-8", "replace")
            yield raw.number, text

    def __iter__(self) -> Iterator[bytes]:
        sentence: list[tuple[int, str]] = []
        for number, text in self._lines:
            if is_blank(text) or is_docstart(text):
                yield from self._hand_on(sentence)
                sentence = []
                yield _line_bytes(number, text.encode("utf-8"))
            else:
                sentence.append((number, text))
        yield from self._hand_on(sentence)

    def _hand_on(self, sentence: list[tuple[int, str]]) -> Iterator[bytes]:
        problem = self._problem(sentence)
        for number, _ in sentence:
            self._undecodable.pop(number, None)
        if problem is not None:
            self.problems.append(problem)
        for number, text in sentence:
            yield _line_bytes(number, b"" if problem else text.encode("utf-8"))

    def _problem(self, sentence: list[tuple[int, str]]) -> tuple[int, str] | None:
        """The first line of a sentence the parser would refuse, and why; None if there is none."""
        for number, text in sentence:
            if number in self._undecodable:
                return number, self._undecodable[number]
            fields = self._split(text)
            if self._columns is None:
                self._columns, self._reference = len(fields), number
                token = self.token_column
                token += len(fields) if token < 0 else 0
                self._token = token if 0 <= token < len(fields) else None
            elif len(fields) != self._columns:
                return number, (
                    f"expected {self._columns} columns (as on line {self._reference}), "
                    f"found {len(fields)} in {shortened(text)}"
                )
            if self._token is not None and not fields[self._token]:
                return number, f"empty token (column {self._token}) in {shortened(text)}"
        return None


def _line_bytes(number: int, data: bytes) -> bytes:
    # The parser removes a byte-order mark from line 1 and one line ending from every line;
    # giving it both makes it read `data` exactly, whatever the line began or ended with.
    return (UTF8_BOM if number == 1 else b"") + data + _CRLF
