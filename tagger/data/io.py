"""Reading input: the one place that opens a path or standard input, splits lines, removes a
byte-order mark and decodes UTF-8. Every reader of a text file builds on it (column files, lexicons,
word vectors, documents to tag), so they all accept the same inputs and fail the same way.

The rules:

* A path of "-" is standard input. It is never closed here, and since it cannot be read twice a
  caller that needs two passes keeps what it read.
* Lines end at LF. A CR directly before the LF belongs to the line ending; any other CR, and
  every other Unicode line separator, stays in the text.
* Only a byte-order mark at the very start of the input is removed.
* Bytes that are not UTF-8 raise NotDecodableError (a DataError) naming the file and line,
  with the bytes, their byte offset in the input and the bytes around them, shortened. Readers
  that let the user name another encoding (column files: `ColumnFormat.encoding`) pass it down;
  it must write ASCII as ASCII (latin-1, cp1252...), since lines are split at LF bytes before
  they are decoded.
* A path ending in ".gz" is read as the gzip-compressed bytes of the file it holds (a damaged or
  cut-off archive raises DataError naming the file).
* A file that cannot be opened raises DataError naming the file; `check_readable` finds that out
  before any work starts.

Input is read line by line, never held whole (plain text, whose lines may be of any length, in
reads of a bounded size: `decoded_blocks`). Writing is `tagger.data.atomic`.
"""

from __future__ import annotations

import codecs
import contextlib
import gzip
import io
import os
import stat
import sys
import zlib
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

from tagger.errors import ConfigError, DataError, NotDecodableError, quoted

STDIO = "-"
STDIN_NAME = "<stdin>"
UTF8_BOM = b"\xef\xbb\xbf"
UTF8 = "utf-8"

# How much of an offending line an error message shows.
SHOWN_CHARS = 60
SHOWN_BYTES = 8  # of the bytes that are not UTF-8
CONTEXT_BYTES = 16  # on either side of them
BLOCK_BYTES = 1 << 16  # bytes read at a time by `decoded_blocks`


def is_stdio(path: str | Path) -> bool:
    """Does `path` name standard input (or output)?"""
    return str(path) == STDIO


def input_name(path: str | Path) -> str:
    """The name error messages give an input: the path, or "<stdin>"."""
    return STDIN_NAME if is_stdio(path) else str(path)


@contextlib.contextmanager
def open_input(path: str | Path) -> Iterator[BinaryIO]:
    """`path` opened for reading bytes; "-" is standard input (left open afterwards).

    Raises DataError naming the file when it cannot be opened (missing, a folder, no permission).
    """
    if is_stdio(path):
        yield sys.stdin.buffer
        return
    try:
        stream = open(path, "rb")  # noqa: SIM115 - closed by the with below
    except OSError as error:
        raise DataError(f"cannot open the file: {error.strerror}", str(path)) from None
    with stream:
        if str(path).lower().endswith(GZIP_SUFFIX):
            with _GzipInput(stream, str(path)) as unpacked:
                yield unpacked  # type: ignore[misc]
        else:
            yield stream


GZIP_SUFFIX = ".gz"


class _GzipInput(gzip.GzipFile):
    """A gzip-compressed input read as its plain bytes; a damaged or cut-off archive is a
    DataError naming the file, wherever the reading meets it."""

    def __init__(self, stream: BinaryIO, name: str) -> None:
        super().__init__(fileobj=stream, mode="rb")
        self._input_name = name

    def _failed(self, error: Exception) -> DataError:
        reason = "it ends early" if isinstance(error, EOFError) else str(error) or "unreadable"
        return DataError(f"cannot read the gzip file: {reason}", self._input_name)

    def read(self, size: int | None = -1) -> bytes:
        try:
            return super().read(size)
        except (OSError, EOFError, zlib.error) as error:
            raise self._failed(error) from None

    def readline(self, size: int | None = -1) -> bytes:
        try:
            return super().readline(size)
        except (OSError, EOFError, zlib.error) as error:
            raise self._failed(error) from None

    def __next__(self) -> bytes:
        line = self.readline()
        if not line:
            raise StopIteration
        return line


def check_readable(path: str | Path, what: str = "file") -> None:
    """Raise DataError naming `path` unless it can be opened for reading; `what` says what the
    file is for ("lexicon"). Standard input, and what is not a regular file (a FIFO, which
    opening would block on), pass: reading them tells."""
    if is_stdio(path):
        return
    try:
        mode = os.stat(path).st_mode
        if stat.S_ISDIR(mode):
            raise DataError(f"cannot open the {what}: it is a folder", str(path))
        if stat.S_ISREG(mode):
            with open(path, "rb"):
                pass
    except OSError as error:
        raise DataError(f"cannot open the {what}: {error.strerror}", str(path)) from None


@dataclass(frozen=True, slots=True)
class RawLine:
    """One input line as bytes, before decoding."""

    number: int  # 1-based
    data: bytes  # without its line ending, and on line 1 without a byte-order mark
    offset: int  # byte offset of data[0] in the input


def raw_lines(stream: Iterable[bytes]) -> Iterator[RawLine]:
    """The lines of a byte stream (split at LF) under the module's rules, not yet decoded."""
    offset = 0
    for number, raw in enumerate(stream, start=1):
        start = offset
        offset += len(raw)
        if raw.endswith(b"\n"):
            raw = raw[:-2] if raw.endswith(b"\r\n") else raw[:-1]
        if number == 1 and raw.startswith(UTF8_BOM):
            raw = raw[len(UTF8_BOM) :]
            start += len(UTF8_BOM)
        yield RawLine(number, raw, start)


def checked_encoding(encoding: str) -> str:
    """`encoding` if the readers can use it (a known codec that writes ASCII as ASCII, so that
    lines split at LF bytes decode one by one); raises ConfigError otherwise."""
    try:
        codecs.lookup(encoding)
    except (LookupError, TypeError):
        raise ConfigError(f"unknown encoding {encoding!r} (e.g. utf-8, latin-1, cp1252)") from None
    if "\t\n -~".encode(encoding, errors="replace") != b"\t\n -~":
        raise ConfigError(
            f"encoding {encoding!r} does not write ASCII as ASCII, so its lines cannot be "
            "read one by one; convert the file to UTF-8 first"
        )
    return encoding


def decode_line(line: RawLine, name: str, encoding: str = UTF8) -> str:
    """The text of a line; raises NotDecodableError (file, line, bytes and offset) if it is not
    in `encoding`."""
    try:
        return line.data.decode(encoding)
    except UnicodeDecodeError as error:
        message = undecodable(
            line.data, error.start, error.end, error.reason, line.offset, encoding
        )
        raise NotDecodableError(message, name, line.number) from None


def decoded_lines(
    stream: Iterable[bytes], name: str, encoding: str = UTF8
) -> Iterator[tuple[int, str]]:
    """(1-based line number, text without its line ending) for each line of a byte stream.

    Raises NotDecodableError at the first line that is not in `encoding`; the lines before it
    arrive first.
    """
    for line in raw_lines(stream):
        yield line.number, decode_line(line, name, encoding)


def read_lines(path: str | Path) -> Iterator[tuple[int, str]]:
    """(line number, text) for each line of a file or of standard input ("-"), read lazily.

    The file is opened on the first `next()`; every failure is a DataError naming the input.
    """
    name = input_name(path)
    with open_input(path) as stream:
        yield from decoded_lines(stream, name)


def decode_text(data: bytes, name: str) -> str:
    """A whole input held as bytes, as text: the byte-order mark removed, UTF-8 decoded.

    Raises the DataError that reading `data` line by line raises at its first bad line.
    """
    skip = len(UTF8_BOM) if data.startswith(UTF8_BOM) else 0
    try:
        return data[skip:].decode("utf-8")
    except UnicodeDecodeError:
        # LF never occurs inside a UTF-8 sequence, so some line fails to decode on its own.
        for _ in decoded_lines(io.BytesIO(data), name):
            pass
        raise


def decoded_blocks(
    stream: BinaryIO, name: str, block_bytes: int = BLOCK_BYTES
) -> Iterator[tuple[int, str]]:
    """(line number where it starts, text) for each read of at most `block_bytes` bytes of a
    byte stream, decoded: joined, the texts are the whole input with its line endings as they
    are, only the byte-order mark at its very start removed. A multi-byte character cut by a
    read arrives whole with the next one. Memory stays at one read however long a line is.

    Raises DataError (file, line, the bytes, their byte offset and the bytes around them on their
    line) at the first bytes that are not UTF-8; the text before them arrives first.
    """
    decoder = codecs.getincrementaldecoder("utf-8")()
    offset = 0  # byte offset of the next read in the input
    line = 1  # line of the next read's first byte
    at_start = True
    while True:
        # The first read is long enough to hold a whole byte-order mark.
        data = stream.read(max(block_bytes, len(UTF8_BOM)) if at_start else block_bytes)
        finished = not data
        if at_start:
            at_start = False
            if data.startswith(UTF8_BOM):
                data, offset = data[len(UTF8_BOM) :], len(UTF8_BOM)
        pending = decoder.getstate()[0]  # the start of a character cut by the previous read
        try:
            text = decoder.decode(data, final=finished)
        except UnicodeDecodeError as error:
            held = pending + data
            start = offset - len(pending)
            first = held.rfind(b"\n", 0, error.start) + 1
            last = held.find(b"\n", error.end)
            text_line = held[first : last if last >= 0 else len(held)].removesuffix(b"\r")
            message = undecodable(
                text_line, error.start - first, error.end - first, error.reason, start + first
            )
            raise DataError(message, name, line + held.count(b"\n", 0, error.start)) from None
        if finished:
            return
        yield line, text
        offset += len(data)
        line += data.count(b"\n")


def undecodable(
    data: bytes, start: int, end: int, reason: str, offset: int, encoding: str = UTF8
) -> str:
    """What is wrong with a line whose bytes data[start:end] are not in `encoding`: the bytes,
    their offset in the input (`offset` is that of data[0]) and the bytes around them, shortened."""
    bad = data[start:end]
    shown = repr(bad[:SHOWN_BYTES]) + ("..." if len(bad) > SHOWN_BYTES else "")
    before = max(0, start - CONTEXT_BYTES)
    after = min(len(data), end + CONTEXT_BYTES)
    around = ("..." if before else "") + repr(data[before:after])
    around += "..." if after < len(data) else ""
    known = "UTF-8" if codecs.lookup(encoding).name == UTF8 else encoding
    return (
        f"bytes {shown} at byte offset {offset + start} are not valid {known} ({reason}) "
        f"in {around}"
    )


def shortened(text: str, limit: int = SHOWN_CHARS) -> str:
    """repr() of an offending piece of input, cut to a readable length (`tagger.errors.quoted`)."""
    return quoted(text, limit)
