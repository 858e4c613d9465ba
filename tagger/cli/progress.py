"""Progress shown on stderr while training and tagging run."""

from __future__ import annotations

import sys
import time
from typing import Any

from tagger.cli.common import say
from tagger.reports.check import tokenizer_fit_finding
from tagger.reports.layout import count, labelled, number


def duration(seconds: float) -> str:
    minutes, seconds = divmod(round(seconds), 60)
    return f"{minutes}m{seconds:02d}s" if minutes else f"{seconds}s"


class TrainingProgress:
    """A one-line progress bar on a terminal, plain lines per epoch otherwise."""

    def __init__(self) -> None:
        self.live = sys.stderr.isatty()
        self.started = time.monotonic()
        self.last_draw = 0.0

    def __call__(self, event: dict[str, Any]) -> None:
        kind = event["event"]
        if kind == "start":
            self._clear()
            for line in run_header(event):
                say(line)
        elif kind in ("note", "warning"):
            self._clear()
            say(f"{kind}: {event['message']}")
        elif kind == "batch" and self.live and time.monotonic() - self.last_draw > 0.2:
            self.last_draw = time.monotonic()
            sys.stderr.write(f"\r\033[K{batch_line(event)}")
            sys.stderr.flush()
        elif kind == "epoch":
            self._clear()
            mark = " *best*" if event["best"] else ""
            say(
                f"epoch {event['epoch']:>3}  loss/token {event['train_loss_per_token']:.4f}  "
                f"dev F1 {100 * event['dev_f1']:.2f}{mark}  {number(round(event['train_tokens_per_second']))} tok/s  "
                f"{event['epoch_seconds']:.0f}s  (elapsed {time.monotonic() - self.started:.0f}s)"
            )

    def _clear(self) -> None:
        if self.live:
            sys.stderr.write("\r\033[K")


def batch_line(event: dict[str, Any]) -> str:
    """The live line of a batch event. When patience or the time budget may end the run early,
    the epoch count is a limit ("epoch 3 of at most 30") and the time left a bound ("at most")."""
    bar = "#" * int(20 * event["batch"] / event["batches"])
    best = event["best_dev_f1"]
    best_text = f"best dev F1 {100 * best:.2f}, " if best >= 0 else ""
    if event.get("may_stop_early"):
        epoch = f"epoch {event['epoch']} of at most {event['epochs']}"
        left = f"at most {duration(event['run_seconds_left'])} left"
    else:
        epoch = f"epoch {event['epoch']}/{event['epochs']}"
        left = f"about {duration(event['run_seconds_left'])} left"
    return (
        f"{epoch} [{bar:<20}] loss {event['loss']:.4f}, "
        f"{number(round(event['tokens_per_second']))} tok/s, {best_text}{left}"
    )


def run_header(event: dict[str, Any]) -> list[str]:
    """The lines shown before the first epoch: data sizes, types, network, stopping rule."""
    train, dev, network = event["train"], event["dev"], event["network"]
    lines = ["Training a tagger"]
    lines += labelled("run folder", event["run_folder"])
    lines += labelled("train", f"{train['source']}: {_size(train)}")
    where = f"held out of {train['source']}" if dev["held_out"] else dev["source"]
    lines += labelled("dev", f"{where}: {_size(dev)}")
    types = ", ".join(f"{name} {number(n)}" for name, n in event["types"].items())
    lines += labelled(
        "types", f"{number(len(event['types']))} in train: {types}" if types else "none in train"
    )
    directions = " per direction" if network["bidirectional"] else ""
    lines += labelled(
        "network",
        f"{network['cell']}, {count(network['layers'], 'layer')} of {network['hidden_size']}"
        f"{directions}, {network['output']} output; {count(network['parameters'], 'parameter')}",
    )
    fit = event.get("tokenizer_fit")
    if fit and fit["split"]["count"] + fit["lost"]["count"]:
        finding = tokenizer_fit_finding(fit, "the settings this run's model will keep")
        lines += labelled("tokenizer", f"{finding}; tagger check lists each one")
    lines += labelled("stops", stopping_rule(event["stopping"]))
    return lines


def _size(part: dict[str, int]) -> str:
    return (
        f"{count(part['sentences'], 'sentence')}, {count(part['tokens'], 'token')}, "
        f"{count(part['spans'], 'span')}"
    )


def stopping_rule(stopping: dict[str, Any]) -> str:
    """When the run ends, in words: the epoch limit, patience and the time budget."""
    epochs, patience, first = stopping["epochs"], stopping["patience"], stopping["first_epoch"]
    text = f"after epoch {epochs} (train.epochs)"
    if first > 1:
        text += f", resuming at epoch {first}"
    if patience < epochs - first + 1:
        text += (
            f", or earlier after {count(patience, 'epoch')} without a better dev F1 "
            "(train.patience)"
        )
    if stopping["max_minutes"]:
        text += f", or once {stopping['max_minutes']:g} minutes are used (train.max_minutes)"
    else:
        text += "; no time budget (train.max_minutes)"
    return text


class TaggingProgress:
    """Documents and tokens per second on one redrawn line, only when stderr is a terminal."""

    def __init__(self) -> None:
        self.live = sys.stderr.isatty()
        self.last_draw = 0.0

    def __call__(self, summary: Any) -> None:
        if not self.live or time.monotonic() - self.last_draw < 0.5:
            return
        self.last_draw = time.monotonic()
        sys.stderr.write(
            f"\r{count(summary.documents, 'document')}, {count(summary.tokens, 'token')}, "
            f"{number(round(summary.tokens_per_second))} tokens/s "
        )
        sys.stderr.flush()

    def clear(self) -> None:
        if self.live and self.last_draw:
            sys.stderr.write("\r\033[K")
