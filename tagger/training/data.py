"""The sentences a run trains and chooses its best epoch on.

Training reads its files here (`read_training_files`) or takes sentences from memory; either way
`prepare_sentences` checks every sentence (labels that are span tags, no more tokens than
data.max_sentence_tokens), decides the input scheme, holds dev out of train when no dev set is
given, and takes the data's fingerprint, which a checkpoint carries so that a run is not resumed
on other data.

A run that could not learn or choose anything is refused before it starts, with what is missing:
no training sentence left after the dev hold-out, no span (entity type) in the training labels, a
dev set without sentences or without spans (dev F1 would be 0 every epoch and choose nothing).
"""

from __future__ import annotations

import hashlib
import json
import random
from collections.abc import Sequence
from dataclasses import dataclass

from tagger.config import Config
from tagger.data.corpus import ColumnFormat, Sentence, read_sentences
from tagger.data.guards import check_sentences
from tagger.data.schemes import Span, detect_scheme, tags_to_spans
from tagger.errors import ConfigError, DataError

TRAIN_IN_MEMORY = "the training sentences"  # named in messages where a file name would be
DEV_IN_MEMORY = "the dev sentences"


@dataclass
class PreparedData:
    train: list[Sentence]
    dev: list[Sentence]
    input_scheme: str
    train_spans: list[list[Span]]
    dev_spans: list[list[Span]]
    fingerprint: str
    notes: list[str]
    train_source: str  # the training file, or TRAIN_IN_MEMORY: where messages point
    dev_source: str  # the dev file, the training source when dev was held out, or DEV_IN_MEMORY
    dev_held_out: bool = False  # was dev held out of train (no dev set given)?


def column_format(config: Config) -> ColumnFormat:
    data = config.data
    delimiter = None if data.delimiter == "auto" else data.delimiter
    return ColumnFormat(
        delimiter=delimiter,
        token_column=data.token_column,
        label_column=data.label_column,
        encoding=data.encoding,
    )


def read_training_files(config: Config) -> tuple[list[Sentence], list[Sentence] | None]:
    """The sentences of data.train, and of data.dev when it is set (None otherwise)."""
    data = config.data
    if not data.train:
        raise ConfigError("no training file: set data.train in the config or pass --train")
    fmt = column_format(config)
    train = read_sentences(data.train, fmt)
    if not train:
        raise DataError("the training file holds no sentences", data.train)
    return train, read_sentences(data.dev, fmt) if data.dev else None


def prepare_data(config: Config) -> PreparedData:
    """Read the train (and dev) files named in the config and prepare them."""
    train, dev = read_training_files(config)
    return prepare_sentences(config, train, dev, config.data.train, config.data.dev or None)


def prepare_sentences(
    config: Config,
    train: Sequence[Sentence],
    dev: Sequence[Sentence] | None = None,
    train_source: str = TRAIN_IN_MEMORY,
    dev_source: str | None = None,
) -> PreparedData:
    """Choose the input scheme and hold out dev from train if `dev` is None."""
    if not train:
        raise DataError("no training sentences", train_source)
    limit = config.data.max_sentence_tokens
    check_sentences(list(train), train_source, limit)
    notes: list[str] = []
    if dev is None:
        kept, held, note = hold_out_dev(train, config)
        notes.append(note)
        dev_source = train_source
        if not kept:
            raise DataError(
                f"no training sentence is left once dev is held out of the {len(train):,} there "
                f"are (data.dev_fraction={config.data.dev_fraction}, no dev file); give a dev "
                "file (--dev) or more training sentences",
                train_source,
            )
    else:
        dev_source = dev_source or DEV_IN_MEMORY
        if not dev:
            raise DataError(
                "the dev set holds no sentences, so dev F1 could not choose the best epoch; "
                "give a dev file with sentences, or none (a part of train is then held out)",
                dev_source,
            )
        check_sentences(list(dev), dev_source, limit)
        kept, held = list(train), list(dev)
    fingerprint = data_fingerprint(train, dev, config.model.lexicons)
    guess = detect_scheme(s.labels for s in kept)
    input_scheme = guess.candidates[0]
    if len(guess.candidates) > 1:
        notes.append(f"input scheme read as {input_scheme}: {guess.note}")
    train_spans = [tags_to_spans(s.labels, input_scheme) for s in kept]
    dev_spans = [tags_to_spans(s.labels, input_scheme) for s in held]
    notes.extend(_check_types(train_spans, dev_spans, train_source, dev_source, dev is None))
    return PreparedData(
        kept,
        held,
        input_scheme,
        train_spans,
        dev_spans,
        fingerprint,
        notes,
        train_source,
        dev_source,
        dev_held_out=dev is None,
    )


def _span_types(spans: Sequence[list[Span]]) -> set[str]:
    return {span[0] for sentence in spans for span in sentence}


def _check_types(
    train_spans: Sequence[list[Span]],
    dev_spans: Sequence[list[Span]],
    train_source: str,
    dev_source: str,
    held_out: bool,
) -> list[str]:
    """Refuse training labels without spans and a dev set without spans; a note (as a list)
    when train and dev share no entity type, as dev F1 then says nothing about what was learnt."""
    train_types, dev_types = _span_types(train_spans), _span_types(dev_spans)
    if not train_types:
        raise DataError(
            "the training labels hold no spans (every label is O), so there is no entity type "
            "to learn; is the label column the right one? (tagger check shows what each column "
            "holds)",
            train_source,
        )
    if not dev_types:
        what = (
            f"the dev set held out of it ({len(dev_spans):,} "
            f"sentence{'' if len(dev_spans) == 1 else 's'}) holds no spans (every label is O), "
            "so dev F1 would be 0 every epoch and choose nothing; give a dev file (--dev) or "
            "raise data.dev_fraction"
            if held_out
            else "the dev labels hold no spans (every label is O), so dev F1 would be 0 every "
            "epoch and choose nothing; give a dev file annotated like the training file"
        )
        raise DataError(what, dev_source)
    if not train_types & dev_types:
        return [
            f"train and dev share no entity type (train: {', '.join(sorted(train_types))}; dev: "
            f"{', '.join(sorted(dev_types))}): dev F1 will be 0 and cannot tell epochs apart; "
            "is the dev file the one meant for this training file?"
        ]
    return []


def hold_out_dev(
    train: Sequence[Sentence], config: Config
) -> tuple[list[Sentence], list[Sentence], str]:
    """(train kept, dev held out, a note saying what was held out).

    When the sentences come from more than one document (-DOCSTART- lines), whole documents are
    held out, so that no document has sentences on both sides: sentences of one document share
    names and wording, and a dev set that shares them scores too high. Documents are drawn until
    the held-out sentences reach data.dev_fraction, always leaving one to train on."""
    data = config.data
    seed = config.train.seed
    target = max(1, round(len(train) * data.dev_fraction))
    how = "the last" if data.dev_holdout == "last" else f"a random draw (seed {seed}) of"
    documents = sorted({s.document for s in train})
    if len(documents) > 1:
        if data.dev_holdout == "random":
            random.Random(seed).shuffle(documents)
        sizes = {d: 0 for d in documents}
        for sentence in train:
            sizes[sentence.document] += 1
        held_documents: set[int] = set()
        held_sentences = 0
        for document in reversed(documents[1:]):  # the first one always stays in train
            held_documents.add(document)
            held_sentences += sizes[document]
            if held_sentences >= target:
                break
        dev = [s for s in train if s.document in held_documents]
        kept = [s for s in train if s.document not in held_documents]
        note = (
            f"no dev file: held out {how} {len(held_documents)} of {len(documents)} documents, "
            f"{len(dev)} of {len(train)} training sentences (data.dev_fraction={data.dev_fraction}; "
            "whole documents, so that no document is split between train and dev) "
            "to choose the best epoch"
        )
        return kept, dev, note
    order = list(range(len(train)))
    if data.dev_holdout == "random":
        random.Random(seed).shuffle(order)
    held = set(order[-target:])
    dev = [s for i, s in enumerate(train) if i in held]
    kept = [s for i, s in enumerate(train) if i not in held]
    note = (
        f"no dev file: held out {how} {len(dev)} of {len(train)} training sentences "
        f"(data.dev_fraction={data.dev_fraction}) to choose the best epoch"
    )
    return kept, dev, note


def data_fingerprint(
    train: Sequence[Sentence], dev: Sequence[Sentence] | None, lexicons: Sequence[str]
) -> str:
    """A hash of what a run learns from: every column of every sentence with its document, which
    of them are the tokens and labels, whether dev was given, and the lexicon files' bytes."""
    digest = hashlib.sha256()
    for part in (train, dev):
        digest.update(b"\x00no dev\n" if part is None else f"\x00{len(part)}\n".encode())
        for sentence in part or ():
            line = [sentence.document, sentence.token_column, sentence.label_column, sentence.rows]
            digest.update(json.dumps(line, ensure_ascii=False).encode())
            digest.update(b"\n")
    # Lexicons are training data too: a changed list must not resume an old checkpoint.
    for path in lexicons:
        content = hashlib.sha256()  # one digest a file: files cannot run into each other
        try:
            with open(path, "rb") as handle:
                while chunk := handle.read(1 << 20):
                    content.update(chunk)
        except OSError as error:  # worded as the lexicon reader words it
            raise DataError(f"cannot read the lexicon: {error.strerror}", path) from None
        digest.update(b"\x00lexicon " + content.digest())
    return digest.hexdigest()
