"""The CRF's decoding in numpy, for the exported backend: the constrained Viterbi path and the
marginals by forward-backward, as `tagger.network.crf.CRF.decode` and
`CRF.marginals` compute them (same forbidden-transition score NEG, same padding rules), and the
softmax of a model without a CRF. Imports no torch.

Emissions are right-padded (batch, time, labels) with a bool mask (batch, time), True at real
positions; every sentence has at least one. The work runs in float64, so the results agree with
torch's float32 ones to well within the 4 decimals confidences are written with.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

NEG = -1e4  # the score of a forbidden start, transition or end (tagger.network.crf.NEG)


def _log_matmul(log_x: np.ndarray, exp_trans: np.ndarray) -> np.ndarray:
    """log(exp(log_x) @ exp_trans), stable: (batch, L) @ (L, L) -> (batch, L)."""
    top = log_x.max(axis=1, keepdims=True)
    return np.log(np.maximum(np.exp(log_x - top) @ exp_trans, 1e-300)) + top


@dataclass(frozen=True)
class LabelDecoder:
    """The CRF's scores with forbidden entries already set to NEG: start (L,), transitions
    (L, L) from row label to column label, end (L,)."""

    start: np.ndarray
    transitions: np.ndarray
    end: np.ndarray

    @classmethod
    def from_scores(
        cls,
        start: Any,
        transitions: Any,
        end: Any,
        start_ok: Any,
        transitions_ok: Any,
        end_ok: Any,
        temperature: float = 1.0,
    ) -> LabelDecoder:
        """From the learnt scores and their flags; learnt scores are divided by
        ``temperature``, forbidden ones stay NEG (as `tagger.apply.predict.tempered_crf`)."""

        def scores(values: Any, ok: Any) -> np.ndarray:
            learnt = np.asarray(values, dtype=np.float64) / temperature
            return np.where(np.asarray(ok, dtype=bool), learnt, NEG)

        return cls(
            scores(start, start_ok), scores(transitions, transitions_ok), scores(end, end_ok)
        )

    @classmethod
    def from_record(cls, record: Mapping[str, Any], temperature: float = 1.0) -> LabelDecoder:
        """From an export file's "decoding" table (`tagger.apply.export_file`)."""
        return cls.from_scores(
            record["start"],
            record["transitions"],
            record["end"],
            record["start_ok"],
            record["transitions_ok"],
            record["end_ok"],
            temperature,
        )

    def decode(self, emissions: np.ndarray, mask: np.ndarray) -> list[list[int]]:
        """Viterbi: the best label path of each sentence, as long as the sentence."""
        emissions = emissions.astype(np.float64, copy=False)
        batch, time, n = emissions.shape
        stay = np.broadcast_to(np.arange(n), (batch, n))
        best = self.start + emissions[:, 0]  # (batch, L)
        pointers = []
        for t in range(1, time):
            candidates = best[:, :, None] + self.transitions  # (batch, from L, to L)
            came_from = candidates.argmax(axis=1)  # (batch, L)
            value = np.take_along_axis(candidates, came_from[:, None, :], axis=1)[:, 0]
            real = mask[:, t, None]  # (batch, 1)
            best = np.where(real, value + emissions[:, t], best)
            pointers.append(np.where(real, came_from, stay))
        label = (best + self.end).argmax(axis=1)  # (batch,)
        path = [label]
        for came_from in reversed(pointers):
            label = np.take_along_axis(came_from, label[:, None], axis=1)[:, 0]
            path.append(label)
        paths = np.stack(path[::-1], axis=1).tolist()  # (batch, time)
        lengths = mask.sum(1).tolist()
        return [p[:k] for p, k in zip(paths, lengths, strict=True)]

    def marginals(self, emissions: np.ndarray, mask: np.ndarray) -> np.ndarray:
        """Forward-backward: P(label j at t) (batch, time, L); zero at padding.

        In probabilities rather than logs, each step's forward and backward vectors rescaled to
        sum to 1: a position's marginals are its forward times its backward vector made to sum
        to 1, which any per-step scale leaves alone. Half the array operations a step of the
        log-space recursion takes (no max, exp and log around the product), and the same values
        to 1e-12 (tests/test_label_decoding.py). Where a probability underflows to 0 on every
        allowed path (scores more than 700 apart), the log-space recursion answers instead."""
        emissions = emissions.astype(np.float64, copy=False)
        with np.errstate(divide="ignore", invalid="ignore"):
            found = self._scaled_marginals(emissions, mask)
        if np.isfinite(found).all():
            return found
        return self._log_marginals(emissions, mask)

    def _scaled_marginals(self, emissions: np.ndarray, mask: np.ndarray) -> np.ndarray:
        batch, time, n = emissions.shape
        # exp of each score less its maximum: entries in (0, 1], forbidden ones exactly 0
        weights = np.exp(emissions - emissions.max(axis=2, keepdims=True))  # (batch, time, L)
        moves = np.exp(self.transitions - self.transitions.max())  # (L, L)
        ends = np.exp(self.end - self.end.max())  # (L,)
        forward = np.empty_like(weights)
        alpha = np.exp(self.start - self.start.max()) * weights[:, 0]
        alpha /= alpha.sum(axis=1, keepdims=True)
        forward[:, 0] = alpha
        for t in range(1, time):
            # past a sentence's end alpha goes on without meaning: only its real positions count
            alpha = (alpha @ moves) * weights[:, t]
            alpha /= alpha.sum(axis=1, keepdims=True)
            forward[:, t] = alpha
        backward = np.empty_like(weights)
        beta = np.broadcast_to(ends, (batch, n))
        backward[:, -1] = beta
        moves_back = moves.T
        for t in range(time - 2, -1, -1):
            after = (weights[:, t + 1] * beta) @ moves_back
            after /= after.sum(axis=1, keepdims=True)
            # at a sentence's last real position the suffix is the end score alone
            beta = np.where(mask[:, t + 1, None], after, ends)
            backward[:, t] = beta
        joint = forward * backward
        joint /= joint.sum(axis=2, keepdims=True)
        return joint * mask[:, :, None]

    def _log_marginals(self, emissions: np.ndarray, mask: np.ndarray) -> np.ndarray:
        """The marginals by forward-backward in log space: slower, finite however far apart
        the scores are."""
        time = emissions.shape[1]
        shift = self.transitions.max()
        exp_trans = np.exp(self.transitions - shift)
        alpha = self.start + emissions[:, 0]  # (batch, L)
        alphas = [alpha]
        for t in range(1, time):
            nxt = _log_matmul(alpha, exp_trans) + shift + emissions[:, t]
            alpha = np.where(mask[:, t, None], nxt, alpha)
            alphas.append(alpha)
        last = alphas[-1] + self.end
        top = last.max(axis=1, keepdims=True)
        log_z = np.log(np.exp(last - top).sum(axis=1, keepdims=True)) + top  # (batch, 1)
        exp_back = exp_trans.T
        beta = np.broadcast_to(self.end, alpha.shape)
        betas = [beta]
        for t in range(time - 2, -1, -1):
            nxt = _log_matmul(emissions[:, t + 1] + beta, exp_back) + shift
            beta = np.where(mask[:, t + 1, None], nxt, self.end)
            betas.append(beta)
        log_p = np.stack(alphas, 1) + np.stack(betas[::-1], 1) - log_z[:, :, None]
        return np.exp(log_p) * mask[:, :, None]


def softmax(emissions: np.ndarray, temperature: float = 1.0) -> np.ndarray:
    """(batch, time, L) label probabilities of a model without a CRF."""
    scaled = emissions.astype(np.float64) / temperature
    scaled -= scaled.max(axis=-1, keepdims=True)
    weights = np.exp(scaled)
    return weights / weights.sum(axis=-1, keepdims=True)


def argmax_paths(emissions: np.ndarray, mask: np.ndarray) -> list[list[int]]:
    """The best label at each position, each sentence as long as it is (no CRF)."""
    best = emissions.argmax(-1).tolist()
    return [row[:n] for row, n in zip(best, mask.sum(1).tolist(), strict=True)]
