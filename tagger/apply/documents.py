"""Reading documents to tag: the input formats, `Document`, `Skipped` and `read_documents`.

Input formats (chosen per input from its name unless `input_format` says otherwise: names ending
in .jsonl or .json read as jsonl, .conll .bio .iob .tsv as columns, anything else, and standard
input, as text):

    text     a UTF-8 file is one document; `tagger.text.tokenizer` finds its sentences and tokens
    jsonl    one JSON object per line with a "text" string and optionally an "id"; every other
             key is carried through to jsonl output untouched; blank lines are ignored
    columns  a pre-tokenised column file (`tagger.data.corpus`); each sentence is one document whose
             text is its tokens joined by single spaces; all its columns are kept, and a model
             trained with extra feature columns (model.feature_columns) reads them from it

A document's text is as decoded, a byte-order mark excluded: offsets into it count characters
(Unicode code points).

Bad input never vanishes: an undecodable line, a line that is not a JSON object with a "text"
string, or a column file that breaks the format becomes a `Skipped` record naming file and line,
in input order, in place of the document it would have been.
"""

from __future__ import annotations

import json
import sys
from collections import deque
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from tagger.data.corpus import ColumnFormat, ColumnReader, Sentence
from tagger.errors import ConfigError, DataError

INPUT_FORMATS = ("text", "jsonl", "columns")
STDIO = "-"

_SUFFIX_FORMATS = {
    ".jsonl": "jsonl",
    ".json": "jsonl",
    ".conll": "columns",
    ".bio": "columns",
    ".iob": "columns",
    ".tsv": "columns",
}
_BOM = b"\xef\xbb\xbf"


@dataclass(frozen=True)
class Skipped:
    """An input item that could not be tagged, and why."""

    source: str
    line: int | None
    message: str

    def __str__(self) -> str:
        where = self.source if self.line is None else f"{self.source}:{self.line}"
        return f"{where}: {self.message}"

    def error(self) -> DataError:
        return DataError(self.message, self.source, self.line)


@dataclass(frozen=True)
class Document:
    """One document as read: `text` is what offsets point into."""

    id: Any
    text: str
    source: str
    line: int  # the input line where the document starts (1-based)
    record: dict[str, Any] | None = None  # the JSON object of a jsonl line
    sentence: Sentence | None = None  # the column-file sentence of a columns document


Item = Document | Skipped


def detect_input_format(name: str | Path) -> str:
    """The input format a file name implies: .jsonl/.json, .conll/.bio/.iob/.tsv, else text."""
    if str(name) == STDIO:
        return "text"
    return _SUFFIX_FORMATS.get(Path(name).suffix.lower(), "text")


def read_documents(
    inputs: Sequence[str | Path],
    input_format: str = "auto",
    token_column: int = 0,
    notes: list[str] | None = None,
) -> Iterator[Item]:
    """The documents of every input in order, with a `Skipped` in place of each bad item.

    Inputs are paths or "-" (standard input, at most once). A file that cannot be opened, and
    the rest of a column file after a line that breaks its format, become `Skipped` records.
    Remarks for people (a text input that looks like a column file) are appended to `notes`.
    """
    if sum(str(path) == STDIO for path in inputs) > 1:
        raise ConfigError("standard input ('-') can be read only once")
    for path in inputs or [STDIO]:
        kind = detect_input_format(path) if input_format == "auto" else input_format
        if kind not in INPUT_FORMATS:
            raise ConfigError(f"input format must be one of {', '.join(INPUT_FORMATS)}")
        name = "<stdin>" if str(path) == STDIO else str(path)
        if kind == "columns":
            yield from _column_items(path, name, token_column)
            continue
        try:
            stream = sys.stdin.buffer if str(path) == STDIO else open(path, "rb")  # noqa: SIM115
        except OSError as error:
            yield Skipped(name, None, f"cannot open the file: {error.strerror}")
            continue
        try:
            if kind == "text":
                item = _text_item(stream.read(), name)
                if (
                    notes is not None
                    and isinstance(item, Document)
                    and _looks_like_columns(item.text)
                ):
                    notes.append(
                        f"{name} was read as plain text but looks like a column file; "
                        "pass --input-format columns to tag its tokens as they are"
                    )
                yield item
            else:
                yield from _jsonl_items(stream, name)
        finally:
            if stream is not sys.stdin.buffer:
                stream.close()


def _undecodable(raw: bytes, error: UnicodeDecodeError, offset: int) -> str:
    bad = raw[error.start : error.end]
    return (
        f"bytes {bad!r} at byte offset {offset + error.start} are not valid UTF-8 ({error.reason})"
    )


def _text_item(data: bytes, name: str) -> Item:
    skip = len(_BOM) if data.startswith(_BOM) else 0
    try:
        text = data[skip:].decode("utf-8")
    except UnicodeDecodeError as error:
        line = data.count(b"\n", 0, skip + error.start) + 1
        return Skipped(name, line, _undecodable(data[skip:], error, skip))
    return Document(name, text, name, 1)


def _looks_like_columns(text: str) -> bool:
    """Do the first lines look like token<TAB>label rows (a column file read as text)?"""
    lines = [line for line in text[:4000].splitlines()[:20] if line.strip()]
    return len(lines) >= 3 and all(
        "\t" in line and " " not in line.strip() and len(line) < 80 for line in lines
    )


def _jsonl_items(stream: IO[bytes], name: str) -> Iterator[Item]:
    offset = 0
    for number, raw in enumerate(stream, start=1):
        start = offset
        offset += len(raw)
        if number == 1 and raw.startswith(_BOM):
            raw, start = raw[len(_BOM) :], start + len(_BOM)
        try:
            line = raw.decode("utf-8")
        except UnicodeDecodeError as error:
            yield Skipped(name, number, _undecodable(raw, error, start))
            continue
        if not line.strip():
            continue
        try:
            record = json.loads(line)
        except ValueError as error:
            message = getattr(error, "msg", str(error))
            column = getattr(error, "colno", None)
            where = f" at column {column}" if column is not None else ""
            yield Skipped(name, number, f"not valid JSON ({message}{where})")
            continue
        if not isinstance(record, dict):
            yield Skipped(name, number, f"a JSON object was expected, not {type(record).__name__}")
            continue
        text = record.get("text")
        if not isinstance(text, str):
            found = "no" if "text" not in record else f"a {type(text).__name__} as its"
            yield Skipped(name, number, f'the object has {found} "text"; a string is needed')
            continue
        if "\\u" in line and not _encodable(record):
            yield Skipped(name, number, "the object holds an unpaired surrogate (\\ud800-\\udfff)")
            continue
        doc_id = record.get("id", f"{name}:{number}")
        yield Document(doc_id, text, name, number, record=record)


def _encodable(record: dict[str, Any]) -> bool:
    try:
        json.dumps(record, ensure_ascii=False).encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


def _column_items(path: str | Path, name: str, token_column: int) -> Iterator[Item]:
    """Sentences of a column file as documents; an undecodable line skips its sentence only."""
    reader = ColumnReader(path, ColumnFormat(token_column=token_column, has_labels=False))
    bad: deque[Skipped] = deque()  # undecodable lines seen by the reader, not yet reported

    def repaired(stream: IO[bytes]) -> Iterator[bytes]:
        # The reader stops at the first undecodable line; give it a decodable stand-in (same
        # columns, same line count) and skip the sentence that holds it.
        offset = 0
        for number, raw in enumerate(stream, start=1):
            try:
                raw.decode("utf-8")
            except UnicodeDecodeError as error:
                bad.append(Skipped(name, number, _undecodable(raw, error, offset)))
                raw = raw.decode("utf-8", "replace").encode("utf-8")
            offset += len(raw)
            yield raw

    try:
        stream = sys.stdin.buffer if str(path) == STDIO else open(path, "rb")  # noqa: SIM115
    except OSError as error:
        yield Skipped(name, None, f"cannot open the file: {error.strerror}")
        return
    try:
        # ColumnReader.__iter__ opens the file itself; _parse reads any stream of byte lines.
        for sentence in reader._parse(repaired(stream)):
            numbers = sentence.line_numbers
            inside = None
            while bad and bad[0].line is not None and bad[0].line <= numbers[-1]:
                problem = bad.popleft()
                if problem.line in numbers:
                    inside = inside or problem
                else:
                    yield problem  # on a line outside every sentence (a -DOCSTART- line)
            if inside is not None:
                yield inside
                continue
            text = " ".join(sentence.tokens)
            yield Document(f"{name}:{numbers[0]}", text, name, numbers[0], sentence=sentence)
    except DataError as error:
        yield from bad
        bad.clear()
        yield Skipped(name, error.line, f"{error.message}; the rest of the file was not read")
    finally:
        if stream is not sys.stdin.buffer:
            stream.close()
    yield from bad
