"""Progress shown on stderr while training and tagging run."""

from __future__ import annotations

import sys
import time
from typing import Any

from tagger.cli.common import say


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
        if kind == "note":
            self._clear()
            say(f"note: {event['message']}")
        elif kind == "batch" and self.live and time.monotonic() - self.last_draw > 0.2:
            self.last_draw = time.monotonic()
            done = event["batch"] / event["batches"]
            bar = "#" * int(20 * done)
            best = event["best_dev_f1"]
            best_text = f"best dev F1 {100 * best:.2f}, " if best >= 0 else ""
            sys.stderr.write(
                f"\r\033[Kepoch {event['epoch']}/{event['epochs']} [{bar:<20}] "
                f"loss {event['loss']:.4f}, {event['tokens_per_second']:,.0f} tok/s, {best_text}"
                f"about {duration(event['run_seconds_left'])} left"
            )
            sys.stderr.flush()
        elif kind == "epoch":
            self._clear()
            mark = " *best*" if event["best"] else ""
            say(
                f"epoch {event['epoch']:>3}  loss/token {event['train_loss_per_token']:.4f}  "
                f"dev F1 {100 * event['dev_f1']:.2f}{mark}  {event['train_tokens_per_second']:,.0f} tok/s  "
                f"{event['epoch_seconds']:.0f}s  (elapsed {time.monotonic() - self.started:.0f}s)"
            )

    def _clear(self) -> None:
        if self.live:
            sys.stderr.write("\r\033[K")


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
            f"\r{summary.documents:,} documents, {summary.tokens:,} tokens, "
            f"{summary.tokens_per_second:,.0f} tokens/s "
        )
        sys.stderr.flush()

    def clear(self) -> None:
        if self.live and self.last_draw:
            sys.stderr.write("\r\033[K")
