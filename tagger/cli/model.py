"""Commands that make or measure a model: train, evaluate."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated

import typer

from tagger.cli.common import (
    AsJson,
    Delimiter,
    LabelColumn,
    ModelFile,
    TokenColumn,
    app,
    column_format,
    domain_errors,
    input_argument,
    print_json,
    readable_inputs,
    say,
)
from tagger.cli.progress import TrainingProgress


@app.command()
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
    overrides: Annotated[
        list[str] | None,
        typer.Option(
            "--set", help="Override a config key, e.g. --set model.cell=gru (repeatable)."
        ),
    ] = None,
    resume: Annotated[
        bool, typer.Option("--resume", help="Continue from the run folder's last checkpoint.")
    ] = False,
) -> None:
    """Train a tagger; the best model by dev span F1 is written to OUT/model.tagger."""
    from tagger.config import apply_overrides, load_config
    from tagger.training.loop import train as run_training

    with domain_errors():
        config = load_config(config_path)
        extra = list(overrides or [])
        if train_file:
            extra.append(f"data.train={json.dumps(str(train_file))}")
        if dev_file:
            extra.append(f"data.dev={json.dumps(str(dev_file))}")
        config = apply_overrides(config, extra)
        try:
            result = run_training(config, out, resume=resume, progress=TrainingProgress())
        except KeyboardInterrupt:
            say(f"\ninterrupted: continue with the same command and --resume (run folder {out})")
            raise typer.Exit(130) from None
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


@app.command()
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
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    delimiter: Delimiter = "auto",
    as_json: AsJson = False,
) -> None:
    """Tag gold files with a model and report span scores per type, with the error breakdown,
    the types wrong-type spans got, example sentences, an interval for F1, how often scores are
    right and what the review flag catches."""
    from tagger.apply.evaluate import evaluate_files
    from tagger.apply.tagger import Tagger
    from tagger.reports.notes import CAUTION
    from tagger.reports.scores import format_evaluation

    readable_inputs(("files", files))
    with domain_errors():
        tagger = Tagger.load(model)
        result = evaluate_files(
            tagger,
            files,
            column_format(delimiter, token_column, label_column),
            predictions,
            side_by_side=side_by_side,
            examples=examples,
            resamples=resamples,
            review_below=review_below,
        )
    if as_json:
        print_json(result)
    else:
        print(format_evaluation(result), end="")
    say(CAUTION)
