"""The geometry of the evaluation page's charts: plain numbers and strings that the page's
templates (`tagger.reports.page_templates`) draw as inline SVG.

Charts are computed here rather than drawn by a plotting library so that the page stays small
(a few kilobytes a chart, no embedded fonts) and this stage needs nothing beyond the templating
library; DEVELOPERS.md says why. Every chart carries its own legend: a list of (label, colour,
marker) entries the template draws beside it.

Colours are the Okabe-Ito palette (Okabe & Ito, "Color Universal Design", 2008), chosen to stay
apart under the common colour-vision deficiencies; lines also differ by marker shape, so a
black-and-white print keeps them apart.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

# Okabe-Ito, by name
ORANGE, SKY_BLUE, GREEN, YELLOW, BLUE, VERMILLION, PURPLE, BLACK = (
    "#E69F00",
    "#56B4E9",
    "#009E73",
    "#F0E442",
    "#0072B2",
    "#D55E00",
    "#CC79A7",
    "#000000",
)
TYPE_COLOURS = (BLUE, ORANGE, GREEN, PURPLE, VERMILLION, SKY_BLUE, BLACK, YELLOW)

SCORES = (("precision", "precision", BLUE), ("recall", "recall", ORANGE), ("f1", "F1", GREEN))
# Where a type's spans ended up: the gold side's outcomes, then the tagged spans no gold span
# touches (the breakdown of `tagger.scoring.metrics`), in the page's words.
OUTCOMES = (
    ("gold", "exact", "found exactly", GREEN),
    ("gold", "wrong_type", "right edges, other type", PURPLE),
    ("gold", "boundary", "right type, other edges", SKY_BLUE),
    ("gold", "type_and_boundary", "other type and edges", BLUE),
    ("gold", "missed", "not found", VERMILLION),
    ("predicted", "spurious", "found, not in gold", ORANGE),
)
CURVE_LINES = (
    ("dev_f1", "dev F1", GREEN, "circle"),
    ("dev_precision", "dev precision", BLUE, "square"),
    ("dev_recall", "dev recall", ORANGE, "triangle"),
)

LABEL_WIDTH = 130  # room for type names left of the bars
PLOT_WIDTH = 420
BAR = 11  # height of one bar
ROW_GAP = 10


@dataclass
class Chart:
    """An SVG chart: its size, the shapes the template draws, its axis ticks and its legend."""

    width: int
    height: int
    rects: list[dict[str, Any]] = field(default_factory=list)
    texts: list[dict[str, Any]] = field(default_factory=list)
    lines: list[dict[str, Any]] = field(default_factory=list)
    paths: list[dict[str, Any]] = field(default_factory=list)
    marks: list[dict[str, Any]] = field(default_factory=list)
    legend: list[dict[str, str]] = field(default_factory=list)


def type_colour(types: Sequence[str], type_: str) -> str:
    """A type's colour on the page, by its place among the sorted types."""
    return TYPE_COLOURS[sorted(types).index(type_) % len(TYPE_COLOURS)]


def _ticks(chart: Chart, top: int, bottom: int, values: Sequence[float], scale: float) -> None:
    """Vertical grid lines with their values under the plot, for a horizontal axis."""
    for value in values:
        x = LABEL_WIDTH + value * scale
        chart.lines.append({"x1": x, "y1": top, "x2": x, "y2": bottom, "kind": "grid"})
        label = f"{value:g}" if value != int(value) or value < 10 else f"{int(value):,}"
        chart.texts.append({"x": x, "y": bottom + 14, "text": label, "anchor": "middle"})


def score_bars(per_type: Mapping[str, Mapping[str, Any]]) -> Chart:
    """Precision, recall and F1 of each type as three horizontal bars on a 0-1 axis."""
    group = len(SCORES) * BAR + ROW_GAP
    top = 8
    height = top + max(len(per_type), 1) * group + 24
    chart = Chart(LABEL_WIDTH + PLOT_WIDTH + 50, height)
    for row, (type_, scores) in enumerate(per_type.items()):
        y = top + row * group
        chart.texts.append(
            {"x": LABEL_WIDTH - 6, "y": y + 1.5 * BAR + 4, "text": type_, "anchor": "end"}
        )
        for index, (key, label, colour) in enumerate(SCORES):
            value = float(scores[key])
            bar_y = y + index * BAR
            chart.rects.append(
                {
                    "x": LABEL_WIDTH,
                    "y": bar_y,
                    "width": round(value * PLOT_WIDTH, 2),
                    "height": BAR - 1,
                    "fill": colour,
                    "title": f"{type_} {label} {value:.3f}",
                }
            )
            chart.texts.append(
                {
                    "x": LABEL_WIDTH + value * PLOT_WIDTH + 4,
                    "y": bar_y + BAR - 2,
                    "text": f"{value:.2f}",
                    "anchor": "start",
                    "small": True,
                }
            )
    _ticks(chart, top - 4, height - 22, (0, 0.25, 0.5, 0.75, 1), PLOT_WIDTH)
    chart.legend = [
        {"label": label, "colour": colour, "marker": "square"} for _, label, colour in SCORES
    ]
    return chart


def outcome_bars(breakdown: Mapping[str, Mapping[str, Mapping[str, int]]]) -> Chart:
    """Each type's spans as one stacked bar: the gold spans by where they ended up, then the
    tagged spans no gold span touches; the axis counts spans."""
    rows = []
    for type_, sides in breakdown.items():
        rows.append(
            (type_, [(sides[side][name], label, colour) for side, name, label, colour in OUTCOMES])
        )
    widest = max((sum(n for n, _, _ in parts) for _, parts in rows), default=0) or 1
    scale = PLOT_WIDTH / widest
    step = 2 * BAR + ROW_GAP
    top = 8
    height = top + max(len(rows), 1) * step + 24
    chart = Chart(LABEL_WIDTH + PLOT_WIDTH + 50, height)
    for row, (type_, parts) in enumerate(rows):
        y = top + row * step
        chart.texts.append({"x": LABEL_WIDTH - 6, "y": y + BAR + 4, "text": type_, "anchor": "end"})
        x = float(LABEL_WIDTH)
        for count, label, colour in parts:
            if not count:
                continue
            width = count * scale
            chart.rects.append(
                {
                    "x": round(x, 2),
                    "y": y,
                    "width": round(width, 2),
                    "height": 2 * BAR,
                    "fill": colour,
                    "title": f"{type_}: {count:,} {label}",
                }
            )
            x += width
        total = sum(n for n, _, _ in parts)
        chart.texts.append(
            {"x": x + 4, "y": y + BAR + 4, "text": f"{total:,}", "anchor": "start", "small": True}
        )
    _ticks(chart, top - 4, height - 22, _count_ticks(widest), scale)
    chart.legend = [
        {"label": label, "colour": colour, "marker": "square"} for _, _, label, colour in OUTCOMES
    ]
    return chart


def _count_ticks(widest: int) -> list[int]:
    """Round tick values from 0 to at least `widest`, four or five of them."""
    step = 1
    while widest / step > 5:
        for factor in (2, 2.5, 2):  # 1, 2, 5, 10, 20, 50, ...
            step = int(step * factor)
            if widest / step <= 5:
                break
    return list(range(0, widest + 1, step))


def confusion_grid(types: Sequence[str], confusion: Mapping[str, Mapping[str, int]]) -> Chart:
    """Rows: a span's gold type; columns: the type it was tagged with (same edges). A cell's
    shade grows with its count; the diagonal (no confusion) is left blank."""
    cell = 44
    left, top = LABEL_WIDTH, 70
    most = max((n for row in confusion.values() for n in row.values()), default=0) or 1
    chart = Chart(left + len(types) * cell + 20, top + len(types) * cell + 10)
    for column, tagged in enumerate(types):
        x = left + column * cell + cell / 2
        chart.texts.append(
            {"x": x, "y": top - 8, "text": tagged, "anchor": "start", "turned": True}
        )
    for row, gold in enumerate(types):
        y = top + row * cell
        chart.texts.append({"x": left - 6, "y": y + cell / 2 + 4, "text": gold, "anchor": "end"})
        for column, tagged in enumerate(types):
            x = left + column * cell
            count = confusion.get(gold, {}).get(tagged, 0)
            same = gold == tagged
            chart.rects.append(
                {
                    "x": x,
                    "y": y,
                    "width": cell - 2,
                    "height": cell - 2,
                    "fill": "#ffffff" if same or not count else BLUE,
                    "opacity": 1.0 if same or not count else round(0.15 + 0.85 * count / most, 3),
                    "stroke": "#999999",
                    "title": f"gold {gold}, tagged {tagged}: {count:,}",
                }
            )
            if not same:
                dark = count / most > 0.5
                chart.texts.append(
                    {
                        "x": x + cell / 2 - 1,
                        "y": y + cell / 2 + 4,
                        "text": f"{count:,}",
                        "anchor": "middle",
                        "light": dark,
                    }
                )
    chart.legend = [
        {"label": "a few spans", "colour": BLUE, "marker": "pale"},
        {"label": f"the most: {most:,} spans", "colour": BLUE, "marker": "square"},
        {"label": "same type (not counted here)", "colour": "#ffffff", "marker": "square"},
    ]
    return chart


def training_curve(history: Sequence[Mapping[str, Any]]) -> Chart:
    """Dev precision, recall and F1 by epoch, each line with its own marker; the best epoch
    (the one kept as the model) marked with a vertical line."""
    left, top, plot_height = 50, 10, 220
    width = PLOT_WIDTH + 40
    chart = Chart(left + width + 20, top + plot_height + 40)
    epochs = [int(row["epoch"]) for row in history]
    first, last = min(epochs), max(epochs)
    span = max(last - first, 1)

    def x_of(epoch: int) -> float:
        return round(left + (epoch - first) / span * width, 2)

    def y_of(value: float) -> float:
        return round(top + (1 - value) * plot_height, 2)

    for value in (0, 0.25, 0.5, 0.75, 1):
        y = y_of(value)
        chart.lines.append({"x1": left, "y1": y, "x2": left + width, "y2": y, "kind": "grid"})
        chart.texts.append({"x": left - 6, "y": y + 4, "text": f"{value:g}", "anchor": "end"})
    for epoch in _epoch_ticks(first, last):
        chart.texts.append(
            {"x": x_of(epoch), "y": top + plot_height + 16, "text": str(epoch), "anchor": "middle"}
        )
    chart.texts.append(
        {"x": left + width / 2, "y": top + plot_height + 34, "text": "epoch", "anchor": "middle"}
    )
    kept = [x_of(int(row["epoch"])) for row in history if row.get("best")]
    if kept:  # the last epoch marked best is the one the model file holds
        chart.lines.append(
            {"x1": kept[-1], "y1": top, "x2": kept[-1], "y2": top + plot_height, "kind": "best"}
        )
    for key, label, colour, marker in CURVE_LINES:
        points = [(x_of(int(row["epoch"])), y_of(float(row[key]))) for row in history if key in row]
        if not points:
            continue
        chart.paths.append(
            {
                "d": "M" + " L".join(f"{x},{y}" for x, y in points),
                "stroke": colour,
                "title": label,
            }
        )
        chart.marks.extend({"x": x, "y": y, "colour": colour, "marker": marker} for x, y in points)
        chart.legend.append({"label": label, "colour": colour, "marker": marker})
    chart.legend.append({"label": "epoch kept as the model", "colour": BLACK, "marker": "dash"})
    return chart


def _epoch_ticks(first: int, last: int) -> list[int]:
    step = max(1, -(-(last - first) // 10))
    return list(range(first, last + 1, step))


def learning_curve_chart(
    points: Sequence[Mapping[str, Any]],
    fit: Mapping[str, float] | None,
    doubling: Mapping[str, Any] | None,
) -> Chart:
    """Each model's span F1 by its training sentences (a marker per seed), the fitted curve
    (solid where measured, dashed beyond), and what it expects at twice the largest size with
    its interval."""
    left, top, plot_height = 50, 10, 220
    width = PLOT_WIDTH + 40
    chart = Chart(left + width + 30, top + plot_height + 40)
    largest = max(int(p["sentences"]) for p in points)
    right = 2 * largest if doubling else largest

    def x_of(n: float) -> float:
        return round(left + n / right * width, 2)

    def y_of(value: float) -> float:
        return round(top + (1 - min(max(value, 0.0), 1.0)) * plot_height, 2)

    for value in (0, 0.25, 0.5, 0.75, 1):
        y = y_of(value)
        chart.lines.append({"x1": left, "y1": y, "x2": left + width, "y2": y, "kind": "grid"})
        chart.texts.append({"x": left - 6, "y": y + 4, "text": f"{value:g}", "anchor": "end"})
    for n in _count_ticks(right):
        chart.texts.append(
            {"x": x_of(n), "y": top + plot_height + 16, "text": f"{n:,}", "anchor": "middle"}
        )
    chart.texts.append(
        {
            "x": left + width / 2,
            "y": top + plot_height + 34,
            "text": "training sentences",
            "anchor": "middle",
        }
    )
    if fit:
        smallest = min(int(p["sentences"]) for p in points)

        def curve(n: float) -> float:
            return fit["a"] - fit["b"] * n ** -fit["c"]

        for start, end, dashed in ((smallest, largest, False), (largest, right, True)):
            if end <= start:
                continue
            steps = [start + (end - start) * k / 40 for k in range(41)]
            chart.paths.append(
                {
                    "d": "M" + " L".join(f"{x_of(n)},{y_of(curve(n))}" for n in steps),
                    "stroke": BLUE,
                    "title": "the fitted curve" + (", beyond what was measured" if dashed else ""),
                    "dashed": dashed,
                }
            )
        chart.legend.append({"label": "fitted curve", "colour": BLUE, "marker": "line"})
        if doubling:
            chart.legend.append(
                {
                    "label": "the curve beyond the measured sizes",
                    "colour": BLUE,
                    "marker": "dashed-line",
                }
            )
    markers = ("circle", "square", "triangle")
    for index, seed in enumerate(sorted({p["seed"] for p in points})):
        marker = markers[index % len(markers)]
        chart.marks.extend(
            {"x": x_of(p["sentences"]), "y": y_of(p["f1"]), "colour": ORANGE, "marker": marker}
            for p in points
            if p["seed"] == seed
        )
        chart.legend.append({"label": f"a model, seed {seed}", "colour": ORANGE, "marker": marker})
    if doubling:
        x = x_of(2 * largest)
        now = doubling["now"]
        chart.lines.append(
            {
                "x1": x,
                "y1": y_of(now + doubling["high"]),
                "x2": x,
                "y2": y_of(now + doubling["low"]),
                "kind": "interval",
            }
        )
        chart.marks.append(
            {"x": x, "y": y_of(doubling["doubled"]), "colour": VERMILLION, "marker": "square"}
        )
        chart.legend.append(
            {
                "label": f"expected at twice the sentences, {doubling['level']:.0%} interval",
                "colour": VERMILLION,
                "marker": "square",
            }
        )
    return chart


def fold_spread(rows: Mapping[str, Mapping[str, Any]]) -> Chart:
    """Span F1 over the folds of a cross-validation, a row a type: the mean as a bar, one
    standard deviation either side as a line, and each fold's F1 as a dot (folds where the type
    was not tested left out)."""
    step = 2 * BAR + ROW_GAP
    top = 8
    height = top + max(len(rows), 1) * step + 24
    chart = Chart(LABEL_WIDTH + PLOT_WIDTH + 50, height)
    for row, (name, entry) in enumerate(rows.items()):
        y = top + row * step
        middle = y + BAR
        chart.texts.append({"x": LABEL_WIDTH - 6, "y": middle + 4, "text": name, "anchor": "end"})
        mean, sd = entry.get("mean"), entry.get("sd")
        if mean is None:
            continue
        chart.rects.append(
            {
                "x": LABEL_WIDTH,
                "y": y + BAR / 2,
                "width": round(mean * PLOT_WIDTH, 2),
                "height": BAR,
                "fill": SKY_BLUE,
                "title": f"{name}: mean F1 {mean:.3f}"
                + (f", sd {sd:.3f}" if sd is not None else ""),
            }
        )
        if sd is not None:
            low, high = max(mean - sd, 0.0), min(mean + sd, 1.0)
            chart.lines.append(
                {
                    "x1": round(LABEL_WIDTH + low * PLOT_WIDTH, 2),
                    "y1": middle,
                    "x2": round(LABEL_WIDTH + high * PLOT_WIDTH, 2),
                    "y2": middle,
                    "kind": "spread",
                }
            )
        chart.marks.extend(
            {
                "x": round(LABEL_WIDTH + value * PLOT_WIDTH, 2),
                "y": middle,
                "colour": VERMILLION,
                "marker": "circle",
            }
            for value in entry["f1_per_fold"]
            if value is not None
        )
    _ticks(chart, top - 4, height - 22, (0, 0.25, 0.5, 0.75, 1), PLOT_WIDTH)
    chart.legend = [
        {"label": "mean F1 over the folds", "colour": SKY_BLUE, "marker": "square"},
        {"label": "one standard deviation either side", "colour": BLACK, "marker": "line"},
        {"label": "one fold", "colour": VERMILLION, "marker": "dot"},
    ]
    return chart
