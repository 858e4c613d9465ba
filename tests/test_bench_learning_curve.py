"""Tests for scripts/bench_learning_curve.py's record: the page of a corpus's entry (the fit's
verdict against the 1-point target, a wide interval said so) and entries merged by corpus, and
for the annotation loop's lines in benchmarks/RESULTS.md (scripts/benchmark.py)."""

from __future__ import annotations

import importlib
import json
from pathlib import Path

import pytest


@pytest.fixture(scope="module")
def bench(load_script):
    return load_script("bench_learning_curve")


def _entry(corpus: str, predicted: float, low: float, high: float) -> dict:
    f1 = {0.1: [0.80, 0.81, 0.79], 0.2: [0.85, 0.86, 0.85], 0.4: [0.88, 0.89, 0.88]}
    f1[1.0] = [0.912, 0.905, 0.910]
    points = [
        {"fraction": share, "seed": seed, "sentences": round(share * 1000), "best_epoch": 9,
         "f1": value}
        for share, values in f1.items() for seed, value in enumerate(values, start=1)
    ]  # fmt: skip
    return {
        "corpus": corpus, "what": "a corpus", "config": "c.toml", "settings": ["train.epochs=15",
        "train.threads=1"], "train": "t.txt", "dev": None, "test": "test.txt", "points": points,
        "warnings": [], "fit": {"shares": [0.1, 0.2, 0.4], "a": 0.95, "b": 1.2, "c": 0.5,
        "sse": 1e-4}, "predicted": {"sentences": 1000, "f1": predicted, "low": low,
        "high": high, "level": 0.95, "resamples": 1000},
        "measured": {"median": 0.910, "min": 0.905, "max": 0.912},
        "difference": predicted - 0.910, "within_target": abs(predicted - 0.910) <= 0.01,
        "minutes": 12.0, "machine": {"date": "d", "commit": "c", "cores": 2, "cpu": "x",
        "torch": "t", "load_before": 1.0, "command": "scripts/bench_learning_curve.py"},
    }  # fmt: skip


def test_a_prediction_within_a_point_is_met(bench) -> None:
    text = "\n".join(bench.render_entry(_entry("demo", 0.915, 0.912, 0.918)))
    assert "| 100% | 1,000 | 91.20 | 90.50 | 91.00 | 91.00 | no: predicted |" in text
    assert "| 40% | 400 | 88.00 | 89.00 | 88.00 | 88.00 | yes |" in text
    assert "predicted at 1,000 sentences: **91.50** (95% interval" in text
    assert "prediction minus measurement: +0.50 points; target within 1 point: **MET**" in text
    assert "the interval's half-width: 0.3 points" in text
    assert "with train.epochs=15, one thread" in text  # the thread count said once


def test_a_prediction_off_by_more_than_a_point_with_a_wide_interval_says_both(bench) -> None:
    text = "\n".join(bench.render_entry(_entry("demo", 0.895, 0.86, 0.93)))
    assert "-1.50 points; target within 1 point: **NOT MET**" in text
    assert "the interval is wide: +-3.5 points" in text


def test_entries_are_merged_by_corpus(bench, tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setattr(bench, "RECORD", tmp_path / "learning_curve")
    (tmp_path / "learning_curve.json").write_text(
        json.dumps({"demo": _entry("demo", 0.9, 0.89, 0.91)})
    )
    record = bench.merged(_entry("conll2000", 0.92, 0.91, 0.93))
    assert sorted(record) == ["conll2000", "demo"]
    assert record["demo"]["predicted"]["f1"] == 0.9
    page = bench.render({"conll2000": record["conll2000"]})
    assert "## demo\n\nNot run yet: `.venv/bin/python scripts/bench_learning_curve.py " in page
    assert "## conll2000: a corpus" in page


def test_results_page_lists_the_annotation_loop_records(load_script, tmp_path: Path) -> None:
    load_script("benchlib")  # puts scripts/ on the path
    benchmark = importlib.import_module("benchmark")
    assert benchmark.render_annotation_loop(tmp_path) == []  # nothing recorded: no section
    (tmp_path / "learning_curve.json").write_text(
        json.dumps({"demo": _entry("demo", 0.915, 0.912, 0.918)})
    )
    alone = benchmark.render_annotation_loop(tmp_path)  # one record is enough for the section
    assert alone[0].startswith("## The annotation loop") and "predicts 91.50" in alone[-2]
    points = [{"sentences": n, "f1": f} for n, f in ((100, 0.5), (500, 0.8))]
    ahead = [{"sentences": n, "f1": f} for n, f in ((100, 0.5), (500, 0.81))]
    (tmp_path / "picking.json").write_text(
        json.dumps({
            "step": 100, "minutes": 50.0, "machine": {"command": "scripts/simulate_picking.py"},
            "curves": {"random": {"1": points, "2": points, "3": points},
                       "ranked": {"1": ahead, "2": ahead, "3": points}},
            "reach": {"median": 0.6, "target": 0.7, "met": True},
        })
    )  # fmt: skip
    text = "\n".join(benchmark.render_annotation_loop(tmp_path))
    assert "CoNLL-2000, 3 seeds, 5 rounds from 100 to 500 sentences" in text
    assert "ends at test F1 80.00 (median), and ranked picking reaches it with 60%" in text
    assert "in the final round it is +1.00 points ahead; target at most 70%: met; 50 min." in text
    assert "demo, the curve through 10-40% (3 seeds each) predicts 91.50 (91.20-91.80)" in text
    assert "measured 91.00 (median of 3, 90.50-91.20); +0.50 points, target within 1: met" in text
