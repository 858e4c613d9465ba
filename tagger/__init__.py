"""tagger: train, evaluate and run bidirectional recurrent sequence taggers on CPUs.

``from tagger import Tagger; Tagger.load("model.tagger").tag(["some text"])`` gives a list of
`Mention`s per text. `Tagger` and `Mention` are looked up when first asked for, and their modules
need no torch until a model is loaded, so ``import tagger`` and ``from tagger import Tagger`` stay
light.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from tagger.version import __version__

if TYPE_CHECKING:
    from tagger.apply.engine import Mention
    from tagger.apply.tagger import Tagger

__all__ = ["Mention", "Tagger", "__version__"]


def __getattr__(name: str) -> Any:
    if name == "Tagger":
        from tagger.apply.tagger import Tagger

        globals()["Tagger"] = Tagger  # found directly from now on
        return Tagger
    if name == "Mention":
        from tagger.apply.engine import Mention

        globals()["Mention"] = Mention
        return Mention
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
