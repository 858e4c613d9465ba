"""The review benchmark (scripts/bench_review.py): its review table, its paired F1 difference and
its record."""

from __future__ import annotations

import json

import numpy as np
import pytest

from tagger.apply.review import ScoredSentence


@pytest.fixture(scope="module")
def bench_review(load_script):
    return load_script("bench_review")


def test_review_table_compares_the_span_rule_with_the_every_token_rule(bench_review) -> None:
    gold = [[("A", 0, 1)], [("A", 0, 1)], [("A", 0, 1)], []]
    scored = [
        ScoredSentence([("A", 0, 1, 0.6)], certainty=0.6),  # right, a doubtful span
        ScoredSentence([], certainty=0.6),  # missed, a doubtful "O": only every token sees it
        ScoredSentence([], certainty=0.999),  # missed with confidence: nothing sees it
        ScoredSentence([], certainty=1.0),
    ]
    rows = {row["review_below"]: row for row in bench_review.review_table(gold, scored)}
    at = rows[0.7]
    assert at["spans_only"] == {
        "sentences": 4,
        "flagged": 1,
        "with_error": 2,
        "flagged_with_error": 0,
    }
    assert at["every_token"] == {
        "sentences": 4,
        "flagged": 2,
        "with_error": 2,
        "flagged_with_error": 1,
    }
    assert rows[0.5]["every_token"]["flagged"] == 0


def test_paired_difference_of_f1(bench_review) -> None:
    rng = np.random.default_rng(3)
    base = np.stack([rng.integers(0, 3, 300), np.full(300, 3), np.full(300, 3)], axis=1)
    same = bench_review.paired_difference(base, base)
    assert same == {"low": 0.0, "high": 0.0}  # the same draws for both: no difference at all
    better = base.copy()
    better[:, 0] = np.minimum(better[:, 0] + 1, 3)
    gained = bench_review.paired_difference(base, better)
    assert 0.0 < gained["low"] < gained["high"]


def test_the_record_renders_as_committed(bench_review) -> None:
    if not bench_review.RESULTS.exists():
        pytest.skip("no benchmarks/review.json recorded yet")
    entry = json.loads(bench_review.RESULTS.read_text(encoding="utf-8"))
    assert bench_review.render(entry) == bench_review.SUMMARY.read_text(encoding="utf-8")
