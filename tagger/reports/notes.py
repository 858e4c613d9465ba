"""The short notes commands print where their output leaves the tool: the caution under the
summary of `tag` and `evaluate`, what a model file reveals, under `train`'s summary, and notes
that recur per document or sentence, said once per kind with their count (`RepeatedNotes`)."""

from __future__ import annotations

import textwrap
from collections.abc import Callable
from dataclasses import dataclass
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


@dataclass
class _Kind:
    note: str  # in full, as said when it is the only one of its kind
    counted: Callable[[int], str]  # the note for n > 1 of its kind, naming where the first is
    times: int = 0


class RepeatedNotes:
    """Notes that may recur for every document or sentence of a run (a thousand cut sentences,
    a thousand text files that look like column files), said once per kind: in full when the
    kind occurred once, else as one counted line naming the first occurrence. Kinds keep the
    order they first occurred in."""

    def __init__(self) -> None:
        self._kinds: dict[str, _Kind] = {}

    def add(self, kind: str, note: str, counted: Callable[[int], str]) -> None:
        """One occurrence of `kind`; `note` and `counted` are kept from its first occurrence."""
        self._kinds.setdefault(kind, _Kind(note, counted)).times += 1

    def lines(self) -> list[str]:
        return [k.note if k.times == 1 else k.counted(k.times) for k in self._kinds.values()]
