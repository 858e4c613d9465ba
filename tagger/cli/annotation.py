"""Commands of the annotation loop: pick (what to annotate next), cross-validate,
learning-curve (whether more annotation pays)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any

import typer

from tagger.apply.documents import InputFormat
from tagger.apply.pick_options import LengthNorm, Measure
from tagger.cli.common import (
    AsJson,
    ConfigOverrides,
    ModelFile,
    TokenColumn,
    app,
    config_from_options,
    domain_errors,
    print_json,
    say,
    usable_output,
)
from tagger.cli.help import examples
from tagger.cli.progress import TrainingProgress
from tagger.cli.tagging import _document_inputs
from tagger.data.io import is_stdio
from tagger.text.near_duplicates import THRESHOLD


@app.command(
    epilog=examples(
        "tagger pick runs/demo/model.tagger pool.txt --count 50 -o next.conll",
        "tagger pick runs/demo/model.tagger notes.jsonl --length per-token -o n.conll",
    )
)
def pick(
    model: ModelFile,
    inputs: Annotated[
        list[Path] | None,
        typer.Argument(
            help="The pool: text, jsonl or column files of unannotated sentences; '-' or none "
            "reads standard input."
        ),
    ] = None,
    out: Annotated[
        Path,
        typer.Option(
            "--out",
            "-o",
            dir_okay=False,
            help="Column file of the picked sentences, pre-filled with the model's labels "
            "('-' for stdout).",
        ),
    ] = Path("-"),
    count: Annotated[int, typer.Option(min=1, help="How many sentences to pick.")] = 20,
    measure: Annotated[
        Measure,
        typer.Option(
            help="entropy: the token entropies of the CRF's marginals summed over the "
            "sentence; least-confidence: 1 - the probability of the best label path.",
            case_sensitive=False,
        ),
    ] = Measure.ENTROPY,
    length: Annotated[
        LengthNorm,
        typer.Option(
            help="How sentence length counts: none (totals: long sentences rise), per-token "
            "(divided by the length), sqrt (divided by its square root).",
            case_sensitive=False,
        ),
    ] = LengthNorm.NONE,
    alike: Annotated[
        float,
        typer.Option(
            min=0.01,
            max=1.0,
            help="Pass over a sentence whose character 4-gram similarity to one picked before "
            "is at least this (1: only exact repeats).",
        ),
    ] = THRESHOLD,
    input_format: Annotated[
        InputFormat,
        typer.Option(
            help="auto reads .jsonl/.json as jsonl, .conll/.bio/.iob/.tsv as columns, anything "
            "else (and stdin) as text; or text, sentence-lines, lines.",
            case_sensitive=False,
        ),
    ] = InputFormat.AUTO,
    token_column: TokenColumn = 0,
    as_json: AsJson = False,
) -> None:
    """Pick the pool sentences the model is least sure of, to annotate next.

    Each picked sentence is written with the model's labels for correcting, after a
    '-DOCSTART- picked' line whose JSON object holds its rank, its uncertainty and where it came
    from (file, document id, character offsets); check and train read the file as it is. The
    list goes to stderr (or stdout with --json)."""
    from tagger.apply.picking import pick_sentences
    from tagger.apply.tagger import Tagger
    from tagger.data.corpus import write_columns
    from tagger.reports.annotation import format_picks
    from tagger.reports.notes import RepeatedNotes

    if as_json and is_stdio(out):
        raise typer.BadParameter(
            "--json prints to stdout, where the picked sentences would go too: name a file "
            "with --out",
            param_hint="'--json'",
        )
    names = _document_inputs(inputs)
    usable_output(out, [model, *(names or ["-"])])
    notes = RepeatedNotes()
    with domain_errors():
        tagger = Tagger.load(model)
        picked = pick_sentences(
            tagger,
            names or ["-"],
            count,
            measure,
            length,
            alike,
            input_format.value,
            token_column,
            notes,
        )
        write_columns(out, picked.sentences)
    rows = [
        {
            "rank": t.rank,
            "score": t.score,
            "tokens": s.tokens,
            "file": t.file,
            "document": t.document,
            "at": [t.start, t.end],
        }
        for t, s in zip(picked.traces, picked.sentences, strict=True)
    ]
    summary: dict[str, Any] = {
        "pool": picked.pool_sentences,
        "passed_over": picked.passed_over,
        "measure": measure.value,
        "length_norm": length.value,
        "threshold": alike,
        "unknown_words": picked.unknown_words,
        "unknown_chars": picked.unknown_chars,
        "out": str(out),
        "warnings": picked.warnings,
    }
    for note in notes.lines():
        say(f"note: {note}")
    if as_json:
        print_json({"picked": rows, **summary})
    else:
        say(format_picks(rows, summary).rstrip("\n"))


@app.command(
    "cross-validate",
    epilog=examples(
        "tagger cross-validate --train train.txt --out runs/cv",
        "tagger cross-validate --train train.txt --folds 10 --set train.epochs=10",
    ),
)
def cross_validate(
    config_path: Annotated[
        Path | None, typer.Option("--config", exists=True, dir_okay=False, help="TOML config file.")
    ] = None,
    train_file: Annotated[
        Path | None,
        typer.Option(
            "--train",
            exists=True,
            dir_okay=False,
            help="Annotated column file to cut into folds (overrides data.train).",
        ),
    ] = None,
    folds: Annotated[int, typer.Option(min=2, help="How many folds (k).")] = 5,
    out: Annotated[
        Path,
        typer.Option(
            "--out", file_okay=False, help="Folder for each fold's run and cross-validation.json."
        ),
    ] = Path("runs/cross-validation"),
    overrides: ConfigOverrides = None,
    overwrite: Annotated[
        bool,
        typer.Option("--overwrite", help="Replace the fold runs OUT already holds."),
    ] = False,
    html: Annotated[
        Path | None,
        typer.Option(
            "--html",
            dir_okay=False,
            help="Also write the folds' scores as one self-contained web page here.",
        ),
    ] = None,
    as_json: AsJson = False,
) -> None:
    """Cross-validate a config: train k models, each scored on the fold it did not train on.

    Documents (-DOCSTART- lines) stay whole in one fold; without them sentences are dealt at
    random (train.seed). Reports the mean and standard deviation of span F1 per type."""
    from tagger.data.atomic import atomic_output
    from tagger.reports.annotation import format_cross_validation
    from tagger.reports.page import cross_validation_page, require_report_extra
    from tagger.training.cross_validation import cross_validate as run

    usable_output(html, [path for path in (config_path, train_file) if path])
    with domain_errors():
        if html is not None:
            require_report_extra()
        given = {"data.train": None if train_file is None else str(train_file)}
        config = config_from_options(config_path, overrides, given)

    def progress(fold: int) -> Any:
        shown = TrainingProgress()

        def report(event: dict[str, Any]) -> None:
            if event["event"] == "start":  # one header line a fold, not the whole run header
                say(f"fold {fold} of {folds}: training in {out / f'fold-{fold}'}")
            elif event["event"] != "note" or fold == 1:  # notes repeat in every fold
                shown(event)

        return report

    with domain_errors(column_files=[config.data.train] if config.data.train else []):
        result = run(config, out, folds, progress, overwrite)
        data = result.to_dict()
        if html is not None:
            with atomic_output(html) as page:
                page.write(cross_validation_page(data))
    if as_json:
        print_json(data)
    else:
        print(format_cross_validation(data), end="")


def _fractions(text: str) -> list[float]:
    """'10,20,40' or '0.1,0.2,0.4' -> fractions; numbers above 1 are percentages."""
    try:
        values = [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise typer.BadParameter(f"expected numbers separated by commas; got {text!r}") from None
    return [value / 100 if value > 1 else value for value in values]


@app.command(
    "learning-curve",
    epilog=examples(
        "tagger learning-curve --train train.txt --dev dev.txt --out runs/curve",
        "tagger learning-curve --config c.toml --shares 10,25,50,100 --seeds 3 --jobs 2",
    ),
)
def learning_curve(
    config_path: Annotated[
        Path | None, typer.Option("--config", exists=True, dir_okay=False, help="TOML config file.")
    ] = None,
    train_file: Annotated[
        Path | None,
        typer.Option(
            "--train",
            exists=True,
            dir_okay=False,
            help="Annotated column file to take growing shares of (overrides data.train).",
        ),
    ] = None,
    dev_file: Annotated[
        Path | None,
        typer.Option(
            "--dev",
            exists=True,
            dir_okay=False,
            help="Column file for choosing each model's best epoch (overrides data.dev).",
        ),
    ] = None,
    score_on: Annotated[
        Path | None,
        typer.Option(
            "--score-on",
            exists=True,
            dir_okay=False,
            help="Column file each model is scored on (default: the dev file).",
        ),
    ] = None,
    shares: Annotated[
        str,
        typer.Option(
            "--shares",
            metavar="PERCENTS",
            help="Shares of the training sentences, in percent, separated by commas.",
        ),
    ] = "10,20,40,70,100",
    seeds: Annotated[
        int, typer.Option(min=1, help="Models per share, each on its own shuffle and seed.")
    ] = 1,
    jobs: Annotated[
        int, typer.Option(min=1, help="Models trained at once, one process and thread each.")
    ] = 1,
    out: Annotated[
        Path,
        typer.Option(
            "--out", file_okay=False, help="Folder for each model's run and learning-curve.json."
        ),
    ] = Path("runs/learning-curve"),
    overrides: ConfigOverrides = None,
    overwrite: Annotated[
        bool,
        typer.Option("--overwrite", help="Replace the runs OUT already holds."),
    ] = False,
    html: Annotated[
        Path | None,
        typer.Option(
            "--html",
            dir_okay=False,
            help="Also write the curve as one self-contained web page here.",
        ),
    ] = None,
    as_json: AsJson = False,
) -> None:
    """Train on growing shares of the training file, score each model, fit a learning curve
    F1(n) = a - b n^-c and say what doubling the annotation is expected to give.

    Each seed shuffles the sentences once and every share takes the start of that shuffle, so
    a larger share holds the smaller ones."""
    from tagger.data.atomic import atomic_output
    from tagger.reports.annotation import format_learning_curve
    from tagger.reports.page import learning_curve_page, require_report_extra
    from tagger.training.learning_curve import learning_curve as run

    fractions = _fractions(shares)
    usable_output(html, [path for path in (config_path, train_file, dev_file, score_on) if path])
    with domain_errors():
        if html is not None:
            require_report_extra()
        given = {
            "data.train": None if train_file is None else str(train_file),
            "data.dev": None if dev_file is None else str(dev_file),
        }
        config = config_from_options(config_path, overrides, given)

    def progress(point: Any) -> Any:
        shown = TrainingProgress()

        def report(event: dict[str, Any]) -> None:
            if event["event"] == "start":  # one header line a model, not the whole run header
                say(
                    f"{point.fraction:.0%} of train, seed {point.seed}: training in {out / point.folder}"
                )
            elif event["event"] != "note":
                shown(event)

        return report

    def done(record: dict[str, Any]) -> None:
        say(
            f"{record['fraction']:.0%} of train ({record['sentences']:,} sentences), seed "
            f"{record['seed']}: span F1 {100 * record['f1']:.2f}"
        )

    files = [name for name in (config.data.train, config.data.dev, score_on) if name]
    with domain_errors(column_files=files):
        result = run(config, out, fractions, seeds, jobs, score_on, progress, done, overwrite)
        if html is not None:
            with atomic_output(html) as page:
                page.write(learning_curve_page(result))
    if as_json:
        print_json(result)
    else:
        print(format_learning_curve(result), end="")
