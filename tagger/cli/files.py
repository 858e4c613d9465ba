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
    Encoding,
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
)
from tagger.data.scheme_rules import SchemeName
from tagger.text.lexicon import LexiconCase


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
    encoding: Encoding = "utf-8",
    lexicons: Annotated[
        list[Path] | None,
        input_option(
            "--lexicon",
            "A lexicon file ('entry' or 'entry<TAB>type' per line) whose coverage of the "
            "annotated spans to report (repeatable; '-' reads standard input).",
        ),
    ] = None,
    lexicon_case: Annotated[
        LexiconCase,
        typer.Option(
            help="How lexicon entries meet tokens: ignoring case, exactly, or smart (entries "
            "in lower case ignore case, others must match exactly).",
            case_sensitive=False,
        ),
    ] = LexiconCase.IGNORE,
    as_json: AsJson = False,
) -> None:
    """Inspect annotated column files: counts, scheme, ill-formed tags, leakage, inconsistencies,
    values of extra columns and lexicon coverage."""
    from tagger.data.check import check_files
    from tagger.reports.check import format_check
    from tagger.text.lexicon import read_lexicon

    readable_inputs(("--lexicon", lexicons), ("files", files))
    with domain_errors(column_files=files):
        loaded = [read_lexicon(path, lexicon_case.value) for path in lexicons or []]
        report = check_files(
            files,
            column_format(delimiter, token_column, label_column, encoding=encoding),
            lexicons=loaded,
        )
    print_json(report) if as_json else print(format_check(report))
    misread = [entry["file"] for entry in report["files"] if "tag_column_hint" in entry]
    if misread:
        # Read with the wrong label column, a file cannot be checked: a pipeline must not go on.
        say(
            f"tagger: error: the label column of {', '.join(misread)} holds no span tags but "
            "another column does; the report says which"
        )
        raise typer.Exit(1)


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
        SchemeName,
        typer.Option("--to", help="Tagging scheme to write (any case).", case_sensitive=False),
    ],
    source_scheme: Annotated[
        SchemeName | None,
        typer.Option(
            "--from",
            help="Tagging scheme of SOURCE (found from the file when omitted).",
            case_sensitive=False,
        ),
    ] = None,
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    delimiter: Delimiter = "auto",
    encoding: Encoding = "utf-8",
) -> None:
    """Rewrite a column file's labels in another tagging scheme, keeping every other column
    (written as UTF-8)."""
    from tagger.data.convert import convert_file
    from tagger.reports.conversion import format_conversion

    readable_inputs(("source", source))
    with domain_errors(column_files=[source]):
        summary = convert_file(
            source,
            target,
            to,
            column_format(delimiter, token_column, label_column, encoding=encoding),
            source_scheme,
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
    encoding: Encoding = "utf-8",
    as_json: AsJson = False,
) -> None:
    """Score a predicted column file against a gold one: strict span precision, recall and F1."""
    from tagger.reports.scores import format_report
    from tagger.scoring.files import score_files

    readable_inputs(("gold", gold), ("predicted", predicted))
    gold_fmt = column_format(delimiter, token_column, label_column, encoding=encoding)
    pred_fmt = column_format(
        delimiter,
        token_column,
        label_column if predicted_label_column is None else predicted_label_column,
        encoding=encoding,
    )
    with domain_errors(column_files=[gold, predicted]):
        result = score_files(gold, predicted, gold_fmt, pred_fmt)
    print_json(result) if as_json else print(format_report(result))
