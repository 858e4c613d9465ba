"""Tests for tagger.network.cells: the generic loop against torch's modules and fused kernels."""

from __future__ import annotations

import math

import pytest
import torch
from torch import nn

from tagger.network.cells import (
    CELL_KINDS,
    make_cell,
    padding_mask,
    reverse_within_lengths,
    run_cell,
    run_cell_fused,
)

FUSED_KINDS = ("rnn", "gru", "lstm")
TORCH_MODULES = {"rnn": nn.RNN, "gru": nn.GRU, "lstm": nn.LSTM}
TORCH_CELLS = {"rnn": nn.RNNCell, "gru": nn.GRUCell, "lstm": nn.LSTMCell}


def _copy_into_torch(cell, module: nn.Module, suffix: str = "_l0") -> None:
    with torch.no_grad():
        for name in ("weight_ih", "weight_hh", "bias_ih", "bias_hh"):
            getattr(module, name + suffix).copy_(getattr(cell, name))


def _batch(seed: int, lengths: list[int], dim: int) -> tuple[torch.Tensor, torch.Tensor]:
    g = torch.Generator().manual_seed(seed)
    x = torch.randn(len(lengths), max(lengths), dim, generator=g)
    return x, torch.tensor(lengths)


@pytest.mark.parametrize("kind", FUSED_KINDS)
def test_generic_loop_matches_torch_module_on_one_sequence(kind: str) -> None:
    # Source: torch's own nn.RNN / nn.GRU / nn.LSTM with the same weights copied in.
    torch.manual_seed(0)
    cell = make_cell(kind, 5, 7)
    x, lengths = _batch(1, [9], 5)
    reference = TORCH_MODULES[kind](5, 7, batch_first=True, bidirectional=True)
    _copy_into_torch(cell, reference, "_l0")
    _copy_into_torch(cell, reference, "_l0_reverse")
    with torch.no_grad():
        expected, _ = reference(x)  # (1, 9, 2*7): left-to-right, then right-to-left
        ours = run_cell(cell, x, lengths)
        ours_reversed = run_cell(cell, x, lengths, reverse=True)
    torch.testing.assert_close(ours, expected[:, :, :7], atol=1e-5, rtol=0)
    torch.testing.assert_close(ours_reversed, expected[:, :, 7:], atol=1e-5, rtol=0)


@pytest.mark.parametrize("kind", FUSED_KINDS)
def test_padded_batch_matches_torch_packed_bidirectional(kind: str) -> None:
    # Source: torch's nn.LSTM/GRU/RNN on a packed sequence, which runs each sentence exactly
    # within its own length in both directions; our runs stay on padded input.
    torch.manual_seed(1)
    cell = make_cell(kind, 4, 6)
    x, lengths = _batch(2, [7, 3, 1, 5], 4)
    reference = TORCH_MODULES[kind](4, 6, batch_first=True, bidirectional=True)
    _copy_into_torch(cell, reference, "_l0")
    _copy_into_torch(cell, reference, "_l0_reverse")
    packed = nn.utils.rnn.pack_padded_sequence(x, lengths, batch_first=True, enforce_sorted=False)
    with torch.no_grad():
        out, _ = reference(packed)
        expected, _ = nn.utils.rnn.pad_packed_sequence(out, batch_first=True)  # zeros at padding
        for run in (run_cell, run_cell_fused):
            torch.testing.assert_close(run(cell, x, lengths), expected[:, :, :6], atol=1e-5, rtol=0)
            torch.testing.assert_close(
                run(cell, x, lengths, reverse=True), expected[:, :, 6:], atol=1e-5, rtol=0
            )


@pytest.mark.parametrize("kind", FUSED_KINDS)
@pytest.mark.parametrize("reverse", [False, True])
def test_generic_loop_matches_fused_kernel_with_gradients(kind: str, reverse: bool) -> None:
    torch.manual_seed(2)
    cell = make_cell(kind, 6, 8)
    x, lengths = _batch(3, [10, 4, 7, 1, 10], 6)
    results = []
    for run in (run_cell, run_cell_fused):
        cell.zero_grad()
        xr = x.clone().requires_grad_(True)
        out = run(cell, xr, lengths, reverse=reverse)
        (out * torch.linspace(-1, 1, out.numel()).view_as(out)).sum().backward()
        results.append((out, xr.grad, [p.grad.clone() for p in cell.parameters()]))
    (out_a, gx_a, gp_a), (out_b, gx_b, gp_b) = results
    torch.testing.assert_close(out_a, out_b, atol=1e-5, rtol=0)
    torch.testing.assert_close(gx_a, gx_b, atol=1e-5, rtol=0)
    for a, b in zip(gp_a, gp_b, strict=True):
        torch.testing.assert_close(a, b, atol=1e-5, rtol=1e-5)


@pytest.mark.parametrize("kind", FUSED_KINDS)
def test_one_step_matches_torch_cell(kind: str) -> None:
    # Source: torch's nn.RNNCell / nn.GRUCell / nn.LSTMCell from a nonzero state.
    torch.manual_seed(3)
    cell = make_cell(kind, 3, 5)
    reference = TORCH_CELLS[kind](3, 5)
    _copy_into_torch(cell, reference, "")
    x = torch.randn(4, 3)
    h = torch.randn(4, 5)
    c = torch.randn(4, 5)
    with torch.no_grad():
        state = (h, c) if kind == "lstm" else (h,)
        ours = cell.step(cell.project(x), state, cell.step_weights())
        expected = reference(x, (h, c)) if kind == "lstm" else (reference(x, h),)
    for a, b in zip(ours, expected, strict=True):
        torch.testing.assert_close(a, b, atol=1e-6, rtol=0)


def _minimal_cell_by_hand() -> torch.nn.Module:
    # input 1, hidden 1; rows are the gate blocks g, c.
    cell = make_cell("minimal", 1, 1)
    ln2, ln3 = math.log(2.0), math.log(3.0)
    with torch.no_grad():
        cell.weight_ih.copy_(torch.tensor([[ln3 / 2], [ln2]]))
        cell.weight_hh.copy_(torch.tensor([[ln3], [2 * ln2]]))
        cell.bias_ih.copy_(torch.tensor([0.0, -ln2]))
        cell.bias_hh.zero_()
    return cell


def test_minimal_cell_one_step_by_hand() -> None:
    # Hand-worked, x = 1, h_prev = 0.5:
    #   g = sigmoid(ln3/2 + ln3 * 0.5) = sigmoid(ln 3) = 3/4
    #   c = tanh(ln2 + 2 ln2 * 0.5 - ln2) = tanh(ln 2) = (2 - 1/2) / (2 + 1/2) = 3/5
    #   h = 3/4 * 1/2 + 1/4 * 3/5 = 0.375 + 0.15 = 0.525
    cell = _minimal_cell_by_hand()
    with torch.no_grad():
        xg = cell.project(torch.tensor([[1.0]]))
        (h,) = cell.step(xg, (torch.tensor([[0.5]]),), cell.step_weights())
    assert h.item() == pytest.approx(0.525, abs=1e-6)


def test_minimal_cell_sequence_matches_scalar_formula() -> None:
    # Source: the published update rule written out with Python scalars, three steps.
    cell = _minimal_cell_by_hand()
    xs = [1.0, -0.5, 2.0]
    (wg, wc), (ug, uc) = cell.weight_ih[:, 0].tolist(), cell.weight_hh[:, 0].tolist()
    bg, bc = (cell.bias_ih + cell.bias_hh).tolist()
    h, expected = 0.0, []
    for x in xs:
        g = 1.0 / (1.0 + math.exp(-(wg * x + ug * h + bg)))
        c = math.tanh(wc * x + uc * h + bc)
        h = g * h + (1.0 - g) * c
        expected.append(h)
    with torch.no_grad():
        out = run_cell(cell, torch.tensor(xs).view(1, 3, 1), torch.tensor([3]))
    assert out.view(-1).tolist() == pytest.approx(expected, abs=1e-6)


def test_minimal_cell_has_no_fused_kernel() -> None:
    cell = make_cell("minimal", 2, 2)
    x, lengths = _batch(0, [2], 2)
    with pytest.raises(ValueError, match="minimal"):
        run_cell_fused(cell, x, lengths)


@pytest.mark.parametrize("kind", CELL_KINDS)
def test_padding_outputs_zero_and_gradients_finite(kind: str) -> None:
    torch.manual_seed(4)
    cell = make_cell(kind, 3, 4)
    x, lengths = _batch(5, [6, 2, 4], 3)
    x.requires_grad_(True)
    out = run_cell(cell, x, lengths, reverse=True)
    pad = ~padding_mask(lengths, 6)
    assert torch.all(out[pad] == 0)
    assert torch.all(out[~pad].abs().sum(1) > 0)
    out.pow(2).sum().backward()
    assert torch.isfinite(x.grad).all()
    assert all(torch.isfinite(p.grad).all() for p in cell.parameters())
    # Padding never influences a real position, so its input gradient is exactly zero.
    assert torch.all(x.grad[pad] == 0)


def test_lstm_forget_bias_starts_at_one() -> None:
    # Common practice (Jozefowicz et al. 2015): the summed forget-gate bias starts at 1.
    cell = make_cell("lstm", 3, 5)
    total = cell.bias_ih + cell.bias_hh
    assert torch.all(total[5:10] == 1.0)
    assert not torch.all(total[:5] == 1.0)


def test_reverse_within_lengths_by_hand() -> None:
    x = torch.tensor([[1, 2, 3, 0], [4, 0, 0, 0], [5, 6, 7, 8]]).unsqueeze(2)
    lengths = torch.tensor([3, 1, 4])
    expected = torch.tensor([[3, 2, 1, 0], [4, 0, 0, 0], [8, 7, 6, 5]]).unsqueeze(2)
    assert torch.equal(reverse_within_lengths(x, lengths), expected)
    assert torch.equal(reverse_within_lengths(expected, lengths), x)


def test_unknown_kind_and_bad_shapes_rejected() -> None:
    with pytest.raises(ValueError, match="cell must be one of"):
        make_cell("transformer", 2, 2)
    cell = make_cell("gru", 3, 2)
    with pytest.raises(ValueError, match="x must be"):
        run_cell(cell, torch.zeros(2, 4, 5), torch.tensor([4, 4]))
    with pytest.raises(ValueError, match="lengths must lie"):
        run_cell(cell, torch.zeros(2, 4, 3), torch.tensor([5, 1]))
