"""Tests of the learning-curve fit: the inverse power law recovered from points its own formula
generated (the reference is the generating function itself), what it expects of doubling and at a
larger size, and the refusals."""

from __future__ import annotations

import numpy as np
import pytest

from tagger.scoring.learning_curve import expect_at, expect_doubling, fit_power_law

SIZES = np.array([120, 240, 480, 840, 1200], dtype=float)  # 10, 20, 40, 70, 100% of 1,200


@pytest.mark.parametrize(("a", "b", "c"), [(0.9, 2.0, 0.5), (0.75, 0.6, 0.25), (0.95, 30.0, 1.2)])
def test_the_fit_recovers_the_curve_that_made_the_points(a: float, b: float, c: float) -> None:
    curve = fit_power_law(SIZES, a - b * SIZES**-c)
    assert (curve.a, curve.b, curve.c) == pytest.approx((a, b, c), rel=2e-3)
    assert curve.sse < 1e-9


def test_with_noise_the_fit_stays_near_the_curve_and_predicts_its_doubling() -> None:
    rng = np.random.default_rng(7)
    a, b, c = 0.88, 1.5, 0.45
    sizes = np.repeat(SIZES, 3)  # three seeds a fraction
    f1 = a - b * sizes**-c + rng.normal(0, 0.004, len(sizes))
    curve, doubling = expect_doubling(sizes, f1, resamples=300, seed=3)
    true_gain = b * (1200**-c - 2400**-c)  # F1(2n) - F1(n) of the generating function
    assert doubling.gain == pytest.approx(true_gain, abs=0.006)
    assert doubling.low <= true_gain <= doubling.high
    assert doubling.low <= doubling.gain <= doubling.high
    assert doubling.sentences == 1200 and doubling.resamples == 300
    assert float(curve(1200)) == pytest.approx(a - b * 1200**-c, abs=0.005)


def test_the_same_points_give_the_same_interval() -> None:
    f1 = 0.9 - 2.0 * SIZES**-0.5 + np.array([0.003, -0.002, 0.001, -0.004, 0.002])
    first, second = (
        expect_doubling(SIZES, f1, resamples=200),
        expect_doubling(SIZES, f1, resamples=200),
    )
    assert first == second


def test_scores_that_fall_with_more_data_give_a_flat_curve() -> None:
    curve, doubling = expect_doubling(SIZES, [0.8, 0.79, 0.78, 0.77, 0.76], resamples=50)
    assert curve.b == 0.0 and curve.a == pytest.approx(0.78)
    assert doubling.gain == 0.0


def test_the_sentence_says_the_gain_in_points() -> None:
    _, doubling = expect_doubling(SIZES, 0.9 - 2.0 * SIZES**-0.5, resamples=50)
    gain = 100 * 2.0 * (1200**-0.5 - 2400**-0.5)  # 1.69 points
    assert doubling.sentence().startswith(
        f"Doubling the annotation from 1,200 to 2,400 sentences is expected to raise span F1 by "
        f"{gain:.1f} points (95% interval "
    )


@pytest.mark.parametrize(
    ("sizes", "f1"),
    [([100, 100, 200, 200], [0.5, 0.5, 0.6, 0.6]), ([0, 10, 20], [0.1, 0.2, 0.3]), ([1, 2], [0.1])],
)
def test_points_that_cannot_fix_a_curve_are_refused(sizes: list[int], f1: list[float]) -> None:
    with pytest.raises(ValueError):
        fit_power_law(sizes, f1)


SMALL = np.array([120, 240, 480], dtype=float)  # 10, 20, 40% of 1,200


def test_the_fit_to_small_shares_predicts_the_whole_file_on_its_own_curve() -> None:
    a, b, c = 0.9, 2.0, 0.5
    curve, expected = expect_at(np.repeat(SMALL, 3), a - b * np.repeat(SMALL, 3) ** -c, 1200)
    assert expected.f1 == pytest.approx(a - b * 1200**-c, abs=1e-4)  # 0.8423
    assert expected.low == pytest.approx(expected.f1, abs=1e-4)  # noiseless: no spread
    assert expected.high == pytest.approx(expected.f1, abs=1e-4)
    assert expected.sentences == 1200 and expected.level == 0.95
    assert float(curve(1200)) == expected.f1


def test_with_noise_the_interval_at_the_whole_file_mostly_holds_the_true_value() -> None:
    a, b, c = 0.88, 1.5, 0.45
    truth = a - b * 1200**-c
    sizes = np.repeat(SMALL, 3)  # three seeds a share
    widths = {}
    for noise in (0.001, 0.004):
        held, width = 0, []
        for trial in range(20):
            rng = np.random.default_rng(trial)
            f1 = a - b * sizes**-c + rng.normal(0, noise, len(sizes))
            _, expected = expect_at(sizes, f1, 1200, resamples=100, seed=5)
            assert expected.low <= expected.f1 <= expected.high
            assert expected.resamples == 100
            held += expected.low <= truth <= expected.high
            width.append(expected.high - expected.low)
        # Nine points at three sizes extrapolated 2.5x: the bootstrap holds the truth in most
        # trials, though not at the nominal 95% (a known optimism of bootstrapping few points).
        assert held >= 15
        widths[noise] = np.median(width)
    assert widths[0.004] > 2 * widths[0.001] > 0  # noisier points, a wider interval


def test_the_expectation_at_the_largest_size_is_the_doublings_starting_point() -> None:
    f1 = 0.9 - 2.0 * SIZES**-0.5 + np.array([0.003, -0.002, 0.001, -0.004, 0.002])
    _, doubling = expect_doubling(SIZES, f1, resamples=100)
    _, expected = expect_at(SIZES, f1, 1200, resamples=100)
    assert expected.f1 == pytest.approx(doubling.now)
    assert expect_at(SIZES, f1, 1200, resamples=100)[1] == expected  # seeded: the same again


def test_a_size_that_is_not_positive_is_refused() -> None:
    with pytest.raises(ValueError, match="positive"):
        expect_at(SMALL, [0.5, 0.6, 0.65], 0)
