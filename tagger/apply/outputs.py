"""Output formats of tagged documents: what each document, or piece of one, writes.

    jsonl    one object per document: its input keys (id first, added as "SOURCE:LINE" when the
             input has none), "text", "mentions" and "needs_review"; each mention is
             {"type": "DRUG", "at": [start, end], "quote": "aspirin", "confidence": 0.97}, where
             start and end count code points of "text", end exclusive, so that
             text[start:end] == quote ("mentions" and "needs_review" keys of the input, e.g.
             from an earlier run, are replaced; so are the earlier names "spans" and "review",
             see `tagger.apply.documents`)
    columns  one token per line with the predicted label appended, in the training files' scheme
             (or `scheme`), columns separated as in the input column file (TAB or space); a
             blank line after each sentence; documents read from text, lines or jsonl start with
             a "-DOCSTART- ID" line
    table    tab-separated mentions with a header row: document, from, to, type, confidence,
             quote (from and to as the jsonl "at");
             backslash, TAB, CR and LF in a field are written as \\\\ \\t \\r \\n

Mentions below `min_score` are left out; a document is flagged for review when the model is less
sure than `review_below` of the label it chose at any of its tokens, in a span (left out or kept)
or outside one (`tagger.apply.review`); a document read in pieces, when any piece is.

A plain-text document read in pieces is formatted piece by piece (`Output.part` set) and joined
into the very text the whole document would give by `tagger.apply.writing`.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from enum import StrEnum
from typing import Any

from tagger.apply.documents import Part, Skipped
from tagger.apply.engine import SCORE_DIGITS, Mention, TaggedDocument
from tagger.apply.review import needs_review
from tagger.data.corpus import Sentence, format_sentence
from tagger.data.schemes import spans_to_tags
from tagger.errors import DataError


class OutputFormat(StrEnum):
    """How tagged documents are written (see the module docstring)."""

    JSONL = "jsonl"
    COLUMNS = "columns"
    TABLE = "table"


OUTPUT_FORMATS: tuple[str, ...] = tuple(f.value for f in OutputFormat)
TABLE_HEADER = "document\tfrom\tto\ttype\tconfidence\tquote\n"
MENTIONS_KEY = "mentions"  # the jsonl keys the tag command writes
REVIEW_KEY = "needs_review"

_TABLE_ESCAPES = str.maketrans({"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"})


def table_field(value: Any) -> str:
    """A value as one tab-separated field: strings as they are, anything else as JSON, escaped."""
    text = value if isinstance(value, str) else json.dumps(value, ensure_ascii=False)
    return text.translate(_TABLE_ESCAPES)


def _json(value: Any) -> str:
    return json.dumps(value, ensure_ascii=False)


@dataclass
class Output:
    """What one document, or one piece of a document read in pieces, writes and counts."""

    text: str  # the document's output; a piece's share of it (jsonl: its text, JSON-escaped)
    part: Part | None = None  # set on a piece of a document read in several pieces
    head: str = ""  # jsonl, a first piece: the record up to the opening quote of its text
    mentions_json: str = ""  # jsonl, a piece: its mentions as JSON objects joined by ", "
    sentences: int = 0
    tokens: int = 0
    spans: int = 0  # spans written (at or above min_score)
    review: bool = False


@dataclass
class ChunkResult:
    """One chunk's outputs and skipped items, in input order."""

    entries: list[Output | Skipped] = field(default_factory=list)

    @property
    def skipped(self) -> list[Skipped]:
        return [entry for entry in self.entries if isinstance(entry, Skipped)]


@dataclass(frozen=True)
class DocumentFormatter:
    """Writes tagged documents in one output format."""

    output_format: str
    output_scheme: str  # labels of columns output
    min_score: float
    review_below: float

    def chunk(self, tagged: list[TaggedDocument | Skipped]) -> ChunkResult:
        """The output of one chunk, in order; a document its format cannot hold is skipped."""
        result = ChunkResult()
        for entry in tagged:
            if isinstance(entry, Skipped):
                result.entries.append(entry)
                continue
            try:
                result.entries.append(self.output(entry))
            except DataError as error:  # a token the column format cannot hold
                doc = entry.document
                document = doc.part.document if doc.part is not None else None
                result.entries.append(Skipped(doc.source, doc.line, error.message, document))
        return result

    def output(self, entry: TaggedDocument) -> Output:
        """A document's output and counts; a piece's share when the document has several."""
        doc = entry.document
        kept = [m for m in entry.mentions if m.confidence >= self.min_score]
        output = Output(
            "",
            sentences=len(entry.analysed.tokens),
            tokens=sum(len(t) for t in entry.analysed.tokens),
            spans=len(kept),
            review=needs_review(entry.certainty, self.review_below),
        )
        if not doc.whole:
            output.part = doc.part
        if self.output_format == "jsonl":
            if doc.whole:
                output.text = self._record(entry, kept, output.review)
            else:
                # Only plain text comes in pieces: its record is id, text, mentions, needs_review.
                output.head = '{"id": ' + _json(doc.id) + ', "text": "' if doc.first else ""
                output.text = _json(doc.text)[1:-1]
                output.mentions_json = ", ".join(_json(m.to_record()) for m in kept)
        elif self.output_format == "table":
            name = table_field(doc.id)
            output.text = "".join(
                f"{name}\t{m.start}\t{m.end}\t{table_field(m.type)}\t"
                f"{round(m.confidence, SCORE_DIGITS)}\t{table_field(m.quote)}\n"
                for m in kept
            )
        else:
            output.text = self._columns(entry)
        return output

    def _record(self, entry: TaggedDocument, kept: list[Mention], review: bool) -> str:
        doc = entry.document
        record: dict[str, Any] = (
            {"id": doc.id} if doc.record is None or "id" not in doc.record else {}
        )
        record.update(doc.record if doc.record is not None else {"text": doc.text})
        record[MENTIONS_KEY] = [m.to_record() for m in kept]
        record[REVIEW_KEY] = review
        return _json(record) + "\n"

    def _columns(self, entry: TaggedDocument) -> str:
        doc = entry.document
        parts = []
        if doc.sentence is None and doc.first:
            parts.append(f"-DOCSTART- {table_field(doc.id)}\n\n")
        for tokens, found in zip(entry.analysed.tokens, entry.token_spans, strict=True):
            chosen = [(t, a, b) for t, a, b, score in found if score >= self.min_score]
            labels = spans_to_tags(chosen, len(tokens), self.output_scheme)
            if doc.sentence is not None:
                sentence = doc.sentence.with_labels(labels)
            else:
                sentence = Sentence.from_tokens(tokens, labels)
            parts.append(format_sentence(sentence, doc.separator))
        return "".join(parts)
