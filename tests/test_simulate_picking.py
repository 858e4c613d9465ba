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


def test_a_seed_that_never_reaches_counts_above_every_share(load_script) -> None:
    simulation = load_script("simulate_picking")
    curves = {
        "random": {s: _points([0.5, 0.6, 0.7, 0.8, 0.9]) for s in (1, 2, 3)},
        "ranked": {
            1: _points([0.5, 0.7, 0.9, 0.9, 0.9]),  # reaches 0.9 at round 3: 60%
            2: _points([0.5, 0.6, 0.7, 0.8, 0.85]),  # never
            3: _points([0.5, 0.9, 0.9, 0.9, 0.9]),  # round 2: 40%
        },
    }
    found = simulation.reach(curves)
    assert found["per_seed"] == {1: 0.6, 2: None, 3: 0.4}
    assert found["median"] == 0.6 and found["met"] is True  # 0.4, 0.6, never: the middle one
    curves["ranked"][3] = _points([0.5, 0.6, 0.7, 0.8, 0.85])  # now two never reach
    found = simulation.reach(curves)
    assert found["median"] is None and found["met"] is False


def test_a_median_above_the_target_is_not_met(load_script) -> None:
    simulation = load_script("simulate_picking")
    curves = {"random": {1: _points([0.5, 0.6, 0.7, 0.8, 0.9])}}
    curves["ranked"] = {1: _points([0.5, 0.6, 0.7, 0.9, 0.9])}  # round 4: 80% of random's
    found = simulation.reach(curves)
    assert found["median"] == 0.8 and found["met"] is False


def test_the_table_gives_each_round_and_the_verdict(load_script) -> None:
    simulation = load_script("simulate_picking")
    curves = {
        "random": {1: _points([0.5, 0.8]), 2: _points([0.4, 0.7]), 3: _points([0.6, 0.9])},
        "ranked": {1: _points([0.5, 0.9]), 2: _points([0.4, 0.6]), 3: _points([0.6, 0.95])},
    }
    for points in (*curves["random"].values(), *curves["ranked"].values()):
        for p in points:
            p["tokens"] = 20 * p["sentences"]
    result = {
        "pool": 1000, "train": "train.txt", "dev": 50, "test": "test.txt", "step": 100,
        "config": "c.toml", "settings": ["train.epochs=2"], "curves": curves,
        "reach": simulation.reach(curves), "minutes": 3.0,
        "machine": {"date": "d", "commit": "c", "cores": 2, "load_before": 1.0},
    }  # fmt: skip
    text = simulation.table(result)
    # seeds 1 and 3 reach random's final F1 at round 2 (100%), seed 2 never: median 100%
    assert "seed 1: 100%, seed 2: not reached, seed 3: 100%" in text
    assert "median 100%, NOT MET" in text
    assert "  random         median     50.00    80.00" in text  # medians of 0.5, 0.4, 0.6 ...
    assert "  ranked         median     50.00    90.00" in text
    assert "\n  1.00  1.00\n" in text  # the same tokens a sentence: equal tokens annotated
