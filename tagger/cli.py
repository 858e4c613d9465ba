"""The `tagger` command: parses options, calls library functions, turns errors into exit codes.

stdout carries data only (tables, JSON); notes and progress go to stderr.
Exit codes: 0 success, 1 a problem with the data, config or model (one clear line), 2 bad usage.
"""

from __future__ import annotations

import json
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated, Any

import typer

from tagger.corpus import ColumnFormat
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


def _say(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


@contextmanager
def _domain_errors() -> Iterator[None]:
    """Library errors become one line on stderr and exit code 1."""
    try:
        yield
    except TaggerError as error:
        _say(f"tagger: error: {error}")
        raise typer.Exit(1) from None


def _format(
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


def _print_json(data: Any) -> None:
    print(json.dumps(data, indent=2, ensure_ascii=False))


@app.command()
def check(
    files: Annotated[
        list[Path],
        typer.Argument(
            exists=True, dir_okay=False, help="Column files; the first is read as train."
        ),
    ],
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    delimiter: Delimiter = "auto",
    as_json: AsJson = False,
) -> None:
    """Inspect annotated column files: counts, scheme, ill-formed tags, leakage and inconsistencies."""
    from tagger.reports import check_files, format_check

    with _domain_errors():
        report = check_files(files, _format(delimiter, token_column, label_column))
    _print_json(report) if as_json else print(format_check(report))


@app.command()
def convert(
    source: ExistingFile,
    target: Annotated[Path, typer.Argument(dir_okay=False, help="Output file ('-' for stdout).")],
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
    from tagger.reports import convert_file

    with _domain_errors():
        summary = convert_file(
            source, target, to, _format(delimiter, token_column, label_column), source_scheme
        )
    _say(
        f"converted {summary['sentences']} sentences from {summary['source_scheme']} to {summary['target_scheme']}"
    )


@app.command()
def score(
    gold: ExistingFile,
    predicted: ExistingFile,
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    predicted_label_column: Annotated[
        int | None, typer.Option(help="Label column of PREDICTED if it differs.")
    ] = None,
    delimiter: Delimiter = "auto",
    as_json: AsJson = False,
) -> None:
    """Score a predicted column file against a gold one: strict span precision, recall and F1."""
    from tagger.evaluation import score_files
    from tagger.metrics import format_report

    gold_fmt = _format(delimiter, token_column, label_column)
    pred_fmt = _format(
        delimiter,
        token_column,
        label_column if predicted_label_column is None else predicted_label_column,
    )
    with _domain_errors():
        result = score_files(gold, predicted, gold_fmt, pred_fmt)
    _print_json(result) if as_json else print(format_report(result))


class _TrainingProgress:
    """A one-line progress bar on a terminal, plain lines per epoch otherwise."""

    def __init__(self) -> None:
        self.live = sys.stderr.isatty()
        self.started = time.monotonic()
        self.last_draw = 0.0

    def __call__(self, event: dict[str, Any]) -> None:
        kind = event["event"]
        if kind == "note":
            self._clear()
            _say(f"note: {event['message']}")
        elif kind == "batch" and self.live and time.monotonic() - self.last_draw > 0.2:
            self.last_draw = time.monotonic()
            done = event["batch"] / event["batches"]
            bar = "#" * int(20 * done)
            sys.stderr.write(
                f"\repoch {event['epoch']}/{event['epochs']} [{bar:<20}] loss {event['loss']:.4f} "
                f"{event['tokens_per_second']:,.0f} tok/s, epoch ends in {event['epoch_seconds_left']:.0f}s "
            )
            sys.stderr.flush()
        elif kind == "epoch":
            self._clear()
            mark = " *best*" if event["best"] else ""
            _say(
                f"epoch {event['epoch']:>3}  loss/token {event['train_loss_per_token']:.4f}  "
                f"dev F1 {100 * event['dev_f1']:.2f}{mark}  {event['train_tokens_per_second']:,.0f} tok/s  "
                f"{event['epoch_seconds']:.0f}s  (elapsed {time.monotonic() - self.started:.0f}s)"
            )

    def _clear(self) -> None:
        if self.live:
            sys.stderr.write("\r\033[K")


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
    from tagger.train import train as run_training

    with _domain_errors():
        config = load_config(config_path)
        extra = list(overrides or [])
        if train_file:
            extra.append(f"data.train={json.dumps(str(train_file))}")
        if dev_file:
            extra.append(f"data.dev={json.dumps(str(dev_file))}")
        config = apply_overrides(config, extra)
        try:
            result = run_training(config, out, resume=resume, progress=_TrainingProgress())
        except KeyboardInterrupt:
            _say(f"\ninterrupted: continue with the same command and --resume (run folder {out})")
            raise typer.Exit(130) from None
    if result.diverged:
        _say(f"tagger: error: {result.stop_reason}")
        raise typer.Exit(1)
    _say(f"stopped: {result.stop_reason}")
    _say(
        f"best dev F1 {100 * result.best_dev['micro']['f1']:.2f} at epoch {result.best_epoch}; model: {result.model_path}"
    )


@app.command()
def evaluate(
    model: ExistingFile,
    files: Annotated[
        list[Path], typer.Argument(exists=True, dir_okay=False, help="Gold column files.")
    ],
    predictions: Annotated[
        Path | None,
        typer.Option("--predictions", dir_okay=False, help="Write the predicted column file here."),
    ] = None,
    token_column: TokenColumn = 0,
    label_column: LabelColumn = -1,
    delimiter: Delimiter = "auto",
    as_json: AsJson = False,
) -> None:
    """Tag gold files with a model and report span scores per type, with the error breakdown."""
    from tagger.evaluation import evaluate_files
    from tagger.metrics import format_report
    from tagger.predict import load_trained

    with _domain_errors():
        tagger = load_trained(model)
        result = evaluate_files(
            tagger, files, _format(delimiter, token_column, label_column), predictions
        )
    if as_json:
        _print_json(result)
        return
    for entry in result["files"]:
        print(f"== {entry['file']} ({entry['sentences']} sentences)")
        print(format_report(entry))
    if len(result["files"]) > 1:
        print("== all files")
        print(format_report(result["overall"]))
