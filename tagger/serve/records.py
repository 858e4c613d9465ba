"""What the service answers: each text's record, and the model's description.

A text's record holds what `tagger tag` writes for it in JSON Lines, less the text itself (the
client has it): "mentions" (each {"type", "at": [start, end], "quote", "confidence"}, offsets in
code points of the text, end exclusive) and "needs_review". Both come from the same
`tagger.apply.engine.Engine` and `Mention.to_record` as the command's, so they are equal.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.apply.documents import Document, Skipped
from tagger.apply.engine import Engine, TaggedDocument
from tagger.apply.outputs import MENTIONS_KEY, REVIEW_KEY
from tagger.apply.review import needs_review
from tagger.data.schemes import split_tag
from tagger.serve.settings import ServiceSettings

if TYPE_CHECKING:
    from tagger.apply.tagger import Tagger

Tagged = TaggedDocument | Skipped


def text_tagger(tagger: Tagger, batch_size: int) -> Callable[[list[str]], list[Tagged]]:
    """A function from texts to one `TaggedDocument` (or `Skipped`, for a sentence longer than
    the model's max_sentence_tokens) each: what the worker thread runs on a batch."""
    engine = Engine(tagger, tagger.tokenizer_settings, batch_size)

    def tag_texts(texts: list[str]) -> list[Tagged]:
        return engine.tag([Document(i, text, f"texts[{i}]", 1) for i, text in enumerate(texts)])

    return tag_texts


def document_record(
    tagged: TaggedDocument, min_score: float, review_below: float
) -> dict[str, Any]:
    """A text's record: its mentions at or above `min_score`, and whether it needs review."""
    return {
        MENTIONS_KEY: [m.to_record() for m in tagged.mentions if m.confidence >= min_score],
        REVIEW_KEY: needs_review(tagged.certainty, review_below),
    }


def model_types(tagger: Tagger) -> list[str]:
    """The mention types the model finds, sorted."""
    return sorted({split_tag(label)[1] for label in tagger.vocabs.labels.itos} - {""})


def model_description(
    tagger: Tagger, path: str | Path, settings: ServiceSettings
) -> dict[str, Any]:
    """What a client may want to know of the served model, as its file stores it: the types,
    the schemes, the training data (with its fingerprint), the dev scores of the epoch kept,
    and the limits requests must keep to. Keys a model file lacks are null."""
    meta = tagger.meta
    return {
        "model": Path(path).name,
        "types": model_types(tagger),
        "scheme": {"predicted": tagger.scheme, "training_files": tagger.input_scheme},
        "training_data": meta.get("training_data"),
        "epoch": meta.get("epoch"),
        "dev_metrics": meta.get("dev_metrics"),
        "temperature": tagger.temperature,
        "tokenizer": tagger.tokenizer_settings.to_dict(),
        "versions": meta.get("versions"),
        "limits": settings.to_record(),
    }
