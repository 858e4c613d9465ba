"""Batch tagging of new documents: read, tokenise, tag, score and write, streaming and in order.

This module owns the `tag` pipeline, its input and output formats, span scores and the review flag.

Input formats (chosen per input from its name unless `input_format` says otherwise: names ending
in .jsonl or .json read as jsonl, .conll .bio .iob .tsv as columns, anything else, and standard
input, as text):

    text     a UTF-8 file is one document; `tagger.text.tokenizer` finds its sentences and tokens
    jsonl    one JSON object per line with a "text" string and optionally an "id"; every other
             key is carried through to jsonl output untouched; blank lines are ignored
    columns  a pre-tokenised column file (`tagger.data.corpus`); each sentence is one document whose
             text is its tokens joined by single spaces; all its columns are kept, and a model
             trained with extra feature columns (model.feature_columns) reads them from it

A model that reads extra columns tags column files only: text and jsonl inputs are refused up
front with `FeatureInputError` (the columns it learnt from are not there to read).

Output formats:

    jsonl    one object per document: its input keys (id first, added as "SOURCE:LINE" when the
             input has none), "text", "spans" (start, end, label, text, score) and "review"
             ("spans" and "review" keys of the input, e.g. from an earlier run, are replaced)
    columns  one token per line with the predicted label appended, in the training files' scheme
             (or `scheme`); a blank line after each sentence; documents read from text or jsonl
             start with a "-DOCSTART- ID" line
    table    tab-separated spans with a header row: document, start, end, label, score, text;
             backslash, TAB, CR and LF in a field are written as \\\\ \\t \\r \\n

Offsets count characters (Unicode code points) of the document text as decoded, a byte-order
mark excluded, end exclusive: `text[start:end]` is the span's text.

A span's score is the smallest, over its tokens, of the probability of the label chosen there
(see `TrainedTagger.predict_scored_spans`). Spans below `min_score` are dropped; a document is
flagged for review when any span the model found in it, dropped or kept, scores below
`review_below`.

Streaming: documents are gathered into chunks of about `chunk_chars` characters (the default is
roughly 2,000 sentences of ordinary prose; a longer document is a chunk of its own), each chunk is
tokenised, tagged in length-sorted batches and formatted, and written before the next is read, so
memory depends on the chunk size and the longest document, not on the input size. With several
workers, chunks go to a pool of processes that each load the model once; results are written in
input order, and only a few chunks per worker are in flight at a time.

Bad input never vanishes: an undecodable line, a line that is not a JSON object with a "text"
string, a column file that breaks the format, or a sentence longer than `max_sentence_tokens`
becomes a `Skipped` record naming file and line. With `on_error="stop"` the first one (in input
order) raises DataError; with "skip" the run goes on and the summary lists each one.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import sys
import time
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Sequence
from contextlib import closing
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

from tagger.data.atomic import atomic_output

# oneDNN keeps a compiled recurrent kernel for every (batch, length) shape it meets, up to 1,024 of
# them by default; a long input with varied sentence lengths fills that cache and peak memory grows
# with the input (measured: +100 MB from a 10 MB to a 100 MB input). 64 keeps memory flat at no
# measurable cost in speed. It must be set before the first kernel is built, i.e. before tagging.
os.environ.setdefault("ONEDNN_PRIMITIVE_CACHE_CAPACITY", "64")
from tagger.data.corpus import ColumnFormat, ColumnReader, Sentence, format_sentence
from tagger.data.schemes import normalise_scheme_name, spans_to_tags
from tagger.errors import ConfigError, DataError, TaggerError
from tagger.text.tokenizer import TextSentence, TokenizerSettings, split_sentences

if TYPE_CHECKING:
    from tagger.apply.tagger import TrainedTagger

INPUT_FORMATS = ("text", "jsonl", "columns")
OUTPUT_FORMATS = ("jsonl", "columns", "table")
ON_ERROR = ("stop", "skip")
STDIO = "-"
CHUNK_CHARS = 200_000  # about 2,000 sentences of 100 characters: long enough to batch by length
TABLE_HEADER = "document\tstart\tend\tlabel\tscore\ttext\n"
SCORE_DIGITS = 4  # scores are written rounded; filtering uses the exact value

_SUFFIX_FORMATS = {
    ".jsonl": "jsonl",
    ".json": "jsonl",
    ".conll": "columns",
    ".bio": "columns",
    ".iob": "columns",
    ".tsv": "columns",
}
_BOM = b"\xef\xbb\xbf"
_TABLE_ESCAPES = str.maketrans({"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"})


@dataclass(frozen=True)
class TaggedSpan:
    """One entity found in a document; `text == document[start:end]` (characters, end exclusive)."""

    start: int
    end: int
    label: str
    text: str
    score: float

    def to_dict(self) -> dict[str, Any]:
        return {
            "start": self.start,
            "end": self.end,
            "label": self.label,
            "text": self.text,
            "score": round(self.score, SCORE_DIGITS),
        }


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
class TagOptions:
    """How `tag_files` reads, tags and writes; checked once, here."""

    input_format: str = "auto"  # "auto" (from each input's name) or one of INPUT_FORMATS
    output_format: str = "jsonl"
    scheme: str | None = None  # labels of columns output; None: the training files' scheme
    token_column: int = 0  # columns input
    min_score: float = 0.0
    review_below: float = 0.8
    on_error: str = "stop"
    max_sentence_tokens: int | None = None  # None: the model's tokenizer setting
    batch_size: int = 64
    chunk_chars: int = CHUNK_CHARS
    workers: int = 1
    threads: int = 0  # torch threads per process; 0: torch's default with one worker, else 1

    def __post_init__(self) -> None:
        if self.input_format != "auto" and self.input_format not in INPUT_FORMATS:
            raise ConfigError(
                f"input format must be auto, {', '.join(INPUT_FORMATS)}; got {self.input_format!r}"
            )
        if self.output_format not in OUTPUT_FORMATS:
            raise ConfigError(
                f"output format must be one of {', '.join(OUTPUT_FORMATS)}; "
                f"got {self.output_format!r}"
            )
        if self.on_error not in ON_ERROR:
            raise ConfigError(f"on_error must be stop or skip; got {self.on_error!r}")
        if self.scheme is not None:
            normalise_scheme_name(self.scheme)
        for name in ("min_score", "review_below"):
            value = getattr(self, name)
            if not 0.0 <= value <= 1.0:
                raise ConfigError(f"{name} must lie in [0, 1]; got {value!r}")
        for name in ("batch_size", "chunk_chars", "workers"):
            if getattr(self, name) < 1:
                raise ConfigError(f"{name} must be at least 1; got {getattr(self, name)!r}")
        if self.threads < 0:
            raise ConfigError(f"threads must not be negative; got {self.threads!r}")
        if self.max_sentence_tokens is not None and self.max_sentence_tokens < 1:
            raise ConfigError(
                f"max_sentence_tokens must be at least 1; got {self.max_sentence_tokens!r}"
            )


@dataclass
class TagSummary:
    """What a run did; `skipped` lists every input item left out, in input order."""

    documents: int = 0
    sentences: int = 0
    tokens: int = 0
    spans: int = 0
    review: int = 0  # documents flagged for review
    seconds: float = 0.0
    skipped: list[Skipped] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def tokens_per_second(self) -> float:
        return self.tokens / self.seconds if self.seconds > 0 else 0.0


# ---------------------------------------------------------------------------------------------
# Reading


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


def _chunks(items: Iterable[Item], chunk_chars: int, stop_at_skip: bool) -> Iterator[list[Item]]:
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


# ---------------------------------------------------------------------------------------------
# Tagging


def tokenizer_settings(meta: dict[str, Any]) -> TokenizerSettings:
    """The tokenizer settings stored in a model's metadata (defaults for models without any)."""
    return TokenizerSettings.from_dict(meta.get("tokenizer", {}))


@dataclass
class _Analysed:
    """A document cut into sentences: tokens with the character offsets of each."""

    doc: Document
    tokens: list[list[str]]
    starts: list[list[int]]
    ends: list[list[int]]


@dataclass
class TaggedDocument:
    document: Document
    spans: list[TaggedSpan]  # every span found, before `min_score` filtering
    token_spans: list[list[tuple[str, int, int, float]]]  # per sentence, token indices
    analysed: _Analysed


@dataclass
class _ChunkResult:
    text: str
    documents: int
    sentences: int
    tokens: int
    spans: int
    review: int
    skipped: list[Skipped]


class _Engine:
    """The work done on one chunk: tokenise, tag, score, format. Runs in each worker process."""

    def __init__(self, tagger: TrainedTagger, options: TagOptions) -> None:
        self.tagger = tagger
        self.options = options
        settings = tokenizer_settings(tagger.meta)
        if options.max_sentence_tokens is not None:
            settings = replace(settings, max_sentence_tokens=options.max_sentence_tokens)
        self.settings = settings
        self.output_scheme = normalise_scheme_name(options.scheme or tagger.input_scheme)

    def analyse(self, doc: Document) -> _Analysed | Skipped:
        limit = self.settings.max_sentence_tokens
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
                    f"a sentence of {len(tokens)} tokens is longer than "
                    f"max_sentence_tokens={limit}",
                )
            starts, position = [], 0
            for token in tokens:
                starts.append(position)
                position += len(token) + 1
            ends = [s + len(t) for s, t in zip(starts, tokens, strict=True)]
            return _Analysed(doc, [tokens], [starts], [ends])
        sentences: list[TextSentence] = split_sentences(doc.text, self.settings)
        analysed = _Analysed(doc, [], [], [])
        for sentence in sentences:
            if sentence.cut:
                line = doc.line
                if doc.record is None:  # a text file: count its lines; a jsonl text is one line
                    line += doc.text.count("\n", 0, sentence.start)
                return Skipped(
                    doc.source,
                    line,
                    f"a sentence longer than max_sentence_tokens={limit} tokens starts at "
                    f"character {sentence.start} of the document",
                )
            analysed.tokens.append([t.text for t in sentence.tokens])
            analysed.starts.append([t.start for t in sentence.tokens])
            analysed.ends.append([t.end for t in sentence.tokens])
        return analysed

    def tag(self, items: Sequence[Item]) -> list[TaggedDocument | Skipped]:
        """Tag the documents of one chunk together (batched by length across documents)."""
        prepared = [item if isinstance(item, Skipped) else self.analyse(item) for item in items]
        analysed = [a for a in prepared if isinstance(a, _Analysed)]
        token_lists = [t for a in analysed for t in a.tokens]
        rows = None
        if self.tagger.needs_columns:
            # Column documents are one sentence each; anything else has no columns to give.
            for a in analysed:
                if a.doc.sentence is None:
                    raise self.tagger.features.refusal(a.doc.source)  # type: ignore[union-attr]
            rows = [a.doc.sentence.rows for a in analysed]  # type: ignore[union-attr]
        scored = iter(
            self.tagger.predict_scored_spans(token_lists, self.options.batch_size, rows=rows)
        )
        results: list[TaggedDocument | Skipped] = []
        for entry in prepared:
            if isinstance(entry, Skipped):
                results.append(entry)
                continue
            text = entry.doc.text
            spans: list[TaggedSpan] = []
            per_sentence = []
            for starts, ends in zip(entry.starts, entry.ends, strict=True):
                found = next(scored)
                per_sentence.append(found)
                for label, first, last, score in found:
                    start, end = starts[first], ends[last - 1]
                    spans.append(TaggedSpan(start, end, label, text[start:end], score))
            results.append(TaggedDocument(entry.doc, spans, per_sentence, entry))
        return results

    def run(self, items: Sequence[Item]) -> _ChunkResult:
        options = self.options
        parts: list[str] = []
        result = _ChunkResult("", 0, 0, 0, 0, 0, [])
        for entry in self.tag(items):
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
            kept = [s for s in entry.spans if s.score >= options.min_score]
            result.documents += 1
            result.sentences += len(entry.analysed.tokens)
            result.tokens += sum(len(t) for t in entry.analysed.tokens)
            result.spans += len(kept)
            result.review += any(s.score < options.review_below for s in entry.spans)
        result.text = "".join(parts)
        return result

    def format(self, entry: TaggedDocument) -> str:
        options = self.options
        doc = entry.document
        kept = [s for s in entry.spans if s.score >= options.min_score]
        if options.output_format == "jsonl":
            record: dict[str, Any] = (
                {"id": doc.id} if doc.record is None or "id" not in doc.record else {}
            )
            record.update(doc.record if doc.record is not None else {"text": doc.text})
            record["spans"] = [s.to_dict() for s in kept]
            record["review"] = any(s.score < options.review_below for s in entry.spans)
            return json.dumps(record, ensure_ascii=False) + "\n"
        if options.output_format == "table":
            name = _table_field(doc.id)
            return "".join(
                f"{name}\t{s.start}\t{s.end}\t{_table_field(s.label)}\t"
                f"{round(s.score, SCORE_DIGITS)}\t{_table_field(s.text)}\n"
                for s in kept
            )
        parts = []
        if doc.sentence is None:
            parts.append(f"-DOCSTART- {_table_field(doc.id)}\n\n")
        for tokens, found in zip(entry.analysed.tokens, entry.token_spans, strict=True):
            chosen = [(t, a, b) for t, a, b, score in found if score >= options.min_score]
            labels = spans_to_tags(chosen, len(tokens), self.output_scheme)
            if doc.sentence is not None:
                sentence = doc.sentence.with_labels(labels)
            else:
                sentence = Sentence.from_tokens(tokens, labels)
            parts.append(format_sentence(sentence))
        return "".join(parts)


def _table_field(value: Any) -> str:
    text = value if isinstance(value, str) else json.dumps(value, ensure_ascii=False)
    return text.translate(_TABLE_ESCAPES)


# Worker processes: each holds one engine, built once by the pool's initializer.
_WORKER: _Engine | None = None
_WORKER_FAILURE: BaseException | None = None


def _start_worker(model: str, options: TagOptions) -> None:
    global _WORKER, _WORKER_FAILURE
    try:
        import torch

        from tagger.apply.tagger import load_trained

        torch.set_num_threads(options.threads or 1)
        _WORKER = _Engine(load_trained(model), options)
    except BaseException as error:  # a failing initializer would be restarted forever
        _WORKER_FAILURE = error


def _run_in_worker(items: list[Item]) -> _ChunkResult:
    if _WORKER is None:
        raise TaggerError(f"the tagging worker could not start: {_WORKER_FAILURE}")
    return _WORKER.run(items)


def _pooled(
    model: str, options: TagOptions, chunks: Iterator[list[Item]]
) -> Iterator[_ChunkResult]:
    """Chunk results in input order from a pool of worker processes.

    Pool.imap would read the whole input ahead into its task queue; a bounded window of
    submitted chunks keeps memory flat and still keeps every worker busy.
    """
    # spawn, not fork: a forked child of a process that has used OpenMP threads can hang.
    context = multiprocessing.get_context("spawn")
    window = 2 * options.workers
    with context.Pool(options.workers, _start_worker, (model, options)) as pool:
        pending: deque[Any] = deque()
        for chunk in chunks:
            pending.append(pool.apply_async(_run_in_worker, (chunk,)))
            if len(pending) >= window:
                yield pending.popleft().get()
        while pending:
            yield pending.popleft().get()


def tag_files(
    model: str | Path,
    inputs: Sequence[str | Path],
    out: str | Path,
    options: TagOptions = TagOptions(),
    progress: Callable[[TagSummary], None] | None = None,
) -> TagSummary:
    """Tag every document of `inputs` ("-" is standard input) with the model file `model` and
    write them to `out` ("-" is standard output) in `options.output_format`, in input order.

    The output file appears only when the run completes. Raises DataError at the first bad item
    when `options.on_error` is "stop"; returns the summary otherwise.
    """
    import torch

    from tagger.apply.tagger import load_trained

    started = time.monotonic()
    tagger = load_trained(model)  # also checks the model file before any worker starts
    if tagger.features is not None and tagger.needs_columns:
        for path in inputs or [STDIO]:
            kind = (
                detect_input_format(path)
                if options.input_format == "auto"
                else options.input_format
            )
            if kind != "columns":
                name = "<stdin>" if str(path) == STDIO else str(path)
                raise tagger.features.refusal(f"{name} ({kind} input)")
    engine = _Engine(tagger, options)
    summary = TagSummary()
    items = read_documents(inputs, options.input_format, options.token_column, summary.notes)
    chunks = _chunks(items, options.chunk_chars, stop_at_skip=options.on_error == "stop")
    if options.workers > 1:
        results: Iterator[_ChunkResult] = _pooled(str(model), options, chunks)
    else:
        if options.threads:
            torch.set_num_threads(options.threads)
        results = (engine.run(chunk) for chunk in chunks)
    with closing(results), atomic_output(out, "w") as handle:
        if options.output_format == "table":
            handle.write(TABLE_HEADER)
        for result in results:
            if result.skipped and options.on_error == "stop":
                raise result.skipped[0].error()
            handle.write(result.text)
            summary.documents += result.documents
            summary.sentences += result.sentences
            summary.tokens += result.tokens
            summary.spans += result.spans
            summary.review += result.review
            summary.skipped.extend(result.skipped)
            summary.seconds = time.monotonic() - started
            if progress is not None:
                progress(summary)
    summary.seconds = time.monotonic() - started
    return summary


# ---------------------------------------------------------------------------------------------
# The Python interface


class DocumentTagger:
    """A model loaded for tagging raw texts; `tag` gives the spans the `tag` command writes."""

    def __init__(self, tagger: TrainedTagger, options: TagOptions = TagOptions()) -> None:
        self.tagger = tagger
        self.options = options
        self._engine = _Engine(tagger, options)

    @classmethod
    def load(cls, path: str | Path, threads: int | None = None) -> DocumentTagger:
        from tagger.apply.tagger import load_trained

        if threads:
            import torch

            torch.set_num_threads(threads)
        return cls(load_trained(path))

    @property
    def settings(self) -> TokenizerSettings:
        """The tokenizer settings the model was trained with."""
        return self._engine.settings

    def tokenize(self, text: str) -> list[TextSentence]:
        """The sentences and tokens the tagger sees in `text`."""
        return split_sentences(text, self.settings)

    def tag(self, texts: Iterable[str], min_score: float = 0.0) -> list[list[TaggedSpan]]:
        """Spans per text, in order; texts are tagged in chunks as the command does.

        Raises DataError for a text holding a sentence longer than max_sentence_tokens, and
        FeatureInputError for a model that reads extra input columns (raw text has none).
        """
        if self.tagger.features is not None and self.tagger.needs_columns:
            raise self.tagger.features.refusal("raw text")
        docs = (Document(i, text, f"text {i}", 1) for i, text in enumerate(texts))
        found: list[list[TaggedSpan]] = []
        for chunk in _chunks(docs, self.options.chunk_chars, stop_at_skip=False):
            for entry in self._engine.tag(chunk):
                if isinstance(entry, Skipped):
                    raise DataError(entry.message, entry.source)
                found.append([s for s in entry.spans if s.score >= min_score])
        return found


def tokenize_files(
    inputs: Sequence[str | Path],
    out: str | Path,
    settings: TokenizerSettings = TokenizerSettings(),
    input_format: str = "auto",
) -> list[str]:
    """Write the tokens the tagger sees: "token<TAB>start<TAB>end" per line, a blank line after
    each sentence, and a "-DOCSTART- ID" line before each document unless the input is one text.

    Returns notes on sentences cut at `settings.max_sentence_tokens` (which `tag` reports as bad
    input). Raises DataError at the first item that cannot be read.
    """
    if input_format == "columns" or (
        input_format == "auto" and any(detect_input_format(p) == "columns" for p in inputs)
    ):
        raise ConfigError("column files are tokenised already; tokenize reads text or jsonl")
    sources = list(inputs) or [STDIO]
    single = len(sources) == 1 and (
        input_format == "text"
        or (input_format == "auto" and detect_input_format(sources[0]) == "text")
    )
    notes: list[str] = []
    with atomic_output(out, "w") as handle:
        for item in read_documents(sources, input_format):
            if isinstance(item, Skipped):
                raise item.error()
            parts = [] if single else [f"-DOCSTART- {_table_field(item.id)}\n\n"]
            for sentence in split_sentences(item.text, settings):
                if sentence.cut:
                    line = item.line + (
                        item.text.count("\n", 0, sentence.start) if item.record is None else 0
                    )
                    notes.append(
                        f"{item.source}:{line}: a sentence longer than max_sentence_tokens="
                        f"{settings.max_sentence_tokens} tokens was cut at character "
                        f"{sentence.tokens[-1].end}; tag reports it as bad input"
                    )
                parts.extend(f"{t.text}\t{t.start}\t{t.end}\n" for t in sentence.tokens)
                parts.append("\n")
            handle.write("".join(parts))
    return notes
