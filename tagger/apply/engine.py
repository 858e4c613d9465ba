"""The tagging engine: documents in chunks -> sentences and tokens with offsets -> scored spans.

Documents are gathered into chunks of about `chunk_chars` characters (the default is roughly
2,000 sentences of ordinary prose; a longer document is a chunk of its own). Each chunk is
tokenised and tagged in length-sorted batches across its documents, so the batches stay full
while memory depends on the chunk size and the longest document, not on the input size.

A span's score is the smallest, over its tokens, of the probability of the label chosen there
(see `Tagger.predict_sentences`); a document's certainty, which the review flag reads, is the
smallest over all of its tokens (`tagger.apply.review`). Each span found becomes a `Mention`,
whose offsets count code points of the document text, end exclusive: `text[start:end]` is its
quote.

A sentence longer than the tokenizer's `max_sentence_tokens` makes its document a `Skipped` record
(for a piece of a plain-text document, its whole document: see `tagger.apply.writing`). A
piece's spans are shifted by its offset, so they index the whole document.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from tagger.apply.documents import Document, Item, Skipped
from tagger.apply.plaintext import document_sentences
from tagger.apply.review import least_certain
from tagger.reports.layout import count
from tagger.text.tokenizer import TokenizerSettings

if TYPE_CHECKING:
    from tagger.apply.tagger import ScoredSpan, Tagger

CHUNK_CHARS = 200_000  # about 2,000 sentences of 100 characters: long enough to batch by length
SCORE_DIGITS = 4  # scores are written rounded; filtering uses the exact value


@dataclass(frozen=True)
class Mention:
    """One entity found in a document: `quote == document[start:end]` (code points, end exclusive);
    `confidence` is the span's score (see the module docstring)."""

    type: str
    start: int
    end: int
    quote: str
    confidence: float

    def to_record(self) -> dict[str, Any]:
        """The mention as the `tag` command writes it in a JSON Lines record."""
        return {
            "type": self.type,
            "at": [self.start, self.end],
            "quote": self.quote,
            "confidence": round(self.confidence, SCORE_DIGITS),
        }


@dataclass
class Analysed:
    """A document cut into sentences: tokens with the character offsets of each."""

    doc: Document
    tokens: list[list[str]]
    starts: list[list[int]]
    ends: list[list[int]]


@dataclass
class TaggedDocument:
    document: Document
    mentions: list[Mention]  # every span found, before `min_score` filtering
    token_spans: list[list[ScoredSpan]]  # per sentence, token indices
    analysed: Analysed
    certainty: float = 1.0  # of its least certain sentence (tagger.apply.review)


def too_long(limit: int, character: int, input_format: str | None) -> str:
    """The message for a sentence longer than `limit` tokens starting at `character`; for plain
    text it names the inputs where a line break ends a sentence or a record."""
    return (
        f"a sentence longer than max_sentence_tokens={limit} tokens starts at character "
        f"{character} of the document{line_inputs_hint(input_format)}"
    )


def line_inputs_hint(input_format: str | None) -> str:
    """For plain text, where a long sentence often means lines that are records: the inputs that
    read a line break as the end of a record or a sentence."""
    if input_format != "text":
        return ""
    return (
        "; if a line break ends each record or sentence of this text, read it with "
        "--input-format lines (a document per line) or sentence-lines (a sentence per line)"
    )


def chunks(items: Iterable[Item], chunk_chars: int, stop_at_skip: bool) -> Iterator[list[Item]]:
    """Consecutive items in chunks of about `chunk_chars` characters of text.

    With `stop_at_skip` nothing is read after the first Skipped item (the run will stop there).
    """
    chunk: list[Item] = []
    size = 0
    for item in items:
        chunk.append(item)
        if isinstance(item, Skipped):
            if stop_at_skip:
                break
            continue
        size += len(item.text) + 1
        if size >= chunk_chars:
            yield chunk
            chunk, size = [], 0
    if chunk:
        yield chunk


class Engine:
    """Tokenise and tag the documents of one chunk together. Runs in each worker process."""

    def __init__(self, tagger: Tagger, settings: TokenizerSettings, batch_size: int) -> None:
        self.tagger = tagger
        self.settings = settings
        self.batch_size = batch_size

    def analyse(self, doc: Document) -> Analysed | Skipped:
        limit = self.settings.max_sentence_tokens
        document = doc.part.document if doc.part is not None else None
        if doc.sentence is not None:
            spec = self.tagger.features
            if spec is not None and doc.sentence.rows:
                problem = spec.missing_columns(doc.sentence.rows[0])
                if problem:
                    return Skipped(doc.source, doc.line, problem)
            tokens = doc.sentence.tokens
            if len(tokens) > limit:
                return Skipped(
                    doc.source,
                    doc.line,
                    f"a sentence of {count(len(tokens), 'token')} is longer than "
                    f"max_sentence_tokens={limit}",
                )
            starts, position = [], 0
            for token in tokens:
                starts.append(position)
                position += len(token) + 1
            ends = [s + len(t) for s, t in zip(starts, tokens, strict=True)]
            return Analysed(doc, [tokens], [starts], [ends])
        analysed = Analysed(doc, [], [], [])
        for shift, sentence in document_sentences(
            doc.text, self.settings, doc.line_breaks_end_sentences
        ):
            if sentence.cut:
                start = shift + sentence.start
                line = doc.line
                if doc.record is None:  # a text file: count its lines; a jsonl text is one line
                    line += doc.text.count("\n", 0, start)
                return Skipped(
                    doc.source,
                    line,
                    too_long(limit, doc.offset + start, doc.input_format),
                    document,
                )
            analysed.tokens.append([t.text for t in sentence.tokens])
            analysed.starts.append([shift + t.start for t in sentence.tokens])
            analysed.ends.append([shift + t.end for t in sentence.tokens])
        return analysed

    def tag(self, items: Sequence[Item]) -> list[TaggedDocument | Skipped]:
        """Tag the documents of one chunk together (batched by length across documents)."""
        prepared = [item if isinstance(item, Skipped) else self.analyse(item) for item in items]
        analysed = [a for a in prepared if isinstance(a, Analysed)]
        token_lists = [t for a in analysed for t in a.tokens]
        rows = None
        if self.tagger.needs_columns:
            # Column documents are one sentence each; anything else has no columns to give.
            for a in analysed:
                if a.doc.sentence is None:
                    raise self.tagger.features.refusal(a.doc.source)  # type: ignore[union-attr]
            rows = [a.doc.sentence.rows for a in analysed]  # type: ignore[union-attr]
        scored = iter(self.tagger.predict_sentences(token_lists, self.batch_size, rows=rows))
        results: list[TaggedDocument | Skipped] = []
        for entry in prepared:
            if isinstance(entry, Skipped):
                results.append(entry)
                continue
            text, offset = entry.doc.text, entry.doc.offset
            mentions: list[Mention] = []
            sentences = [next(scored) for _ in entry.starts]
            for starts, ends, found in zip(entry.starts, entry.ends, sentences, strict=True):
                for label, first, last, score in found.spans:
                    start, end = starts[first], ends[last - 1]
                    mentions.append(
                        Mention(label, offset + start, offset + end, text[start:end], score)
                    )
            per_sentence = [found.spans for found in sentences]
            results.append(
                TaggedDocument(entry.doc, mentions, per_sentence, entry, least_certain(sentences))
            )
        return results
