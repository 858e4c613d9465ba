"""Tests for scripts/simulate_picking.py's reading of its curves: the share of random picking's
sentences with which ranked picking reaches random's final F1 (worked out by hand here)."""

from __future__ import annotations


def _points(f1s: list[float], step: int = 100) -> list[dict]:
    return [{"round": r, "sentences": step * r, "f1": f1} for r, f1 in enumerate(f1s, start=1)]


def test_reach_is_the_first_ranked_round_at_random_final_f1(load_script) -> None:
    simulation = load_script("simulate_picking")
    curves = {
        "random": {1: _points([0.5, 0.6, 0.7, 0.75, 0.8]), 2: _points([0.5, 0.6, 0.7, 0.7, 0.7])},
        "ranked": {1: _points([0.5, 0.7, 0.8, 0.85, 0.9]), 2: _points([0.5, 0.72, 0.8, 0.8, 0.8])},
    }
    found = simulation.reach(curves)
    # seed 1: ranked first reaches 0.8 at round 3 (300 of random's 500); seed 2: 0.7 at round 2
    assert found["per_seed"] == {1: 0.6, 2: 0.4}
    assert found["median"] == 0.5


def test_a_seed_that_never_reaches_leaves_no_median(load_script) -> None:
    simulation = load_script("simulate_picking")
    curves = {"random": {1: _points([0.5, 0.9])}, "ranked": {1: _points([0.5, 0.6])}}
    found = simulation.reach(curves)
    assert found["per_seed"] == {1: None} and found["median"] is None
