"""tagger: train, evaluate and run bidirectional recurrent sequence taggers on CPUs."""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from pathlib import Path

    from tagger.apply.tagging import DocumentTagger

from tagger.version import __version__

__all__ = ["__version__", "load_tagger"]


def load_tagger(path: str | Path, threads: int | None = None) -> DocumentTagger:
    """Load a model file for tagging raw texts: ``load_tagger(path).tag(["some text"])``.

    torch is imported here, not when the package is, so ``import tagger`` stays light.
    """
    from tagger.apply.tagging import DocumentTagger

    return DocumentTagger.load(path, threads=threads)
