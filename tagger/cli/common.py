"""What every command shares: the typer app, common options, error handling, signals and output.

Errors: a library error (TaggerError) or an operating-system one (a missing folder, a full disk)
is one line on stderr and exit code 1 (`domain_errors`). Signals: Ctrl-C and SIGTERM both unwind
the command (temporary files removed, the run folder's lock released) and end it with one line,
exit code 130 or 143 (128 + the signal's number, as shells report it).
"""

from __future__ import annotations

import io
import json
import os
import re
import signal
import sys
import threading
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from types import FrameType
from typing import Annotated, Any

import typer
from typer._click.exceptions import NoArgsIsHelpError, UsageError
from typer.core import TyperGroup

from tagger.cli.help import readable_placeholders, reflowed
from tagger.data.atomic import check_output, refuse_input_as_output
from tagger.data.column_lines import DelimiterChoice
from tagger.data.corpus import ColumnFormat
from tagger.data.io import checked_encoding, input_name, is_stdio
from tagger.errors import NotDecodableError, TaggerError
from tagger.reports.layout import count
from tagger.version import package_version

__all__ = [
    "AsJson",
    "Delimiter",
    "Encoding",
    "LabelColumn",
    "ModelFile",
    "Terminated",
    "TokenColumn",
    "app",
    "checked_option_encoding",
    "column_format",
    "count",
    "domain_errors",
    "input_argument",
    "input_names",
    "input_option",
    "print_json",
    "readable_inputs",
    "say",
    "stopped_words",
    "usable_output",
]

# The exit code of a command whose reader closed standard output early (`tagger convert IN - |
# head -1`): that of a filter ended by SIGPIPE (128 + 13), as a shell reports it.
CLOSED_PIPE = 141


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised in the main thread so that the command unwinds exactly as on Ctrl-C."""


def stopped_words(stop: KeyboardInterrupt) -> tuple[str, int]:
    """What to say when a command was stopped by a signal, and its exit code."""
    if isinstance(stop, Terminated):
        return "terminated (SIGTERM)", 128 + signal.SIGTERM
    return "interrupted", 128 + signal.SIGINT


@contextmanager
def _sigterm_unwinds() -> Iterator[None]:
    """While the block runs, SIGTERM raises Terminated; a second SIGTERM kills as usual."""
    if threading.current_thread() is not threading.main_thread():
        yield  # only the main thread may set handlers (and only it receives signals)
        return

    def terminate(signum: int, frame: FrameType | None) -> None:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        raise Terminated

    previous = signal.signal(signal.SIGTERM, terminate)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


class _Commands(TyperGroup):
    """The command group: every command runs with SIGTERM handled; a command stopped by a signal
    ends with one line instead of a traceback, and one whose reader stops reading its standard
    output ends quietly with CLOSED_PIPE (no traceback, no error line)."""

    def get_command(self, ctx: typer.Context, name: str) -> Any:
        command = super().get_command(ctx, name)
        if command is not None:
            readable_placeholders(command, ctx)
            reflowed(command)
        return command

    def format_help(self, ctx: typer.Context, formatter: Any) -> None:
        readable_placeholders(self, ctx)  # the options of the app itself (--version, --help)
        super().format_help(ctx, formatter)

    def invoke(self, ctx: typer.Context) -> Any:
        with _sigterm_unwinds():
            try:
                result = super().invoke(ctx)
                sys.stdout.flush()  # so that output still buffered fails here rather than at exit
                return result
            except BrokenPipeError:
                _discard_stdout()
                raise typer.Exit(CLOSED_PIPE) from None
            except KeyboardInterrupt as stop:
                words, code = stopped_words(stop)
                say(f"tagger: {words}; unfinished output files were removed")
                raise typer.Exit(code) from None
            except NoArgsIsHelpError:
                raise  # a command given nothing shows its help
            except UsageError as error:
                say(usage_error_line(error))
                raise typer.Exit(error.exit_code) from None


def usage_error_line(error: UsageError) -> str:
    """A usage error as one line, like every other error: the command, what was wrong with which
    argument, and where the usage is shown. (The default is a framed box whose width cuts long
    file names in two.)"""
    command = error.ctx.command_path if error.ctx is not None else "tagger"
    message = " ".join(error.format_message().split()).rstrip(".")
    # "Invalid value for 'FILES': Value error, ..." -> "FILES: ..."
    message = re.sub(
        r"^Invalid value(?: for '?([^':]*)'?)?: (?:Value error, )?",
        lambda found: f"{found[1]}: " if found[1] else "",
        message,
    )
    return f"{command}: error: {message} (see {command} --help)"


def _discard_stdout() -> None:
    """Point standard output at the null device, so that Python's own flush at exit, of what is
    still buffered, does not fail a second time."""
    try:
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, sys.stdout.fileno())
        os.close(null)
    except (OSError, ValueError, io.UnsupportedOperation):
        pass  # not a real file (a test runner's capture): nothing will flush to a closed pipe


app = typer.Typer(
    cls=_Commands,
    add_completion=True,  # choices are enums, so shells can offer them
    no_args_is_help=True,
    help="Train, evaluate and run sequence taggers on annotated column files, on CPUs.",
)

TokenColumn = Annotated[
    int, typer.Option(help="Column holding the token (0-based; negative counts from the end).")
]
LabelColumn = Annotated[
    int, typer.Option(help="Column holding the label (0-based; -1 is the last).")
]
Delimiter = Annotated[
    DelimiterChoice,
    typer.Option(
        help="Column separator: found from the first lines, one TAB, or runs of spaces/TABs.",
        case_sensitive=False,
    ),
]
Encoding = Annotated[
    str,
    typer.Option(help="Encoding of the column files, e.g. latin-1 or cp1252 for older files."),
]
ConfigOverrides = Annotated[
    list[str] | None,
    typer.Option("--set", help="Override a config key, e.g. --set train.epochs=10 (repeatable)."),
]
AsJson = Annotated[
    bool, typer.Option("--json", help="Print machine-readable JSON instead of a table.")
]
ModelFile = Annotated[
    Path,
    typer.Argument(
        exists=True,
        dir_okay=False,
        readable=True,
        help="Model file written by train (RUN_FOLDER/model.tagger).",
    ),
]


def _print_version(wanted: bool) -> None:
    if wanted:
        print(f"tagger {package_version()}")
        raise typer.Exit()


@app.callback()
def _options(
    version: Annotated[
        bool,
        typer.Option(
            "--version",
            callback=_print_version,
            is_eager=True,
            help="Print the installed version and exit.",
        ),
    ] = False,
) -> None:
    # Options of the app itself, before any command; --version acts in its callback.
    pass


def say(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


# Added to the error of a column file that does not decode, by the commands taking --encoding.
ENCODING_HINT = (
    "; if the file is in another encoding, name it with --encoding, e.g. --encoding latin-1"
)


@contextmanager
def domain_errors(column_files: Sequence[str | Path] = ()) -> Iterator[None]:
    """Library errors, and operating-system errors (no permission, a full disk, a file gone),
    become one line on stderr naming the file, and exit code 1. `column_files` are the files the
    command reads in the encoding its --encoding option names: bytes of theirs that do not decode
    get a hint at that option. A closed pipe is left to the command group (the reader stopped)."""
    try:
        yield
    except TaggerError as error:
        message = str(error)
        if isinstance(error, NotDecodableError) and error.path in {
            input_name(path) for path in column_files
        }:
            message += ENCODING_HINT
        say(f"tagger: error: {message}")
        raise typer.Exit(1) from None
    except BrokenPipeError:
        raise
    except OSError as error:
        say(f"tagger: error: {_os_error_words(error)}")
        raise typer.Exit(1) from None


def _os_error_words(error: OSError) -> str:
    """'PATH: reason' (both paths for a rename), or the reason alone when no file is named."""
    reason = error.strerror or str(error)
    if error.filename is None:
        return reason
    if error.filename2 is not None:
        return f"{error.filename} -> {error.filename2}: {reason}"
    return f"{error.filename}: {reason}"


def usable_output(path: Path | str | None, inputs: Sequence[Path | str | None]) -> None:
    """Before any work: an output that cannot be written (its folder missing or read-only, a
    folder) or that is one of the command's inputs (which writing would replace) ends the
    command with one line and exit code 1. None (no output asked for) passes."""
    if path is None:
        return
    with domain_errors():
        check_output(path)
        refuse_input_as_output(path, [source for source in inputs if source is not None])


def column_format(
    delimiter: str,
    token_column: int,
    label_column: int,
    has_labels: bool = True,
    encoding: str = "utf-8",
) -> ColumnFormat:
    choice = DelimiterChoice(delimiter)
    return ColumnFormat(
        delimiter=None if choice is DelimiterChoice.AUTO else choice.value,
        token_column=token_column,
        label_column=label_column,
        has_labels=has_labels,
        encoding=checked_option_encoding(encoding),
    )


def checked_option_encoding(encoding: str) -> str:
    """The --encoding value, or a usage error (exit 2) naming the option."""
    try:
        return checked_encoding(encoding)
    except TaggerError as error:
        raise typer.BadParameter(str(error), param_hint="--encoding") from None


def print_json(data: Any) -> None:
    print(json.dumps(data, indent=2, ensure_ascii=False))


def input_names(paths: list[Path] | None) -> list[str]:
    """Input paths as given; '-' is standard input. Missing files are a usage error (exit 2)."""
    names = [str(p) for p in paths or []]
    for name in names:
        if not is_stdio(name):
            _must_be_a_file(name, "INPUTS")
    return names


def input_argument(description: str) -> Any:
    """A positional argument naming a file to read, or '-' for standard input.

    A folder is refused as the argument is parsed; call `readable_inputs` for the rest (the
    argument parser's own existence check would refuse '-').
    """
    return typer.Argument(dir_okay=False, help=description)


def input_option(name: str, description: str) -> Any:
    """An option naming a file to read, or '-' for standard input; see `input_argument`."""
    return typer.Option(name, dir_okay=False, help=description)


def readable_inputs(*arguments: tuple[str, Path | Sequence[Path] | None]) -> None:
    """Usage errors (exit 2) for the files a command will read, each argument given as (its name
    as help shows it, its value): a missing file, a folder, or standard input ('-') named more
    than once in the command, since it can be read only once."""
    reading_stdin: str | None = None
    for argument, value in arguments:
        paths = [] if value is None else [value] if isinstance(value, Path | str) else value
        for path in paths:
            if not is_stdio(path):
                _must_be_a_file(str(path), argument)
            elif reading_stdin is None:
                reading_stdin = argument
            else:
                raise typer.BadParameter(
                    "standard input ('-') can be read only once per command, and "
                    f"{reading_stdin} already reads it",
                    param_hint=f"'{argument}'",
                )


def _must_be_a_file(name: str, argument: str) -> None:
    path = Path(name)
    if path.is_dir():
        raise typer.BadParameter(f"file {name!r} is a directory.", param_hint=f"'{argument}'")
    if not path.exists():
        raise typer.BadParameter(f"file {name!r} does not exist.", param_hint=f"'{argument}'")


def config_from_options(
    config_path: Path | None, overrides: Sequence[str] | None, given: dict[str, Any]
) -> Any:
    """The config a training command runs: the file (or the defaults), then `--set`, then the
    options given by name (`given`, key -> value; None: not given), which win over `--set`.

    Paths in the config file are read from its folder; those given here, from the current one.
    Made absolute, so that a run folder's resolved-config.toml reads back from anywhere."""
    from tagger.config import apply_overrides, load_config, resolve_paths

    config = load_config(config_path)
    extra = list(overrides or [])
    extra += [f"{key}={json.dumps(value)}" for key, value in given.items() if value is not None]
    return resolve_paths(apply_overrides(config, extra), Path.cwd())
