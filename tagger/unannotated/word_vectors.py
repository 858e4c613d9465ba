"""Learning word vectors with subword information from unannotated text.

Skip-gram with negative sampling (Mikolov et al. 2013) over words and their character n-grams
(Bojanowski et al. 2017), learnt by gensim's FastText, whose training loop is compiled C: the
raw text is tokenised here (`tagger.unannotated.raw_text`) into a temporary one-sentence-per-line
file, which gensim then reads in its own threads. gensim is an optional dependency (the
"vectors" extra) and is imported only when vectors are learnt.
"""

from __future__ import annotations

import logging
import tempfile
import time
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np

from tagger.errors import ConfigError, DataError
from tagger.reports.notes import RepeatedNotes
from tagger.text.subword import SubwordSettings, SubwordVectors
from tagger.text.tokenizer import TokenizerSettings
from tagger.unannotated.raw_text import raw_sentences, write_sentence_lines

Progress = Callable[[dict[str, Any]], None]


@dataclass(frozen=True)
class VectorSettings:
    """What the learning of word vectors may be told (the command's options)."""

    dim: int = 100
    window: int = 5  # context words on each side
    min_count: int = 3  # words seen fewer times get no row of their own (n-grams still learn)
    epochs: int = 5
    threads: int = 2
    seed: int = 1
    buckets: int = 80_000  # n-gram hash buckets: rows of the n-gram table
    min_n: int = 3
    max_n: int = 6
    negative: int = 5  # negative samples per context word
    lowercase: bool = False
    digits_to_zero: bool = False

    def __post_init__(self) -> None:
        at_least = {"dim": 1, "window": 1, "min_count": 1, "epochs": 1, "threads": 1}
        at_least |= {"buckets": 1, "min_n": 1, "negative": 1, "seed": 0}
        for name, low in at_least.items():
            value = getattr(self, name)
            if type(value) is not int or value < low:
                raise ConfigError(f"vectors setting {name} must be a whole number >= {low}")
        if self.max_n < self.min_n or self.max_n > 32:
            raise ConfigError("vectors setting max_n must lie between min_n and 32")


def learn_word_vectors(
    inputs: Sequence[str | Path],
    settings: VectorSettings = VectorSettings(),
    tokenizer: TokenizerSettings = TokenizerSettings(),
    input_format: str = "auto",
    token_column: int = 0,
    progress: Progress | None = None,
    notes: list[str] | None = None,
) -> SubwordVectors:
    """Vectors learnt from the sentences of `inputs`, as the tagger's tokenizer cuts them.

    `progress` receives {"event": "read", "sentences", "tokens"} once the text is read, then
    {"event": "progress", "epoch", "epochs", "done" (0..1 of the whole run), "words_per_second",
    "seconds"} while learning. Remarks on the inputs go to `notes`. Raises DataError for
    unreadable or empty input.
    """
    try:
        from gensim.models import FastText
    except ImportError:
        raise ConfigError(
            "learning word vectors needs gensim: pip install 'tagger[vectors]' (or gensim)"
        ) from None
    started = time.monotonic()
    report = progress or (lambda event: None)
    names = ", ".join(str(p) for p in inputs) or "<stdin>"
    with tempfile.TemporaryDirectory(prefix="tagger-vectors-") as folder:
        corpus = Path(folder) / "sentences.txt"
        repeated = RepeatedNotes()
        sentences = raw_sentences(inputs, tokenizer, input_format, token_column, repeated)
        keys = SubwordSettings(lowercase=settings.lowercase, digits_to_zero=settings.digits_to_zero)
        size = write_sentence_lines(([keys.key(t) for t in s] for s in sentences), corpus)
        if notes is not None:
            notes.extend(repeated.lines())
        if size.tokens == 0:
            raise DataError("no words to learn from: the input holds no tokens", names)
        report({"event": "read", "sentences": size.sentences, "tokens": size.tokens})
        model = FastText(
            vector_size=settings.dim,
            window=settings.window,
            min_count=settings.min_count,
            sg=1,
            hs=0,
            negative=settings.negative,
            min_n=settings.min_n,
            max_n=settings.max_n,
            bucket=settings.buckets,
            workers=settings.threads,
            seed=settings.seed,
            epochs=settings.epochs,
        )
        model.build_vocab(corpus_file=str(corpus))
        if not model.wv.index_to_key:
            raise DataError(
                f"no word occurs {settings.min_count} times or more (vectors setting min_count)",
                names,
            )
        with _gensim_progress(settings.epochs, report, started):
            model.train(
                corpus_file=str(corpus),
                total_examples=model.corpus_count,
                total_words=model.corpus_total_words,
                epochs=settings.epochs,
            )
    wv = model.wv
    words = list(wv.index_to_key)
    counts = [int(wv.get_vecattr(word, "count")) for word in words]
    summary = {
        "sentences": size.sentences,
        "tokens": size.tokens,
        "seconds": round(time.monotonic() - started, 1),
        **asdict(settings),
    }
    return SubwordVectors(
        words,
        counts,
        np.asarray(wv.vectors, dtype=np.float32),
        np.asarray(wv.vectors_ngrams, dtype=np.float32),
        SubwordSettings(
            settings.min_n,
            settings.max_n,
            settings.buckets,
            settings.lowercase,
            settings.digits_to_zero,
        ),
        tokenizer.to_dict(),
        summary,
    )


class _ProgressRecords(logging.Handler):
    """gensim reports its progress only through logging ("EPOCH %i - PROGRESS: at %.2f%%
    examples, %.0f words/s, ..." about once a second, and a line at each epoch's end): turn
    those records into progress events."""

    def __init__(self, epochs: int, report: Progress, started: float) -> None:
        super().__init__(logging.INFO)
        self.epochs, self.report, self.started = epochs, report, started

    def emit(self, record: logging.LogRecord) -> None:
        message, args = str(record.msg), record.args
        if not isinstance(args, tuple) or not message.startswith("EPOCH %i"):
            return
        if message.startswith("EPOCH %i - PROGRESS"):  # epoch (from 0), percent, words/s
            epoch, percent, per_second = int(args[0]), float(args[1]), float(args[2])
        elif message.startswith("EPOCH %i: training on"):  # epoch, raw, effective, s, words/s
            epoch, percent, per_second = int(args[0]), 100.0, float(args[4])
        else:
            return
        epoch += 1
        self.report(
            {
                "event": "progress",
                "epoch": epoch,
                "epochs": self.epochs,
                "done": min(1.0, (epoch - 1 + percent / 100) / self.epochs),
                "words_per_second": per_second,
                "seconds": time.monotonic() - self.started,
            }
        )


class _gensim_progress:  # noqa: N801 - used as a context manager, like a function
    def __init__(self, epochs: int, report: Progress, started: float) -> None:
        self.logger = logging.getLogger("gensim.models.word2vec")
        self.handler = _ProgressRecords(epochs, report, started)
        self.level = self.logger.level

    def __enter__(self) -> None:
        self.logger.addHandler(self.handler)
        self.logger.setLevel(logging.INFO)
        self.propagate = self.logger.propagate
        self.logger.propagate = False  # gensim's own lines stay out of the user's terminal

    def __exit__(self, *exc: object) -> None:
        self.logger.removeHandler(self.handler)
        self.logger.setLevel(self.level)
        self.logger.propagate = self.propagate
