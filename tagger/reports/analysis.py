"""The error-analysis parts of a score report: which type a span got instead of its own, example
sentences of each kind of error, span scores against how often they are right, and what the
review flag raises.

Each part reads one key of a summary (``type_confusion``, ``examples``, ``calibration``,
``review``; see `tagger.apply.evaluate`) and gives no lines when the key is absent or empty.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from tagger.reports.layout import (
    Cell,
    Column,
    count,
    labelled,
    number,
    percent,
    render_table,
    share,
)

CONTEXT = 6  # words shown on each side of the spans an example is about
KIND_NAMES = {
    "wrong_type": "type only",
    "boundary": "edges only",
    "type_and_boundary": "type+edges",
    "missed": "missed",
    "spurious": "spurious",
}


def confusion_lines(summary: dict[str, Any]) -> list[str]:
    """The confusion of types: gold types down, the types they were tagged as across."""
    table: dict[str, dict[str, int]] = summary.get("type_confusion") or {}
    if not table:
        return []
    tagged_types = sorted({t for row in table.values() for t in row})
    rows: list[list[Cell]] = [
        [gold, *(table[gold].get(t, 0) or "-" for t in tagged_types)] for gold in sorted(table)
    ]
    columns = [Column("gold type", "left"), *(Column(t) for t in tagged_types)]
    return [
        "Spans with the right edges tagged as another type (gold type down, tagged as across)",
        "",
        *render_table(columns, rows),
    ]


def example_lines(summary: dict[str, Any]) -> list[str]:
    """A few sentences of each kind of error, gold spans above what the tagger wrote."""
    kinds: dict[str, dict[str, Any]] = summary.get("examples") or {}
    if not kinds:
        return []
    lines = [
        "Examples of each kind of error, spread over the file; spans are written [TYPE words]",
    ]
    for kind, found in kinds.items():
        shown = found["examples"]
        held = count(found["sentences"], "sentence")
        lines += ["", *labelled(KIND_NAMES.get(kind, kind), f"{held}, {number(len(shown))} shown")]
        for example in shown:
            start, end = _window(example)
            lines += labelled(
                f"line {example['line']}", "gold    " + _marked(example, "gold", start, end)
            )
            lines += labelled("", "tagged  " + _marked(example, "tagged", start, end))
    return lines


def _window(example: dict[str, Any]) -> tuple[int, int]:
    """The tokens an example shows: its focus spans with CONTEXT words around them, widened so
    that no span is cut."""
    focus = [*example["gold_focus"], *example["tagged_focus"]]
    start = max(0, min(s for _, s, _ in focus) - CONTEXT)
    end = min(len(example["tokens"]), max(e for _, _, e in focus) + CONTEXT)
    for _, s, e in [*example["gold"], *example["tagged"]]:
        if s < start < e:
            start = s
        if s < end < e:
            end = e
    return start, end


def _marked(example: dict[str, Any], side: str, start: int, end: int) -> str:
    """The window's tokens with one side's spans written [TYPE words]; "..." where words are cut."""
    tokens: Sequence[str] = example["tokens"]
    opening = {s: t for t, s, _ in example[side]}
    closing = {e for _, _, e in example[side]}
    words = ["..."] if start > 0 else []
    for i in range(start, end):
        word = tokens[i]
        if i in opening:
            word = f"[{opening[i]} {word}"
        if i + 1 in closing:
            word += "]"
        words.append(word)
    if end < len(tokens):
        words.append("...")
    return " ".join(words)


def calibration_lines(summary: dict[str, Any]) -> list[str]:
    """The reliability table: tagged spans by score, how many were right, and the ECE."""
    calibration = summary.get("calibration")
    if not calibration or not calibration.get("spans"):
        return []
    rows: list[list[Cell]] = [
        [
            f"{b['low']:.1f} to {b['high']:.1f}",
            b["spans"],
            percent(b["mean_score"]),
            percent(b["right"]),
        ]
        for b in calibration["bins"]
    ]
    columns = [
        Column("span score", "left"),
        Column("tagged spans"),
        Column("mean score %"),
        Column("right %"),
    ]
    return [
        "How often tagged spans are right, by their score",
        "",
        *render_table(columns, rows),
        "",
        f"  Expected calibration error: {percent(calibration['ece'])} points",
        "  (the gap between mean score and share right, averaged over the rows by their spans)",
    ]


def review_lines(summary: dict[str, Any]) -> list[str]:
    """What the review flag raised: sentences flagged, and how many of those with an error."""
    review = summary.get("review")
    if not review or not review.get("sentences"):
        return []
    below = f"{review['review_below']:g}"
    flagged, sentences = review["flagged"], review["sentences"]
    caught, erroneous = review["flagged_with_error"], review["with_error"]
    return [
        f"Review flag at {below} (any token whose chosen label has a probability below {below})",
        "",
        *labelled(
            "flagged",
            f"{number(flagged)} of {count(sentences, 'sentence')} ({share(flagged, sentences)})",
        ),  # fmt: skip
        *labelled(
            "caught",
            f"{number(caught)} of the {count(erroneous, 'sentence')} holding an error "
            f"({share(caught, erroneous)}); the rest hold only mistakes the model was sure of",
        ),
    ]
