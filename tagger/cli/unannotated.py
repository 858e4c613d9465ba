"""Commands that learn from unannotated text: learn-vectors, learn-char-lm."""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Annotated, Any

import typer

from tagger.apply.documents import InputFormat
from tagger.cli.common import TokenColumn, app, domain_errors, say, usable_output
from tagger.cli.help import examples
from tagger.cli.progress import duration
from tagger.cli.tagging import _document_inputs
from tagger.reports.layout import count, number

RawInputs = Annotated[
    list[Path] | None,
    typer.Argument(
        help="Unannotated text, lines, jsonl or column files (.gz too); '-' or none reads "
        "standard input."
    ),
]
TokenizerConfig = Annotated[
    Path | None,
    typer.Option(
        "--config",
        exists=True,
        dir_okay=False,
        help="The training config: its [tokenizer] settings cut the text as tagging will.",
    ),
]
RawInputFormat = Annotated[InputFormat, typer.Option(help="How to read the inputs, as for tag.")]


class LearningProgress:
    """The "read" event as a line; then, on a terminal only, a live line of the share done, the
    speed and the time left (`speed` turns an event into its speed and details)."""

    def __init__(
        self, read: Callable[[dict[str, Any]], str], speed: Callable[[dict[str, Any]], str]
    ) -> None:
        self.live = sys.stderr.isatty()
        self.last_draw = 0.0
        self.read, self.speed = read, speed

    def __call__(self, event: dict[str, Any]) -> None:
        if event["event"] == "read":
            say(self.read(event))
        elif event["event"] in ("progress", "batch") and self.live:
            if time.monotonic() - self.last_draw < 0.2 and event["done"] < 1:
                return
            self.last_draw = time.monotonic()
            done, seconds = event["done"], event["seconds"]
            left = seconds * (1 - done) / done if done > 0 else 0.0
            bar = "#" * int(20 * done)
            sys.stderr.write(
                f"\r\033[K[{bar:<20}] epoch {event['epoch']}/{event['epochs']}  "
                f"{self.speed(event)}  about {duration(left)} left"
            )
            sys.stderr.flush()

    def clear(self) -> None:
        if self.live:
            sys.stderr.write("\r\033[K")


def vectors_progress() -> LearningProgress:
    return LearningProgress(
        lambda e: (
            f"read {count(e['sentences'], 'sentence')}, {count(e['tokens'], 'token')}; "
            "learning vectors"
        ),
        lambda e: f"{number(round(e['words_per_second']))} words/s",
    )


def char_lm_progress() -> LearningProgress:
    return LearningProgress(
        lambda e: (
            f"read {count(e['sentences'], 'sentence')}, "
            f"{count(e['characters'], 'character')} to learn from "
            f"({count(e['chars_known'], 'distinct character')} kept)"
        ),
        lambda e: (
            f"loss/char {e['loss_per_char']:.3f}  {number(round(e['chars_per_second']))} chars/s"
        ),
    )


@app.command(
    "learn-vectors",
    epilog=examples(
        "tagger learn-vectors archive.txt.gz --config configs/default.toml -o a.tagvec",
        "tagger learn-vectors notes.jsonl --dim 50 --epochs 10 -o notes.tagvec",
    ),
)
def learn_vectors(
    inputs: RawInputs = None,
    out: Annotated[
        Path,
        typer.Option(
            "--out",
            "-o",
            dir_okay=False,
            help="The vectors file a config names as model.pretrained_vectors; the word2vec "
            "text format goes beside it (.txt added).",
        ),
    ] = Path("vectors.tagvec"),
    config_path: TokenizerConfig = None,
    input_format: RawInputFormat = InputFormat.AUTO,
    token_column: TokenColumn = 0,
    dim: Annotated[int, typer.Option(min=1, help="Numbers per vector.")] = 100,
    window: Annotated[int, typer.Option(min=1, help="Context words on each side.")] = 5,
    min_count: Annotated[
        int, typer.Option(min=1, help="Words seen fewer times get no row (their n-grams do).")
    ] = 3,
    epochs: Annotated[int, typer.Option(min=1, help="Passes over the text.")] = 5,
    threads: Annotated[int, typer.Option(min=1, help="Threads learning at once.")] = 2,
    seed: Annotated[int, typer.Option(min=0, help="Seed (one thread repeats exactly).")] = 1,
    buckets: Annotated[
        int, typer.Option(min=1, help="Rows for character n-grams (hashed); sizes the file.")
    ] = 80_000,
) -> None:
    """Learn word vectors (with character n-grams, so every word gets one) from raw text;
    train with them through --set model.pretrained_vectors=FILE."""
    from tagger.config import load_config
    from tagger.unannotated.vectors_file import save_vectors, save_word2vec_text
    from tagger.unannotated.word_vectors import VectorSettings, learn_word_vectors

    names = _document_inputs(inputs)
    text_out = Path(f"{out}.txt")
    usable_output(out, names or ["-"])
    usable_output(text_out, names or ["-"])
    progress = vectors_progress()
    with domain_errors():
        config = load_config(config_path)
        settings = VectorSettings(
            dim=dim,
            window=window,
            min_count=min_count,
            epochs=epochs,
            threads=threads,
            seed=seed,
            buckets=buckets,
            lowercase=config.model.lowercase,
            digits_to_zero=config.model.digits_to_zero,
        )
        tokenizer = config.tokenizer_settings()
        notes: list[str] = []
        try:
            vectors = learn_word_vectors(
                names, settings, tokenizer, input_format, token_column, progress, notes
            )
        finally:
            progress.clear()
            for note in notes:
                say(f"note: {note}")
        save_vectors(out, vectors)
        save_word2vec_text(text_out, vectors)
    summary = vectors.summary
    say(
        f"learnt {count(len(vectors.words), 'word vector')} of {vectors.dim} numbers and "
        f"{number(buckets)} n-gram rows from {count(summary['sentences'], 'sentence')}, "
        f"{count(summary['tokens'], 'token')} in {duration(summary['seconds'])}: {out} "
        f"(word2vec text: {text_out})"
    )


@app.command(
    "learn-char-lm",
    epilog=examples(
        "tagger learn-char-lm archive.txt.gz --config configs/default.toml -o a.tagclm",
        "tagger learn-char-lm archive.txt.gz -o a.tagclm --max-minutes 60 --resume",
    ),
)
def learn_char_lm(
    inputs: RawInputs = None,
    out: Annotated[
        Path,
        typer.Option(
            "--out",
            "-o",
            dir_okay=False,
            help="The model file a config names as model.char_lm; its resume state is OUT.resume.",
        ),
    ] = Path("chars.tagclm"),
    config_path: TokenizerConfig = None,
    input_format: RawInputFormat = InputFormat.AUTO,
    token_column: TokenColumn = 0,
    hidden_size: Annotated[int, typer.Option(min=1, help="Units per direction.")] = 256,
    layers: Annotated[int, typer.Option(min=1, help="Residual layers per direction.")] = 1,
    epochs: Annotated[int, typer.Option(min=1, help="Passes over the text.")] = 1,
    seq_len: Annotated[int, typer.Option(min=3, help="Characters per training piece.")] = 250,
    batch_size: Annotated[int, typer.Option(min=1, help="Pieces per step.")] = 32,
    threads: Annotated[int, typer.Option(min=1, help="Threads torch uses.")] = 1,
    seed: Annotated[int, typer.Option(min=0, help="Seed of the data order and dropout.")] = 1,
    max_minutes: Annotated[
        float, typer.Option(min=0, help="Stop after this long (0: no budget); resumable.")
    ] = 0.0,
    resume: Annotated[
        bool, typer.Option("--resume", help="Go on from OUT.resume, where a run stopped.")
    ] = False,
) -> None:
    """Learn a forward and a backward character language model from raw text; a tagger reads
    them as word features through --set model.char_lm=FILE."""
    from tagger.config import load_config
    from tagger.unannotated.char_lm_training import CharLMSettings
    from tagger.unannotated.char_lm_training import learn_char_lm as learn

    names = _document_inputs(inputs)
    usable_output(out, names or ["-"])
    progress = char_lm_progress()
    with domain_errors():
        config = load_config(config_path)
        settings = CharLMSettings(
            hidden_size=hidden_size,
            layers=layers,
            epochs=epochs,
            seq_len=seq_len,
            batch_size=batch_size,
            threads=threads,
            seed=seed,
            max_minutes=max_minutes,
        )
        try:
            learnt = learn(
                names,
                out,
                settings,
                config.tokenizer_settings(),
                input_format,
                token_column,
                resume,
                progress,
            )
        finally:
            progress.clear()
    stopped = "" if learnt["stopped"] == "finished" else f"; stopped by the {learnt['stopped']}"
    say(
        f"learnt from {count(learnt['characters'], 'character')} in "
        f"{duration(learnt['seconds'])}: held-out perplexity {learnt['held_out_perplexity']:.2f} "
        f"per character (a unigram model: {learnt['unigram_perplexity']:.2f}){stopped}: {out}"
    )
