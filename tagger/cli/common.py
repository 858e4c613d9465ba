"""What every command shares: the typer app, common options, error handling and output."""

from __future__ import annotations

import json
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated, Any

import typer

from tagger.data.corpus import ColumnFormat
from tagger.errors import TaggerError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Train, evaluate and run sequence taggers on annotated column files, on CPUs.",
)

TokenColumn = Annotated[
    int, typer.Option(help="Column holding the token (0-based; negative counts from the end).")
]
LabelColumn = Annotated[
    int, typer.Option(help="Column holding the label (0-based; -1 is the last).")
]
Delimiter = Annotated[str, typer.Option(help="Column separator: auto, tab or space.")]
AsJson = Annotated[
    bool, typer.Option("--json", help="Print machine-readable JSON instead of a table.")
]
ExistingFile = Annotated[Path, typer.Argument(exists=True, dir_okay=False, readable=True)]


def say(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


@contextmanager
def domain_errors() -> Iterator[None]:
    """Library errors become one line on stderr and exit code 1."""
    try:
        yield
    except TaggerError as error:
        say(f"tagger: error: {error}")
        raise typer.Exit(1) from None


def column_format(
    delimiter: str, token_column: int, label_column: int, has_labels: bool = True
) -> ColumnFormat:
    if delimiter not in ("auto", "tab", "space"):
        raise typer.BadParameter(
            f"must be auto, tab or space, not {delimiter!r}", param_hint="--delimiter"
        )
    return ColumnFormat(
        delimiter=None if delimiter == "auto" else delimiter,
        token_column=token_column,
        label_column=label_column,
        has_labels=has_labels,
    )


def print_json(data: Any) -> None:
    print(json.dumps(data, indent=2, ensure_ascii=False))


def count(n: int, noun: str) -> str:
    return f"{n:,} {noun}{'' if n == 1 else 's'}"


def input_names(paths: list[Path] | None) -> list[str]:
    """Input paths as given; '-' is standard input. Missing files are a usage error (exit 2)."""
    names = [str(p) for p in paths or []]
    for name in names:
        if name != "-" and not Path(name).is_file():
            raise typer.BadParameter(f"file {name!r} does not exist", param_hint="INPUT")
    return names
