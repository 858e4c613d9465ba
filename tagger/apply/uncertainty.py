"""How unsure a model is of a sentence, from the CRF's distribution over label paths.

Two measures (Settles & Craven 2008, "An analysis of active learning strategies for sequence
labeling tasks"), both higher for a sentence the model is less sure of:

    least-confidence  1 - P(y* | x), y* the best (Viterbi) label path
    entropy           the token entropies summed over the sentence,
                      - sum_t sum_j P(y_t = j | x) log P(y_t = j | x), from the CRF's marginals

Long sentences hold more to be unsure of, so the user chooses how length counts (`LengthNorm`):
``none`` keeps the sentence totals (long sentences rise), ``per-token`` divides the entropy by the
length T and reads least confidence per token as 1 - P(y* | x)^(1/T) (one minus the geometric
mean of the path's per-token probability), and ``sqrt`` divides by sqrt(T) in both places, in
between. A model without a CRF has independent tokens: P(y* | x) is the product of each token's
largest softmax probability, and its marginals are those softmax probabilities.

Probabilities are read at the model's fitted temperature (`Tagger.temperature`), as its scores are.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import torch

from tagger.apply.label_decoding import LabelDecoder
from tagger.apply.pick_options import LengthNorm, Measure
from tagger.apply.predict import crf_decoder, emission_batches, label_probabilities, tempered_crf
from tagger.network.crf import CRF

if TYPE_CHECKING:
    from tagger.apply.tagger import Rows, Tagger


@dataclass(frozen=True)
class Uncertain:
    """One sentence's uncertainty and the label path the model would give it."""

    score: float
    path: list[int]  # label ids of the best path, one per token


def crf_measures(
    crf: CRF, emissions: torch.Tensor, mask: torch.Tensor, decoder: LabelDecoder | None = None
) -> tuple[torch.Tensor, list[list[int]], torch.Tensor]:
    """(marginals (B, T, L), best paths, log P(best path | x) (B,)) of a CRF's distribution;
    `decoder` is `crf_decoder(crf)`, made once by a caller with many batches."""
    paths = crf.decode(emissions, mask)
    padded = torch.zeros(mask.shape, dtype=torch.long)  # (B, T)
    for b, path in enumerate(paths):
        padded[b, : len(path)] = torch.tensor(path)
    log_best = crf.score(emissions, padded, mask) - crf.log_partition(emissions, mask)
    # the marginals as tagging computes them (numpy, float64): 1.7-3x faster than torch's
    decoder = decoder or crf_decoder(crf)
    marginals = decoder.marginals(emissions.numpy(), mask.numpy())
    return torch.from_numpy(marginals), paths, log_best


def token_entropy(marginals: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    """(B,): each sentence's token entropies (nats) summed over its real positions."""
    per_token = -torch.special.xlogy(marginals, marginals).sum(-1)  # (B, T); 0 log 0 = 0
    return (per_token * mask.to(per_token.dtype)).sum(-1)


def sentence_scores(
    measure: Measure,
    norm: LengthNorm,
    marginals: torch.Tensor,
    log_best: torch.Tensor,
    mask: torch.Tensor,
) -> list[float]:
    """Each sentence's uncertainty under ``measure`` and ``norm`` (see the module docstring)."""
    lengths = mask.sum(-1).to(marginals.dtype)  # (B,)
    if norm is LengthNorm.NONE:
        divisor = torch.ones_like(lengths)
    elif norm is LengthNorm.PER_TOKEN:
        divisor = lengths
    else:
        divisor = lengths.sqrt()
    if measure is Measure.ENTROPY:
        scores = token_entropy(marginals, mask) / divisor
    else:
        # exp() of a log-probability may overshoot 1 by a rounding error
        scores = 1.0 - (log_best.clamp_max(0.0) / divisor).exp()
    return [max(0.0, float(s)) for s in scores]


def uncertainties(
    tagger: Tagger,
    token_lists: Sequence[Sequence[str]],
    measure: Measure,
    norm: LengthNorm,
    batch_size: int,
    rows: Rows | None = None,
) -> list[Uncertain | None]:
    """Per sentence, its uncertainty and best label path; None for an empty sentence."""
    net = tagger.net
    temperature = tagger.temperature
    crf = decoder = None
    if net.crf is not None:
        crf = net.crf if temperature == 1.0 else tempered_crf(net.crf, temperature)
        decoder = crf_decoder(crf)
    result: list[Uncertain | None] = [None] * len(token_lists)
    for indices, emissions, mask in emission_batches(tagger, token_lists, batch_size, rows):
        with torch.inference_mode():
            if crf is not None:
                marginals, paths, log_best = crf_measures(
                    crf, emissions / temperature, mask, decoder
                )
            else:
                marginals = label_probabilities(net, emissions, mask, temperature)  # (B, T, L)
                top = marginals.max(-1)
                lengths = mask.sum(-1).tolist()
                paths = [row[:n] for row, n in zip(top.indices.tolist(), lengths, strict=True)]
                log_best = (top.values.clamp_min(1e-30).log() * mask).sum(-1)
            scores = sentence_scores(measure, norm, marginals, log_best, mask)
        for i, path, score in zip(indices, paths, scores, strict=True):
            result[i] = Uncertain(score if math.isfinite(score) else 0.0, path)
    return result
