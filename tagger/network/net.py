"""The tagger network: word and character features -> residual bidirectional encoder -> output layer.

words (B,T) ──embed──┐
chars (B,T,C) ─CNN/RNN┤
features (B,T,K) ─────┤
fixed bags (B,T,K) ───┴─ concat ─ dropout ─ BiResidualEncoder ─ dropout ─ linear ─> emissions (B,T,L)
  one embedding per slot (optional)                                      └─ CRF or softmax
  frozen pretrained table, mean of each bag (optional)

The feature slots (extra columns, lexicon categories, word shape; see tagger.text.features) each get a
small embedding; a model without them has no such modules, so its parameters are as they were.
`build_net` makes the network a config describes, for training and for loading a model file.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import torch
from torch import nn

from tagger.config import ModelConfig
from tagger.data.schemes import allowed_transitions
from tagger.network.batching import LMInput
from tagger.network.char_lm import FrozenCharLM
from tagger.network.crf import CRF
from tagger.network.encoder import BiResidualEncoder, SharedDropout

if TYPE_CHECKING:
    from tagger.config import Config
    from tagger.text.char_context import CharLMSpec
    from tagger.text.features import FeatureSpec
    from tagger.text.vocab import Vocabularies

Transitions = tuple[list[bool], list[list[bool]], list[bool]]


class CharCNN(nn.Module):
    """Character convolution with max pooling over each token's characters."""

    def __init__(self, n_chars: int, dim: int, features: int, kernel: int) -> None:
        super().__init__()
        self.embed = nn.Embedding(n_chars, dim, padding_idx=0)
        self.conv = nn.Conv1d(dim, features, kernel, padding=kernel // 2)
        self.output_size = features

    def forward(self, chars: torch.Tensor) -> torch.Tensor:
        batch, time, width = chars.shape
        flat = chars.reshape(batch * time, width)  # (B*T, C)
        x = self.embed(flat).transpose(1, 2)  # (B*T, dim, C)
        h = self.conv(x)[:, :, :width]  # (B*T, features, C)
        h = h.masked_fill((flat == 0)[:, None, :], -1e4)
        pooled = h.max(dim=2).values.clamp_min(
            -1.0
        )  # padding tokens pool to -1e4: keep them finite
        return pooled.reshape(batch, time, -1)  # (B, T, features)


class CharRNN(nn.Module):
    """A one-layer bidirectional recurrent encoder over each token's characters (same stack code)."""

    def __init__(self, n_chars: int, dim: int, features: int, cell: str, fast: bool) -> None:
        super().__init__()
        self.embed = nn.Embedding(n_chars, dim, padding_idx=0)
        self.encoder = BiResidualEncoder(dim, features, 1, cell, 0.0, fast=fast)
        self.features = features
        self.output_size = 2 * features

    def forward(self, chars: torch.Tensor) -> torch.Tensor:
        batch, time, width = chars.shape
        flat = chars.reshape(batch * time, width)
        lengths = (flat != 0).sum(1)  # (B*T,)
        real = lengths > 0
        out = flat.new_zeros(batch * time, self.output_size, dtype=torch.float32)
        if real.any():
            h = self.encoder(self.embed(flat[real]), lengths[real])  # (N, C, 2F)
            last = (lengths[real] - 1)[:, None, None].expand(-1, 1, self.features)
            forward_end = h[:, :, : self.features].gather(1, last).squeeze(1)
            backward_end = h[:, 0, self.features :]
            out = out.index_put(
                (real.nonzero().squeeze(1),), torch.cat([forward_end, backward_end], 1)
            )
        return out.reshape(batch, time, -1)


class FixedVectors(nn.Module):
    """A frozen table of pretrained vectors; a token's vector is the mean of the rows of its bag
    (`tagger.text.subword.SubwordIndex.bag`): its word's row, or its n-grams' rows, or none
    (zeros). The table is a buffer: saved with the model, never trained."""

    def __init__(self, rows: int, dim: int) -> None:
        super().__init__()
        self.register_buffer("table", torch.zeros(rows, dim))
        self.output_size = dim

    def forward(self, bags: torch.Tensor) -> torch.Tensor:
        """(..., K) row ids, 0 padding -> (..., dim)."""
        flat = bags.reshape(-1, bags.shape[-1])
        if flat.shape[1] == 0:
            flat = flat.new_zeros(flat.shape[0], 1)
        # mean over the bag's real rows; a bag of padding alone gives zeros
        out = nn.functional.embedding_bag(flat, self.table, mode="mean", padding_idx=0)
        return out.reshape(*bags.shape[:-1], self.output_size)


class TaggerNet(nn.Module):
    def __init__(
        self,
        config: ModelConfig,
        n_words: int,
        n_chars: int,
        n_labels: int,
        transitions: Transitions | None = None,
        feature_slots: Sequence[tuple[int, int]] = (),
        fixed_vectors: tuple[int, int] | None = None,
        char_lm: CharLMSpec | None = None,
    ) -> None:
        """``feature_slots``: (number of ids, embedding size) of each feature slot, in slot order;
        ``fixed_vectors``: (rows, dim) of a frozen pretrained table, or None; ``char_lm``: the
        characters and sizes of a frozen character language model, or None."""
        super().__init__()
        self.config = config
        self.words = nn.Embedding(n_words, config.word_dim, padding_idx=0)
        self.chars: nn.Module | None = None
        char_size = 0
        if config.char_encoder == "cnn":
            self.chars = CharCNN(n_chars, config.char_dim, config.char_features, config.char_kernel)
        elif config.char_encoder == "rnn":
            self.chars = CharRNN(
                n_chars, config.char_dim, config.char_features, config.cell, config.fast_kernels
            )
        if self.chars is not None:
            char_size = self.chars.output_size
        self.dropout = SharedDropout(config.dropout)
        feature_size = sum(dim for _, dim in feature_slots)
        fixed_size = fixed_vectors[1] if fixed_vectors is not None else 0
        lm_size = char_lm.output_size if char_lm is not None else 0
        self.encoder = BiResidualEncoder(
            config.word_dim + char_size + feature_size + fixed_size + lm_size,
            config.hidden_size,
            config.layers,
            config.cell,
            config.dropout,
            fast=config.fast_kernels,
            bidirectional=config.bidirectional,
        )
        self.output = nn.Linear(self.encoder.output_size, n_labels)
        self.crf = CRF(n_labels, *transitions) if config.output == "crf" else None
        # Made last, so the modules above draw the same initial weights as without features.
        self.features: nn.ModuleList | None = None
        if feature_slots:
            self.features = nn.ModuleList(
                nn.Embedding(size, dim, padding_idx=0) for size, dim in feature_slots
            )
            with torch.no_grad():
                for embedding in self.features:
                    embedding.weight[1].zero_()  # id 1, "nothing known", starts neutral
        self.fixed_vectors = FixedVectors(*fixed_vectors) if fixed_vectors is not None else None
        self.char_lm = FrozenCharLM(char_lm) if char_lm is not None else None

    def emissions(
        self,
        words: torch.Tensor,
        chars: torch.Tensor | None,
        lengths: torch.Tensor,
        char_features: torch.Tensor | None = None,
        features: torch.Tensor | None = None,
        fixed: torch.Tensor | None = None,
        lm: LMInput | torch.Tensor | None = None,
    ) -> torch.Tensor:
        """(B, T, L) label scores. ``char_features`` (B, T, F), when given, replaces running the
        character encoder on ``chars``: prediction computes it once per distinct token.
        ``features`` (B, T, K) holds the ids of the K feature slots of a model that has them.
        ``fixed``, for a model with a frozen vector table: each token's bag of rows (B, T, K)
        (ids), or its vector (B, T, dim) (floats; prediction computes it per distinct token).
        ``lm``, for a model with a character language model: the batch as it reads it, or its
        word states (B, T, 2*hidden) computed already."""
        parts = [self.words(words)]  # (B, T, word_dim)
        if self.chars is not None:
            if char_features is None:
                char_features = self.chars(chars)
            parts.append(char_features)  # (B, T, char features)
        if self.features is not None:
            if features is None:
                raise ValueError("this network reads feature ids; none were given")
            # (B, T, dim) per slot
            parts.extend(embed(features[:, :, k]) for k, embed in enumerate(self.features))
        if self.fixed_vectors is not None:
            if fixed is None:
                raise ValueError("this network reads pretrained vectors; none were given")
            parts.append(fixed if fixed.is_floating_point() else self.fixed_vectors(fixed))
        if self.char_lm is not None:
            if lm is None:
                raise ValueError("this network reads a character language model; no input given")
            if isinstance(lm, LMInput):
                lm = self.char_lm(lm.ids, lm.lengths, lm.starts, lm.ends)
            parts.append(lm[:, : words.shape[1]])  # (B, T, 2*hidden)
        inputs = parts[0] if len(parts) == 1 else torch.cat(parts, dim=-1)
        h = self.encoder(self.dropout(inputs), lengths)  # (B, T, output_size)
        return self.output(self.dropout(h))  # (B, T, L)

    def loss(
        self, emissions: torch.Tensor, labels: torch.Tensor, mask: torch.Tensor
    ) -> torch.Tensor:
        """Summed negative log-likelihood of the gold labels over the batch."""
        if self.crf is not None:
            return self.crf.nll(emissions, labels, mask, reduction="sum")
        log_probs = emissions.log_softmax(-1)
        picked = log_probs.gather(-1, labels.unsqueeze(-1)).squeeze(-1)  # (B, T)
        return -(picked * mask).sum()

    def decode(self, emissions: torch.Tensor, mask: torch.Tensor) -> list[list[int]]:
        lengths = mask.sum(1).tolist()
        if self.crf is not None:
            return self.crf.decode(emissions, mask)
        best = emissions.argmax(-1).tolist()
        return [row[:n] for row, n in zip(best, lengths, strict=True)]

    def label_probabilities(self, emissions: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
        """(B, T, L): CRF marginals or softmax probabilities."""
        if self.crf is not None:
            return self.crf.marginals(emissions, mask)
        return emissions.softmax(-1)

    def flops_per_token(self) -> int:
        """Forward FLOPs of the word-level encoder and output layer per token (the dominant cost)."""
        out = self.output
        return self.encoder.flops_per_token() + 2 * out.in_features * out.out_features


def build_net(
    config: Config, vocabs: Vocabularies, features: FeatureSpec | None = None
) -> TaggerNet:
    """The network a config describes, sized for the vocabularies and feature slots; a CRF output
    layer may take only the transitions that are well-formed in the model's scheme."""
    transitions = None
    if config.model.output == "crf":
        transitions = allowed_transitions(vocabs.labels.itos, config.model.scheme)
    slots = features.slot_sizes(config.model) if features is not None else ()
    fixed = (vocabs.subwords.size, vocabs.subwords.dim) if vocabs.subwords is not None else None
    lm = vocabs.char_lm
    return TaggerNet(
        config.model,
        len(vocabs.words),
        len(vocabs.chars),
        len(vocabs.labels),
        transitions,
        slots,
        fixed,
        lm,
    )
