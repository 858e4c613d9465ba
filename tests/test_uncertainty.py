"""Tests for tagger.apply.uncertainty: least confidence and summed token entropy against
brute-force enumeration of every label path of short sentences (the distribution a linear-chain
CRF defines, written out with plain Python floats), and the length normalisations."""

from __future__ import annotations

import itertools
import math

import pytest
import torch

from tagger.apply.pick_options import LengthNorm, Measure
from tagger.apply.uncertainty import crf_measures, sentence_scores, token_entropy
from tagger.network.crf import CRF

LABELS = 3


def _crf(seed: int) -> CRF:
    # Label 2 may not follow label 0, nor start a sentence: forbidden paths must get no mass.
    start_ok = [True, True, False]
    trans_ok = [[True, True, False], [True, True, True], [True, True, True]]
    crf = CRF(LABELS, start_ok, trans_ok, None)
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        crf.transitions.copy_(torch.randn(LABELS, LABELS, generator=g))
        crf.start.copy_(torch.randn(LABELS, generator=g))
        crf.end.copy_(torch.randn(LABELS, generator=g))
    return crf


def _path_probabilities(crf: CRF, emissions: list[list[float]]) -> dict[tuple[int, ...], float]:
    """P(path | x) of every allowed path, from the textbook path score (brute force)."""
    scores = {}
    for path in itertools.product(range(LABELS), repeat=len(emissions)):
        if not crf.start_ok[path[0]] or not all(
            crf.trans_ok[a, b] for a, b in itertools.pairwise(path)
        ):
            continue
        s = crf.start[path[0]].item() + crf.end[path[-1]].item()
        s += sum(emissions[t][y] for t, y in enumerate(path))
        s += sum(crf.transitions[a, b].item() for a, b in itertools.pairwise(path))
        scores[path] = s
    z = math.log(sum(math.exp(s) for s in scores.values()))
    return {path: math.exp(s - z) for path, s in scores.items()}


def _brute_force(crf: CRF, emissions: list[list[float]]) -> tuple[float, float, tuple[int, ...]]:
    """(P(best path), summed token entropy, best path) by enumeration."""
    probabilities = _path_probabilities(crf, emissions)
    best = max(probabilities, key=probabilities.__getitem__)
    entropy = 0.0
    for t in range(len(emissions)):
        for j in range(LABELS):
            p = sum(q for path, q in probabilities.items() if path[t] == j)
            entropy -= p * math.log(p) if p > 0 else 0.0
    return probabilities[best], entropy, best


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_least_confidence_and_entropy_match_enumerating_every_path(seed: int) -> None:
    crf = _crf(seed)
    g = torch.Generator().manual_seed(100 + seed)
    lengths = [3, 2, 1]  # a padded batch: the shorter sentences must not see the padding
    emissions = torch.randn(len(lengths), 3, LABELS, generator=g) * 2
    mask = torch.arange(3) < torch.tensor(lengths).unsqueeze(1)
    with torch.no_grad():
        marginals, paths, log_best = crf_measures(crf, emissions, mask)
        lc = sentence_scores(Measure.LEAST_CONFIDENCE, LengthNorm.NONE, marginals, log_best, mask)
        lc_token = sentence_scores(
            Measure.LEAST_CONFIDENCE, LengthNorm.PER_TOKEN, marginals, log_best, mask
        )
        te = sentence_scores(Measure.ENTROPY, LengthNorm.NONE, marginals, log_best, mask)
        te_token = sentence_scores(Measure.ENTROPY, LengthNorm.PER_TOKEN, marginals, log_best, mask)
        te_sqrt = sentence_scores(Measure.ENTROPY, LengthNorm.SQRT, marginals, log_best, mask)
    for b, n in enumerate(lengths):
        p_best, entropy, best = _brute_force(crf, emissions[b, :n].tolist())
        assert tuple(paths[b]) == best
        assert lc[b] == pytest.approx(1 - p_best, abs=1e-5)
        assert lc_token[b] == pytest.approx(1 - p_best ** (1 / n), abs=1e-5)
        assert te[b] == pytest.approx(entropy, abs=1e-4)
        assert te_token[b] == pytest.approx(entropy / n, abs=1e-4)
        assert te_sqrt[b] == pytest.approx(entropy / math.sqrt(n), abs=1e-4)


def test_entropy_of_hand_computed_marginals() -> None:
    # One sentence of two tokens: a sure one (1, 0, 0) and an even split between two labels,
    # whose entropy is ln 2 by hand; padding (the third position) adds nothing.
    marginals = torch.tensor([[[1.0, 0.0, 0.0], [0.5, 0.5, 0.0], [0.2, 0.3, 0.5]]])
    mask = torch.tensor([[True, True, False]])
    assert token_entropy(marginals, mask).tolist() == pytest.approx([math.log(2)])


def test_a_sure_sentence_scores_zero_and_an_even_one_scores_highest() -> None:
    # Emissions that leave no doubt against emissions that leave every label equally likely
    # (a CRF with all-zero scores): the even one has the largest possible entropy, n ln L.
    crf = CRF(LABELS)
    emissions = torch.stack([torch.eye(LABELS) * 50, torch.zeros(LABELS, LABELS)])
    mask = torch.ones(2, LABELS, dtype=torch.bool)
    with torch.no_grad():
        marginals, _, log_best = crf_measures(crf, emissions, mask)
    te = sentence_scores(Measure.ENTROPY, LengthNorm.NONE, marginals, log_best, mask)
    lc = sentence_scores(Measure.LEAST_CONFIDENCE, LengthNorm.NONE, marginals, log_best, mask)
    assert te[0] == pytest.approx(0.0, abs=1e-6)
    assert te[1] == pytest.approx(LABELS * math.log(LABELS), abs=1e-5)
    assert lc[0] == pytest.approx(0.0, abs=1e-6)
    assert lc[1] == pytest.approx(1 - LABELS**-LABELS, abs=1e-6)
