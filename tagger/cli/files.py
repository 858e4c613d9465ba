"""Commands on annotated files alone, no model: check, convert, score (none loads torch).

Every file they read may be '-' (standard input), once per command.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from tagger.cli.common import (
    AsJson,
    Delimiter,
    LabelColumn,
    TokenColumn,
    app,
    column_format,
    domain_errors,
    input_argument,
    input_option,
    print_json,
    readable_inputs,
    say,
    usable_output,
)


@app.command()
def check(
    files: Annotated[
        list[Path],
        input_argument(
            "Annotated column files; the first is read as train, any others as dev/test "
            "and compared with it. '-' reads standard input."
        ),
    ],
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    delimiter: Delimiter = "auto",
    lexicons: Annotated[
        list[Path] | None,
        input_option(
            "--lexicon",
            "A lexicon file ('entry' or 'entry<TAB>type' per line) whose coverage of the "
            "annotated spans to report (repeatable; '-' reads standard input).",
        ),
    ] = None,
    lexicon_case: Annotated[
        str, typer.Option(help="How lexicon entries meet tokens: ignore, exact or smart.")
    ] = "ignore",
    as_json: AsJson = False,
) -> None:
    """Inspect annotated column files: counts, scheme, ill-formed tags, leakage, inconsistencies,
    values of extra columns and lexicon coverage."""
    from tagger.data.check import check_files
    from tagger.reports.check import format_check
    from tagger.text.lexicon import CASE_MODES, read_lexicon

    readable_inputs(("--lexicon", lexicons), ("files", files))
    if lexicon_case not in CASE_MODES:
        raise typer.BadParameter(
            f"must be one of {', '.join(CASE_MODES)}, not {lexicon_case!r}",
            param_hint="--lexicon-case",
        )
    with domain_errors():
        loaded = [read_lexicon(path, lexicon_case) for path in lexicons or []]
        report = check_files(
            files, column_format(delimiter, token_column, label_column), lexicons=loaded
        )
    print_json(report) if as_json else print(format_check(report))


@app.command()
def convert(
    source: Annotated[
        Path, input_argument("Annotated column file to rewrite ('-' for standard input).")
    ],
    target: Annotated[
        Path,
        typer.Argument(
            dir_okay=False, help="Output file, replaced once complete ('-' for stdout)."
        ),
    ],
    to: Annotated[
        str, typer.Option("--to", help="Target scheme: IO, IOB1, IOB2, IOE1, IOE2, BIOES, BILOU.")
    ],
    source_scheme: Annotated[
        str | None, typer.Option("--from", help="Scheme of SOURCE (detected when omitted).")
    ] = None,
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    delimiter: Delimiter = "auto",
) -> None:
    """Rewrite a column file's labels in another tagging scheme, keeping every other column."""
    from tagger.data.convert import convert_file
    from tagger.reports.conversion import format_conversion

    readable_inputs(("source", source))
    usable_output(target, [source])
    with domain_errors():
        summary = convert_file(
            source, target, to, column_format(delimiter, token_column, label_column), source_scheme
        )
    say(format_conversion(summary))


@app.command()
def score(
    gold: Annotated[
        Path, input_argument("Column file holding the gold labels ('-' for standard input).")
    ],
    predicted: Annotated[
        Path,
        input_argument(
            "Column file holding the predicted labels for the same tokens, in the same "
            "order ('-' for standard input)."
        ),
    ],
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    predicted_label_column: Annotated[
        int | None, typer.Option(help="Label column of PREDICTED if it differs.")
    ] = None,
    delimiter: Delimiter = "auto",
    as_json: AsJson = False,
) -> None:
    """Score a predicted column file against a gold one: strict span precision, recall and F1."""
    from tagger.reports.scores import format_report
    from tagger.scoring.files import score_files

    readable_inputs(("gold", gold), ("predicted", predicted))
    gold_fmt = column_format(delimiter, token_column, label_column)
    pred_fmt = column_format(
        delimiter,
        token_column,
        label_column if predicted_label_column is None else predicted_label_column,
    )
    with domain_errors():
        result = score_files(gold, predicted, gold_fmt, pred_fmt)
    print_json(result) if as_json else print(format_report(result))
