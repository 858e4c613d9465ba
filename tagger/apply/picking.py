"""Which sentences of a pool of unannotated text to annotate next: `pick_sentences`.

The pool is read as `tag` reads its inputs (`tagger.apply.documents`) and cut into sentences and
tokens as tagging cuts them (`tagger.apply.engine.Engine.analyse`, the model's tokenizer). Every
sentence gets an uncertainty (`tagger.apply.uncertainty`); the most uncertain are taken, best
first, passing over any sentence too alike to one already taken (`tagger.text.near_duplicates`),
until the batch is full. Each taken sentence comes back as a column-file `Sentence` pre-filled
with the model's labels (in the scheme of its training files) behind its trace line
(`tagger.data.pick_trace`), ready to be corrected and added to train.

The pool is read a chunk at a time; only the ``count * SPARE`` most uncertain sentences so far are
kept, so memory does not grow with the pool.
"""

from __future__ import annotations

import heapq
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.apply.documents import Document, Skipped, read_documents
from tagger.apply.engine import CHUNK_CHARS, Analysed, Engine, chunks
from tagger.apply.pick_options import LengthNorm, Measure
from tagger.apply.uncertainty import uncertainties
from tagger.data.corpus import Sentence
from tagger.data.io import input_name
from tagger.data.pick_trace import Trace
from tagger.data.schemes import spans_to_tags
from tagger.errors import DataError
from tagger.reports.layout import percent
from tagger.reports.notes import RepeatedNotes
from tagger.text.near_duplicates import THRESHOLD, DistinctPicker

if TYPE_CHECKING:
    from tagger.apply.tagger import Tagger

SPARE = 20  # candidates kept per sentence asked for, so near-duplicates passed over leave enough
# Shares of the pool unknown to the model above which its scores are said to mean little.
UNKNOWN_CHARS_WARN = 0.2  # characters never seen in training: another script
UNKNOWN_WORDS_WARN = 0.6  # words never seen in training: another language (or domain)


@dataclass(frozen=True)
class Candidate:
    """A pool sentence with its uncertainty, its best label path and where it lies."""

    score: float
    order: int  # its place in the pool: earlier sentences win ties
    tokens: list[str]
    path: list[int]
    file: str
    document: Any
    start: int
    end: int
    sentence: Sentence | None  # the column-file sentence of a column pool (its other columns)


@dataclass
class Picked:
    """What `pick_sentences` found: the sentences to annotate, best first, and about the pool."""

    sentences: list[Sentence]
    traces: list[Trace]
    pool_sentences: int
    passed_over: int  # near-duplicates of a sentence taken before them
    unknown_words: float  # share of the pool's tokens outside the model's word vocabulary
    unknown_chars: float  # share of the pool's characters outside its character vocabulary
    warnings: list[str] = field(default_factory=list)


def pick_sentences(
    tagger: Tagger,
    inputs: Sequence[str | Path],
    count: int,
    measure: Measure = Measure.ENTROPY,
    norm: LengthNorm = LengthNorm.NONE,
    threshold: float = THRESHOLD,
    input_format: str = "auto",
    token_column: int = 0,
    notes: RepeatedNotes | None = None,
    batch_size: int = 64,
) -> Picked:
    """The ``count`` pool sentences to annotate next (see the module docstring).

    Raises DataError for an input item that cannot be read (naming file and line) and for a pool
    without sentences; FeatureInputError for a model reading columns given a pool without them.
    """
    if count < 1:
        raise ValueError(f"count must be at least 1, not {count}")
    settings = tagger.tokenizer_settings
    engine = Engine(tagger, settings, batch_size)
    items = read_documents(inputs, input_format, token_column, notes, settings=settings)
    kept: list[tuple[float, int, Candidate]] = []  # a min-heap of the most uncertain so far
    keep = count * SPARE
    seen = Familiarity(tagger)
    pool = 0
    for chunk in chunks(items, CHUNK_CHARS, stop_at_skip=True):
        analysed = [_analysed(engine, item) for item in chunk]
        sentences = [
            (a, s) for a in analysed for s in range(len(a.tokens)) if a.tokens[s]
        ]  # (document, sentence index) of every non-empty sentence
        token_lists = [a.tokens[s] for a, s in sentences]
        rows = None
        if tagger.needs_columns:
            for a, _ in sentences:
                if a.doc.sentence is None:
                    raise tagger.features.refusal(a.doc.source)  # type: ignore[union-attr]
            rows = [a.doc.sentence.rows for a, _ in sentences]  # type: ignore[union-attr]
        scored = uncertainties(tagger, token_lists, measure, norm, batch_size, rows)
        for (a, s), tokens, found in zip(sentences, token_lists, scored, strict=True):
            assert found is not None  # only non-empty sentences were scored
            seen.add(tokens)
            doc = a.doc
            candidate = Candidate(
                found.score,
                pool,
                tokens,
                found.path,
                doc.source,
                doc.id,
                doc.offset + a.starts[s][0],
                doc.offset + a.ends[s][-1],
                doc.sentence,
            )
            entry = (found.score, -pool, candidate)  # score, then earlier first; never equal
            if len(kept) < keep:
                heapq.heappush(kept, entry)
            else:
                heapq.heappushpop(kept, entry)
            pool += 1
    if pool == 0:
        names = ", ".join(input_name(path) for path in inputs) or "standard input"
        raise DataError("the pool holds no sentences to pick from", names)
    ranked = [c for _, _, c in sorted(kept, key=lambda e: (e[0], e[1]), reverse=True)]
    distinct = DistinctPicker(threshold)
    taken: list[Candidate] = []
    passed_over = 0
    for candidate in ranked:
        if len(taken) == count:
            break
        if distinct.offer(candidate.tokens):
            taken.append(candidate)
        else:
            passed_over += 1
    traces = [
        Trace(rank, c.score, c.file, c.document, c.start, c.end)
        for rank, c in enumerate(taken, start=1)
    ]
    picked = [_labelled(tagger, c, trace) for c, trace in zip(taken, traces, strict=True)]
    return Picked(
        picked,
        traces,
        pool,
        passed_over,
        seen.unknown_words,
        seen.unknown_chars,
        seen.warnings(),
    )


def _analysed(engine: Engine, item: Document | Skipped) -> Analysed:
    """A document cut into sentences; an unreadable item or a too-long sentence stops the run."""
    if isinstance(item, Skipped):
        raise item.error()
    analysed = engine.analyse(item)
    if isinstance(analysed, Skipped):
        raise analysed.error()
    return analysed


def _labelled(tagger: Tagger, candidate: Candidate, trace: Trace) -> Sentence:
    """The candidate as a column-file sentence: its tokens (with the pool's other columns for a
    column pool), the model's labels in the training files' scheme, its trace line before it."""
    spans = tagger.label_ids_to_spans(candidate.path)
    labels = spans_to_tags(spans, len(candidate.tokens), tagger.input_scheme)
    if candidate.sentence is not None:
        sentence = candidate.sentence.with_labels(labels)
    else:
        sentence = Sentence.from_tokens(candidate.tokens, labels)
    return replace(sentence, prefix_lines=(trace.line(),))


class Familiarity:
    """How much of the pool the model has seen in training: tokens outside its word vocabulary
    and characters outside its character vocabulary, counted over the whole pool."""

    def __init__(self, tagger: Tagger) -> None:
        self.vocabs = tagger.vocabs
        self.tokens = self.unknown_tokens = 0
        self.chars = self.unknown_char_count = 0

    def add(self, tokens: Sequence[str]) -> None:
        words, chars = self.vocabs.words, self.vocabs.chars
        for token in tokens:
            self.tokens += 1
            self.unknown_tokens += self.vocabs.word_key(token) not in words
            self.chars += len(token)
            self.unknown_char_count += sum(c not in chars for c in token)

    @property
    def unknown_words(self) -> float:
        return self.unknown_tokens / self.tokens if self.tokens else 0.0

    @property
    def unknown_chars(self) -> float:
        return self.unknown_char_count / self.chars if self.chars else 0.0

    def warnings(self) -> list[str]:
        """Why the scores may mean little: a pool in another script or language."""
        if self.unknown_chars > UNKNOWN_CHARS_WARN:
            return [
                f"{percent(self.unknown_chars, 0)}% of the pool's characters never occur in the "
                "training text: is the pool in another script? Uncertainty on text unlike the "
                "training text ranks little but its strangeness"
            ]
        if self.unknown_words > UNKNOWN_WORDS_WARN:
            return [
                f"{percent(self.unknown_words, 0)}% of the pool's words never occur in the "
                "training text: is the pool in another language or domain? Uncertainty on text "
                "unlike the training text ranks little but its strangeness"
            ]
        return []
