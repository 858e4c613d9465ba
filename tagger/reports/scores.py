"""Span scores as text: the report `score` prints, and the per-file reports of `evaluate`.

Both read the plain dicts of `tagger.scoring.metrics.summarise` (extra keys are ignored), so a
summary stored as JSON prints the same as a fresh one. The keys `evaluate` adds (an F1 interval,
examples, calibration, the review flag) are printed when present (`tagger.reports.analysis`).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from tagger.reports.analysis import (
    KIND_NAMES,
    calibration_lines,
    confusion_lines,
    example_lines,
    review_lines,
)
from tagger.reports.layout import Cell, Column, count, number, percent, render_table
from tagger.scoring.metrics import GOLD_OUTCOMES, PREDICTED_OUTCOMES

_SCORE_COLUMNS = (
    Column("span type", "left"),
    Column("F1 %"),
    Column("prec %"),
    Column("rec %"),
    Column("in gold"),
    Column("tagged"),
    Column("right"),
)

_OUTCOME_LABELS = {"exact": "exact", **KIND_NAMES}

_OUTCOME_NOTE = [
    "  exact: same type and edges; type only: same edges, another type;",
    "  edges only: overlaps a span of its own type; type+edges: overlaps only spans",
    "  of other types; missed / spurious: overlaps nothing on the other side",
]


def format_report(summary: dict[str, Any]) -> str:
    """A plain-text report of a :func:`tagger.scoring.metrics.summarise` dict.

    Scores first (types ordered by gold count, F1 before precision and recall, counts after;
    the F1 interval beside F1 when the summary has one), then where the errors come from, then
    the error-analysis parts the summary holds.
    """
    per_type: dict[str, dict[str, Any]] = summary["per_type"]
    micro, macro = summary["micro"], summary["macro"]
    order = sorted(per_type, key=lambda t: (-per_type[t]["gold"], t))
    rows = [_score_row(t, per_type[t]) for t in order]
    totals = [
        _score_row("all spans pooled", micro),
        _score_row(f"mean of {macro.get('types', len(per_type))} types", macro),
    ]
    interval = summary.get("f1_interval")
    lines = [
        f"Span scores: F1 {percent(micro['f1'])} %"
        + (f" ({percent(interval['low'])} to {percent(interval['high'])})" if interval else "")
        + f" over {number(micro['gold'])} gold and {number(micro['predicted'])} tagged spans",
        *_interval_note(interval),
        "",
        *render_table(_SCORE_COLUMNS, rows, totals),
    ]
    if summary.get("tokens"):
        lines += [
            "",
            f"Tokens tagged right: {percent(summary['token_accuracy'])} % of "
            f"{number(summary['tokens'])}",
        ]
    breakdown = summary.get("breakdown")
    if breakdown:
        lines += ["", "Where each span ended up (each span counted once, first match wins)"]
        for side, names, title in (
            ("gold", GOLD_OUTCOMES, "gold spans"),
            ("predicted", PREDICTED_OUTCOMES, "tagged spans"),
        ):
            lines += ["", *_outcome_table(breakdown, side, names, title, order)]
        lines += ["", *_OUTCOME_NOTE]
    for part in (confusion_lines, example_lines, calibration_lines, review_lines):
        found = part(summary)
        if found:
            lines += ["", *found]
    return "\n".join(lines) + "\n"


def _interval_note(interval: dict[str, Any] | None) -> list[str]:
    if not interval:
        return []
    return [
        f"  ({percent(interval['low'])} to {percent(interval['high'])}: where F1 fell in "
        f"{interval['level']:.0%} of {number(interval['resamples'])} draws of "
        f"{count(interval['sentences'], 'sentence')} with replacement)"
    ]


def _score_row(name: str, scores: dict[str, Any]) -> list[Cell]:
    # The mean row has no counts: its cells stay empty.
    counts: list[Cell] = [scores.get(key, "") for key in ("gold", "predicted", "correct")]
    return [
        name,
        percent(scores["f1"]),
        percent(scores["precision"]),
        percent(scores["recall"]),
        *counts,
    ]


def _outcome_table(
    breakdown: dict[str, Any], side: str, names: Sequence[str], title: str, order: list[str]
) -> list[str]:
    per_type = breakdown["per_type"]
    rows: list[list[Cell]] = [
        [t, *(per_type[t][side][n] for n in names)]
        for t in order
        if any(per_type.get(t, {}).get(side, {}).values())
    ]
    total: list[Cell] = [f"all {title}", *(breakdown[side][n] for n in names)]
    columns = [Column(title, "left"), *(Column(_OUTCOME_LABELS[n]) for n in names)]
    return render_table(columns, rows, [total])


def format_evaluation(result: dict[str, Any]) -> str:
    """The text `evaluate` prints: a report per gold file, then one over all of them if several."""
    parts = []
    for entry in result["files"]:
        parts.append(f"== {entry['file']} ({count(entry['sentences'], 'sentence')})\n")
        parts.append(format_report(entry) + "\n")
    if len(result["files"]) > 1:
        parts.append("== all files\n")
        parts.append(format_report(result["overall"]) + "\n")
    if "temperature" in result:
        fitted = "fitted on dev in training" if result.get("temperature_fit") else "none fitted"
        parts.append(
            f"Scores and the review flag read the label probabilities at temperature "
            f"{result['temperature']:.2f} ({fitted})\n"
        )
    return "".join(parts)
