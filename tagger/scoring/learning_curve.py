"""Will more annotation pay: an inverse power law fitted to span F1 against the number of
training sentences, and what it expects of twice as many.

The curve is F1(n) = a - b * n^(-c) with b >= 0 and c > 0: F1 rises with n towards a, fast at
first and then ever more slowly (the learning-curve model of e.g. Figueroa et al., "Predicting
sample size required for classification performance", BMC Medical Informatics and Decision
Making, 2012). For a fixed c the model is linear in a and b, so the fit is ordinary least squares
over a grid of c, refined once around the best value: no starting point to choose and the same
answer every time.

The uncertainty is a bootstrap over the measured points (seeded): the points are drawn with
replacement, the curve refitted, and the spread of what each refit expects at twice the largest
size gives the interval (`expect_doubling`), or the spread of their F1 at any one size
(`expect_at`: e.g. the whole training file predicted from its smaller shares). Draws with fewer
than three distinct sizes cannot fix three parameters and are drawn again.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

RESAMPLES = 1000
SEED = 0
LEVEL = 0.95
C_RANGE = (0.01, 3.0)  # exponents tried; beyond 3 the curve is flat after a handful of sentences
MIN_SIZES = 3  # distinct training sizes a fit needs


@dataclass(frozen=True)
class PowerLaw:
    """F1(n) = a - b * n^(-c), and the sum of squared residuals of the points it was fitted to."""

    a: float
    b: float
    c: float
    sse: float

    def __call__(self, n: float | np.ndarray) -> float | np.ndarray:
        return self.a - self.b * np.power(n, -self.c)


def _fit_at(x: np.ndarray, y: np.ndarray, c: np.ndarray) -> tuple[np.ndarray, ...]:
    """For each exponent in `c`: the least-squares a and b (b kept >= 0) and the squared error."""
    z = np.power(x[None, :], -c[:, None])  # (exponents, points)
    mean_z = z.mean(axis=1)
    centred = z - mean_z[:, None]
    spread = np.einsum("ij,ij->i", centred, centred)
    slope = centred @ (y - y.mean())
    b = np.where(spread > 0, -slope / np.where(spread > 0, spread, 1.0), 0.0)
    b = np.maximum(b, 0.0)  # a curve falling with more data is not a learning curve: flat instead
    a = y.mean() + b * mean_z
    residual = y[None, :] - (a[:, None] - b[:, None] * z)
    return a, b, np.einsum("ij,ij->i", residual, residual)


GRID = np.geomspace(*C_RANGE, 400)


def fit_power_law(sizes: Sequence[float], f1: Sequence[float]) -> PowerLaw:
    """The inverse power law through (training sentences, F1) points (see the module docstring).
    Raises ValueError for fewer than three distinct sizes or a size that is not positive."""
    x, y = np.asarray(sizes, dtype=float), np.asarray(f1, dtype=float)
    if x.shape != y.shape or x.ndim != 1 or np.any(x <= 0):
        raise ValueError("sizes must be positive and as many as the scores")
    if len(np.unique(x)) < MIN_SIZES:
        raise ValueError(f"a learning curve needs at least {MIN_SIZES} distinct training sizes")
    best = int(np.argmin(_fit_at(x, y, GRID)[2]))
    fine = np.linspace(GRID[max(best - 1, 0)], GRID[min(best + 1, len(GRID) - 1)], 201)
    a, b, error = _fit_at(x, y, fine)
    i = int(np.argmin(error))
    return PowerLaw(float(a[i]), float(b[i]), float(fine[i]), float(error[i]))


@dataclass(frozen=True)
class Doubling:
    """What the fitted curve expects of twice the largest training size measured."""

    sentences: int  # the largest size measured
    now: float  # the fitted F1 there
    doubled: float  # the fitted F1 at twice as many
    low: float  # the interval of `doubled - now` over the bootstrap refits
    high: float
    level: float
    resamples: int

    @property
    def gain(self) -> float:
        return self.doubled - self.now

    def sentence(self) -> str:
        """The answer in one sentence, in points of F1."""
        return (
            f"Doubling the annotation from {self.sentences:,} to {2 * self.sentences:,} sentences "
            f"is expected to raise span F1 by {100 * self.gain:.1f} points "
            f"({self.level:.0%} interval {100 * self.low:.1f} to {100 * self.high:.1f}), "
            f"from {100 * self.now:.1f} to {100 * self.doubled:.1f}."
        )


def _refits(x: np.ndarray, y: np.ndarray, resamples: int, seed: int) -> list[PowerLaw]:
    """The curve refitted to `resamples` seeded draws of the points with replacement (draws
    holding fewer than three distinct sizes drawn again, at most 20 tries a refit)."""
    rng = np.random.default_rng(seed)
    refits: list[PowerLaw] = []
    attempts = 0
    while len(refits) < resamples and attempts < 20 * resamples:
        attempts += 1
        drawn = rng.integers(0, len(x), len(x))
        if len(np.unique(x[drawn])) < MIN_SIZES:
            continue
        refits.append(fit_power_law(x[drawn], y[drawn]))
    return refits


def _interval(values: list[float], fallback: float, level: float) -> tuple[float, float]:
    """The central `level` interval of `values`; (fallback, fallback) when there are none
    (every draw repeated sizes: no spread to report but the fit's own)."""
    if not values:
        return fallback, fallback
    tail = (1 - level) / 2
    low, high = (float(v) for v in np.quantile(values, [tail, 1 - tail]))
    return low, high


def expect_doubling(
    sizes: Sequence[float],
    f1: Sequence[float],
    resamples: int = RESAMPLES,
    seed: int = SEED,
    level: float = LEVEL,
) -> tuple[PowerLaw, Doubling]:
    """The curve through the points and what it expects of twice the largest size, with a
    bootstrap interval over the points (`resamples` seeded draws). ValueError as fit_power_law."""
    curve = fit_power_law(sizes, f1)
    x, y = np.asarray(sizes, dtype=float), np.asarray(f1, dtype=float)
    largest = float(x.max())
    refits = _refits(x, y, resamples, seed)
    gains = [float(refit(2 * largest) - refit(largest)) for refit in refits]
    gain = float(curve(2 * largest) - curve(largest))
    low, high = _interval(gains, gain, level)
    now = float(curve(largest))
    return curve, Doubling(
        sentences=int(round(largest)),
        now=now,
        doubled=min(now + gain, 1.0),
        low=low,
        high=high,
        level=level,
        resamples=len(gains),
    )


@dataclass(frozen=True)
class Expectation:
    """What the fitted curve expects at one training size, with a bootstrap interval."""

    sentences: float
    f1: float  # the fitted curve's F1 there (not capped: a value above 1 says the fit is off)
    low: float  # the interval of the refits' F1 there
    high: float
    level: float
    resamples: int


def expect_at(
    sizes: Sequence[float],
    f1: Sequence[float],
    at: float,
    resamples: int = RESAMPLES,
    seed: int = SEED,
    level: float = LEVEL,
) -> tuple[PowerLaw, Expectation]:
    """The curve through the points and its F1 at `at` sentences (e.g. the whole training file,
    from fits to its smaller shares), with the interval of the bootstrap refits' F1 there.
    ValueError as fit_power_law, or for `at` not positive."""
    if at <= 0:
        raise ValueError("the size to expect an F1 at must be positive")
    curve = fit_power_law(sizes, f1)
    x, y = np.asarray(sizes, dtype=float), np.asarray(f1, dtype=float)
    values = [float(refit(at)) for refit in _refits(x, y, resamples, seed)]
    expected = float(curve(at))
    low, high = _interval(values, expected, level)
    return curve, Expectation(at, expected, low, high, level, len(values))
