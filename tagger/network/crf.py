"""The linear-chain CRF output layer: path scores, the forward algorithm, Viterbi and marginals.

A label path y_0..y_{n-1} over emissions e (time, labels) scores
    start[y_0] + sum_t e[t, y_t] + sum_{t>=1} transitions[y_{t-1}, y_t] + end[y_{n-1}].
Forbidden starts, transitions and ends (e.g. an inside tag after an outside tag) score NEG instead
of their learnt value: large enough that no decoded path uses them, finite so that no gradient is
NaN. Every method takes right-padded emissions (batch, time, labels) with a bool mask (batch, time)
that is True at real positions; each sentence has at least one real position. All loops run over
time only, vectorised over the batch.
"""

from __future__ import annotations

import numpy as np
import torch
from torch import Tensor, nn

NEG = -1e4


def _exp_transitions(trans: Tensor) -> tuple[Tensor, Tensor]:
    """exp(trans - max) (entries <= 1, forbidden ones 0) and the max that was taken off."""
    shift = trans.max().detach()
    return shift, (trans - shift).exp()


def _log_matmul(log_x: Tensor, exp_trans: Tensor) -> Tensor:
    """log(exp(log_x) @ exp_trans), stable: the log-sum-exp over labels as one matrix product.

    A (batch, L, L) logsumexp per step costs far more than a (batch, L) @ (L, L) product, in the
    forward and even more in the backward pass. The clamp keeps log() finite when every path into
    a label is forbidden or underflows (those paths have probability below e^-69 anyway).
    """
    top = log_x.max(dim=1, keepdim=True).values.detach()  # (batch, 1)
    return ((log_x - top).exp() @ exp_trans).clamp_min(1e-30).log() + top


def _bool_buffer(
    values: list[bool] | list[list[bool]] | None, shape: tuple[int, ...], name: str
) -> Tensor:
    if values is None:
        return torch.ones(shape, dtype=torch.bool)
    t = torch.tensor(values, dtype=torch.bool)
    if t.shape != shape:
        raise ValueError(f"{name} must have shape {shape}; got {tuple(t.shape)}")
    return t


class CRF(nn.Module):
    """Learnable transitions (L, L) (from row label to column label), start (L,) and end (L,)
    scores; `*_ok` flags (default all True) forbid the ones set to False."""

    def __init__(
        self,
        num_labels: int,
        start_ok: list[bool] | None = None,
        trans_ok: list[list[bool]] | None = None,
        end_ok: list[bool] | None = None,
    ) -> None:
        super().__init__()
        if num_labels < 1:
            raise ValueError(f"num_labels must be a positive integer, got {num_labels}")
        n = num_labels
        self.num_labels = n
        self.transitions = nn.Parameter(torch.zeros(n, n))
        self.start = nn.Parameter(torch.zeros(n))
        self.end = nn.Parameter(torch.zeros(n))
        # Buffers, so the constraints travel with the weights.
        self.register_buffer("start_ok", _bool_buffer(start_ok, (n,), "start_ok"))
        self.register_buffer("trans_ok", _bool_buffer(trans_ok, (n, n), "trans_ok"))
        self.register_buffer("end_ok", _bool_buffer(end_ok, (n,), "end_ok"))

    def extra_repr(self) -> str:
        return f"num_labels={self.num_labels}"

    def _scores(self) -> tuple[Tensor, Tensor, Tensor]:
        """(start (L,), transitions (L, L), end (L,)) with forbidden entries set to NEG."""
        neg = self.transitions.new_tensor(NEG)
        return (
            torch.where(self.start_ok, self.start, neg),
            torch.where(self.trans_ok, self.transitions, neg),
            torch.where(self.end_ok, self.end, neg),
        )

    def _check(self, emissions: Tensor, mask: Tensor) -> None:
        if emissions.dim() != 3 or emissions.shape[2] != self.num_labels:
            raise ValueError(
                f"emissions must be (batch, time, {self.num_labels}); got {tuple(emissions.shape)}"
            )
        if mask.shape != emissions.shape[:2] or mask.dtype != torch.bool:
            raise ValueError(f"mask must be bool {tuple(emissions.shape[:2])}")
        if emissions.shape[1] == 0 or not bool(mask[:, 0].all()):
            raise ValueError("every sentence needs at least one real position")

    def _alphas(self, emissions: Tensor, mask: Tensor) -> list[Tensor]:
        """Forward variables: alpha_t[b, j] = log-sum of all prefixes ending in label j at t,
        each (batch, L); at padding alpha_t carries the last real alpha forward."""
        start, trans, _ = self._scores()
        shift, exp_trans = _exp_transitions(trans)
        steps = emissions.transpose(0, 1).unbind(0)  # time x (batch, L)
        real = mask.transpose(0, 1).unsqueeze(2).unbind(0)  # time x (batch, 1)
        alpha = start + steps[0]  # (batch, L)
        alphas = [alpha]
        for e_t, m_t in zip(steps[1:], real[1:], strict=True):
            nxt = _log_matmul(alpha, exp_trans) + shift + e_t  # (batch, L)
            alpha = torch.where(m_t, nxt, alpha)
            alphas.append(alpha)
        return alphas

    def log_partition(self, emissions: Tensor, mask: Tensor) -> Tensor:
        """log Z per sentence: log-sum-exp of the scores of all label paths. -> (batch,)"""
        self._check(emissions, mask)
        _, _, end = self._scores()
        return torch.logsumexp(self._alphas(emissions, mask)[-1] + end, dim=1)

    def score(self, emissions: Tensor, labels: Tensor, mask: Tensor) -> Tensor:
        """Score of the given label paths (batch, time) (values at padding ignored). -> (batch,)"""
        self._check(emissions, mask)
        start, trans, end = self._scores()
        labels = torch.where(mask, labels, torch.zeros_like(labels))
        fmask = mask.to(emissions.dtype)
        emitted = emissions.gather(2, labels.unsqueeze(2)).squeeze(2)  # (batch, time)
        moved = trans[labels[:, :-1], labels[:, 1:]]  # (batch, time-1)
        last = labels.gather(1, (mask.sum(1) - 1).unsqueeze(1)).squeeze(1)  # (batch,)
        return (
            start[labels[:, 0]]
            + (emitted * fmask).sum(1)
            + (moved * fmask[:, 1:]).sum(1)
            + end[last]
        )

    def nll(
        self, emissions: Tensor, labels: Tensor, mask: Tensor, reduction: str = "sum"
    ) -> Tensor:
        """Negative log-likelihood of the label paths; reduction "sum", "mean" (per sentence) or
        "none" (batch,)."""
        if reduction not in ("sum", "mean", "none"):
            raise ValueError(f"reduction must be 'sum', 'mean' or 'none'; got {reduction!r}")
        losses = self.log_partition(emissions, mask) - self.score(emissions, labels, mask)
        if reduction == "sum":
            return losses.sum()
        if reduction == "mean":
            return losses.mean()
        return losses

    @torch.no_grad()
    def decode(self, emissions: Tensor, mask: Tensor) -> list[list[int]]:
        """Viterbi: the best label path of each sentence, as long as the sentence."""
        self._check(emissions, mask)
        start, trans, end = self._scores()
        batch, time, n = emissions.shape
        steps = emissions.transpose(0, 1).unbind(0)  # time x (batch, L)
        real = mask.transpose(0, 1).unsqueeze(2).unbind(0)  # time x (batch, 1)
        # At padding the back-pointer is the identity, so the last real label rides to the end.
        stay = torch.arange(n, device=emissions.device).expand(batch, n)  # (batch, L)
        best = start + steps[0]  # (batch, L)
        pointers = []
        for e_t, m_t in zip(steps[1:], real[1:], strict=True):
            value, came_from = (best.unsqueeze(2) + trans).max(dim=1)  # (batch, L) each
            best = torch.where(m_t, value + e_t, best)
            pointers.append(torch.where(m_t, came_from, stay))
        label = (best + end).argmax(dim=1).numpy()  # (batch,)
        # Following the pointers back is integer indexing alone: done in numpy on all of them at
        # once, it costs a few microseconds a step, where a torch gather a step cost ten times as
        # much (scripts/profile_tagging.py).
        path = np.empty((time, batch), dtype=np.int64)  # (time, batch)
        path[-1] = label
        if pointers:
            back = torch.stack(pointers).numpy()  # (time-1, batch, L)
            rows = np.arange(batch)
            for t in range(time - 2, -1, -1):
                label = back[t, rows, label]
                path[t] = label
        paths = path.T.tolist()  # (batch, time)
        lengths = mask.sum(1).tolist()
        return [p[:k] for p, k in zip(paths, lengths, strict=True)]

    def marginals(self, emissions: Tensor, mask: Tensor) -> Tensor:
        """Forward-backward: P(label j at t) per sentence, (batch, time, L); rows sum to 1 at real
        positions and are zero at padding."""
        self._check(emissions, mask)
        _, trans, end = self._scores()
        alphas = self._alphas(emissions, mask)
        log_z = torch.logsumexp(alphas[-1] + end, dim=1, keepdim=True)  # (batch, 1)
        steps = emissions.transpose(0, 1).unbind(0)  # time x (batch, L)
        real = mask.transpose(0, 1).unsqueeze(2).unbind(0)  # time x (batch, 1)
        # beta_t[b, i]: log-sum of all suffixes after t given label i at t; at the last real
        # position (and at padding, where it is unused) it is the end score.
        shift, exp_trans = _exp_transitions(trans)
        exp_trans_back = exp_trans.t()
        beta = end.expand_as(alphas[-1])  # (batch, L)
        betas = [beta]
        for t in range(len(steps) - 2, -1, -1):
            nxt = _log_matmul(steps[t + 1] + beta, exp_trans_back) + shift  # (batch, L)
            beta = torch.where(real[t + 1], nxt, end)
            betas.append(beta)
        log_p = torch.stack(alphas, 1) + torch.stack(betas[::-1], 1) - log_z.unsqueeze(2)
        return log_p.exp() * mask.unsqueeze(2).to(log_p.dtype)  # (batch, time, L)
