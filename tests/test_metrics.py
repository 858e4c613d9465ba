"""Tests for tagger.scoring.metrics: scores against seqeval, hand-worked counts and the error breakdown."""

from __future__ import annotations

import json
import random
import warnings

import pytest
from seqeval.metrics import classification_report, f1_score, precision_score, recall_score

from tagger.data.schemes import Span, spans_lenient, spans_to_tags
from tagger.errors import DataError
from tagger.reports.scores import format_report
from tagger.scoring.metrics import (
    SpanCounts,
    count_sentence,
    count_spans,
    count_tag_sequences,
    summarise,
)

TYPES = ("PER", "LOC", "creative-work")  # one type holds a hyphen


def _random_sentence(rng: random.Random) -> list[str]:
    """Half any mix of B/I/E/S/O (mostly ill-formed), half well-formed IOB1/IOB2/BIOES."""
    length = rng.randint(0, 12)
    if rng.random() < 0.5:
        return [
            "O" if p == "O" else f"{p}-{rng.choice(TYPES)}"
            for p in (rng.choice("BIESOO") for _ in range(length))
        ]
    spans: list[Span] = []
    i = 0
    while i < length:
        if rng.random() < 0.5:
            end = rng.randint(i + 1, min(length, i + 4))
            spans.append((rng.choice(TYPES), i, end))
            i = end
        else:
            i += 1
    return spans_to_tags(spans, length, rng.choice(["IOB1", "IOB2", "BIOES"]))


def _noisy_copy(rng: random.Random, tags: list[str]) -> list[str]:
    """A prediction: the gold tags with about a quarter of them replaced at random."""
    out = []
    for tag in tags:
        if rng.random() < 0.25:
            prefix = rng.choice("BIESO")
            tag = "O" if prefix == "O" else f"{prefix}-{rng.choice(TYPES)}"
        out.append(tag)
    return out


def test_scores_match_seqeval_default_mode() -> None:
    # Source: seqeval's default mode (documented as compatible with the CoNLL evaluation script):
    # precision_score / recall_score / f1_score for micro scores and
    # classification_report(output_dict=True) per type and for the macro average.
    rng = random.Random(1234)
    corpora = 0
    for _ in range(200):  # 200 corpora of 15 sentences: 3000 sentences in all
        gold = [_random_sentence(rng) for _ in range(15)]
        pred = [_noisy_copy(rng, g) for g in gold]
        summary = summarise(count_tag_sequences(gold, pred))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            micro = (
                precision_score(gold, pred, zero_division=0),
                recall_score(gold, pred, zero_division=0),
                f1_score(gold, pred, zero_division=0),
            )
            report = classification_report(gold, pred, output_dict=True, zero_division=0)
        ours = summary["micro"]
        assert (ours["precision"], ours["recall"], ours["f1"]) == pytest.approx(micro, abs=1e-12)
        types = {k for k in report if not k.endswith(" avg")}
        assert set(summary["per_type"]) == types
        for type_ in types:
            theirs, mine = report[type_], summary["per_type"][type_]
            assert mine["precision"] == pytest.approx(theirs["precision"], abs=1e-12)
            assert mine["recall"] == pytest.approx(theirs["recall"], abs=1e-12)
            assert mine["f1"] == pytest.approx(theirs["f1-score"], abs=1e-12)
            assert mine["gold"] == theirs["support"]
        if types:  # with no types seqeval's macro mean is NaN; ours is 0.0 by policy
            corpora += 1
            macro = report["macro avg"]
            assert summary["macro"]["precision"] == pytest.approx(macro["precision"], abs=1e-12)
            assert summary["macro"]["recall"] == pytest.approx(macro["recall"], abs=1e-12)
            assert summary["macro"]["f1"] == pytest.approx(macro["f1-score"], abs=1e-12)
    assert corpora > 190  # the comparison really ran on most corpora


def test_worked_example() -> None:
    # Worked by hand.
    # gold: PER[0,2) LOC[3,4) ORG[5,7)            -> 3 gold spans
    # pred: PER[0,2) LOC[3,5) ORG[5,7) MISC[8,9)  -> 4 predicted spans, 2 correct (PER, ORG)
    # micro P = 2/4 = 0.5, R = 2/3, F1 = 2PR/(P+R) = (2/3)/(7/6) = 4/7
    # per type: PER 1/1/1, LOC 0/0/0, ORG 1/1/1, MISC P=0 (0 of 1), R=0 (no gold: 0 by policy)
    # macro over the 4 types: P = (1+0+1+0)/4 = 0.5, R = 0.5, F1 = 0.5
    # tokens: positions 4 and 8 differ -> 7 of 9 right
    gold = ["B-PER", "I-PER", "O", "B-LOC", "O", "B-ORG", "I-ORG", "O", "O"]
    pred = ["B-PER", "I-PER", "O", "B-LOC", "I-LOC", "B-ORG", "I-ORG", "O", "B-MISC"]
    summary = summarise(count_tag_sequences([gold], [pred]))
    assert summary["micro"]["precision"] == pytest.approx(0.5)
    assert summary["micro"]["recall"] == pytest.approx(2 / 3)
    assert summary["micro"]["f1"] == pytest.approx(4 / 7)
    assert (summary["micro"]["gold"], summary["micro"]["predicted"]) == (3, 4)
    assert summary["per_type"]["MISC"] == {
        "precision": 0.0,
        "recall": 0.0,
        "f1": 0.0,
        "gold": 0,
        "predicted": 1,
        "correct": 0,
    }
    assert summary["per_type"]["PER"]["f1"] == 1.0 and summary["per_type"]["LOC"]["f1"] == 0.0
    assert summary["macro"]["precision"] == pytest.approx(0.5)
    assert summary["macro"]["recall"] == pytest.approx(0.5)
    assert summary["macro"]["f1"] == pytest.approx(0.5)
    assert summary["token_accuracy"] == pytest.approx(7 / 9)
    assert summary["tokens"] == 9
    # the LOC pair overlaps with the same type: a boundary error on both sides; MISC is spurious
    assert summary["breakdown"]["gold"] == {
        "exact": 2,
        "wrong_type": 0,
        "boundary": 1,
        "type_and_boundary": 0,
        "missed": 0,
    }
    assert summary["breakdown"]["predicted"]["spurious"] == 1
    assert summary["breakdown"]["per_type"]["MISC"]["predicted"]["spurious"] == 1


def test_conll_conventions_in_scoring() -> None:
    # CoNLL scoring convention (as seqeval's default mode reads it): I- after O starts a span,
    # and a change of type (I-X I-Y) starts a new span; both predictions below are then exact.
    gold = [["O", "B-X", "I-X", "B-Y"]]
    pred = [["O", "I-X", "I-X", "I-Y"]]
    summary = summarise(count_tag_sequences(gold, pred))
    assert summary["micro"]["f1"] == 1.0
    assert summary["micro"]["correct"] == 2


def test_spans_never_cross_sentences_when_scoring() -> None:
    # CoNLL scoring convention: sentences are scored as separate sequences. Read apart, gold
    # holds X[1,3) and X[0,1); joined they would wrongly make one span X[1,4).
    gold = [["O", "B-X", "I-X"], ["I-X", "O"]]
    summary = summarise(count_tag_sequences(gold, gold))
    assert summary["micro"]["gold"] == 2 and summary["micro"]["f1"] == 1.0
    joined = summarise(count_tag_sequences([gold[0] + gold[1]], [gold[0] + gold[1]]))
    assert joined["micro"]["gold"] == 1


@pytest.mark.parametrize(
    ("gold", "pred", "gold_outcomes", "pred_outcomes"),
    [  # hand-worked, one error category at a time (spans given directly)
        ([("X", 0, 2)], [("X", 0, 2)], {("X", "exact")}, {("X", "exact")}),
        ([("X", 0, 2)], [("Y", 0, 2)], {("X", "wrong_type")}, {("Y", "wrong_type")}),
        ([("X", 0, 3)], [("X", 1, 3)], {("X", "boundary")}, {("X", "boundary")}),
        (
            [("X", 0, 3)],
            [("Y", 2, 4)],
            {("X", "type_and_boundary")},
            {("Y", "type_and_boundary")},
        ),
        ([("X", 0, 2)], [], {("X", "missed")}, set()),
        ([], [("Y", 1, 2)], set(), {("Y", "spurious")}),
        # touching is not overlapping (half-open spans): missed and spurious
        ([("X", 0, 2)], [("X", 2, 4)], {("X", "missed")}, {("X", "spurious")}),
    ],
)
def test_breakdown_categories(
    gold: list[Span],
    pred: list[Span],
    gold_outcomes: set[tuple[str, str]],
    pred_outcomes: set[tuple[str, str]],
) -> None:
    counts = SpanCounts()
    count_sentence(counts, gold, pred)
    assert set(counts.gold_outcomes) == gold_outcomes
    assert set(counts.predicted_outcomes) == pred_outcomes


def test_breakdown_precedence() -> None:
    # Hand-worked. Gold X[0,5) overlaps predicted Y[0,1) (other type) and X[2,3) (same type):
    # the same-type overlap wins, a boundary error. Y[0,1) overlaps only gold X:
    # type_and_boundary. X[2,3) overlaps the same-type gold: boundary.
    counts = SpanCounts()
    count_sentence(counts, [("X", 0, 5)], [("Y", 0, 1), ("X", 2, 3)])
    assert counts.gold_outcomes == {("X", "boundary"): 1}
    assert counts.predicted_outcomes == {("Y", "type_and_boundary"): 1, ("X", "boundary"): 1}
    # Overlapping predictions (possible when spans are given directly): same boundaries with
    # another type wins over a same-type overlap.
    counts = SpanCounts()
    count_sentence(counts, [("X", 0, 2)], [("Y", 0, 2), ("X", 1, 3)])
    assert counts.gold_outcomes == {("X", "wrong_type"): 1}
    assert counts.predicted_outcomes == {("Y", "wrong_type"): 1, ("X", "boundary"): 1}
    # One gold span split in two same-type predictions: one boundary error on the gold side,
    # two on the predicted side.
    counts = SpanCounts()
    count_sentence(counts, [("X", 0, 4)], [("X", 0, 2), ("X", 2, 4)])
    assert counts.gold_outcomes == {("X", "boundary"): 1}
    assert counts.predicted_outcomes == {("X", "boundary"): 2}


def test_breakdown_accounts_for_every_span() -> None:
    # Property: each span lands in exactly one outcome, and exact matches are the correct spans.
    rng = random.Random(99)
    gold = [_random_sentence(rng) for _ in range(400)]
    pred = [_noisy_copy(rng, g) for g in gold]
    summary = summarise(count_tag_sequences(gold, pred))
    breakdown = summary["breakdown"]
    assert sum(breakdown["gold"].values()) == summary["micro"]["gold"]
    assert sum(breakdown["predicted"].values()) == summary["micro"]["predicted"]
    assert breakdown["gold"]["exact"] == breakdown["predicted"]["exact"]
    assert breakdown["gold"]["exact"] == summary["micro"]["correct"]
    assert breakdown["gold"]["wrong_type"] == breakdown["predicted"]["wrong_type"]
    for type_, scores in summary["per_type"].items():
        assert sum(breakdown["per_type"][type_]["gold"].values()) == scores["gold"]
        assert sum(breakdown["per_type"][type_]["predicted"].values()) == scores["predicted"]
    assert min(breakdown["gold"].values()) > 0  # the random data reaches every category
    assert min(breakdown["predicted"].values()) > 0


def test_counts_merge() -> None:
    # Property: counting two halves and adding them equals counting the whole.
    rng = random.Random(5)
    gold = [_random_sentence(rng) for _ in range(100)]
    pred = [_noisy_copy(rng, g) for g in gold]
    whole = count_tag_sequences(gold, pred)
    first = count_tag_sequences(gold[:37], pred[:37])
    second = count_tag_sequences(gold[37:], pred[37:])
    assert first + second == whole
    assert summarise(first + second) == summarise(whole)
    merged = SpanCounts()
    merged.update(first).update(second)
    assert merged == whole
    assert first + second != first  # the merge really added something
    assert whole.sentences == 100


def test_count_spans_equals_tag_counts_without_tokens() -> None:
    rng = random.Random(8)
    gold = [_random_sentence(rng) for _ in range(50)]
    pred = [_noisy_copy(rng, g) for g in gold]
    from_tags = count_tag_sequences(gold, pred)
    from_spans = count_spans([spans_lenient(g) for g in gold], [spans_lenient(p) for p in pred])
    assert from_spans.token_total == 0
    from_tags.token_total = from_tags.token_correct = 0
    assert from_spans == from_tags


def test_mismatched_inputs_raise() -> None:
    with pytest.raises(DataError, match="sentence 2"):
        count_tag_sequences([["O"], ["O", "B-X"]], [["O"], ["O"]])
    with pytest.raises(DataError, match="predicted"):
        count_tag_sequences([["O"], ["O"]], [["O"]])
    with pytest.raises(DataError, match="gold"):
        count_tag_sequences([["O"]], [["O"], ["O"]])
    with pytest.raises(DataError):
        count_tag_sequences([["Z-X"]], [["O"]])  # unknown prefix
    with pytest.raises(DataError):
        count_spans([[]], [])


def test_zero_division_policy_and_json() -> None:
    # Policy: any ratio with a zero denominator is 0.0 (no NaN), and the summary is plain JSON.
    empty = summarise(SpanCounts())
    assert empty["micro"]["precision"] == empty["micro"]["recall"] == empty["micro"]["f1"] == 0.0
    assert empty["macro"]["f1"] == 0.0 and empty["token_accuracy"] == 0.0
    assert empty["per_type"] == {}
    rng = random.Random(3)
    gold = [_random_sentence(rng) for _ in range(30)]
    summary = summarise(count_tag_sequences(gold, [_noisy_copy(rng, g) for g in gold]))
    assert json.loads(json.dumps(summary)) == summary


def test_format_report() -> None:
    # Types are listed by gold count (LOC 3, PER 2, creative-work 1), then the pooled and the
    # mean rows, then the breakdown tables.
    gold = [
        ["B-LOC", "O", "B-LOC", "O", "B-LOC"],
        ["B-PER", "I-PER", "O", "B-PER", "B-creative-work"],
    ]
    pred = [
        ["B-LOC", "O", "B-LOC", "O", "O"],
        ["B-PER", "O", "O", "B-PER", "B-LOC"],
    ]
    summary = summarise(count_tag_sequences(gold, pred))
    text = format_report(summary)
    lines = text.splitlines()
    rows = [
        next(i for i, line in enumerate(lines) if line.strip().startswith(t))
        for t in ("LOC", "PER", "creative-work")
    ]
    assert rows == sorted(rows)
    # LOC: 2 of 3 predicted right and 2 of 3 gold found -> 66.67 for F1, P and R
    assert lines[rows[0]].split()[1:] == ["66.67", "66.67", "66.67", "3", "3", "2"]
    # micro: 3 correct of 5 predicted and 6 gold -> F1 = 6/11 = 54.55 %
    assert "54.55" in lines[0]
    # tokens: one wrong in the first sentence, two in the second -> 7 of 10
    assert "Tokens tagged right: 70.00 % of 10" in text
    assert "missed" in text and "spurious" in text
    # the report reads plain summaries with extra keys, as stored by callers
    assert format_report({"file": "x", **json.loads(json.dumps(summary))}) == text
