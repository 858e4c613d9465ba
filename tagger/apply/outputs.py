"""Output formats of tagged documents, and what one chunk of them adds to a run's counts.

    jsonl    one object per document: its input keys (id first, added as "SOURCE:LINE" when the
             input has none), "text", "spans" (start, end, label, text, score) and "review"
             ("spans" and "review" keys of the input, e.g. from an earlier run, are replaced)
    columns  one token per line with the predicted label appended, in the training files' scheme
             (or `scheme`); a blank line after each sentence; documents read from text or jsonl
             start with a "-DOCSTART- ID" line
    table    tab-separated spans with a header row: document, start, end, label, score, text;
             backslash, TAB, CR and LF in a field are written as \\\\ \\t \\r \\n

Spans below `min_score` are left out; a document is flagged for review when the model is less
sure than `review_below` of the label it chose at any of its tokens, in a span (left out or kept)
or outside one (`tagger.apply.review`).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any

from tagger.apply.documents import Skipped
from tagger.apply.engine import SCORE_DIGITS, TaggedDocument
from tagger.apply.review import needs_review
from tagger.data.corpus import Sentence, format_sentence
from tagger.data.schemes import spans_to_tags
from tagger.errors import DataError

OUTPUT_FORMATS = ("jsonl", "columns", "table")
TABLE_HEADER = "document\tstart\tend\tlabel\tscore\ttext\n"

_TABLE_ESCAPES = str.maketrans({"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"})


def table_field(value: Any) -> str:
    """A value as one tab-separated field: strings as they are, anything else as JSON, escaped."""
    text = value if isinstance(value, str) else json.dumps(value, ensure_ascii=False)
    return text.translate(_TABLE_ESCAPES)


@dataclass
class ChunkResult:
    """One chunk's output text and what it adds to the run's summary."""

    text: str = ""
    documents: int = 0
    sentences: int = 0
    tokens: int = 0
    spans: int = 0
    review: int = 0
    skipped: list[Skipped] = field(default_factory=list)


@dataclass(frozen=True)
class DocumentFormatter:
    """Writes tagged documents in one output format."""

    output_format: str
    output_scheme: str  # labels of columns output
    min_score: float
    review_below: float

    def chunk(self, tagged: list[TaggedDocument | Skipped]) -> ChunkResult:
        """The output of one chunk, in order; a document its format cannot hold is skipped."""
        parts: list[str] = []
        result = ChunkResult()
        for entry in tagged:
            if isinstance(entry, Skipped):
                result.skipped.append(entry)
                continue
            try:
                parts.append(self.format(entry))
            except DataError as error:  # a token the column format cannot hold
                result.skipped.append(
                    Skipped(entry.document.source, entry.document.line, error.message)
                )
                continue
            kept = [s for s in entry.spans if s.score >= self.min_score]
            result.documents += 1
            result.sentences += len(entry.analysed.tokens)
            result.tokens += sum(len(t) for t in entry.analysed.tokens)
            result.spans += len(kept)
            result.review += needs_review(entry.certainty, self.review_below)
        result.text = "".join(parts)
        return result

    def format(self, entry: TaggedDocument) -> str:
        doc = entry.document
        kept = [s for s in entry.spans if s.score >= self.min_score]
        if self.output_format == "jsonl":
            record: dict[str, Any] = (
                {"id": doc.id} if doc.record is None or "id" not in doc.record else {}
            )
            record.update(doc.record if doc.record is not None else {"text": doc.text})
            record["spans"] = [s.to_dict() for s in kept]
            record["review"] = needs_review(entry.certainty, self.review_below)
            return json.dumps(record, ensure_ascii=False) + "\n"
        if self.output_format == "table":
            name = table_field(doc.id)
            return "".join(
                f"{name}\t{s.start}\t{s.end}\t{table_field(s.label)}\t"
                f"{round(s.score, SCORE_DIGITS)}\t{table_field(s.text)}\n"
                for s in kept
            )
        parts = []
        if doc.sentence is None:
            parts.append(f"-DOCSTART- {table_field(doc.id)}\n\n")
        for tokens, found in zip(entry.analysed.tokens, entry.token_spans, strict=True):
            chosen = [(t, a, b) for t, a, b, score in found if score >= self.min_score]
            labels = spans_to_tags(chosen, len(tokens), self.output_scheme)
            if doc.sentence is not None:
                sentence = doc.sentence.with_labels(labels)
            else:
                sentence = Sentence.from_tokens(tokens, labels)
            parts.append(format_sentence(sentence))
        return "".join(parts)
