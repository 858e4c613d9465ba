"""What a character language model reads, and where each token's states are taken from it.

A sentence is read as its tokens joined by single spaces between two boundary marks (code 1 in
the ids; 0 is padding and 2 an unknown character):

    ids      |  C  r  e  w     B  .  |          (| the boundary, _ a space)
    index    0  1  2  3  4  5  6  7  8
    token       [Crew    ]    [B.  ]
    starts      1              6          the backward model's state here has read "B. |" from the right
    ends                 4        7       the forward model's state here has read "| Crew" (and "| Crew B.")

so the forward model's state at a token's last character and the backward model's state at its
first character summarise everything on either side, including the token itself (Akbik, Blythe
& Vollgraf 2018). Column files hold tokens only, so tagging reads text the same way: the tokens
the tokenizer cut, joined by spaces, not the original spacing.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

# what `CharLMSpec.encode` gives: character ids, each token's first index, each token's last
Reading = tuple[list[int], list[int], list[int]]

PAD, BOUNDARY, UNKNOWN = 0, 1, 2
FIRST_CHAR = 3  # ids of the model's characters start here


@dataclass
class CharLMSpec:
    """The characters a language model knows (most frequent first) and its sizes."""

    chars: list[str]
    char_dim: int = 64
    hidden_size: int = 256
    layers: int = 1
    cell: str = "lstm"
    _ids: dict[str, int] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        self._ids = {ch: i for i, ch in enumerate(self.chars, start=FIRST_CHAR)}

    @property
    def vocab_size(self) -> int:
        return FIRST_CHAR + len(self.chars)

    @property
    def output_size(self) -> int:
        """Numbers per token the two directions give together."""
        return 2 * self.hidden_size

    def char_ids(self, text: str) -> list[int]:
        ids = self._ids
        return [ids.get(ch, UNKNOWN) for ch in text]

    def encode(self, tokens: Sequence[str]) -> tuple[list[int], list[int], list[int]]:
        """(ids of the sentence's text with its boundaries, each token's first index, each
        token's last index) as the module docstring lays them out."""
        ids = [BOUNDARY]
        starts, ends = [], []
        for i, token in enumerate(tokens):
            if i:
                ids.append(self._ids.get(" ", UNKNOWN))
            starts.append(len(ids))
            ids.extend(self.char_ids(token) or [UNKNOWN])
            ends.append(len(ids) - 1)
        ids.append(BOUNDARY)
        return ids, starts, ends

    def to_dict(self) -> dict[str, Any]:
        return {
            "chars": list(self.chars),
            "char_dim": self.char_dim,
            "hidden_size": self.hidden_size,
            "layers": self.layers,
            "cell": self.cell,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> CharLMSpec:
        return cls(**data)


def pad_readings(
    readings: Sequence[Reading],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sentences' readings padded into one batch: ids (B, chars) with 0 padding, lengths (B,),
    starts and ends (B, tokens) with padding tokens pointing at index 0 (all int64). Both
    backends batch through here, so the torch and exported networks read the same arrays."""
    width = max(len(ids) for ids, _, _ in readings)
    time = max(len(starts) for _, starts, _ in readings)
    ids = np.zeros((len(readings), width), dtype=np.int64)
    starts = np.zeros((len(readings), time), dtype=np.int64)
    ends = np.zeros((len(readings), time), dtype=np.int64)
    for b, (chars, first, last) in enumerate(readings):
        ids[b, : len(chars)] = chars
        starts[b, : len(first)] = first
        ends[b, : len(last)] = last
    lengths = np.asarray([len(chars) for chars, _, _ in readings], dtype=np.int64)
    return ids, lengths, starts, ends
