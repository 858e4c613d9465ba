"""The `tag` pipeline: read, tokenise, tag, score and write documents, streaming and in order.

This module owns `tag_files`, its options (`TagOptions`) and its summary (`TagSummary`). The parts
it strings together each have their own module: reading the input formats
(`tagger.apply.documents`), tagging chunks of documents (`tagger.apply.engine`), the output formats
(`tagger.apply.outputs`) and the worker processes (`tagger.apply.pool`).

A model that reads extra columns tags column files only: text and jsonl inputs are refused up
front with `FeatureInputError` (the columns it learnt from are not there to read).

Streaming: each chunk of documents is tokenised, tagged and formatted, and written before the next
is read; plain text comes in pieces of about `chunk_chars` characters (`tagger.apply.plaintext`),
joined again on writing (`tagger.apply.writing`). With several workers, chunks go to a pool of
processes that each load the model once (`tagger.apply.pool`); with a cluster's address, to the
workers of that Dask scheduler (`tagger.apply.cluster`). Either way results are written in input
order, by the same writer, so the output bytes do not depend on where the chunks were tagged.

Bad input never vanishes: every item `read_documents` could not read, a sentence longer than
`max_sentence_tokens` and a token the columns output cannot hold become `Skipped` records naming
file and line (a bad piece of a plain-text document skips the whole document). With `on_error="stop"` the first one (in input order) raises DataError; with "skip"
the run goes on and the summary lists each one.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator, Sequence
from contextlib import closing
from dataclasses import dataclass, field, replace
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING

from tagger.apply.documents import INPUT_FORMATS, STDIO, Item, detect_input_format, read_documents
from tagger.apply.engine import CHUNK_CHARS, Engine, chunks
from tagger.apply.outputs import OUTPUT_FORMATS, TABLE_HEADER, ChunkResult, DocumentFormatter
from tagger.apply.pool import pooled
from tagger.apply.tagger import PREDICT_BATCH, Tagger
from tagger.apply.writing import OutputWriter, Tally
from tagger.data.atomic import atomic_output
from tagger.data.schemes import normalise_scheme_name
from tagger.errors import ConfigError
from tagger.reports.notes import RepeatedNotes

if TYPE_CHECKING:
    from tagger.apply.cluster import ClusterResults


class OnError(StrEnum):
    """What a bad input item does: stop the run at it, or skip it and go on."""

    STOP = "stop"
    SKIP = "skip"


ON_ERROR: tuple[str, ...] = tuple(f.value for f in OnError)


class Backend(StrEnum):
    """What runs the network: torch on a model file, or onnxruntime on an export file."""

    TORCH = "torch"
    ONNX = "onnx"


BACKENDS: tuple[str, ...] = tuple(b.value for b in Backend)


def load_tagger(model: str | Path, backend: str, threads: int | None) -> Tagger:
    """The tagger of ``model`` on ``backend``: `Tagger.load` of a model file, or
    `ExportedTagger.load` of an export file (imported only then; it needs no torch)."""
    if backend == Backend.ONNX:
        from tagger.apply.exported import ExportedTagger

        return ExportedTagger.load(model, threads=threads)
    return Tagger.load(model, threads=threads)


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
    batch_size: int = PREDICT_BATCH
    chunk_chars: int = CHUNK_CHARS
    workers: int = 1
    threads: int = 0  # threads per process; 0: the backend's default with one worker, else 1
    backend: str = "torch"  # one of BACKENDS
    cluster: str | None = None  # a Dask scheduler's address: its workers tag the chunks
    cluster_wait: float = 10.0  # seconds to wait for that scheduler to answer

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
        if self.backend not in BACKENDS:
            raise ConfigError(f"backend must be one of {', '.join(BACKENDS)}; got {self.backend!r}")
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
        if self.cluster is not None and self.workers > 1:
            raise ConfigError(
                "workers is for one machine; on a cluster, start as many dask workers as wanted"
            )
        if not self.cluster_wait > 0:
            raise ConfigError(f"cluster_wait must be above 0 seconds; got {self.cluster_wait!r}")
        if self.max_sentence_tokens is not None and self.max_sentence_tokens < 1:
            raise ConfigError(
                f"max_sentence_tokens must be at least 1; got {self.max_sentence_tokens!r}"
            )


@dataclass
class TagSummary(Tally):
    """What a run did (the counts of `Tally`), how long it took and remarks for people."""

    seconds: float = 0.0
    notes: list[str] = field(default_factory=list)

    @property
    def tokens_per_second(self) -> float:
        return self.tokens / self.seconds if self.seconds > 0 else 0.0


@dataclass(frozen=True)
class _TaggingJob:
    """What is done to each chunk: tag it, then write it in the output format."""

    engine: Engine
    formatter: DocumentFormatter

    def __call__(self, items: list[Item]) -> ChunkResult:
        return self.formatter.chunk(self.engine.tag(items))


def _job(tagger: Tagger, options: TagOptions) -> _TaggingJob:
    settings = tagger.tokenizer_settings
    if options.max_sentence_tokens is not None:
        settings = replace(settings, max_sentence_tokens=options.max_sentence_tokens)
    formatter = DocumentFormatter(
        options.output_format,
        normalise_scheme_name(options.scheme or tagger.input_scheme),
        options.min_score,
        options.review_below,
    )
    return _TaggingJob(Engine(tagger, settings, options.batch_size), formatter)


def _worker_job(model: str, options: TagOptions) -> _TaggingJob:
    """A worker process's job: the model loaded once, one thread unless told otherwise."""
    return _job(load_tagger(model, options.backend, options.threads or 1), options)


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
    started = time.monotonic()
    # Also checks the model file before any worker starts; the threads are this process's only
    # when it does the tagging itself.
    tagger = load_tagger(model, options.backend, options.threads if options.workers == 1 else None)
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
    job = _job(tagger, options)
    summary = TagSummary(notes=list(tagger.notes))
    input_notes = RepeatedNotes()
    items = read_documents(
        inputs,
        options.input_format,
        options.token_column,
        input_notes,
        piece_chars=options.chunk_chars,
        settings=job.engine.settings,
    )
    chunked = chunks(items, options.chunk_chars, stop_at_skip=options.on_error == "stop")
    results: Iterator[ChunkResult] | ClusterResults
    if options.cluster is not None:
        from tagger.apply.cluster import ClusterResults

        # Connects now: a wrong address fails before the output is opened. The workers may run
        # elsewhere: they are given the model's absolute path.
        where = str(Path(model).resolve())
        results = ClusterResults(
            options.cluster, where, _worker_job, (where, options), chunked, options.cluster_wait
        )
    elif options.workers > 1:
        results = pooled(options.workers, _worker_job, (str(model), options), chunked)
    else:
        results = (job(chunk) for chunk in chunked)
    with closing(results), atomic_output(out, "w") as handle:
        if options.output_format == "table":
            handle.write(TABLE_HEADER)
        writer = OutputWriter(handle, options.output_format, summary)
        try:
            for result in results:
                skipped = result.skipped
                if skipped and options.on_error == "stop":
                    raise skipped[0].error()
                writer.write(result)
                summary.seconds = time.monotonic() - started
                if progress is not None:
                    progress(summary)
        finally:
            writer.close()
    summary.seconds = time.monotonic() - started
    summary.notes += input_notes.lines()
    return summary
