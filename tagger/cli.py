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
    lexicons: Annotated[
        list[Path] | None,
        typer.Option(
            "--lexicon",
            exists=True,
            dir_okay=False,
            help="A lexicon file ('entry' or 'entry<TAB>type' per line) whose coverage of the "
            "annotated spans to report (repeatable).",
        ),
    ] = None,
    lexicon_case: Annotated[
        str, typer.Option(help="How lexicon entries meet tokens: ignore, exact or smart.")
    ] = "ignore",
    as_json: AsJson = False,
) -> None:
    """Inspect annotated column files: counts, scheme, ill-formed tags, leakage, inconsistencies,
    values of extra columns and lexicon coverage."""
    from tagger.data.check import check_files, format_check
    from tagger.text.lexicon import CASE_MODES, read_lexicon

    if lexicon_case not in CASE_MODES:
        raise typer.BadParameter(
            f"must be one of {', '.join(CASE_MODES)}, not {lexicon_case!r}",
            param_hint="--lexicon-case",
        )
    with _domain_errors():
        loaded = [read_lexicon(path, lexicon_case) for path in lexicons or []]
        report = check_files(files, _format(delimiter, token_column, label_column), lexicons=loaded)
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
    from tagger.data.check import convert_file

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
    from tagger.scoring.files import score_files
    from tagger.scoring.metrics import format_report

    gold_fmt = _format(delimiter, token_column, label_column)
    pred_fmt = _format(
        delimiter,
        token_column,
        label_column if predicted_label_column is None else predicted_label_column,
    )
    with _domain_errors():
        result = score_files(gold, predicted, gold_fmt, pred_fmt)
    _print_json(result) if as_json else print(format_report(result))


def _duration(seconds: float) -> str:
    minutes, seconds = divmod(round(seconds), 60)
    return f"{minutes}m{seconds:02d}s" if minutes else f"{seconds}s"


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
            best = event["best_dev_f1"]
            best_text = f"best dev F1 {100 * best:.2f}, " if best >= 0 else ""
            sys.stderr.write(
                f"\r\033[Kepoch {event['epoch']}/{event['epochs']} [{bar:<20}] "
                f"loss {event['loss']:.4f}, {event['tokens_per_second']:,.0f} tok/s, {best_text}"
                f"about {_duration(event['run_seconds_left'])} left"
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
    from tagger.training.loop import train as run_training

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
    from tagger.apply.evaluate import evaluate_files
    from tagger.apply.tagger import load_trained
    from tagger.scoring.metrics import format_report

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


class _TaggingProgress:
    """Documents and tokens per second on one redrawn line, only when stderr is a terminal."""

    def __init__(self) -> None:
        self.live = sys.stderr.isatty()
        self.last_draw = 0.0

    def __call__(self, summary: Any) -> None:
        if not self.live or time.monotonic() - self.last_draw < 0.5:
            return
        self.last_draw = time.monotonic()
        sys.stderr.write(
            f"\r{summary.documents:,} documents, {summary.tokens:,} tokens, "
            f"{summary.tokens_per_second:,.0f} tokens/s "
        )
        sys.stderr.flush()

    def clear(self) -> None:
        if self.live and self.last_draw:
            sys.stderr.write("\r\033[K")


def _count(n: int, noun: str) -> str:
    return f"{n:,} {noun}{'' if n == 1 else 's'}"


def _inputs(paths: list[Path] | None) -> list[str]:
    """Input paths as given; '-' is standard input. Missing files are a usage error (exit 2)."""
    names = [str(p) for p in paths or []]
    for name in names:
        if name != "-" and not Path(name).is_file():
            raise typer.BadParameter(f"file {name!r} does not exist", param_hint="INPUT")
    return names


@app.command()
def tag(
    model: ExistingFile,
    inputs: Annotated[
        list[Path] | None,
        typer.Argument(help="Files to tag, in order; '-' or none reads standard input."),
    ] = None,
    out: Annotated[
        Path, typer.Option("--out", "-o", dir_okay=False, help="Output file ('-' for stdout).")
    ] = Path("-"),
    input_format: Annotated[
        str,
        typer.Option(
            help="auto, text, jsonl or columns. auto reads .jsonl/.json as jsonl, "
            ".conll/.bio/.iob/.tsv as columns, anything else (and stdin) as text."
        ),
    ] = "auto",
    output_format: Annotated[
        str,
        typer.Option(
            help="jsonl (a record per document), columns (token and label per line) or "
            "table (tab-separated spans with a header)."
        ),
    ] = "jsonl",
    scheme: Annotated[
        str | None,
        typer.Option(help="Label scheme of columns output (default: that of the training files)."),
    ] = None,
    token_column: TokenColumn = 0,
    min_score: Annotated[float, typer.Option(help="Drop spans scoring below this (0 to 1).")] = 0.0,
    review_below: Annotated[
        float,
        typer.Option(help="Flag documents holding a span that scores below this (0 to 1)."),
    ] = 0.8,
    on_error: Annotated[
        str,
        typer.Option(
            help="stop: exit 1 at the first bad input item; skip: go on and list each one."
        ),
    ] = "stop",
    max_sentence_tokens: Annotated[
        int | None,
        typer.Option(help="Longest sentence accepted (default: the model's tokenizer setting)."),
    ] = None,
    threads: Annotated[
        int, typer.Option(help="torch threads per process (0: all cores, or 1 per worker).")
    ] = 0,
    workers: Annotated[
        int, typer.Option(help="Worker processes, each holding the model once.")
    ] = 1,
    batch_size: Annotated[int, typer.Option(help="Sentences per batch.")] = 64,
    chunk_chars: Annotated[
        int, typer.Option(help="Characters of text read, tagged and written at a time.")
    ] = 200_000,
) -> None:
    """Tag new documents with a model; spans point into the original text by character offsets."""
    from tagger.apply.tagging import TagOptions, tag_files

    names = _inputs(inputs)
    try:
        options = TagOptions(
            input_format=input_format,
            output_format=output_format,
            scheme=scheme,
            token_column=token_column,
            min_score=min_score,
            review_below=review_below,
            on_error=on_error,
            max_sentence_tokens=max_sentence_tokens,
            batch_size=batch_size,
            chunk_chars=chunk_chars,
            workers=workers,
            threads=threads,
        )
    except TaggerError as error:
        raise typer.BadParameter(str(error)) from None
    progress = _TaggingProgress()
    try:
        with _domain_errors():
            summary = tag_files(model, names, out, options, progress)
    finally:
        progress.clear()
    for note in summary.notes:
        _say(f"note: {note}")
    _say(
        f"tagged {_count(summary.documents, 'document')} ({summary.review:,} to review), "
        f"{_count(summary.sentences, 'sentence')}, {_count(summary.tokens, 'token')}, "
        f"{_count(summary.spans, 'span')} in {summary.seconds:.1f} s "
        f"({summary.tokens_per_second:,.0f} tokens/s); {len(summary.skipped)} skipped"
    )
    for item in summary.skipped:
        _say(f"  skipped {item}")


@app.command()
def tokenize(
    inputs: Annotated[
        list[Path] | None,
        typer.Argument(help="Text or jsonl files; '-' or none reads standard input."),
    ] = None,
    model: Annotated[
        Path | None,
        typer.Option(
            "--model", exists=True, dir_okay=False, help="Use this model's tokenizer settings."
        ),
    ] = None,
    input_format: Annotated[
        str, typer.Option(help="auto (from the file name), text or jsonl.")
    ] = "auto",
    out: Annotated[
        Path, typer.Option("--out", "-o", dir_okay=False, help="Output file ('-' for stdout).")
    ] = Path("-"),
) -> None:
    """Show the sentences and tokens the tagger sees: token, start and end offsets per line."""
    from tagger.apply.tagging import tokenize_files
    from tagger.text.tokenizer import TokenizerSettings

    names = _inputs(inputs)
    if input_format not in ("auto", "text", "jsonl"):
        raise typer.BadParameter(
            f"must be auto, text or jsonl, not {input_format!r}", param_hint="--input-format"
        )
    with _domain_errors():
        settings = TokenizerSettings()
        if model is not None:
            from tagger.apply.tagging import tokenizer_settings
            from tagger.network.modelfile import load_model_file

            settings = tokenizer_settings(load_model_file(model)[1])
        notes = tokenize_files(names, out, settings, input_format)
    for note in notes:
        _say(f"note: {note}")
