"""tagger: train, evaluate and run bidirectional recurrent sequence taggers on CPUs.

``from tagger import Tagger; Tagger.load("model.tagger").tag(["some text"])``. `Tagger` is looked
up when first asked for, and its module needs no torch until a model is loaded, so ``import
tagger`` and ``from tagger import Tagger`` stay light.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from tagger.version import __version__

if TYPE_CHECKING:
    from tagger.apply.tagger import Tagger

__all__ = ["Tagger", "__version__"]


def __getattr__(name: str) -> Any:
    if name == "Tagger":
        from tagger.apply.tagger import Tagger

        globals()["Tagger"] = Tagger  # found directly from now on
        return Tagger
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
