"""Tests for tagger.network.encoder: padding isolation, direction starts, residual sums, gradients."""

from __future__ import annotations

import pytest
import torch
from torch import nn

from tagger.network.cells import CELL_KINDS, padding_mask, run_cell
from tagger.network.encoder import BiResidualEncoder

PATHS = [(kind, fast) for kind in CELL_KINDS for fast in (False, True) if kind != "minimal" or fast]
TORCH_CELLS = {"rnn": nn.RNNCell, "gru": nn.GRUCell, "lstm": nn.LSTMCell}


def _encoder(kind: str, fast: bool = True, layers: int = 2, seed: int = 0) -> BiResidualEncoder:
    torch.manual_seed(seed)
    return BiResidualEncoder(5, 6, layers, kind, dropout=0.3, fast=fast).eval()


@pytest.mark.parametrize(("kind", "fast"), PATHS)
def test_padding_never_leaks(kind: str, fast: bool) -> None:
    enc = _encoder(kind, fast)
    g = torch.Generator().manual_seed(1)
    lengths = [8, 3, 1, 6]
    x = torch.randn(len(lengths), 8, 5, generator=g) * 3
    with torch.no_grad():
        batched = enc(x, torch.tensor(lengths))
        for i, n in enumerate(lengths):
            alone = enc(x[i : i + 1, :n], torch.tensor([n]))
            torch.testing.assert_close(batched[i, :n], alone[0], atol=1e-5, rtol=0)
            assert torch.all(batched[i, n:] == 0)


@pytest.mark.parametrize("kind", ["rnn", "gru", "lstm"])
def test_fast_and_generic_encoders_agree(kind: str) -> None:
    generic, fast = _encoder(kind, False), _encoder(kind, True)
    fast.load_state_dict(generic.state_dict())
    x = torch.randn(3, 7, 5, generator=torch.Generator().manual_seed(2))
    lengths = torch.tensor([7, 2, 5])
    with torch.no_grad():
        torch.testing.assert_close(generic(x, lengths), fast(x, lengths), atol=1e-5, rtol=0)


def _minimal_step_from_zero(cell: nn.Module, x: torch.Tensor) -> torch.Tensor:
    # The published update from h_prev = 0: h = (1 - g) * c.
    g, c = (x @ cell.weight_ih.T + cell.bias_ih + cell.bias_hh).chunk(2, -1)
    return (1 - torch.sigmoid(g)) * torch.tanh(c)


@pytest.mark.parametrize(("kind", "fast"), PATHS)
def test_right_to_left_starts_at_each_sentences_last_token(kind: str, fast: bool) -> None:
    # Source: torch's nn.RNNCell / GRUCell / LSTMCell (one step from a zero state), and for
    # "minimal" the published update rule, applied to the last real token alone.
    enc = _encoder(kind, fast, layers=1)
    x = torch.randn(3, 6, 5, generator=torch.Generator().manual_seed(3))
    lengths = torch.tensor([6, 2, 4])
    cell = enc.right_to_left.cells[0]
    with torch.no_grad():
        out = enc(x, lengths)
        for i, n in enumerate(lengths.tolist()):
            h0 = enc.projection(x[i, n - 1])  # (hidden,)
            if kind == "minimal":
                step = _minimal_step_from_zero(cell, h0)
            else:
                reference = TORCH_CELLS[kind](6, 6)
                for name in ("weight_ih", "weight_hh", "bias_ih", "bias_hh"):
                    getattr(reference, name).copy_(getattr(cell, name))
                step = reference(h0.unsqueeze(0))
                step = (step[0] if kind == "lstm" else step)[0]
            # Residual: the layer output is its input plus the cell's output.
            torch.testing.assert_close(out[i, n - 1, 6:], h0 + step, atol=1e-5, rtol=0)


@pytest.mark.parametrize("kind", CELL_KINDS)
def test_zero_cells_leave_the_residual_identity(kind: str) -> None:
    # Hand-worked: with all cell parameters zero every kind outputs 0 (rnn tanh(0) = 0; lstm
    # g = tanh(0) = 0 so c = h = 0; gru n = 0 and h = z*h_prev = 0; minimal c = 0 and h = 0),
    # so each stack returns its input: both halves equal the projection.
    enc = _encoder(kind, layers=3)
    with torch.no_grad():
        for stack in (enc.left_to_right, enc.right_to_left):
            for p in stack.parameters():
                p.zero_()
        x = torch.randn(2, 4, 5, generator=torch.Generator().manual_seed(4))
        lengths = torch.tensor([4, 3])
        out = enc(x, lengths)
        expected = enc.projection(x) * padding_mask(lengths, 4).unsqueeze(2)
    torch.testing.assert_close(out, torch.cat([expected, expected], 2), atol=1e-6, rtol=0)


@pytest.mark.parametrize("kind", CELL_KINDS)
def test_residual_sums_across_layers(kind: str) -> None:
    # Layer 2 zeroed (it then outputs 0): the stack is h0 + RNN_1(h0). Layer 1 zeroed instead:
    # RNN_2 sees h0 itself, so the stack is h0 + RNN_2(h0).
    x = torch.randn(2, 5, 5, generator=torch.Generator().manual_seed(5))
    lengths = torch.tensor([5, 2])
    mask = padding_mask(lengths, 5).unsqueeze(2)
    for live in (0, 1):
        enc = _encoder(kind, fast=False, layers=2)
        stack = enc.left_to_right
        with torch.no_grad():
            for p in stack.cells[1 - live].parameters():
                p.zero_()
            h0 = enc.projection(x)
            expected = (h0 + run_cell(stack.cells[live], h0, lengths)) * mask
            torch.testing.assert_close(enc(x, lengths)[:, :, :6], expected, atol=1e-6, rtol=0)


def test_layers_and_directions_have_their_own_parameters() -> None:
    enc = _encoder("gru", layers=3)
    cells = [*enc.left_to_right.cells, *enc.right_to_left.cells]
    pointers = {p.data_ptr() for c in cells for p in c.parameters()}
    assert len(pointers) == 4 * len(cells)
    assert len(list(enc.parameters())) == 4 * len(cells) + 2


@pytest.mark.parametrize(("kind", "fast"), PATHS)
def test_gradients_flow_in_training_mode(kind: str, fast: bool) -> None:
    enc = _encoder(kind, fast).train()
    x = torch.randn(3, 6, 5, generator=torch.Generator().manual_seed(6), requires_grad=True)
    out = enc(x, torch.tensor([6, 1, 4]))
    out.pow(2).mean().backward()
    assert torch.isfinite(x.grad).all() and x.grad.abs().sum() > 0
    for name, p in enc.named_parameters():
        assert p.grad is not None and torch.isfinite(p.grad).all(), name
        assert p.grad.abs().sum() > 0, name


def test_left_to_right_only() -> None:
    torch.manual_seed(7)
    enc = BiResidualEncoder(5, 6, 2, "lstm", bidirectional=False).eval()
    x = torch.randn(2, 4, 5)
    lengths = torch.tensor([4, 2])
    assert enc.output_size == 6
    with torch.no_grad():
        out = enc(x, lengths)
        # Left to right only: an earlier position never depends on a later token.
        changed = x.clone()
        changed[0, 3] += 1.0
        assert out.shape == (2, 4, 6)
        moved = enc(changed, lengths)
        torch.testing.assert_close(moved[0, :3], out[0, :3], atol=0, rtol=0)
        assert not torch.allclose(moved[0, 3], out[0, 3])


@pytest.mark.parametrize(("kind", "gates"), [("rnn", 1), ("minimal", 2), ("gru", 3), ("lstm", 4)])
def test_flops_per_token(kind: str, gates: int) -> None:
    # 2*G*H*(D_in + H) per layer per direction (PERFORMANCE.md), plus the 2*D*H projection.
    enc = BiResidualEncoder(10, 4, 3, kind)
    assert enc.flops_per_token() == 2 * 10 * 4 + 2 * 3 * 2 * gates * 4 * (4 + 4)
    assert enc.output_size == 8


def test_bad_arguments_rejected() -> None:
    with pytest.raises(ValueError, match="cell must be one of"):
        BiResidualEncoder(3, 4, 1, "cnn")
    with pytest.raises(ValueError, match="layers"):
        BiResidualEncoder(3, 4, 0, "gru")
    with pytest.raises(ValueError, match="dropout"):
        BiResidualEncoder(3, 4, 1, "gru", dropout=1.5)
