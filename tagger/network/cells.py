"""Recurrent cells behind one interface, and the procedures that run a cell across time.

Owns four cell kinds ("rnn", "minimal", "gru", "lstm"), the generic time loop that runs any of
them (`run_cell`), the fused torch kernel for the kinds torch has one for (`run_cell_fused`), and
the per-sentence reversal that lets both directions work on right-padded batches.

Every cell keeps its parameters once, in torch's layout and gate order (`weight_ih` (G*H, D),
`weight_hh` (G*H, H), `bias_ih` and `bias_hh` (G*H,); LSTM gates i, f, g, o; GRU gates r, z, n),
so the generic loop and the fused kernel use the same tensors and weights can be copied to and
from torch's own modules. For "minimal" the two biases simply add up to the gate bias.

Both procedures take a right-padded batch (batch, time, D) with its lengths (batch,). They run
left to right over the whole padded width: a real position only ever sees earlier positions, so
padding cannot reach it. Right to left reverses each sentence within its own length, runs left to
right, and reverses back (see `reverse_within_lengths`). Outputs at padded positions are zeros.
"""

from __future__ import annotations

import math

import torch
from torch import Tensor, nn
from torch.nn import functional as F

from tagger.config import CellKind

CELL_KINDS: tuple[str, ...] = tuple(kind.value for kind in CellKind)

State = tuple[Tensor, ...]  # (h,) or, for the LSTM, (h, c); each (batch, hidden)


def require_positive(**sizes: int) -> None:
    """Raise ValueError naming the first size that is not a positive integer."""
    for name, value in sizes.items():
        if value < 1:
            raise ValueError(f"{name} must be a positive integer, got {value}")


class Cell(nn.Module):
    """A recurrent cell with G gate blocks: an input projection for all steps, and a step.

    Subclasses set `kind` and `gates` and implement `step`; those with a fused torch kernel
    implement `fused` and set `has_fused`.
    """

    kind: str = ""
    gates: int = 0
    has_fused: bool = False

    def __init__(self, input_size: int, hidden_size: int) -> None:
        super().__init__()
        require_positive(input_size=input_size, hidden_size=hidden_size)
        self.input_size = input_size
        self.hidden_size = hidden_size
        width = self.gates * hidden_size
        self.weight_ih = nn.Parameter(torch.empty(width, input_size))
        self.weight_hh = nn.Parameter(torch.empty(width, hidden_size))
        self.bias_ih = nn.Parameter(torch.empty(width))
        self.bias_hh = nn.Parameter(torch.empty(width))
        self.reset_parameters()

    def reset_parameters(self) -> None:
        """torch's recurrent-module initialisation: uniform in +-1/sqrt(hidden)."""
        bound = 1.0 / math.sqrt(self.hidden_size)
        for p in self.parameters():
            nn.init.uniform_(p, -bound, bound)

    def extra_repr(self) -> str:
        return f"{self.input_size}, {self.hidden_size}"

    def input_bias(self) -> Tensor:
        """Bias added in the all-steps input projection: both biases where they simply add up."""
        return self.bias_ih + self.bias_hh

    def project(self, x: Tensor) -> Tensor:
        """(..., input) -> (..., G*hidden): the input half of every gate, for all steps at once."""
        return F.linear(x, self.weight_ih, self.input_bias())

    def step_weights(self) -> tuple[Tensor, ...]:
        """What `step` needs besides its input, prepared once per run (not once per step)."""
        return (self.weight_hh.t(),)  # (hidden, G*hidden)

    def initial_state(self, batch: int, like: Tensor) -> State:
        return (like.new_zeros(batch, self.hidden_size),)

    def step(self, xg: Tensor, state: State, weights: tuple[Tensor, ...]) -> State:
        """One time step: `xg` (batch, G*hidden) is this step's projected input."""
        raise NotImplementedError

    def fused(self, x: Tensor) -> Tensor:
        """(batch, time, input) -> (batch, time, hidden) with torch's kernel, from a zero state."""
        raise ValueError(f"cell {self.kind!r} has no fused torch kernel")

    def _flat_weights(self) -> list[Tensor]:
        return [self.weight_ih, self.weight_hh, self.bias_ih, self.bias_hh]

    def _zero_hidden(self, x: Tensor) -> Tensor:
        return x.new_zeros(1, x.shape[0], self.hidden_size)  # (layers*directions, batch, hidden)


class RNNCell(Cell):
    """Vanilla recurrence: h = tanh(W x + b_ih + U h_prev + b_hh)."""

    kind = "rnn"
    gates = 1
    has_fused = True

    def step(self, xg: Tensor, state: State, weights: tuple[Tensor, ...]) -> State:
        return (torch.tanh(torch.addmm(xg, state[0], weights[0])),)

    def fused(self, x: Tensor) -> Tensor:
        # Same positional signature as torch's nn.RNN uses: (input, hx, params, has_biases,
        # num_layers, dropout, train, bidirectional, batch_first).
        out, _ = torch.rnn_tanh(
            x, self._zero_hidden(x), self._flat_weights(), True, 1, 0.0, self.training, False, True
        )
        return out


class MinimalCell(Cell):
    """Minimal gated unit (Collins, Sohl-Dickstein & Sussillo 2016), gate blocks g, c:
    g = sigmoid(W_g x + U_g h_prev + b_g), c = tanh(W_c x + U_c h_prev + b_c),
    h = g * h_prev + (1 - g) * c."""

    kind = "minimal"
    gates = 2

    def step(self, xg: Tensor, state: State, weights: tuple[Tensor, ...]) -> State:
        h = state[0]
        g, c = torch.addmm(xg, h, weights[0]).chunk(2, 1)
        # lerp(c, h, g) = c + g * (h - c) = g*h + (1-g)*c, one fused kernel.
        return (torch.lerp(torch.tanh(c), h, torch.sigmoid(g)),)


class GRUCell(Cell):
    """torch's GRU: r, z = sigmoid(...), n = tanh(W_n x + b_in + r * (U_n h + b_hn)),
    h = (1 - z) * n + z * h_prev."""

    kind = "gru"
    gates = 3
    has_fused = True

    def input_bias(self) -> Tensor:
        # b_hn sits inside the reset product, so it stays with the recurrent product.
        h = self.hidden_size
        return self.bias_ih + torch.cat([self.bias_hh[: 2 * h], self.bias_hh.new_zeros(h)])

    def step_weights(self) -> tuple[Tensor, ...]:
        h = self.hidden_size
        recurrent_bias = torch.cat([self.bias_hh.new_zeros(2 * h), self.bias_hh[2 * h :]])
        return (self.weight_hh.t(), recurrent_bias)

    def step(self, xg: Tensor, state: State, weights: tuple[Tensor, ...]) -> State:
        h = state[0]
        hg = torch.addmm(weights[1], h, weights[0])  # (batch, 3*hidden)
        x_r, x_z, x_n = xg.chunk(3, 1)
        h_r, h_z, h_n = hg.chunk(3, 1)
        r = torch.sigmoid(x_r + h_r)
        z = torch.sigmoid(x_z + h_z)
        n = torch.tanh(torch.addcmul(x_n, r, h_n))
        return (torch.lerp(n, h, z),)

    def fused(self, x: Tensor) -> Tensor:
        out, _ = torch.gru(
            x, self._zero_hidden(x), self._flat_weights(), True, 1, 0.0, self.training, False, True
        )
        return out


class LSTMCell(Cell):
    """torch's LSTM, gates i, f, g, o; forget-gate bias starts at 1 (Jozefowicz et al. 2015)."""

    kind = "lstm"
    gates = 4
    has_fused = True

    def reset_parameters(self) -> None:
        super().reset_parameters()
        h = self.hidden_size
        with torch.no_grad():
            # The two biases add up, so the forget block of the sum is 1.
            self.bias_ih[h : 2 * h].fill_(1.0)
            self.bias_hh[h : 2 * h].fill_(0.0)

    def initial_state(self, batch: int, like: Tensor) -> State:
        zeros = like.new_zeros(batch, self.hidden_size)
        return (zeros, zeros)

    def step(self, xg: Tensor, state: State, weights: tuple[Tensor, ...]) -> State:
        h, c = state
        i, f, g, o = torch.addmm(xg, h, weights[0]).chunk(4, 1)
        c = torch.addcmul(torch.sigmoid(f) * c, torch.sigmoid(i), torch.tanh(g))
        return (torch.sigmoid(o) * torch.tanh(c), c)

    def fused(self, x: Tensor) -> Tensor:
        h0 = self._zero_hidden(x)
        out, _, _ = torch.lstm(
            x, (h0, h0), self._flat_weights(), True, 1, 0.0, self.training, False, True
        )
        return out


_CELLS: dict[str, type[Cell]] = {c.kind: c for c in (RNNCell, MinimalCell, GRUCell, LSTMCell)}
# Adding a cell: its class here, its name in config.CellKind.
assert set(_CELLS) == set(CELL_KINDS), "every CellKind needs a cell class and the reverse"


def make_cell(kind: str, input_size: int, hidden_size: int) -> Cell:
    """A fresh cell of the named kind (one of CELL_KINDS)."""
    if kind not in _CELLS:
        raise ValueError(f"cell must be one of {', '.join(CELL_KINDS)}; got {kind!r}")
    return _CELLS[kind](input_size, hidden_size)


def padding_mask(lengths: Tensor, time: int) -> Tensor:
    """(batch,) lengths -> (batch, time) bool, True at real positions."""
    return torch.arange(time, device=lengths.device) < lengths.unsqueeze(1)


def reverse_within_lengths(x: Tensor, lengths: Tensor, index: Tensor | None = None) -> Tensor:
    """Reverse each sentence of a right-padded batch (batch, time, ...) within its own length.

        lengths = [3, 1]     t: 0 1 2 3          0 1 2 3
                  sentence 0:   a b c _    ->    c b a _
                  sentence 1:   d _ _ _    ->    d _ _ _

    Padding stays where it is, so the result is right-padded too; applying it twice is the identity.
    ``index``, from `reversal_index`, saves building it again for another tensor of the batch.
    """
    batch, time = x.shape[:2]
    if index is None:
        index = reversal_index(lengths.to(x.device), time)
    index = index.view(batch, time, *([1] * (x.dim() - 2))).expand_as(x)
    return x.gather(1, index)


def reversal_index(lengths: Tensor, time: int) -> Tensor:
    """(batch, time): where each position of `reverse_within_lengths`'s result comes from."""
    t = torch.arange(time, device=lengths.device).expand(lengths.shape[0], time)
    last = (lengths - 1).unsqueeze(1)  # (batch, 1)
    return torch.where(t <= last, last - t, t)


def check_batch(cell: Cell, x: Tensor, lengths: Tensor) -> None:
    if x.dim() != 3 or x.shape[2] != cell.input_size:
        raise ValueError(f"x must be (batch, time, {cell.input_size}); got shape {tuple(x.shape)}")
    if lengths.shape != (x.shape[0],):
        raise ValueError(f"lengths must be ({x.shape[0]},); got shape {tuple(lengths.shape)}")
    if x.shape[0] and (int(lengths.min()) < 0 or int(lengths.max()) > x.shape[1]):
        raise ValueError(f"lengths must lie in [0, {x.shape[1]}]")


def _scan(cell: Cell, x: Tensor) -> Tensor:
    """The generic loop, left to right from a zero state: (batch, time, D) -> (batch, time, H)."""
    batch, time = x.shape[:2]
    if time == 0:
        return x.new_zeros(batch, 0, cell.hidden_size)
    xg = cell.project(x.transpose(0, 1))  # (time, batch, G*hidden)
    weights = cell.step_weights()
    state = cell.initial_state(batch, x)
    outputs = []
    # unbind, not xg[t]: indexing inside the loop makes backward build a full-size zero tensor
    # per step, so training time grows with time^2.
    for xg_t in xg.unbind(0):
        state = cell.step(xg_t, state, weights)
        outputs.append(state[0])
    return torch.stack(outputs, 1)  # (batch, time, hidden)


def run_unmasked(cell: Cell, x: Tensor, fused: bool) -> Tensor:
    """Left to right over the whole padded width, unchecked: (batch, time, D) -> (batch, time, H)
    whose padded positions hold whatever the cell made of the padding. A real position never
    sees them, so a stack of layers masks once at its top (`ResidualStack`)."""
    return cell.fused(x) if fused else _scan(cell, x)


def _run(cell: Cell, x: Tensor, lengths: Tensor, reverse: bool, fused: bool) -> Tensor:
    check_batch(cell, x, lengths)
    if reverse:
        x = reverse_within_lengths(x, lengths)
    out = run_unmasked(cell, x, fused)  # (batch, time, hidden)
    out = out * padding_mask(lengths, x.shape[1]).unsqueeze(2).to(out.dtype)
    if reverse:
        out = reverse_within_lengths(out, lengths)
    return out


def run_cell(cell: Cell, x: Tensor, lengths: Tensor, reverse: bool = False) -> Tensor:
    """Run any cell across a right-padded batch with the generic loop.

    x (batch, time, input), lengths (batch,) -> (batch, time, hidden), zeros at padding.
    `reverse` runs right to left, each sentence starting at its own last token.
    """
    return _run(cell, x, lengths, reverse, fused=False)


def run_cell_fused(cell: Cell, x: Tensor, lengths: Tensor, reverse: bool = False) -> Tensor:
    """As `run_cell`, with torch's fused kernel on the padded batch (no packing, which would push
    the LSTM off its fast kernel). ValueError for a cell without one (see `Cell.has_fused`)."""
    if not cell.has_fused:
        raise ValueError(f"cell {cell.kind!r} has no fused torch kernel")
    return _run(cell, x, lengths, reverse, fused=True)
