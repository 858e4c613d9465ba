"""The exception types the library raises (the CLI turns them into exit code 1), and `quoted`,
how a message quotes a piece of the user's input.
"""

from __future__ import annotations

# Characters of a token, label or line an error message shows: one bad 5 MB token must not
# print 5 MB to the terminal.
QUOTED_CHARS = 60


def quoted(value: object, limit: int = QUOTED_CHARS) -> str:
    """A piece of input as a message quotes it: repr() of at most `limit` characters, cut with
    "..." after the closing quote when longer. Anything but a string is quoted by its repr()."""
    if isinstance(value, str):
        return repr(value[: limit - 3]) + "..." if len(value) > limit else repr(value)
    text = repr(value)
    return text[: limit - 3] + "..." if len(text) > limit else text


class TaggerError(Exception):
    """Base of every error caused by the user's data, config or model file."""


class DataError(TaggerError):
    """Bad input data, located by file and (where known) line number."""

    def __init__(self, message: str, path: str | None = None, line: int | None = None) -> None:
        self.message = message
        self.path = path
        self.line = line
        where = path or ""
        if path is not None and line is not None:
            where = f"{path}:{line}"
        super().__init__(f"{where}: {message}" if where else message)


class NotDecodableError(DataError):
    """Input bytes that are not text in the encoding they were read in (UTF-8 unless named)."""


class ConfigError(TaggerError):
    """An invalid configuration key, value or override."""


class ModelFileError(TaggerError):
    """A model file that is missing, truncated, corrupted or from an incompatible version."""


class FolderBusyError(TaggerError):
    """A run folder that another process is writing to."""


class OutputError(TaggerError):
    """An output that cannot or must not be written: a missing or read-only folder, a full disk, a
    file that is also one of the command's inputs, a run folder that holds a run."""
