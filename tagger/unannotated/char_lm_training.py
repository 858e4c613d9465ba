"""Learning a forward and a backward character language model from unannotated text.

The text's sentences (cut as tagging cuts them) become one stream of character ids, each sentence
between boundary marks as `CharLMSpec.encode` lays it out, cut into pieces of `seq_len`
characters; an epoch visits the pieces in an order drawn from (seed, epoch). Plain SGD with
gradient clipping, as published for character language models used as tagging features (Akbik,
Blythe & Vollgraf 2018: learning rate 20, clipping 0.25; from memory). The last 1% of the
sentences are held out: their perplexity, beside that of a unigram model of the training
characters, says whether the model learnt anything.

A resume state (weights, where the run is, the random generator) is written every few minutes,
at each epoch's end and when the time budget ends the run, beside the output (OUT.resume);
`resume=True` continues from it exactly where it was, with the same data order and dropout draws.
A run the budget stopped still writes a usable model; a finished one removes the resume state.
"""

from __future__ import annotations

import math
import random
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch

from tagger.errors import ConfigError, DataError
from tagger.network.char_lm import CharLanguageModel
from tagger.text.char_context import BOUNDARY, CharLMSpec
from tagger.text.tokenizer import TokenizerSettings
from tagger.unannotated.char_lm_file import load_char_lm, save_char_lm
from tagger.unannotated.raw_text import raw_sentences

Progress = Callable[[dict[str, Any]], None]
HELD_OUT = 0.01  # share of the sentences (the last ones) kept out of training


@dataclass(frozen=True)
class CharLMSettings:
    hidden_size: int = 256
    layers: int = 1
    char_dim: int = 64
    cell: str = "lstm"
    dropout: float = 0.1
    seq_len: int = 250
    batch_size: int = 32
    epochs: int = 1
    learning_rate: float = 20.0
    clip_norm: float = 0.25
    max_chars: int = 300  # characters of the model's vocabulary, most frequent first
    min_char_count: int = 2  # rarer characters are read as unknown
    seed: int = 1
    threads: int = 1
    checkpoint_minutes: float = 5.0
    max_minutes: float = 0.0  # 0: no budget

    def __post_init__(self) -> None:
        for name in ("hidden_size", "layers", "char_dim", "seq_len", "batch_size", "epochs"):
            value = getattr(self, name)
            if type(value) is not int or value < 1:
                raise ConfigError(f"character model setting {name} must be a whole number >= 1")
        if self.seq_len < 3:
            raise ConfigError("character model setting seq_len must be 3 or more")
        if not 0 <= self.dropout < 1 or not self.learning_rate > 0 or not self.clip_norm > 0:
            raise ConfigError("character model dropout must lie in [0, 1), rates above 0")


def resume_path(out: str | Path) -> Path:
    return Path(f"{out}.resume")


def char_vocabulary(sentences: Sequence[Sequence[str]], settings: CharLMSettings) -> list[str]:
    counts: Counter[str] = Counter()
    for tokens in sentences:
        counts.update(" ".join(tokens))
    frequent = [
        ch
        for ch, n in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))
        if n >= settings.min_char_count
    ][: settings.max_chars]
    return frequent if " " in frequent else [" ", *frequent[: settings.max_chars - 1]]


def character_stream(spec: CharLMSpec, sentences: Sequence[Sequence[str]]) -> np.ndarray:
    """One array of the sentences' ids, neighbours sharing their boundary mark."""
    parts = [np.array([BOUNDARY], dtype=np.int64)]
    for tokens in sentences:
        ids, _, _ = spec.encode(tokens)
        parts.append(np.asarray(ids[1:], dtype=np.int64))
    return np.concatenate(parts)


def pieces(stream: np.ndarray, seq_len: int) -> np.ndarray:
    """(N, seq_len) consecutive pieces (neighbours overlap by one character, so every character
    but the stream's ends is predicted from both sides); a short tail is padded."""
    step = seq_len - 1
    n = max(1, math.ceil((len(stream) - 1) / step))
    out = np.zeros((n, seq_len), dtype=np.int64)
    for i in range(n):
        chunk = stream[i * step : i * step + seq_len]
        out[i, : len(chunk)] = chunk
    return out


def perplexity(model: CharLanguageModel, rows: np.ndarray, batch_size: int = 64) -> float:
    """Per-character perplexity of both directions over the pieces (evaluation mode)."""
    was = model.training
    model.eval()
    total, count = 0.0, 0
    with torch.no_grad():
        for first in range(0, len(rows), batch_size):
            ids = torch.from_numpy(rows[first : first + batch_size])
            loss, n = model.loss(ids, (ids != 0).sum(1))
            total, count = total + float(loss), count + n
    model.train(was)
    return math.exp(total / max(count, 1))


def unigram_perplexity(train: np.ndarray, rows: np.ndarray, vocab_size: int) -> float:
    """The perplexity of predicting every held-out character from training frequencies alone
    (add-one smoothed), over the characters the language model predicts."""
    counts = np.bincount(train[train != 0], minlength=vocab_size).astype(np.float64) + 1
    counts[0] = 0  # padding is never predicted
    log_p = np.log(np.maximum(counts, 1) / counts.sum())  # padding's entry is never read
    lengths = (rows != 0).sum(1)
    nll, n = 0.0, 0
    for row, length in zip(rows, lengths, strict=True):
        ids = row[:length]
        # left to right predicts ids[1:], right to left ids[:-1]
        nll -= log_p[ids[1:]].sum() + log_p[ids[:-1]].sum()
        n += 2 * (length - 1)
    return math.exp(nll / max(n, 1))


def learn_char_lm(
    inputs: Sequence[str | Path],
    out: str | Path,
    settings: CharLMSettings = CharLMSettings(),
    tokenizer: TokenizerSettings = TokenizerSettings(),
    input_format: str = "auto",
    token_column: int = 0,
    resume: bool = False,
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Learn the language models, write them to `out`, and return the summary stored in it."""
    report = progress or (lambda event: None)
    started = time.monotonic()
    names = ", ".join(str(p) for p in inputs) or "<stdin>"
    sentences = list(raw_sentences(inputs, tokenizer, input_format, token_column))
    if not any(sentences):
        raise DataError("no text to learn from: the input holds no tokens", names)
    held = max(1, int(len(sentences) * HELD_OUT)) if len(sentences) > 1 else 0
    train_sentences, held_sentences = sentences[: len(sentences) - held], sentences[-held:]
    if settings.threads:
        torch.set_num_threads(settings.threads)
    torch.manual_seed(settings.seed)
    spec = CharLMSpec(
        char_vocabulary(train_sentences, settings),
        settings.char_dim,
        settings.hidden_size,
        settings.layers,
        settings.cell,
    )
    model = CharLanguageModel(spec, settings.dropout)
    epoch, batch_index, used_seconds = 0, 0, 0.0
    state_file = resume_path(out)
    if resume:
        epoch, batch_index, used_seconds = _resume(state_file, model, spec, settings, tokenizer)
    train_rows = pieces(character_stream(spec, train_sentences), settings.seq_len)
    held_rows = pieces(character_stream(spec, held_sentences or sentences[-1:]), settings.seq_len)
    report(
        {
            "event": "read",
            "sentences": len(sentences),
            "characters": int((train_rows != 0).sum()),
            "chars_known": len(spec.chars),
        }
    )
    optimizer = torch.optim.SGD(model.parameters(), lr=settings.learning_rate)
    batches_per_epoch = math.ceil(len(train_rows) / settings.batch_size)
    total_batches = batches_per_epoch * settings.epochs
    last_save = time.monotonic()
    stopped = "finished"
    chars_here = 0  # characters trained on by this process (speed)
    model.train()
    while epoch < settings.epochs:
        order = list(range(len(train_rows)))
        random.Random(settings.seed * 1000 + epoch).shuffle(order)
        while batch_index < batches_per_epoch:
            chosen = order[
                batch_index * settings.batch_size : (batch_index + 1) * settings.batch_size
            ]
            ids = torch.from_numpy(train_rows[chosen])
            loss, n = model.loss(ids, (ids != 0).sum(1))
            optimizer.zero_grad(set_to_none=True)
            (loss / max(n, 1)).backward()
            torch.nn.utils.clip_grad_norm_(model.parameters(), settings.clip_norm)
            optimizer.step()
            batch_index += 1
            chars_here += int((ids != 0).sum())
            seconds = used_seconds + time.monotonic() - started
            done = (epoch * batches_per_epoch + batch_index) / total_batches
            report(
                {
                    "event": "batch",
                    "epoch": epoch + 1,
                    "epochs": settings.epochs,
                    "done": done,
                    "loss_per_char": loss.item() / max(n, 1),
                    "chars_per_second": chars_here / max(time.monotonic() - started, 1e-9),
                    "seconds": seconds,
                }
            )
            if settings.max_minutes and seconds > 60 * settings.max_minutes:
                stopped = f"time budget of {settings.max_minutes:g} minutes"
                _save_state(state_file, model, tokenizer, settings, (epoch, batch_index, seconds))
                break
            if time.monotonic() - last_save > 60 * settings.checkpoint_minutes:
                position = (epoch, batch_index, seconds)
                _save_state(state_file, model, tokenizer, settings, position)
                last_save = time.monotonic()
        if stopped != "finished":
            break
        epoch, batch_index = epoch + 1, 0
        seconds = used_seconds + time.monotonic() - started
        if epoch < settings.epochs:
            _save_state(state_file, model, tokenizer, settings, (epoch, 0, seconds))
            last_save = time.monotonic()
    seconds = used_seconds + time.monotonic() - started
    learnt = {
        "sentences": len(sentences),
        "held_out_sentences": held,
        "characters": int((train_rows != 0).sum()),
        "seconds": round(seconds, 1),
        "stopped": stopped,
        "held_out_perplexity": round(perplexity(model, held_rows), 4),
        "unigram_perplexity": round(unigram_perplexity(train_rows, held_rows, spec.vocab_size), 4),
        **asdict(settings),
    }
    save_char_lm(out, model, tokenizer.to_dict(), learnt)
    if stopped == "finished":
        state_file.unlink(missing_ok=True)
    return learnt


def _save_state(
    path: Path,
    model: CharLanguageModel,
    tokenizer: TokenizerSettings,
    settings: CharLMSettings,
    position: tuple[int, int, float],
) -> None:
    epoch, batch, seconds = position
    where = {"epoch": epoch, "batch": batch, "seconds": seconds, "settings": asdict(settings)}
    save_char_lm(path, model, tokenizer.to_dict(), {}, where, torch.get_rng_state())


RESUMABLE = ("threads", "checkpoint_minutes", "max_minutes")  # a resumed run may change these


def _same_run(stored: object, settings: CharLMSettings) -> bool:
    """Were the stored settings those of `settings`, apart from what does not change the model
    (threads, how often the state is saved, the time budget)?"""
    if not isinstance(stored, dict):
        return False
    ours = asdict(settings)
    return {k: v for k, v in stored.items() if k not in RESUMABLE} == {
        k: v for k, v in ours.items() if k not in RESUMABLE
    }


def _resume(
    path: Path,
    model: CharLanguageModel,
    spec: CharLMSpec,
    settings: CharLMSettings,
    tokenizer: TokenizerSettings,
) -> tuple[int, int, float]:
    if not path.exists():
        raise DataError("nothing to resume: no resume state beside the output", str(path))
    stored, meta, extra = load_char_lm(path, resume_state=True)
    position = meta.get("position") or {}
    if not _same_run(position.get("settings"), settings) or stored.spec.to_dict() != spec.to_dict():
        raise ConfigError(
            f"{path}: the resume state was made with other settings or text; run without "
            "--resume to start again"
        )
    if meta["tokenizer"] != tokenizer.to_dict():
        raise ConfigError(f"{path}: the resume state was made with other tokenizer settings")
    model.load_state_dict(stored.state_dict())
    if "rng_state" in extra:
        torch.set_rng_state(extra["rng_state"])
    return int(position["epoch"]), int(position["batch"]), float(position["seconds"])
