"""Commands on new text: tag, tokenize."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from tagger.apply.documents import InputFormat
from tagger.apply.outputs import OutputFormat
from tagger.apply.tagging import Backend, OnError
from tagger.apply.tokenizing import TokenizeFormat
from tagger.cli.common import (
    TokenColumn,
    app,
    count,
    domain_errors,
    input_names,
    say,
    usable_output,
)
from tagger.cli.help import examples
from tagger.cli.progress import TaggingProgress
from tagger.data.io import is_stdio
from tagger.data.scheme_rules import SchemeName
from tagger.errors import TaggerError
from tagger.reports.layout import number
from tagger.reports.notes import CAUTION

_TEXT_FORMATS = (
    "text (a file is one document), sentence-lines (as text, and a line break ends a sentence), "
    "lines (every line is a document, its id FILE:LINE)"
)


def _document_inputs(paths: list[Path] | None) -> list[str]:
    """The input names, a folder or an unexpanded wildcard refused plainly (exit 2)."""
    from tagger.apply.documents import unopenable

    for path in paths or []:
        if not is_stdio(path):
            problem = unopenable(path, "")
            if problem:
                raise typer.BadParameter(f"{str(path)!r}: {problem}", param_hint="'INPUTS'")
    return input_names(paths)


@app.command(
    epilog=examples(
        "tagger tag runs/demo/model.tagger data/demo/new_reports.jsonl -o tagged.jsonl",
        "tagger tag runs/demo/model.tagger app.log --input-format lines",
    )
)
def tag(
    model: Annotated[
        Path,
        typer.Argument(
            exists=True,
            dir_okay=False,
            readable=True,
            help="Model file written by train (RUN_FOLDER/model.tagger), or with --backend onnx "
            "an export file written by export.",
        ),
    ],
    inputs: Annotated[
        list[Path] | None,
        typer.Argument(help="Files to tag, in order; '-' or none reads standard input."),
    ] = None,
    out: Annotated[
        Path, typer.Option("--out", "-o", dir_okay=False, help="Output file ('-' for stdout).")
    ] = Path("-"),
    input_format: Annotated[
        InputFormat,
        typer.Option(
            help=f"auto reads .jsonl/.json as jsonl, .conll/.bio/.iob/.tsv as columns, anything "
            f"else (and stdin) as text; {_TEXT_FORMATS}.",
            case_sensitive=False,
        ),
    ] = InputFormat.AUTO,
    output_format: Annotated[
        OutputFormat,
        typer.Option(
            help="jsonl (a record per document, its mentions and needs_review flag), columns "
            "(token and label per line) or table (tab-separated mentions with a header).",
            case_sensitive=False,
        ),
    ] = OutputFormat.JSONL,
    scheme: Annotated[
        SchemeName | None,
        typer.Option(
            help="Tagging scheme of columns output (default: that of the training files).",
            case_sensitive=False,
        ),
    ] = None,
    token_column: TokenColumn = 0,
    min_score: Annotated[
        float, typer.Option(help="Drop mentions whose confidence is below this (0 to 1).")
    ] = 0.0,
    review_below: Annotated[
        float,
        typer.Option(
            help="Flag documents where the model gives any token's label (in a span or not) "
            "a probability below this (0 to 1)."
        ),
    ] = 0.8,
    on_error: Annotated[
        OnError,
        typer.Option(
            help="stop: exit 1 at the first bad input item; skip: go on and list each one.",
            case_sensitive=False,
        ),
    ] = OnError.STOP,
    max_sentence_tokens: Annotated[
        int | None,
        typer.Option(help="Longest sentence accepted (default: the model's tokenizer setting)."),
    ] = None,
    threads: Annotated[
        int, typer.Option(help="Threads per process (0: all cores, or 1 per worker).")
    ] = 0,
    backend: Annotated[
        Backend,
        typer.Option(
            help="torch runs a model file; onnx runs an export file (tagger export) with "
            "onnxruntime, without torch.",
            case_sensitive=False,
        ),
    ] = Backend.TORCH,
    workers: Annotated[
        int, typer.Option(help="Worker processes, each holding the model once.")
    ] = 1,
    cluster: Annotated[
        str | None,
        typer.Option(
            metavar="ADDRESS",
            help="Tag on the workers of the Dask scheduler at this address (e.g. "
            "tcp://10.0.0.5:8786; the cluster extra); each worker must see the model file at "
            "the same path. The output is the same as on one machine.",
        ),
    ] = None,
    cluster_wait: Annotated[
        float, typer.Option(help="Seconds to wait for the --cluster scheduler to answer.")
    ] = 10.0,
    batch_size: Annotated[int, typer.Option(help="Sentences per batch.")] = 64,
    chunk_chars: Annotated[
        int, typer.Option(help="Characters of text read, tagged and written at a time.")
    ] = 200_000,
) -> None:
    """Tag new documents with a model; spans point into the original text by character offsets."""
    from tagger.apply.tagging import TagOptions, tag_files

    names = _document_inputs(inputs)
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
            backend=backend,
            cluster=cluster,
            cluster_wait=cluster_wait,
        )
    except TaggerError as error:
        raise typer.BadParameter(str(error)) from None
    usable_output(out, [model, *(names or ["-"])])
    progress = TaggingProgress()
    try:
        with domain_errors():
            summary = tag_files(model, names, out, options, progress)
    finally:
        progress.clear()
    for note in summary.notes:
        say(f"note: {note}")
    say(
        f"tagged {count(summary.documents, 'document')} ({number(summary.review)} to review), "
        f"{count(summary.sentences, 'sentence')}, {count(summary.tokens, 'token')}, "
        f"{count(summary.spans, 'span')} in {summary.seconds:.1f} s "
        f"({number(round(summary.tokens_per_second))} tokens/s); {number(len(summary.skipped))} skipped"
    )
    for item in summary.skipped:
        say(f"  skipped {item}")
    say(CAUTION)


@app.command(
    epilog=examples(
        "tagger tokenize notes.txt",
        "tagger tokenize app.log --input-format lines --model runs/demo/model.tagger",
    )
)
def tokenize(
    inputs: Annotated[
        list[Path] | None,
        typer.Argument(help="Text, lines or jsonl files; '-' or none reads standard input."),
    ] = None,
    model: Annotated[
        Path | None,
        typer.Option(
            "--model", exists=True, dir_okay=False, help="Use this model's tokenizer settings."
        ),
    ] = None,
    input_format: Annotated[
        TokenizeFormat,
        typer.Option(
            help=f"auto (from the file name), {_TEXT_FORMATS} or jsonl.", case_sensitive=False
        ),
    ] = TokenizeFormat.AUTO,
    out: Annotated[
        Path, typer.Option("--out", "-o", dir_okay=False, help="Output file ('-' for stdout).")
    ] = Path("-"),
) -> None:
    """Show the sentences and tokens the tagger sees: token, start and end offsets per line."""
    from tagger.apply.tokenizing import tokenize_files
    from tagger.text.tokenizer import TokenizerSettings

    names = _document_inputs(inputs)
    usable_output(out, [model, *(names or ["-"])])
    with domain_errors():
        settings = TokenizerSettings()
        model_notes: list[str] = []
        if model is not None:
            from tagger.apply.tagger import model_tokenizer_settings

            settings = model_tokenizer_settings(model, model_notes)
        notes = model_notes + tokenize_files(names, out, settings, input_format.value)
    for note in notes:
        say(f"note: {note}")
