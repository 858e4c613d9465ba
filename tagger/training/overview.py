"""What a run tells before its first epoch: the size of its train and dev data, the types, the
network, the run folder, the stopping rule, and the annotated tokens the tagging tokenizer would
not give back whole (as `check` reports them); the warnings about data that cannot teach the
model anything or cannot choose its best epoch well; and, while it runs, whether the epoch limit
is a promise or only a limit (patience or a time budget may end the run earlier).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

from tagger.config import Config
from tagger.data.corpus import Sentence
from tagger.data.schemes import Span
from tagger.data.tokenizer_fit import TokenizerFit
from tagger.text.tokenizer import tokenize
from tagger.training.data import PreparedData

# Fewer dev spans than this draw a warning: the best epoch is chosen on them, and below it one
# more span found can move dev F1 by a point or more (`span_weight`). Common practice, not a
# measured threshold.
SMALL_DEV_SPANS = 100


def part_size(sentences: Sequence[Sentence], spans: Sequence[list[Span]]) -> dict[str, int]:
    """{"sentences", "tokens", "spans"} of one side of the data."""
    return {
        "sentences": len(sentences),
        "tokens": sum(len(s) for s in sentences),
        "spans": sum(len(found) for found in spans),
    }


def run_overview(
    config: Config, data: PreparedData, parameters: int, run_dir: Path, first_epoch: int
) -> dict[str, Any]:
    """The facts of a run a user checks before waiting for it (the "start" progress event)."""
    types = Counter(span[0] for spans in data.train_spans for span in spans)
    model, train = config.model, config.train
    return {
        "train": {"source": data.train_source, **part_size(data.train, data.train_spans)},
        "dev": {
            "source": data.dev_source,
            "held_out": data.dev_held_out,
            **part_size(data.dev, data.dev_spans),
        },
        "types": dict(sorted(types.items(), key=lambda kv: (-kv[1], kv[0]))),
        "network": {
            "cell": model.cell,
            "layers": model.layers,
            "hidden_size": model.hidden_size,
            "bidirectional": model.bidirectional,
            "output": model.output,
            "parameters": parameters,
        },
        "run_folder": str(run_dir),
        "tokenizer_fit": tokenizer_fit(config, data.train),
        "stopping": {
            "first_epoch": first_epoch,
            "epochs": train.epochs,
            "patience": train.patience,
            "max_minutes": train.max_minutes,
        },
    }


def tokenizer_fit(config: Config, sentences: Sequence[Sentence]) -> dict[str, Any]:
    """How the training tokens fit the tokenizer the model will cut raw text with (its settings
    travel in the model file): `TokenizerFit.as_dict`, without examples (the header shows the
    count and the most frequent tokens; `check` lists the lines)."""
    settings = replace(config.tokenizer, max_sentence_tokens=config.data.max_sentence_tokens)

    def offsets(text: str) -> list[tuple[int, int]]:
        return [(token.start, token.end) for token in tokenize(text, settings)]

    fit = TokenizerFit(offsets, limit=0)
    for sentence in sentences:
        # Sentences made in memory have no line numbers; none is shown here anyway.
        fit.add(sentence.tokens, sentence.line_numbers or (0,) * len(sentence))
    return fit.as_dict()


def data_warnings(data: PreparedData) -> list[str]:
    """What in the data makes the run pointless or its choice of the best epoch a toss-up."""
    warnings: list[str] = []
    # Data without spans in train or dev is refused before this (tagger.training.data).
    dev_spans = sum(len(found) for found in data.dev_spans)
    dev = (
        "the held-out dev sentences hold" if data.dev_held_out else f"dev ({data.dev_source}) holds"
    )
    if 0 < dev_spans < SMALL_DEV_SPANS:
        low, high = span_weight(dev_spans)
        warnings.append(
            f"{dev} only {dev_spans} spans to choose the best epoch by: one span more "
            f"found moves dev F1 by {low:.1f} to {high:.1f} points, so epochs that close "
            f"are told apart by chance (common practice: {SMALL_DEV_SPANS} dev spans or more)"
        )
    return warnings


def span_weight(gold_spans: int) -> tuple[float, float]:
    """The points of F1 one more span found is worth with n = `gold_spans` gold spans and as many
    predicted: from 100(n+1)/(n(2n+1)) with all but one found to 200/(2n+1) with none found.

    With n gold, n predicted and t of them right, F1 = 2t/(2n); one more right span (t+1 right
    of n+1 predicted) gives 2(t+1)/(2n+1), a gain of (2n-t)/(n(2n+1)) for t from n-1 down to 0.
    """
    n = gold_spans
    return 100 * (n + 1) / (n * (2 * n + 1)), 200 / (2 * n + 1)


def earliest_stop(epoch: int, epochs: int, patience: int, bad_epochs: int) -> int:
    """The first epoch, from `epoch` on, after which the run may stop: the epoch limit, or
    earlier if patience runs out (with `bad_epochs` epochs without a better dev F1 before this
    one, and none better from now on)."""
    return min(epochs, epoch + max(0, patience - bad_epochs - 1))
