"""The service benchmark (scripts/bench_serve.py): its percentiles and its record."""

from __future__ import annotations


def test_percentiles_are_nearest_rank(load_script) -> None:
    bench = load_script("bench_serve")
    values = [float(v) for v in range(1, 101)]  # 1..100: the p-th percentile is p itself
    assert bench.percentile(values, 0.5) == 50.0
    assert bench.percentile(values, 0.99) == 99.0
    assert bench.percentile([3.0], 0.99) == 3.0
    assert bench.latency_summary([0.010, 0.020, 0.030]) == {
        "p50_ms": 20.0,
        "p99_ms": 30.0,
        "max_ms": 30.0,
    }


def test_the_record_says_whether_each_target_is_met(load_script) -> None:
    bench = load_script("bench_serve")
    machine = dict.fromkeys(("date", "commit", "command", "cores", "cpu", "torch", "python"), "x")
    phase = {"requests": 10, "answered": 10, "requests_per_second": 5.0, "seconds": 2.0}
    entry = {
        "machine": {**machine, "load_before": 1.0},
        "load_after": 1.0,
        "model": "m.tagger",
        "threads": 1,
        "clients": 16,
        "library": {"tokens_per_second": 1000.0},
        "full_load": {**phase, "tokens_per_second": 900.0, "p50_ms": 5, "p99_ms": 9, "max_ms": 9},
        "half_load": {
            **phase,
            "tokens_per_second": 450.0,
            "p50_ms": 5,
            "p99_ms": 120,
            "max_ms": 130,
        },
        "batches_at_full_load": {"batches": 2, "texts": 10, "largest": 6},
    }
    text = bench.render(entry)
    assert "of the library's tokens/s under 16 clients: met (90%)" in text
    assert "p99 <= 100 ms at half load: not met (120 ms)" in text
    assert "5.0 texts per batch on average, at most 6" in text
