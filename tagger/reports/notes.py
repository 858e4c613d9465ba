"""The short notes commands print where their output leaves the tool: the caution under the
summary of `tag` and `evaluate`, and what a model file reveals, under `train`'s summary."""

from __future__ import annotations

import textwrap
from typing import Any

from tagger.reports.layout import WIDTH, count

CAUTION = "caution: tagged output is an aid to review, not a decision; a person checks what matters"


def stored_text_note(meta: dict[str, Any]) -> str:
    """What a model file (its metadata ``meta``) holds in plain text that came from the training
    files or the config (the word vocabulary, the values of feature columns, lexicons), and the
    setting that keeps rare words out; wrapped to the width of the reports."""
    words = len(meta.get("vocabularies", {}).get("words", {}).get("items", []))
    least = meta.get("config", {}).get("model", {}).get("min_word_count", 1)
    features = meta.get("features") or {}
    seen = "every word of train" if least <= 1 else f"the words seen {least} times or more in train"
    held = [f"{count(words, 'word')} ({seen})"]
    raw_words = len(meta.get("vocabularies", {}).get("subwords", {}).get("words", []))
    if raw_words:
        held.append(f"{count(raw_words, 'word')} of the word vectors' raw text")
    if features.get("columns"):
        held.append(f"the values of {count(len(features['columns']), 'feature column')}")
    if features.get("lexicons"):
        held.append(count(len(features["lexicons"]), "lexicon"))
    held_text = " and ".join([", ".join(held[:-1]), held[-1]] if len(held) > 1 else held)
    text = (
        f"the model file stores {held_text} in plain text, for anyone holding it to read; "
        "model.min_word_count=K keeps the words seen fewer than K times out of it"
    )
    return "\n".join(textwrap.wrap(text, WIDTH, initial_indent="note: ", subsequent_indent=" " * 6))
