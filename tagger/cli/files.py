"""Commands on annotated files alone: check, convert, score. None loads torch, except `check`
when it reads a model's tokenizer settings (--model).

Every file they read may be '-' (standard input), once per command.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated

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
    usable_output,
)
from tagger.cli.help import examples
from tagger.data.convert import REPAIR_OPTION  # the option its refusal names
from tagger.data.file_scan import LONG_SENTENCE
from tagger.data.scheme_rules import SchemeName
from tagger.text.lexicon import LexiconCase

if TYPE_CHECKING:
    from tagger.data.tokenizer_fit import Tokenizer

# `check` found data unfit to train or score on (1 is a file that could not be read, 2 bad usage).
PROBLEMS_FOUND = 3
REPORT_ONLY = "--report-only"


@app.command(
    help="Inspect annotated column files: counts, scheme, ill-formed tags, leakage, sentences "
    "and token sequences labelled two ways, likely label typos, tokens the tagging tokenizer "
    "would cut differently, values of extra columns and lexicon coverage.\n\n"
    f"Exit code {PROBLEMS_FOUND} when a file holds ill-formed tags (transitions its scheme "
    "forbids, or labels that are neither O nor PREFIX-TYPE) or a dev/test file shares a sentence "
    f"of {LONG_SENTENCE} tokens or more with train, so that check can stop a pipeline; "
    f"{REPORT_ONLY} reports them and exits 0. Exit code 1 when a file cannot be read. The last "
    "line of the report says why.",
    epilog=examples(
        "tagger check data/demo/train.txt data/demo/dev.txt data/demo/test.txt",
        "tagger check train.txt --lexicon parts.tsv --json > check.json",
    ),
)
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
    model: Annotated[
        Path | None,
        typer.Option(
            "--model",
            exists=True,
            dir_okay=False,
            help="Compare the annotated tokens with the tokenizer as this model's settings "
            "make it (default: the tokenizer's default settings).",
        ),
    ] = None,
    report_only: Annotated[
        bool,
        typer.Option(
            REPORT_ONLY,
            help="Report ill-formed tags and sentences shared with train without failing: "
            "exit 0 whenever the files could be read.",
        ),
    ] = False,
    as_json: AsJson = False,
) -> None:
    from tagger.data.check import check_files
    from tagger.reports.check import format_check, format_verdict
    from tagger.text.lexicon import read_lexicon

    readable_inputs(("--lexicon", lexicons), ("FILES", files))
    with domain_errors(column_files=files):
        loaded = [read_lexicon(path, lexicon_case.value) for path in lexicons or []]
        tokenizer, settings = _tagging_tokenizer(model)
        report = check_files(
            files,
            column_format(delimiter, token_column, label_column, encoding=encoding),
            lexicons=loaded,
            tokenizer=tokenizer,
        )
    report["tokenizer_settings"] = settings
    misread = [entry["file"] for entry in report["files"] if "tag_column_hint" in entry]
    code = PROBLEMS_FOUND if report["problems"] and not report_only else 0
    verdict = format_verdict(report, code, REPORT_ONLY if report_only else "")
    if as_json:
        print_json(report)
        say(" ".join(verdict.split()))  # one line beside the JSON on stdout
    else:
        print(format_check(report) + "\n\n" + verdict)
    if misread:
        # Read with the wrong label column, a file cannot be checked: a pipeline must not go on.
        say(
            f"tagger: error: the label column of {', '.join(misread)} holds no span tags but "
            "another column does; the report says which"
        )
        raise typer.Exit(1)
    if code:
        raise typer.Exit(code)


def _tagging_tokenizer(model: Path | None) -> tuple[Tokenizer, str]:
    """The tokenizer `tag` would use, as text -> token offsets, and words naming its settings."""
    from tagger.text.tokenizer import TokenizerSettings, tokenize

    settings = TokenizerSettings()
    described = "its default settings"
    if model is not None:
        from tagger.apply.tagger import read_tokenizer_settings
        from tagger.network.modelfile import load_model_file

        settings = read_tokenizer_settings(load_model_file(model)[1])
        described = f"the settings of {model}"

    def offsets(text: str) -> list[tuple[int, int]]:
        return [(token.start, token.end) for token in tokenize(text, settings)]

    return offsets, described


@app.command(
    epilog=examples(
        "tagger convert train.txt train.bioes.txt --to bioes",
        "tagger convert old.conll fixed.conll --from iob1 --to iob2 --repair",
    )
)
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
            help="Tagging scheme of SOURCE (found from the file when omitted), checked "
            "against the file.",
            case_sensitive=False,
        ),
    ] = None,
    repair: Annotated[
        bool,
        typer.Option(
            REPAIR_OPTION,
            help="Convert sentences that are ill-formed in the source scheme too, reading them "
            "the lenient CoNLL way, and list them.",
        ),
    ] = False,
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    delimiter: Delimiter = "auto",
    encoding: Encoding = "utf-8",
) -> None:
    """Rewrite a column file's labels in another tagging scheme, keeping every other column
    (written as UTF-8).

    A file with sentences that are ill-formed in its scheme (detected, or given by --from) is
    refused with their count and first lines, and nothing is written; with --repair they are read
    the lenient CoNLL way (I- after O starts a span), rewritten well-formed and listed on stderr.
    """
    from tagger.data.convert import convert_file
    from tagger.reports.conversion import format_conversion

    readable_inputs(("SOURCE", source))
    usable_output(target, [source])
    with domain_errors(column_files=[source]):
        summary = convert_file(
            source,
            target,
            to,
            column_format(delimiter, token_column, label_column, encoding=encoding),
            source_scheme,
            repair=repair,
        )
    say(format_conversion(summary))


@app.command(
    epilog=examples(
        "tagger score test.txt test.predicted.txt",
        "tagger score gold.tsv both.tsv --predicted-label-column 2 --json",
    )
)
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

    readable_inputs(("GOLD", gold), ("PREDICTED", predicted))
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
