"""Column files (CoNLL style): reading them as a stream of sentences, and writing them back.

The format rules this module owns:

* One token per line; the line's columns hold the token, its label and any other annotation.
* Columns are separated either by single TABs ("tab") or by runs of ASCII spaces and TABs
  ("space"). Unless the format says which, the first content lines of each file decide: if any
  of them holds a TAB the file is tab-separated. In a tab-separated file nothing but the TAB
  splits, so spaces (ASCII or not), zero-width characters and byte-order marks stay inside
  tokens; an empty column between two TABs is kept as an empty string. In a space-separated
  file TABs also separate, because files of that kind mix them, and leading and trailing
  spaces of the line are ignored.
* A line holding nothing or only ASCII whitespace (space, TAB, CR, FF, VT) ends a sentence;
  several in a row are one boundary. Unicode spaces such as U+00A0 or U+3000 do not make a
  line blank, since corpora use them as tokens.
* A line whose first column is `-DOCSTART-` starts a document, with or without a blank line
  before or after it; it also ends the sentence in progress.
* Comment lines exist only when `ColumnFormat.comment_prefix` is set (off by default, as "#" is
  a common token). Comments, `-DOCSTART-` lines and the blank lines directly after them are
  kept in the next sentence's `prefix_lines`, so writing reproduces them before that sentence
  (a comment inside a sentence, or right after its last token, moves to before that
  sentence). Such lines after the last sentence of a file belong to no sentence and are
  dropped on writing; the reader's `ReadStats.trailing_lines` counts them.
* Files are UTF-8 (or the encoding `ColumnFormat.encoding` names), with or without a byte-order
  mark at the very start (only that one is removed); lines end in LF or CRLF (only the line
  ending is removed). Bytes that do not decode are reported with file, line and byte offset.
  These are the rules of every input (`tagger.data.io`); how a single line reads is
  `tagger.data.column_lines`.

Reading is a generator over a binary stream decoded line by line, so a file is never held whole.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from tagger.data.atomic import atomic_output
from tagger.data.column_lines import (
    DELIMITERS,
    DOCSTART,
    detect_delimiter,
    is_blank,
    is_docstart,
    splitter,
    unwritable,
    writing_delimiter,
)
from tagger.data.io import (
    STDIO,
    UTF8,
    UTF8_BOM,
    checked_encoding,
    decoded_lines,
    input_name,
    is_stdio,
    open_input,
)
from tagger.data.io import shortened as _shorten
from tagger.errors import ConfigError, DataError

__all__ = [
    "DOCSTART",
    "STDIO",
    "ColumnFormat",
    "ColumnReader",
    "ColumnSource",
    "ReadStats",
    "Sentence",
    "format_sentence",
    "read_columns",
    "read_sentences",
    "write_columns",
]


@dataclass(frozen=True)
class ColumnFormat:
    """How to read a column file; the defaults suit most labelled corpora."""

    delimiter: str | None = None  # "tab", "space", or None = detect per file
    token_column: int = 0  # may be negative: counted from the end
    label_column: int = -1  # may be negative: counted from the end
    comment_prefix: str | None = None  # lines starting with it are comments; None = no comments
    has_labels: bool = True  # False for files to be tagged: no label column is read
    encoding: str = UTF8  # of the file's bytes; one that writes ASCII as ASCII (tagger.data.io)

    def __post_init__(self) -> None:
        checked_encoding(self.encoding)
        if self.delimiter is not None and self.delimiter not in DELIMITERS:
            raise ConfigError(
                f"delimiter must be 'tab', 'space' or None (detect), not {self.delimiter!r}"
            )
        for name in ("token_column", "label_column"):
            value = getattr(self, name)
            if not isinstance(value, int) or isinstance(value, bool):
                raise ConfigError(f"{name} must be an integer, not {value!r}")
        if self.comment_prefix is not None and (
            not self.comment_prefix or "\n" in self.comment_prefix
        ):
            raise ConfigError(
                f"comment_prefix must be a non-empty one-line string or None, "
                f"not {self.comment_prefix!r}"
            )


@dataclass(frozen=True)
class Sentence:
    """One sentence of a column file, with every column of every token line as read."""

    rows: tuple[tuple[str, ...], ...]  # every column of every token line, as read
    line_numbers: tuple[int, ...]  # 1-based file line of each token; empty if not from a file
    token_column: int  # resolved, non-negative
    label_column: int | None  # resolved; None when the file has no labels
    document: int  # 0-based document index (increments at each -DOCSTART-)
    prefix_lines: tuple[str, ...] = ()  # -DOCSTART-, comment and blank lines written before it

    def __len__(self) -> int:
        return len(self.rows)

    @property
    def tokens(self) -> list[str]:
        column = self.token_column
        return [row[column] for row in self.rows]

    @property
    def labels(self) -> list[str]:
        if self.label_column is None:
            raise DataError("the file was read without labels", None, self.first_line)
        column = self.label_column
        return [row[column] for row in self.rows]

    @property
    def first_line(self) -> int | None:
        """The file line of the first token, if known."""
        return self.line_numbers[0] if self.line_numbers else None

    def with_labels(self, labels: Sequence[str]) -> Sentence:
        """The same sentence with the label column replaced (or appended if it had none)."""
        if len(labels) != len(self.rows):
            raise ValueError(f"got {len(labels)} labels for a sentence of {len(self.rows)} tokens")
        if self.label_column is None:
            column = len(self.rows[0]) if self.rows else 0
            rows = tuple((*row, label) for row, label in zip(self.rows, labels, strict=True))
        else:
            column = self.label_column
            rows = tuple(
                (*row[:column], label, *row[column + 1 :])
                for row, label in zip(self.rows, labels, strict=True)
            )
        return Sentence(
            rows=rows,
            line_numbers=self.line_numbers,
            token_column=self.token_column,
            label_column=column,
            document=self.document,
            prefix_lines=self.prefix_lines,
        )

    @classmethod
    def from_tokens(
        cls, tokens: Sequence[str], labels: Sequence[str] | None = None, document: int = 0
    ) -> Sentence:
        """A sentence not read from a file: one column of tokens, plus labels if given."""
        if labels is None:
            return cls(tuple((t,) for t in tokens), (), 0, None, document)
        if len(labels) != len(tokens):
            raise ValueError(f"got {len(labels)} labels for {len(tokens)} tokens")
        rows = tuple((t, lab) for t, lab in zip(tokens, labels, strict=True))
        return cls(rows, (), 0, 1, document)


@dataclass
class ReadStats:
    """What a reader saw in one file, beyond the sentences themselves (filled while reading)."""

    delimiter: str | None = None  # "tab" or "space", once known
    columns: int | None = None  # columns per token line, once known
    lines: int = 0
    sentences: int = 0
    tokens: int = 0
    documents: int = 0
    docstart_lines: int = 0
    comment_lines: int = 0
    whitespace_only_lines: int = 0  # blank lines holding spaces or TABs rather than nothing
    trailing_lines: int = 0  # -DOCSTART-/comment/blank lines after the last sentence


class ColumnReader:
    """The sentences of one column file, in order, read lazily; `stats` fills as they are read.

    Iterate once. `path` "-" reads standard input.
    """

    def __init__(self, path: str | Path, fmt: ColumnFormat = ColumnFormat()) -> None:
        self.path = path
        self.fmt = fmt
        self.name = input_name(path)
        self.stats = ReadStats()

    def __iter__(self) -> Iterator[Sentence]:
        with open_input(self.path) as stream:
            yield from self._parse(stream)

    def _parse(self, stream: Iterable[bytes]) -> Iterator[Sentence]:
        """The sentences of any stream of byte lines (an open file, standard input, a list)."""
        fmt, stats, name = self.fmt, self.stats, self.name
        lines: Iterable[tuple[int, str]] = decoded_lines(stream, name, fmt.encoding)
        if fmt.delimiter is None:
            lines, stats.delimiter = detect_delimiter(lines, fmt.comment_prefix)
        else:
            stats.delimiter = fmt.delimiter
        split = splitter(stats.delimiter)
        comment = fmt.comment_prefix

        rows: list[tuple[str, ...]] = []
        numbers: list[int] = []
        prefix: list[str] = []
        document = 0
        started = False  # has a sentence or a -DOCSTART- been seen yet?
        columns = 0
        columns_line = 0
        token_column = 0
        label_column: int | None = None

        def finish() -> Sentence:
            sentence = Sentence(
                rows=tuple(rows),
                line_numbers=tuple(numbers),
                token_column=token_column,
                label_column=label_column,
                document=document,
                prefix_lines=tuple(prefix),
            )
            stats.sentences += 1
            stats.tokens += len(rows)
            rows.clear()
            numbers.clear()
            prefix.clear()
            return sentence

        number = 0
        for number, text in lines:
            if is_blank(text):
                if text:
                    stats.whitespace_only_lines += 1
                if rows:
                    yield finish()
                elif prefix:
                    prefix.append(text)  # the blank line after a -DOCSTART- is part of the layout
                continue
            if is_docstart(text):
                if rows:
                    yield finish()
                if started:
                    document += 1
                started = True
                stats.docstart_lines += 1
                prefix.append(text)
                continue
            if comment is not None and text.startswith(comment):
                stats.comment_lines += 1
                prefix.append(text)
                continue

            fields = split(text)
            if not columns:
                columns, columns_line = len(fields), number
                stats.columns = columns
                token_column, label_column = _resolve_columns(fmt, columns, name, number)
            elif len(fields) != columns:
                raise DataError(
                    f"expected {columns} columns (as on line {columns_line}), "
                    f"found {len(fields)} in {_shorten(text)}",
                    name,
                    number,
                )
            if not fields[token_column]:
                raise DataError(
                    f"empty token (column {token_column}) in {_shorten(text)}", name, number
                )
            if label_column is not None and not fields[label_column]:
                raise DataError(
                    f"empty label (column {label_column}) in {_shorten(text)}", name, number
                )
            rows.append(tuple(fields))
            numbers.append(number)
            started = True

        if rows:
            yield finish()
        else:
            stats.trailing_lines = len(prefix)
        stats.lines = number
        stats.documents = document + 1 if started else 0


def read_columns(path: str | Path, fmt: ColumnFormat = ColumnFormat()) -> Iterator[Sentence]:
    """The sentences of a column file, read lazily (a generator). Path "-" reads stdin."""
    return iter(ColumnReader(path, fmt))


def read_sentences(path: str | Path, fmt: ColumnFormat = ColumnFormat()) -> list[Sentence]:
    """All sentences of a column file, in a list."""
    return list(read_columns(path, fmt))


@dataclass
class ColumnSource:
    """A column file that can be read more than once: a file is read again from disk each time,
    standard input ("-") is kept on the first read. `stats` are those of the latest read."""

    path: str | Path
    fmt: ColumnFormat = ColumnFormat()
    stats: ReadStats = field(default_factory=ReadStats)
    _kept: list[Sentence] | None = field(default=None, init=False, repr=False)

    def sentences(self) -> Iterator[Sentence]:
        if self._kept is not None:
            yield from self._kept
            return
        reader = ColumnReader(self.path, self.fmt)
        self.stats = reader.stats  # filled as the reader goes
        if is_stdio(self.path):
            self._kept = list(reader)
            yield from self._kept
            return
        yield from reader


def format_sentence(sentence: Sentence, delimiter: str = "\t") -> str:
    """A sentence as column-file text: its prefix lines, one line per token, a blank line.

    `delimiter` is "\\t" or " " (or "tab" / "space"). A sentence without tokens gives only its
    prefix lines. Raises DataError for a column that would not read back as written.
    """
    separator = writing_delimiter(delimiter)
    parts = [line + "\n" for line in sentence.prefix_lines]
    if not sentence.rows:
        return "".join(parts)
    numbers = sentence.line_numbers
    for index, row in enumerate(sentence.rows):
        line = separator.join(row)
        problem = unwritable(row, line, separator)
        if problem:
            where = numbers[index] if index < len(numbers) else None
            raise DataError(f"cannot write {_shorten(line)}: {problem}", None, where)
        parts.append(line + "\n")
    parts.append("\n")
    return "".join(parts)


def write_columns(path: str | Path, sentences: Iterable[Sentence], delimiter: str = "\t") -> None:
    """Write sentences as a UTF-8 column file, replacing `path` only once all is written.

    Path "-" writes to stdout. Each sentence is followed by a blank line.
    """
    separator = writing_delimiter(delimiter)
    name = "<stdout>" if is_stdio(path) else str(path)
    with atomic_output(path, "wb") as out:
        at_start = True
        for sentence in sentences:
            try:
                text = format_sentence(sentence, separator)
            except DataError as error:
                raise DataError(error.message, name, error.line) from error
            if at_start and text.startswith("\ufeff"):
                # A reader removes one byte-order mark at the start of a file; give it one to
                # remove so that a token starting with U+FEFF reads back intact.
                out.write(UTF8_BOM)
            at_start = at_start and not text
            try:
                out.write(text.encode("utf-8"))
            except UnicodeEncodeError as error:
                raise DataError(
                    f"cannot encode {_shorten(text[error.start : error.end])} as UTF-8",
                    name,
                    sentence.first_line,
                ) from error


def _resolve_columns(
    fmt: ColumnFormat, columns: int, name: str, number: int
) -> tuple[int, int | None]:
    def resolve(index: int, what: str) -> int:
        resolved = index + columns if index < 0 else index
        if not 0 <= resolved < columns:
            raise DataError(
                f"{what} column {index} is out of range: the file's lines have {columns} "
                f"column{'s' if columns != 1 else ''} (valid: 0 to {columns - 1}, "
                f"or -1 to -{columns})",
                name,
                number,
            )
        return resolved

    token = resolve(fmt.token_column, "token")
    if not fmt.has_labels:
        return token, None
    label = resolve(fmt.label_column, "label")
    if label == token:
        raise DataError(
            f"token and label would both be column {token}, as the line has {columns} "
            f"column{'s' if columns != 1 else ''}; an annotated file holds a token and a label "
            "on each line",
            name,
            number,
        )
    return token, label
