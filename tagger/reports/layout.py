"""The two shapes every plain-text report is built from, and how numbers are written in them.

* A table: a header, a rule, rows, and totals under a second rule; each column aligned left or
  right to its widest cell, columns three spaces apart.
* Labelled text: a short label in a left-hand column with its text wrapped beside it, and
  bulleted examples indented under the text.

Numbers: whole numbers with a comma between thousands (12,345), percentages as 100 times a
fraction with a fixed number of decimals and no sign (the headers carry the "%"), shares of a
whole as "12.5%".
"""

from __future__ import annotations

import textwrap
from collections.abc import Sequence
from dataclasses import dataclass

Cell = str | int

WIDTH = 100  # the longest line labelled text is wrapped to
LABEL_WIDTH = 15  # the left-hand column of labelled text, indent included
INDENT = "  "
COLUMN_GAP = "   "


def number(value: int) -> str:
    """A whole number with thousands separated by commas: 1234567 -> "1,234,567"."""
    return f"{value:,}"


def percent(fraction: float, decimals: int = 2) -> str:
    """A fraction as a percentage without the sign: 0.66666 -> "66.67"."""
    return f"{100 * fraction:.{decimals}f}"


def share(part: int, whole: int) -> str:
    """What part of a whole is, with the sign: (1, 8) -> "12.5%"; "-" for an empty whole."""
    return f"{percent(part / whole, 1)}%" if whole else "-"


def count(value: int, noun: str, plural: str | None = None) -> str:
    """A number and its noun, plural unless it is one: (2, "token") -> "2 tokens"."""
    return f"{number(value)} {noun if value == 1 else plural or noun + 's'}"


@dataclass(frozen=True)
class Column:
    title: str
    align: str = "right"  # "left" or "right"

    def __post_init__(self) -> None:
        if self.align not in ("left", "right"):
            raise ValueError(f"align must be 'left' or 'right', not {self.align!r}")


def render_table(
    columns: Sequence[Column],
    rows: Sequence[Sequence[Cell]],
    totals: Sequence[Sequence[Cell]] = (),
    indent: str = INDENT,
) -> list[str]:
    """The lines of a table: header, rule, rows, then (under a second rule) totals.

    Whole-number cells are written with `number`; text cells as they are. The second rule is left
    out when there are no rows or no totals. Trailing spaces are cut from every line.
    """
    width = len(columns)
    texts = [[_cell(cell) for cell in row] for row in [*rows, *totals]]
    for row in texts:
        if len(row) != width:
            raise ValueError(f"a row of {len(row)} cells in a table of {width} columns")
    header = [column.title for column in columns]
    widths = [max(len(row[c]) for row in [header, *texts]) for c in range(width)]

    def line(cells: Sequence[str]) -> str:
        aligned = [
            cell.ljust(size) if column.align == "left" else cell.rjust(size)
            for cell, size, column in zip(cells, widths, columns, strict=True)
        ]
        return (indent + COLUMN_GAP.join(aligned)).rstrip()

    rule = indent + "-" * (sum(widths) + len(COLUMN_GAP) * (width - 1))
    body = [line(row) for row in texts[: len(rows)]]
    below = [line(row) for row in texts[len(rows) :]]
    return [line(header), rule, *body, *([rule] if body and below else []), *below]


def _cell(cell: Cell) -> str:
    return number(cell) if isinstance(cell, int) and not isinstance(cell, bool) else str(cell)


def labelled(label: str, text: str) -> list[str]:
    """`label` in the left-hand column, `text` wrapped beside it (never inside a word)."""
    return textwrap.wrap(
        text,
        width=WIDTH,
        initial_indent=f"{INDENT}{label:<{LABEL_WIDTH - len(INDENT)}}",
        subsequent_indent=" " * LABEL_WIDTH,
        break_long_words=False,
        break_on_hyphens=False,
    ) or [f"{INDENT}{label}"]


def bullets(texts: Sequence[str], hidden: int = 0) -> list[str]:
    """Examples as "- " items under labelled text, then "and N more" when some were left out."""
    items = [*texts, *([f"and {number(hidden)} more"] if hidden > 0 else [])]
    lines: list[str] = []
    for text in items:
        lines += textwrap.wrap(
            text,
            width=WIDTH,
            initial_indent=" " * LABEL_WIDTH + "- ",
            subsequent_indent=" " * (LABEL_WIDTH + 2),
            break_long_words=False,
            break_on_hyphens=False,
        )
    return lines
