"""Tests for tagger.apply.label_decoding: the numpy Viterbi and marginals against the torch CRF
(tagger.network.crf, itself checked against brute-force enumeration in test_crf.py) and the
temperature-scaled CRF of tagger.apply.predict, on random scores."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from test_crf import CASES, _random_batch, _random_crf

from tagger.apply.label_decoding import argmax_paths, softmax
from tagger.apply.predict import crf_decoder, tempered_crf
from tagger.network.crf import CRF


@pytest.mark.parametrize(("n", "lengths", "constrained", "seed"), CASES)
def test_viterbi_and_marginals_equal_the_torch_crf(
    n: int, lengths: list[int], constrained: bool, seed: int
) -> None:
    # Reference: tagger.network.crf.CRF (torch), on the same scores and batch.
    crf = _random_crf(n, seed, constrained)
    emissions, mask = _random_batch(n, lengths, seed + 100)
    decoder = crf_decoder(crf)
    assert decoder.decode(emissions.numpy(), mask.numpy()) == crf.decode(emissions, mask)
    with torch.no_grad():
        expected = crf.marginals(emissions, mask).numpy()
    got = decoder.marginals(emissions.numpy(), mask.numpy())
    np.testing.assert_allclose(got, expected, atol=1e-5)
    assert np.all(got[~mask.numpy()] == 0.0)
    np.testing.assert_allclose(got[mask.numpy()].sum(-1), 1.0, atol=1e-9)


@pytest.mark.parametrize("temperature", [0.5, 1.7])
def test_a_temperature_divides_learnt_scores_and_keeps_forbidden_ones(temperature: float) -> None:
    # Reference: tagger.apply.predict.tempered_crf, the torch tagger's temperature scaling.
    crf = _random_crf(5, 3, constrained=True)
    emissions, mask = _random_batch(5, [6, 2, 4], 11)
    decoder = crf_decoder(crf, temperature)
    with torch.no_grad():
        expected = tempered_crf(crf, temperature).marginals(emissions / temperature, mask)
    got = decoder.marginals(emissions.numpy() / temperature, mask.numpy())
    np.testing.assert_allclose(got, expected.numpy(), atol=1e-5)
    forbidden = ~crf.trans_ok.numpy()
    assert forbidden.any() and np.all(decoder.transitions[forbidden] == -1e4)


def test_marginals_stay_finite_where_every_allowed_label_underflows() -> None:
    # Reference: the torch CRF's log-space marginals. Only label 1 may follow anything, and at
    # the second position its score is 2,000 below label 0's: exp() of it is 0 in float64, so
    # the rescaled recursion has nothing left, and the log-space one must answer as the torch
    # backend does. (Scores this far apart are beyond both: their log-sums floor an impossible
    # sum far above -2,000, so the figures are the floor's, not exact; what counts is that the
    # two backends give the same finite numbers, never NaN.)
    crf = CRF(2, trans_ok=[[False, True], [False, True]]).double()
    emissions = torch.tensor([[[0.0, 0.0], [0.0, -2000.0], [0.0, 0.0]]], dtype=torch.float64)
    mask = torch.tensor([[True, True, True]])
    with torch.no_grad():
        expected = crf.marginals(emissions, mask).numpy()
    got = crf_decoder(crf).marginals(emissions.numpy(), mask.numpy())
    assert np.isfinite(got).all()
    np.testing.assert_allclose(got, expected, atol=1e-9)


def test_long_sentences_stay_finite_and_decode_alike() -> None:
    # 300 positions of large scores: the log-space products must not overflow or underflow.
    # Reference: the torch CRF in float64 (in float32 its own rounding over 300 steps of scores
    # this large reaches 1e-3, more than the difference being checked).
    crf = _random_crf(7, 5, constrained=True)
    emissions, mask = _random_batch(7, [300, 150, 1], 21)
    emissions = emissions * 10
    decoder = crf_decoder(crf)
    assert decoder.decode(emissions.numpy(), mask.numpy()) == crf.decode(emissions, mask)
    with torch.no_grad():
        expected = crf.double().marginals(emissions.double(), mask).numpy()
    got = decoder.marginals(emissions.numpy(), mask.numpy())
    assert np.isfinite(got).all()
    np.testing.assert_allclose(got, expected, atol=1e-4)


def test_without_a_crf_labels_are_the_argmax_and_scores_the_softmax() -> None:
    # Reference: torch.softmax and torch.argmax.
    emissions, mask = _random_batch(4, [3, 1, 2], 5)
    paths = argmax_paths(emissions.numpy(), mask.numpy())
    assert [len(p) for p in paths] == [3, 1, 2]
    assert paths[0] == emissions[0].argmax(-1).tolist()
    np.testing.assert_allclose(
        softmax(emissions.numpy(), 2.0), (emissions / 2.0).softmax(-1).numpy(), atol=1e-6
    )
