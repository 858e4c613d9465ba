"""Help screens that read like the README: placeholders such as `FILE`, `N`, `auto|tab|space` and
nothing after a flag, instead of the Python types typer shows by default (`<bool>`,
`<list[str]>`, `<int range>`); paragraphs as flowing text; examples under each command."""

from __future__ import annotations

import enum
import inspect
import typing
from pathlib import Path
from typing import Any

# Python type -> the word a help screen shows for a value of it.
_WORDS: dict[Any, str] = {int: "N", float: "NUMBER", str: "TEXT"}


def readable_placeholders(command: Any, ctx: Any) -> None:
    """Give every parameter of a typer command a placeholder a person reads: nothing for a flag,
    the allowed values for a choice, FILE or FOLDER for a path, N, NUMBER or TEXT otherwise
    (repeatable options say so in their help)."""
    for param in [*command.params, command.get_help_option(ctx)]:
        if param is None:
            continue
        if getattr(param, "is_flag", False):
            param.metavar = ""
            continue
        word = _placeholder(getattr(param, "type_descriptor", None))
        if word is None:
            continue
        if param.param_type_name == "argument":
            _plain_argument(param)
        elif param.metavar is None:
            param.metavar = word


def _plain_argument(param: Any) -> None:
    """An argument shows as its name (MODEL, FILES...), bracketed only when it may be left out,
    with no type column."""
    name = param.metavar or param.name.upper()
    many = "..." if param.nargs != 1 else ""
    param.metavar = name
    param.display_type_rich = lambda ctx: None
    param.display_type = lambda ctx: ""
    param._rich_display_name = lambda: name + many
    param._usage_display_name = lambda: (name if param.required else f"[{name}]") + many


def _placeholder(descriptor: Any) -> str | None:
    annotation = getattr(descriptor, "annotation", None)
    if annotation is None:
        return None
    if typing.get_origin(annotation) is list:
        (annotation,) = typing.get_args(annotation)
    if isinstance(annotation, type) and issubclass(annotation, enum.Enum):
        return "|".join(str(member.value) for member in annotation)
    if annotation is Path:
        info = getattr(descriptor, "parameter_info", None)
        return "FOLDER" if getattr(info, "file_okay", True) is False else "FILE"
    return _WORDS.get(annotation)


def reflowed(command: Any) -> None:
    """The command's help with each paragraph on one line, for the help screen to wrap: the
    line breaks of a docstring would otherwise show where the source wrapped it."""
    if command.help:
        paragraphs = inspect.cleandoc(command.help).split("\n\n")
        command.help = "\n\n".join(" ".join(paragraph.split()) for paragraph in paragraphs)


def examples(*lines: str) -> str:
    """A command's epilog: example command lines, one a line (each short enough not to wrap at
    80 columns, so that it can be copied whole)."""
    return "Examples:\n" + "\n".join(lines)
