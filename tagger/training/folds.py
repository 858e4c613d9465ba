"""Cutting a labelled corpus into k folds for cross-validation (scikit-learn's splitters).

Where the file marks documents (`-DOCSTART-` lines), every document's sentences go to one fold
(`GroupKFold`, the documents shuffled by the seed): sentences of one document share names and
wording, so a document split across folds would score its held-out part too high. Without
documents the sentences are dealt into folds at random (`KFold`, shuffled by the seed). Either
way every sentence is held out in exactly one fold.

scikit-learn is an optional dependency (the `folds` extra), as only this command needs it; its
GroupKFold shuffles documents from version 1.6 on.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from tagger.data.corpus import Sentence
from tagger.errors import ConfigError, DataError


@dataclass(frozen=True)
class Folds:
    """Which fold holds out each sentence (0-based), and how the folds were cut."""

    held_out_in: list[int]  # per sentence, in file order
    k: int
    documents: int  # documents in the corpus (1 when it marks none)

    @property
    def by_documents(self) -> bool:
        return self.documents > 1

    def parts(self, fold: int) -> tuple[list[int], list[int]]:
        """(indices trained on, indices held out) in fold ``fold`` (0-based)."""
        train = [i for i, f in enumerate(self.held_out_in) if f != fold]
        held = [i for i, f in enumerate(self.held_out_in) if f == fold]
        return train, held


def split_folds(sentences: Sequence[Sentence], k: int, seed: int, source: str) -> Folds:
    """Cut ``sentences`` into ``k`` folds (see the module docstring).

    Raises DataError naming ``source`` when there are fewer documents (or, without documents,
    fewer sentences) than folds: some fold would hold nothing out."""
    try:
        from sklearn.model_selection import GroupKFold, KFold
    except ImportError:
        raise ConfigError(
            "cross-validation needs scikit-learn: pip install 'tagger[folds]' (or scikit-learn)"
        ) from None
    if k < 2:
        raise ValueError(f"k must be at least 2, not {k}")
    groups = [s.document for s in sentences]
    documents = len(set(groups))
    if documents > 1:
        if k > documents:
            raise DataError(
                f"{k} folds need at least {k} documents, as each document's sentences stay in "
                f"one fold, and the file marks {documents} (-DOCSTART- lines); use --folds "
                f"{documents} or fewer",
                source,
            )
        splitter = GroupKFold(n_splits=k, shuffle=True, random_state=seed)
        splits = splitter.split(groups, groups=groups)
    else:
        if k > len(sentences):
            raise DataError(
                f"{k} folds need at least {k} sentences and the file holds {len(sentences)}; "
                f"use --folds {len(sentences)} or fewer",
                source,
            )
        splits = KFold(n_splits=k, shuffle=True, random_state=seed).split(groups)
    held_out_in = [-1] * len(sentences)
    for fold, (_, held) in enumerate(splits):
        for index in held:
            held_out_in[int(index)] = fold
    return Folds(held_out_in, k, documents)
