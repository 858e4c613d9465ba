"""The installed package's version, read from its metadata (pyproject.toml is the one source)."""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version


def package_version() -> str:
    try:
        return version("tagger")
    except PackageNotFoundError:  # run from a source tree that was never installed
        return "0+unknown"


__version__ = package_version()
