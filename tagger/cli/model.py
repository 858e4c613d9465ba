"""Commands that make, measure or export a model: train, evaluate, export."""

from __future__ import annotations

import sys
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from tagger.cli.common import (
    AsJson,
    ConfigOverrides,
    Encoding,
    ModelFile,
    app,
    checked_option_encoding,
    column_format,
    config_from_options,
    domain_errors,
    input_argument,
    print_json,
    readable_inputs,
    say,
    stopped_words,
    usable_output,
)
from tagger.cli.help import examples
from tagger.cli.progress import TrainingProgress
from tagger.data.column_lines import DelimiterChoice

if TYPE_CHECKING:
    from tagger.data.corpus import ColumnFormat

WORST_ON_PAGE = 12  # sentences with the most errors shown on the --html page

# Column options that default to what the config (train) or the model (evaluate) says, so that
# the column layout is given once; given explicitly, they win.
GivenTokenColumn = Annotated[
    int | None,
    typer.Option(
        "--token-column",
        help="Column holding the token (0-based; negative counts from the end). "
        "Default: data.token_column of the config (train), the training files' layout (evaluate).",
    ),
]
GivenLabelColumn = Annotated[
    int | None,
    typer.Option(
        "--label-column",
        help="Column holding the label (0-based; -1 is the last). "
        "Default: data.label_column of the config (train), the training files' layout (evaluate).",
    ),
]
GivenDelimiter = Annotated[
    DelimiterChoice | None,
    typer.Option(
        "--delimiter",
        help="Column separator: found from the first lines, one TAB, or runs of spaces/TABs. "
        "Default: data.delimiter of the config (train), the training files' layout (evaluate).",
        case_sensitive=False,
    ),
]


@app.command(
    epilog=examples(
        "tagger train --config configs/default.toml --train train.txt --out runs/demo",
        "tagger train --train train.txt --out runs/gru --set model.cell=gru",
    )
)
def train(
    config_path: Annotated[
        Path | None, typer.Option("--config", exists=True, dir_okay=False, help="TOML config file.")
    ] = None,
    train_file: Annotated[
        Path | None,
        typer.Option(
            "--train",
            exists=True,
            dir_okay=False,
            help="Training column file (overrides data.train).",
        ),
    ] = None,
    dev_file: Annotated[
        Path | None,
        typer.Option(
            "--dev", exists=True, dir_okay=False, help="Dev column file (overrides data.dev)."
        ),
    ] = None,
    out: Annotated[
        Path,
        typer.Option(
            "--out", file_okay=False, help="Run folder for the model, checkpoint and history."
        ),
    ] = Path("runs/latest"),
    overrides: ConfigOverrides = None,
    resume: Annotated[
        bool, typer.Option("--resume", help="Continue from the run folder's last checkpoint.")
    ] = False,
    token_column: GivenTokenColumn = None,
    label_column: GivenLabelColumn = None,
    delimiter: GivenDelimiter = None,
    encoding: Annotated[
        str | None,
        typer.Option(
            help="Encoding of the train and dev files, e.g. latin-1 (overrides data.encoding)."
        ),
    ] = None,
    threads: Annotated[
        int | None,
        typer.Option(
            min=0,
            help="torch threads while training (overrides train.threads, default 1; 0: one per core).",
        ),
    ] = None,
    overwrite: Annotated[
        bool,
        typer.Option(
            "--overwrite",
            help="Replace the run OUT holds (its model, checkpoint and records); without it a "
            "folder holding a run is refused.",
        ),
    ] = False,
) -> None:
    """Train a tagger; the best model by dev span F1 is written to OUT/model.tagger.

    The model keeps the column layout it was trained on, which evaluate reads gold files with."""
    from tagger.training.loop import train as run_training

    if encoding is not None:
        checked_option_encoding(encoding)
    if resume and overwrite:
        raise typer.BadParameter(
            "--resume continues the run in OUT and --overwrite replaces it: give one of them",
            param_hint="'--overwrite'",
        )
    with domain_errors():
        given = {
            "data.train": None if train_file is None else str(train_file),
            "data.dev": None if dev_file is None else str(dev_file),
            "data.token_column": token_column,
            "data.label_column": label_column,
            "data.delimiter": delimiter,
            "data.encoding": encoding,
            "train.threads": threads,
        }
        config = config_from_options(config_path, overrides, given)
    with domain_errors(
        column_files=[name for name in (config.data.train, config.data.dev) if name]
    ):
        try:
            result = run_training(
                config, out, resume=resume, progress=TrainingProgress(), overwrite=overwrite
            )
        except KeyboardInterrupt as stop:
            words, code = stopped_words(stop)
            ending = "\n" if sys.stderr.isatty() else ""  # off the progress bar's line
            say(
                f"{ending}tagger: {words}: continue with the same command and --resume "
                f"(run folder {out})"
            )
            raise typer.Exit(code) from None
    if result.rank:  # under torchrun, rank 0 says how the run ended
        raise typer.Exit(1 if result.diverged else 0)
    if result.diverged:
        say(f"tagger: error: {result.stop_reason}")
        raise typer.Exit(1)
    say(f"stopped: {result.stop_reason}")
    say(
        f"best dev F1 {100 * result.best_dev['micro']['f1']:.2f} at epoch {result.best_epoch}; model: {result.model_path}"
    )
    if result.model_path.exists():
        from tagger.network.modelfile import load_model_file
        from tagger.reports.notes import stored_text_note

        with domain_errors():
            say(stored_text_note(load_model_file(result.model_path)[1]))


@app.command(
    epilog=examples(
        "tagger evaluate runs/demo/model.tagger data/demo/test.txt",
        "tagger evaluate runs/demo/model.tagger test.txt --html test.html",
    )
)
def evaluate(
    model: ModelFile,
    files: Annotated[
        list[Path],
        input_argument("Gold column files to tag and score ('-' for standard input)."),
    ],
    predictions: Annotated[
        Path | None,
        typer.Option("--predictions", dir_okay=False, help="Write the predicted column file here."),
    ] = None,
    side_by_side: Annotated[
        Path | None,
        typer.Option(
            "--side-by-side",
            dir_okay=False,
            help="Write token, gold label, tagged label and same/DIFF here, one token a line.",
        ),
    ] = None,
    examples: Annotated[
        int,
        typer.Option(min=0, help="Example sentences shown per kind of error (0: none)."),
    ] = 3,
    resamples: Annotated[
        int,
        typer.Option(
            min=0,
            help="Seeded draws of the sentences for the interval printed beside F1 (0: none).",
        ),
    ] = 1000,
    review_below: Annotated[
        float,
        typer.Option(
            min=0.0,
            max=1.0,
            help="Count the sentences tag would flag for review at this threshold (0 to 1).",
        ),
    ] = 0.8,
    html: Annotated[
        Path | None,
        typer.Option(
            "--html",
            dir_okay=False,
            help="Also write the results as one self-contained web page here: charts per type, "
            "the training curve when the run folder is beside the model, the worst sentences.",
        ),
    ] = None,
    token_column: GivenTokenColumn = None,
    label_column: GivenLabelColumn = None,
    delimiter: GivenDelimiter = None,
    encoding: Encoding = "utf-8",
    as_json: AsJson = False,
) -> None:
    """Tag gold files with a model and report span scores per type, with the error breakdown,
    the types wrong-type spans got, example sentences, an interval for F1, how often scores are
    right and what the review flag catches; --html also draws them on one page.

    Gold files are read in the column layout of the model's training files unless the column
    options say otherwise."""
    from tagger.apply.evaluate import evaluate_files
    from tagger.apply.tagger import Tagger
    from tagger.data.atomic import atomic_output
    from tagger.reports.notes import CAUTION
    from tagger.reports.page import evaluation_page, require_report_extra, run_epochs
    from tagger.reports.scores import format_evaluation

    readable_inputs(("FILES", files))
    given = column_format(
        delimiter or "auto",
        token_column or 0,
        -1 if label_column is None else label_column,
        encoding=encoding,
    )
    usable_output(predictions, [model, *files])
    usable_output(html, [model, *files])
    if html is not None:
        with domain_errors():
            require_report_extra()
    with domain_errors(column_files=files):
        tagger = Tagger.load(model)
        for note in tagger.notes:
            say(f"note: {note}")
        fmt = _gold_layout(tagger.column_layout, given, token_column, label_column, delimiter)
        result = evaluate_files(
            tagger,
            files,
            fmt,
            predictions,
            side_by_side=side_by_side,
            examples=examples,
            resamples=resamples,
            review_below=review_below,
            worst=WORST_ON_PAGE if html is not None else 0,
        )
        if html is not None:
            history, history_note = run_epochs(model)
            page = evaluation_page(result, history, history_note)
            with atomic_output(html) as out:
                out.write(page)
            if history is None:
                say(f"note: {history_note}")
    if as_json:
        print_json(result)
    else:
        print(format_evaluation(result), end="")
    say(CAUTION)


def _gold_layout(
    stored: ColumnFormat | None,
    given: ColumnFormat,
    token_column: int | None,
    label_column: int | None,
    delimiter: str | None,
) -> ColumnFormat:
    """How evaluate reads gold files: each column option given wins, the rest come from the
    layout the model was trained on (the defaults for a model that does not know it). Says so
    when the stored layout is not the default one."""
    if stored is None:
        return given
    fmt = replace(
        given,
        token_column=stored.token_column if token_column is None else given.token_column,
        label_column=stored.label_column if label_column is None else given.label_column,
        delimiter=stored.delimiter if delimiter is None else given.delimiter,
    )
    taken = [
        f"{name} {shown}"
        for name, option, shown, default in (
            ("token column", token_column, fmt.token_column, 0),
            ("label column", label_column, fmt.label_column, -1),
            ("delimiter", delimiter, fmt.delimiter or "auto", "auto"),
        )
        if option is None and shown != default
    ]
    if taken:
        say(f"note: gold files read as the model's training files were: {', '.join(taken)}")
    return fmt


@app.command(
    "export",
    epilog=examples(
        "tagger export runs/demo/model.tagger runs/demo/model.tagexport",
        "tagger export runs/demo/model.tagger runs/demo/model-int8.tagexport --int8",
    ),
)
def export(
    model: ModelFile,
    out: Annotated[
        Path,
        typer.Argument(dir_okay=False, help="Export file to write (tag it with --backend onnx)."),
    ],
    int8: Annotated[
        bool,
        typer.Option(
            "--int8",
            help="Store the linear and recurrent weights and the embedding tables (a frozen "
            "vector table too) as 8-bit integers (dynamic quantisation): smaller and faster, "
            "scores change slightly.",
        ),
    ] = False,
) -> None:
    """Write a model's network as ONNX graphs, with its CRF and vocabularies, in one export file
    that tags without torch."""
    from tagger.apply.exporting import export_model, require_export_packages
    from tagger.reports.layout import number

    with domain_errors():
        require_export_packages()
    usable_output(out, [model])
    with domain_errors():
        sizes = export_model(model, out, int8=int8)
    shown = ", ".join(f"{name} {number(size)} bytes" for name, size in sizes.items())
    say(f"wrote {out} ({'int8' if int8 else 'float32'} weights; graphs: {shown})")
