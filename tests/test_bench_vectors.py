"""The vectors benchmark's summary (scripts/bench_vectors.py): medians and ranges over seeds of
hand-made score records, and the table it renders from them."""

from __future__ import annotations

import pytest


def scores(f1: float, chemical_unseen: float, unseen_f1: float = 0.6) -> dict:
    def group(recall: float, f1: float = 0.5) -> dict:
        return {"mentions": 10, "found": round(10 * recall), "recall": recall, "f1": f1}

    return {
        "Chemical": {"f1": f1, "seen": group(0.9), "unseen": group(chemical_unseen)},
        "Disease": {"f1": f1, "seen": group(0.8), "unseen": group(0.4)},
        "all": {"f1": f1, "seen": group(0.85), "unseen": group(0.5, unseen_f1)},
    }


@pytest.fixture()
def bench(load_script):
    return load_script("bench_vectors")


def test_the_summary_takes_the_median_and_range_over_seeds(bench) -> None:
    runs = {
        "both": {
            "1": {"scores": scores(0.84, 0.70)},
            "2": {"scores": scores(0.86, 0.60)},
            "3": {"scores": scores(0.85, 0.80)},
        },
        "none": {"1": {"scores": scores(0.81, 0.62)}},
    }
    summary = bench.summarise(runs)
    assert summary["both"]["seeds"] == [1, 2, 3]
    assert summary["both"]["f1"] == {"median": 0.85, "min": 0.84, "max": 0.86}
    assert summary["both"]["Chemical unseen recall"] == {"median": 0.7, "min": 0.6, "max": 0.8}
    assert summary["none"]["f1"] == {"median": 0.81, "min": 0.81, "max": 0.81}
    assert summary["both"]["unseen f1"] == {"median": 0.6, "min": 0.6, "max": 0.6}


def test_the_table_shows_one_row_per_variant_with_ranges_where_seeds_differ(bench) -> None:
    runs = {
        "both": {"1": {"scores": scores(0.84, 0.7, 0.7)}, "2": {"scores": scores(0.86, 0.7, 0.8)}},
        "none": {"1": {"scores": scores(0.81, 0.62)}},
    }
    record = {"summary": bench.summarise(runs), "machine": {"cores": 2}, "learning": {}}
    lines = bench.render(bench.SETTINGS["bc5cdr"], record).splitlines()
    assert lines[0] == "# Word vectors from unannotated text on BC5CDR"
    header = next(line for line in lines if line.startswith("| variant"))
    assert header == (
        "| variant | seeds | span F1 | unseen-span F1 | Chemical seen recall | "
        "Chemical unseen recall | Disease seen recall | Disease unseen recall |"
    )
    rows = [line for line in lines if line.startswith("| both") or line.startswith("| none")]
    assert rows == [
        "| both | 1,2 | 85.00 (84.00-86.00) | 75.00 (70.00-80.00) | 90.00 | 70.00 | 80.00 | 40.00 |",
        "| none | 1 | 81.00 | 60.00 | 90.00 | 62.00 | 80.00 | 40.00 |",
    ]
