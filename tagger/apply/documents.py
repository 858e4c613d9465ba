"""Reading documents to tag: the input formats, `Document`, `Skipped` and `read_documents`.

Input formats (chosen per input from its name unless `input_format` says otherwise: names ending
in .jsonl or .json read as jsonl, .conll .bio .iob .tsv as columns, anything else, and standard
input, as text):

    text            a file is one document; `tagger.text.tokenizer` finds its sentences and
                    tokens. It is read in bounded pieces cut where the whole text has a sentence
                    boundary (`tagger.apply.plaintext`), never held whole
    sentence-lines  as text, but a line break also ends a sentence (a sentence never crosses
                    a line): text with a sentence per line
    lines           every line holding more than whitespace is a document of its own, with the
                    id "SOURCE:LINE" (its line number): logs and other line-per-record text
    jsonl           one JSON object per line with a "text" string and optionally an "id"; every
                    other key is carried through to jsonl output untouched; blank lines are ignored.
                    A record written by an earlier release of `tag` holds its findings under the
                    keys "spans" and "review": they are dropped here (the new run writes
                    "mentions" and "needs_review" in their place) and a note says so once per
                    input. This reading of the earlier names lasts one release
    columns         a pre-tokenised column file (`tagger.data.corpus`); each sentence is one
                    document whose text is its tokens joined by single spaces; all its columns are
                    kept, and a model trained with extra feature columns reads them from it

Every input is read through `tagger.data.io` (the byte-order mark, line endings, UTF-8 errors
with file and line). A document's text is as decoded: offsets into it count characters (Unicode
code points); a piece of a text document carries its offset into the whole.

Bad input never vanishes: a file that cannot be opened, an undecodable line, a line that is not a
JSON object with a "text" string, or a column-file sentence that breaks the format becomes a
`Skipped` record naming file and line, in input order, in place of the document it would have
been; for a text document read in pieces, in place of the whole document.
"""

from __future__ import annotations

import contextlib
import json
from collections import deque
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from enum import StrEnum
from pathlib import Path
from typing import Any, BinaryIO

from tagger.apply.column_input import CheckedColumnLines
from tagger.apply.plaintext import text_pieces
from tagger.data.column_lines import writing_delimiter
from tagger.data.corpus import ColumnFormat, ColumnReader, Sentence
from tagger.data.io import (
    GZIP_SUFFIX,
    STDIO,
    decode_line,
    input_name,
    is_stdio,
    open_input,
    raw_lines,
)
from tagger.errors import ConfigError, DataError
from tagger.reports.layout import count
from tagger.reports.layout import number as number_of
from tagger.reports.notes import RepeatedNotes
from tagger.text.tokenizer import TokenizerSettings


class InputFormat(StrEnum):
    """How an input is read (see the module docstring); auto chooses by the file's name."""

    AUTO = "auto"
    TEXT = "text"
    SENTENCE_LINES = "sentence-lines"
    LINES = "lines"
    JSONL = "jsonl"
    COLUMNS = "columns"


INPUT_FORMATS: tuple[str, ...] = tuple(f.value for f in InputFormat if f is not InputFormat.AUTO)
PIECE_CHARS = 200_000  # characters of plain text read at a time
# The keys under which an earlier release of `tag` wrote its findings; read for one release more.
EARLIER_RECORD_KEYS = ("spans", "review")
MAX_JSON_DEPTH = 100  # deepest nesting of arrays and objects a JSON Lines record may have

_SUFFIX_FORMATS = {
    ".jsonl": "jsonl",
    ".json": "jsonl",
    ".conll": "columns",
    ".bio": "columns",
    ".iob": "columns",
    ".tsv": "columns",
}
_WILDCARDS = frozenset("*?[")

__all__ = [
    "INPUT_FORMATS",
    "STDIO",
    "Document",
    "Item",
    "Part",
    "Skipped",
    "detect_input_format",
    "read_documents",
]


@dataclass(frozen=True)
class Skipped:
    """An input item that could not be tagged, and why."""

    source: str
    line: int | None
    message: str
    document: int | None = None  # the `Part.document` of a document read in pieces it ends

    def __str__(self) -> str:
        where = self.source if self.line is None else f"{self.source}:{self.line}"
        return f"{where}: {self.message}"

    def error(self) -> DataError:
        return DataError(self.message, self.source, self.line)


@dataclass(frozen=True)
class Part:
    """Where a piece of a plain-text document read in pieces lies in the document."""

    document: int  # which input of the run it comes from: the pieces of a document share it
    index: int  # 0 for the first piece
    offset: int  # characters of the document before the piece
    last: bool


@dataclass(frozen=True)
class Document:
    """One document as read, or a piece of one: `text` is what offsets point into (plus `offset`)."""

    id: Any
    text: str
    source: str
    line: int  # the input line where the document (or piece) starts (1-based)
    record: dict[str, Any] | None = None  # the JSON object of a jsonl line
    sentence: Sentence | None = None  # the column-file sentence of a columns document
    input_format: str | None = None  # how it was read; None: handed over whole (the Python API)
    part: Part | None = None  # set on plain text, which is read in pieces
    separator: str = "\t"  # columns: the input's column separator, which columns output keeps

    @property
    def offset(self) -> int:
        """Characters of the whole document before `text`."""
        return 0 if self.part is None else self.part.offset

    @property
    def first(self) -> bool:
        """Is this the document's first (or only) piece?"""
        return self.part is None or self.part.index == 0

    @property
    def whole(self) -> bool:
        """Is this the whole document (not one piece of several)?"""
        return self.part is None or (self.part.index == 0 and self.part.last)

    @property
    def line_breaks_end_sentences(self) -> bool:
        return self.input_format == "sentence-lines"


Item = Document | Skipped


def detect_input_format(name: str | Path) -> str:
    """The input format a file name implies: .jsonl/.json, .conll/.bio/.iob/.tsv, else text."""
    if is_stdio(name):
        return "text"
    path = Path(name)
    if path.suffix.lower() == GZIP_SUFFIX:  # notes.jsonl.gz is JSON Lines, compressed
        path = path.with_suffix("")
    return _SUFFIX_FORMATS.get(path.suffix.lower(), "text")


def read_documents(
    inputs: Sequence[str | Path],
    input_format: str = "auto",
    token_column: int = 0,
    notes: RepeatedNotes | None = None,
    piece_chars: int = PIECE_CHARS,
    settings: TokenizerSettings | None = None,
) -> Iterator[Item]:
    """The documents of every input in order, with a `Skipped` in place of each bad item.

    Inputs are paths or "-" (standard input, at most once). Plain text comes in pieces of about
    `piece_chars` characters, cut where `settings` (the tokenizer's) finds a sentence boundary.
    Remarks for people (a text input that looks like a column file) are appended to `notes`.
    """
    if sum(is_stdio(path) for path in inputs) > 1:
        raise ConfigError("standard input ('-') can be read only once")
    settings = settings or TokenizerSettings()
    for number, path in enumerate(inputs or [STDIO]):
        kind = detect_input_format(path) if input_format == "auto" else input_format
        if kind not in INPUT_FORMATS:
            raise ConfigError(f"input format must be one of {', '.join(INPUT_FORMATS)}")
        name = input_name(path)
        with contextlib.ExitStack() as stack:
            try:
                stream = stack.enter_context(open_input(path))
            except DataError as error:
                yield Skipped(name, None, unopenable(path, error.message))
                continue
            if kind == "columns":
                yield from _column_items(stream, path, token_column)
            elif kind == "jsonl":
                yield from _jsonl_items(stream, name, notes)
            elif kind == "lines":
                yield from _line_items(stream, name)
            else:
                text = _text_items(stream, name, kind, number, piece_chars, settings)
                yield from _noting_columns(text, notes)


def unopenable(path: str | Path, message: str) -> str:
    """Why an input could not be opened (`message`), said plainly for a folder or a wildcard."""
    name = str(path)
    if Path(name).is_dir():
        example = f"{name.rstrip('/')}/*.txt"
        return f"a folder, not a file; name the files in it (e.g. {example}, unquoted)"
    if not Path(name).exists() and _WILDCARDS & set(name):
        return (
            "no such file, and the name holds a wildcard that no shell expanded (was it "
            "quoted?); leave it unquoted, or name the files"
        )
    return message


def _noting_columns(items: Iterator[Item], notes: RepeatedNotes | None) -> Iterator[Item]:
    for item in items:
        if (
            notes is not None
            and isinstance(item, Document)
            and item.first
            and item.input_format == "text"
            and _looks_like_columns(item.text)
        ):
            first = item.source
            notes.add(
                "looks like columns",
                f"{first} was read as plain text but looks like a column file; "
                "pass --input-format columns to tag its tokens as they are",
                lambda n, first=first: (
                    f"{count(n, 'input')} were read as plain text but look like column files "
                    f"(first: {first}); pass --input-format columns to tag their tokens as "
                    "they are"
                ),
            )
        yield item


def _text_items(
    stream: BinaryIO,
    name: str,
    kind: str,
    number: int,
    piece_chars: int,
    settings: TokenizerSettings,
) -> Iterator[Item]:
    """A text document in pieces; a problem met on the way ends it with a Skipped."""
    line_breaks = kind == "sentence-lines"
    try:
        pieces = text_pieces(stream, name, piece_chars, settings, line_breaks)
        for index, piece in enumerate(pieces):
            part = Part(number, index, piece.offset, piece.last)
            yield Document(name, piece.text, name, piece.line, input_format=kind, part=part)
    except DataError as error:
        yield Skipped(name, error.line, error.message, document=number)


def _looks_like_columns(text: str) -> bool:
    """Do the first lines look like token<TAB>label rows (a column file read as text)?"""
    lines = [line for line in text[:4000].splitlines()[:20] if line.strip()]
    return len(lines) >= 3 and all(
        "\t" in line and " " not in line.strip() and len(line) < 80 for line in lines
    )


def _column_items(stream: BinaryIO, path: str | Path, token_column: int) -> Iterator[Item]:
    """Sentences of a column file as documents; a sentence holding a bad line is skipped alone."""
    name = input_name(path)
    lines = CheckedColumnLines(stream, name, token_column)
    fmt = ColumnFormat(delimiter=lines.delimiter, token_column=token_column, has_labels=False)
    separator = writing_delimiter(lines.delimiter)
    problems = lines.problems
    try:
        # ColumnReader.__iter__ opens the file itself; _parse reads any stream of byte lines.
        for sentence in ColumnReader(path, fmt)._parse(iter(lines)):
            first = sentence.line_numbers[0]
            while problems and problems[0][0] < first:
                yield Skipped(name, *problems.popleft())
            text = " ".join(sentence.tokens)
            yield Document(
                f"{name}:{first}",
                text,
                name,
                first,
                sentence=sentence,
                input_format="columns",
                separator=separator,
            )
    except DataError as error:
        while problems and (error.line is None or problems[0][0] < error.line):
            yield Skipped(name, *problems.popleft())
        yield Skipped(name, error.line, f"{error.message}; the rest of the file was not read")
        return
    for problem in problems:
        yield Skipped(name, *problem)


def _line_items(stream: BinaryIO, name: str) -> Iterator[Item]:
    for raw in raw_lines(stream):
        try:
            text = decode_line(raw, name)
        except DataError as error:
            yield Skipped(name, raw.number, error.message)
            continue
        if text.strip():
            yield Document(f"{name}:{raw.number}", text, name, raw.number, input_format="lines")


def _jsonl_items(stream: BinaryIO, name: str, notes: RepeatedNotes | None = None) -> Iterator[Item]:
    seen_content = False
    noted_earlier_keys = False
    for raw in raw_lines(stream):
        number = raw.number
        try:
            line = decode_line(raw, name)
        except DataError as error:
            yield Skipped(name, number, error.message)
            continue
        if not line.strip():
            continue
        if not seen_content:
            seen_content = True
            spread = _spread_over_lines(line)
            if spread is not None:
                yield Skipped(name, number, spread)
                return
        record = _record(line)
        if isinstance(record, str):
            yield Skipped(name, number, record)
            continue
        if "spans" in record:  # an earlier release's output: its findings are replaced
            for key in EARLIER_RECORD_KEYS:
                record.pop(key, None)
            if not noted_earlier_keys and notes is not None:
                notes.add(
                    "earlier record keys",
                    f'{name} (from line {number}) uses the earlier record keys "spans" and '
                    '"review"; they are dropped and the findings written anew as "mentions" '
                    'and "needs_review"',
                    lambda files, first=f"{name}:{number}": (
                        f'{number_of(files)} files use the earlier record keys "spans" and '
                        f'"review" (first: {first}); they are dropped and the findings written '
                        'anew as "mentions" and "needs_review"'
                    ),
                )
            noted_earlier_keys = True
        doc_id = record.get("id", f"{name}:{number}")
        yield Document(doc_id, record["text"], name, number, record=record, input_format="jsonl")


def _spread_over_lines(first_line: str) -> str | None:
    """What is wrong with a file whose first line opens a JSON array or object and ends there
    (pretty-printed JSON rather than JSON Lines); None when it is not such a file."""
    opened = first_line.strip()
    if opened not in ("[", "{"):
        return None
    what = "a JSON array" if opened == "[" else "a JSON object spread over several lines"
    return (
        f"the file holds {what}; JSON Lines is expected, one object per line such as "
        '{"id": 1, "text": "..."}; the rest of the file was not read'
    )


class _NotJsonNumber(ValueError):
    pass


def _refuse_constant(name: str) -> Any:
    raise _NotJsonNumber(f"{name} is not a JSON number; write null or a string")


def _record(line: str) -> dict[str, Any] | str:
    """The JSON object of a jsonl line, or what is wrong with the line."""
    try:
        # NaN and Infinity are not JSON: written back they would make the output invalid too.
        record = json.loads(line, parse_constant=_refuse_constant)
    except _NotJsonNumber as error:
        return f"not valid JSON ({error})"
    except RecursionError:
        return f"the record nests arrays and objects deeper than {MAX_JSON_DEPTH} levels"
    except ValueError as error:
        return f"not valid JSON ({_json_problem(error)})"
    if not isinstance(record, dict):
        if isinstance(record, list):
            return "a JSON array; JSON Lines is expected, one object per line"
        return f"a JSON object was expected, not {type(record).__name__}"
    # Nesting deeper than the limit needs more opening brackets than it: counting them is the
    # cheap test that spares almost every record the walk (a sixth of reading's time).
    brackets = line.count("{") + line.count("[")
    if brackets > MAX_JSON_DEPTH and _depth(record) > MAX_JSON_DEPTH:
        return f"the record nests arrays and objects deeper than {MAX_JSON_DEPTH} levels"
    text = record.get("text")
    if not isinstance(text, str):
        found = "no" if "text" not in record else f"a {type(text).__name__} as its"
        return f'the object has {found} "text"; a string is needed'
    if "\\u" in line and not _encodable(record):
        return "the object holds an unpaired surrogate (\\ud800-\\udfff)"
    return record


def _json_problem(error: ValueError) -> str:
    message = getattr(error, "msg", str(error))
    column = getattr(error, "colno", None)
    if column is None:
        return message
    # Some of the parser's messages end in "at" ("Unterminated string starting at").
    return (
        f"{message} column {column}" if message.endswith(" at") else f"{message} at column {column}"
    )


def _depth(value: Any) -> int:
    """How deeply arrays and objects nest in a parsed JSON value (walked without recursion)."""
    deepest = 0
    stack: deque[tuple[Any, int]] = deque([(value, 1)])
    while stack:
        item, depth = stack.pop()
        children = item.values() if isinstance(item, dict) else item
        deepest = max(deepest, depth)
        stack.extend((child, depth + 1) for child in children if isinstance(child, dict | list))
    return deepest


def _encodable(record: dict[str, Any]) -> bool:
    try:
        json.dumps(record, ensure_ascii=False).encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True
