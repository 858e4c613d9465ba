"""The recurrent encoder: residual stacks in each direction, their top outputs concatenated.

          x (B,T,input) ── linear ──> h0 (B,T,hidden)
                                       ├─ left-to-right stack ──┐
                                       └─ right-to-left stack ──┴─ concat ─> (B,T,2*hidden)
    in each stack:  h_l = h_{l-1} + RNN_l(dropout(h_{l-1}))   (no dropout below layer 1)

The right-to-left stack reverses every sentence within its own length once at the bottom, runs
all its layers left to right, and reverses back once at the top: residual sums and dropout act
position by position, so they commute with the reversal.
"""

from __future__ import annotations

import torch
from torch import Tensor, nn

from tagger.network.cells import (
    CELL_KINDS,
    check_batch,
    make_cell,
    padding_mask,
    require_positive,
    reversal_index,
    reverse_within_lengths,
    run_unmasked,
)


class SharedDropout(nn.Module):
    """Dropout with one mask per sentence and feature, shared by every time step.

    This is the recurrent-network dropout of Gal & Ghahramani (2016). It also draws T times fewer
    random numbers than element-wise dropout, whose Bernoulli draws cost as much as a whole
    recurrent layer's forward pass on a CPU.
    """

    def __init__(self, p: float) -> None:
        super().__init__()
        if not 0.0 <= p < 1.0:
            raise ValueError(f"dropout must lie in [0, 1), got {p}")
        self.p = p

    def forward(self, x: Tensor) -> Tensor:
        """(batch, time, features) -> same shape."""
        if not self.training or self.p == 0.0:
            return x
        keep = 1.0 - self.p
        mask = (
            x.new_empty(x.shape[0], 1, x.shape[2]).bernoulli_(keep).div_(keep)
        )  # (batch, 1, features)
        return x * mask

    def extra_repr(self) -> str:
        return f"p={self.p}"


class ResidualStack(nn.Module):
    """One direction: `layers` cells of width hidden -> hidden, each adding to its input."""

    def __init__(
        self, hidden_size: int, layers: int, cell: str, dropout: float = 0.0, fast: bool = True
    ) -> None:
        super().__init__()
        require_positive(layers=layers)
        self.hidden_size = hidden_size
        self.cells = nn.ModuleList(make_cell(cell, hidden_size, hidden_size) for _ in range(layers))
        self.dropout = SharedDropout(dropout)
        # torch has no fused minimal gated cell: it always takes the generic loop.
        self.fast = fast and self.cells[0].has_fused

    def forward(self, x: Tensor, lengths: Tensor, reverse: bool = False) -> Tensor:
        """(batch, time, hidden) -> (batch, time, hidden), zeros at padding."""
        check_batch(self.cells[0], x, lengths)
        index = reversal_index(lengths, x.shape[1]) if reverse else None
        if index is not None:
            x = reverse_within_lengths(x, lengths, index)
        h = x
        for layer, cell in enumerate(self.cells):
            below = h if layer == 0 else self.dropout(h)
            # Unmasked: padding is only ever to the right of a real position, so what the
            # layers make of it never reaches one; the one mask below clears it (a mask per
            # layer was a visible share of tagging a few sentences at a time).
            h = h + run_unmasked(cell, below, self.fast)  # (batch, time, hidden)
        h = h * padding_mask(lengths, h.shape[1]).unsqueeze(2).to(h.dtype)
        if index is not None:
            h = reverse_within_lengths(h, lengths, index)
        return h


class BiResidualEncoder(nn.Module):
    """Input projection, then a residual stack per direction; outputs concatenated (left-to-right
    first). With `bidirectional=False` only the left-to-right stack runs."""

    def __init__(
        self,
        input_size: int,
        hidden_size: int,
        layers: int,
        cell: str,
        dropout: float = 0.0,
        fast: bool = True,
        bidirectional: bool = True,
    ) -> None:
        super().__init__()
        if cell not in CELL_KINDS:
            raise ValueError(f"cell must be one of {', '.join(CELL_KINDS)}; got {cell!r}")
        require_positive(input_size=input_size, hidden_size=hidden_size)
        self.input_size = input_size
        self.hidden_size = hidden_size
        self.layers = layers
        self.cell = cell
        self.bidirectional = bidirectional
        self.output_size = (2 if bidirectional else 1) * hidden_size
        # Projecting to the hidden width lets every layer, the first included, add to its input.
        self.projection = nn.Linear(input_size, hidden_size)
        self.left_to_right = ResidualStack(hidden_size, layers, cell, dropout, fast)
        self.right_to_left = (
            ResidualStack(hidden_size, layers, cell, dropout, fast) if bidirectional else None
        )

    def forward(self, x: Tensor, lengths: Tensor) -> Tensor:
        """(batch, time, input), lengths (batch,) -> (batch, time, output_size); 0 at padding."""
        if x.dim() != 3 or x.shape[2] != self.input_size:
            raise ValueError(f"x must be (batch, time, {self.input_size}); got {tuple(x.shape)}")
        h0 = self.projection(x)  # (batch, time, hidden)
        forward = self.left_to_right(h0, lengths)
        if self.right_to_left is None:
            return forward
        backward = self.right_to_left(h0, lengths, reverse=True)
        return torch.cat([forward, backward], dim=2)  # (batch, time, 2*hidden)

    def flops_per_token(self) -> int:
        """Forward FLOPs (2 per multiply-add) per token of the projection and the recurrent layers:
        2*G*H*(D_in + H) per layer per direction, with D_in = H above the projection."""
        gates = self.left_to_right.cells[0].gates
        h = self.hidden_size
        directions = 2 if self.bidirectional else 1
        recurrent = directions * self.layers * 2 * gates * h * (h + h)
        return 2 * self.input_size * h + recurrent
