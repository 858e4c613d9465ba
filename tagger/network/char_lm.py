"""A forward and a backward character language model, and the word features read from them.

    ids (B,L) ─ embed ─ BiResidualEncoder ─┬─ left-to-right states ─ linear ─> next character
                                           └─ right-to-left states ─ linear ─> previous character

The two directions are the project's residual stacks (`tagger.network.encoder`), trained to
predict the next character reading left to right and the previous one reading right to left;
neither sees the character it predicts. A tagger reads, for each token, the left-to-right state
at its last character and the right-to-left state at its first (`word_states`; positions from
`tagger.text.char_context.CharLMSpec.encode`), with the language model frozen.
"""

from __future__ import annotations

import torch
from torch import Tensor, nn

from tagger.network.encoder import BiResidualEncoder
from tagger.text.char_context import PAD, CharLMSpec


class CharLanguageModel(nn.Module):
    def __init__(self, spec: CharLMSpec, dropout: float = 0.0) -> None:
        super().__init__()
        self.spec = spec
        self.embed = nn.Embedding(spec.vocab_size, spec.char_dim, padding_idx=PAD)
        self.encoder = BiResidualEncoder(
            spec.char_dim, spec.hidden_size, spec.layers, spec.cell, dropout
        )
        self.next_char = nn.Linear(spec.hidden_size, spec.vocab_size)
        self.previous_char = nn.Linear(spec.hidden_size, spec.vocab_size)

    def states(self, ids: Tensor, lengths: Tensor) -> Tensor:
        """(B, L) character ids -> (B, L, 2*hidden): left-to-right states, then right-to-left."""
        return self.encoder(self.embed(ids), lengths)

    def loss(self, ids: Tensor, lengths: Tensor) -> tuple[Tensor, int]:
        """Summed negative log-likelihood (nats) of every character predicted in both directions,
        and how many predictions that is: position i predicts i+1 left to right and i-1 right
        to left, so each direction predicts length-1 characters of each sequence."""
        hidden = self.spec.hidden_size
        h = self.states(ids, lengths)  # (B, L, 2H)
        forward = self.next_char(h[:, :-1, :hidden])  # (B, L-1, V) predicts ids[:, 1:]
        backward = self.previous_char(h[:, 1:, hidden:])  # (B, L-1, V) predicts ids[:, :-1]
        positions = torch.arange(ids.shape[1] - 1)
        real = positions[None, :] < (lengths[:, None] - 1)  # (B, L-1)
        nll = nn.functional.cross_entropy
        loss = nll(forward[real], ids[:, 1:][real], reduction="sum")
        loss = loss + nll(backward[real], ids[:, :-1][real], reduction="sum")
        return loss, 2 * int(real.sum())

    def word_states(self, ids: Tensor, lengths: Tensor, starts: Tensor, ends: Tensor) -> Tensor:
        """(B, T, 2*hidden): per token, the left-to-right state at its last character and the
        right-to-left state at its first; ``starts``/``ends`` (B, T) index ``ids`` (B, L)."""
        hidden = self.spec.hidden_size
        h = self.states(ids, lengths)  # (B, L, 2H)
        forward = h[:, :, :hidden].gather(1, ends.unsqueeze(2).expand(-1, -1, hidden))
        backward = h[:, :, hidden:].gather(1, starts.unsqueeze(2).expand(-1, -1, hidden))
        return torch.cat([forward, backward], dim=2)


class FrozenCharLM(nn.Module):
    """A trained language model inside a tagger: never trained further, always without dropout,
    and run without gradients."""

    def __init__(self, spec: CharLMSpec) -> None:
        super().__init__()
        self.model = CharLanguageModel(spec)
        self.model.requires_grad_(False)
        self.output_size = spec.output_size

    def train(self, mode: bool = True) -> FrozenCharLM:
        super().train(False)
        return self

    def forward(self, ids: Tensor, lengths: Tensor, starts: Tensor, ends: Tensor) -> Tensor:
        with torch.no_grad():
            return self.model.word_states(ids, lengths, starts, ends)
