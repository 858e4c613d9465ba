"""Tests of the error-analysis pieces that need no model: the confusion of types, the bootstrap
interval of F1, the reliability of scores, the review counts, example sentences, and their text."""

from __future__ import annotations

import json
import random

import numpy as np
import pytest

from tagger.data.schemes import Span, spans_lenient, spans_to_tags
from tagger.reports.analysis import (
    calibration_lines,
    confusion_lines,
    example_lines,
    review_lines,
)
from tagger.reports.layout import WIDTH
from tagger.reports.notes import CAUTION, stored_text_note
from tagger.reports.scores import format_report
from tagger.scoring.bootstrap import f1_interval, sentence_counts
from tagger.scoring.calibration import reliability, review_catch
from tagger.scoring.examples import PairedSentence, error_examples, sentence_errors, spread
from tagger.scoring.metrics import SpanCounts, count_sentence, count_tag_sequences, summarise

TYPES = ("ASSET", "COMP", "DEF")


def _random_pair(rng: random.Random) -> tuple[list[Span], list[Span]]:
    """Gold spans of a random sentence and a noisy prediction: spans kept, retyped, moved,
    dropped, and spurious ones added."""
    length = rng.randint(0, 14)
    gold: list[Span] = []
    i = 0
    while i < length:
        if rng.random() < 0.4:
            end = rng.randint(i + 1, min(length, i + 3))
            gold.append((rng.choice(TYPES), i, end))
            i = end
        i += 1
    tagged: list[Span] = []
    for kind, start, end in gold:
        roll = rng.random()
        if roll < 0.55:
            tagged.append((kind, start, end))
        elif roll < 0.75:
            tagged.append((rng.choice([t for t in TYPES if t != kind]), start, end))
        elif roll < 0.9 and end - start > 1:
            tagged.append((kind, start, end - 1))
    taken = {t for _, s, e in tagged for t in range(s, e)}
    free = [t for t in range(length) if t not in taken]
    if free and rng.random() < 0.2:
        tagged.append((rng.choice(TYPES), free[0], free[0] + 1))
    return gold, sorted(tagged, key=lambda s: s[1])


# --- the confusion of types -----------------------------------------------------------------


def test_confusion_says_which_type_a_wrong_type_span_got() -> None:
    counts = SpanCounts()
    # COMP at 0-2 tagged DEF; ASSET at 3-4 tagged COMP; DEF at 5-7 found with other edges.
    count_sentence(
        counts,
        [("COMP", 0, 2), ("ASSET", 3, 4), ("DEF", 5, 7)],
        [("DEF", 0, 2), ("COMP", 3, 4), ("DEF", 5, 6)],
    )
    count_sentence(counts, [("COMP", 0, 1)], [("DEF", 0, 1)])
    summary = summarise(counts)
    assert summary["type_confusion"] == {"ASSET": {"COMP": 1}, "COMP": {"DEF": 2}}
    assert summary["breakdown"]["gold"]["wrong_type"] == 3


def test_confusion_adds_up_to_the_wrong_type_spans_and_merges() -> None:
    # Property: the pairs count every gold span of outcome wrong_type once, per gold type.
    rng = random.Random(31)
    pairs = [_random_pair(rng) for _ in range(600)]
    counts = SpanCounts()
    for gold, tagged in pairs:
        count_sentence(counts, gold, tagged)
    summary = summarise(counts)
    table = summary["type_confusion"]
    per_type = summary["breakdown"]["per_type"]
    assert table, "the random data must hold wrong-type spans"
    for kind in per_type:
        assert sum(table.get(kind, {}).values()) == per_type[kind]["gold"]["wrong_type"]
    assert all(kind not in row for kind, row in table.items())  # never its own type
    half = SpanCounts()
    for gold, tagged in pairs[:250]:
        count_sentence(half, gold, tagged)
    rest = SpanCounts()
    for gold, tagged in pairs[250:]:
        count_sentence(rest, gold, tagged)
    assert summarise(half + rest)["type_confusion"] == table


# --- the bootstrap interval -----------------------------------------------------------------


def test_sentence_counts_match_the_pooled_counts() -> None:
    rng = random.Random(4)
    pairs = [_random_pair(rng) for _ in range(200)]
    table = sentence_counts([g for g, _ in pairs], [t for _, t in pairs])
    micro = summarise(count_tag_sequences(
        [spans_to_tags(g, 20, "IOB2") for g, _ in pairs],
        [spans_to_tags(t, 20, "IOB2") for _, t in pairs],
    ))["micro"]  # fmt: skip
    assert table.shape == (200, 3)
    assert table.sum(axis=0).tolist() == [micro["correct"], micro["predicted"], micro["gold"]]


def test_interval_is_seeded_holds_the_figure_and_narrows_with_more_sentences() -> None:
    rng = random.Random(9)
    pairs = [_random_pair(rng) for _ in range(150)]
    table = sentence_counts([g for g, _ in pairs], [t for _, t in pairs])
    correct, predicted, gold = table.sum(axis=0)
    point = 2 * correct / (predicted + gold)
    interval = f1_interval(table)
    assert interval is not None and interval == f1_interval(table)  # seeded: the same twice
    assert interval["low"] < point < interval["high"]
    assert (interval["resamples"], interval["level"], interval["sentences"]) == (1000, 0.95, 150)
    assert f1_interval(table, seed=interval["seed"] + 1) != interval
    # Sixteen copies of the sentences: the spread of a mean over 16x the units is about 1/4.
    wide = interval["high"] - interval["low"]
    many = f1_interval(np.tile(table, (16, 1)))
    assert many is not None
    assert 0.18 < (many["high"] - many["low"]) / wide < 0.32
    assert many["low"] < point < many["high"]


def test_interval_edge_cases() -> None:
    perfect = sentence_counts([[("A", 0, 1)]] * 20, [[("A", 0, 1)]] * 20)
    interval = f1_interval(perfect)
    assert interval is not None and interval["low"] == interval["high"] == 1.0
    assert f1_interval(np.zeros((0, 3), dtype=np.int64)) is None
    assert f1_interval(perfect, resamples=0) is None
    nothing = f1_interval([(0, 0, 0)] * 5)  # no spans anywhere: F1 0 by the one policy
    assert nothing is not None and nothing["low"] == nothing["high"] == 0.0
    with pytest.raises(ValueError, match="level"):
        f1_interval(perfect, level=1.0)


# --- reliability and review counts ----------------------------------------------------------


def test_reliability_hand_worked() -> None:
    # Bins 0.9-1.0: two spans (0.95, 1.0), one right; 0.5-0.6: 0.55, right; 0.1-0.2: 0.15, wrong.
    result = reliability([0.95, 1.0, 0.55, 0.15], [True, False, True, False])
    assert result["spans"] == 4
    assert [(b["low"], b["spans"]) for b in result["bins"]] == [(0.1, 1), (0.5, 1), (0.9, 2)]
    top = result["bins"][-1]
    assert top["mean_score"] == pytest.approx(0.975) and top["right"] == 0.5
    # ECE = 2/4 * |0.975 - 0.5| + 1/4 * |0.55 - 1| + 1/4 * |0.15 - 0|
    assert result["ece"] == pytest.approx(0.5 * 0.475 + 0.25 * 0.45 + 0.25 * 0.15)
    # Brier: ((0.95 - 1)^2 + (1 - 0)^2 + (0.55 - 1)^2 + (0.15 - 0)^2) / 4
    assert result["brier"] == pytest.approx((0.0025 + 1 + 0.2025 + 0.0225) / 4)
    assert reliability([], []) == {"spans": 0, "bins": [], "ece": 0.0, "brier": 0.0}
    assert reliability([0.7] * 10, [True] * 7 + [False] * 3)["ece"] == pytest.approx(0.0)
    with pytest.raises(ValueError, match="outside"):
        reliability([1.2], [True])
    with pytest.raises(ValueError):
        reliability([0.5], [])


def test_review_catch_counts() -> None:
    flagged = [True, False, True, False, True]
    erroneous = [True, True, False, False, True]
    assert review_catch(flagged, erroneous) == {
        "sentences": 5,
        "flagged": 3,
        "with_error": 3,
        "flagged_with_error": 2,
    }
    with pytest.raises(ValueError):
        review_catch([True], [])


# --- examples -------------------------------------------------------------------------------


def test_sentence_errors_name_each_kind_with_its_spans() -> None:
    gold = [("COMP", 0, 2), ("ASSET", 3, 4), ("DEF", 5, 7), ("COMP", 9, 10)]
    tagged = [("DEF", 0, 2), ("ASSET", 3, 4), ("DEF", 5, 6), ("ASSET", 11, 12)]
    assert sentence_errors(gold, tagged) == {
        "wrong_type": [[("COMP", 0, 2)], [("DEF", 0, 2)]],
        "boundary": [[("DEF", 5, 7)], [("DEF", 5, 6)]],
        "missed": [[("COMP", 9, 10)], []],
        "spurious": [[], [("ASSET", 11, 12)]],
    }
    assert sentence_errors(gold, gold) == {}


def test_spread_takes_first_last_and_evenly_between() -> None:
    assert spread(10, 3) == [0, 4, 9]  # 4.5 rounds to the even 4
    assert spread(2, 3) == [0, 1]
    assert spread(7, 1) == [0]
    assert spread(0, 3) == [] and spread(5, 0) == []
    assert spread(100, 4) == [0, 33, 66, 99]


def test_error_examples_pick_spread_sentences_of_each_kind() -> None:
    sentences = [
        PairedSentence("f.txt", 1 + 3 * i, ["w"] * 4, [("A", 0, 1)], [] if i % 2 else [("A", 0, 1)])
        for i in range(9)
    ]  # sentences 1, 3, 5, 7 miss their span
    found = error_examples(sentences, per_kind=3)
    assert list(found) == ["missed"]
    assert found["missed"]["sentences"] == 4
    lines = [e["line"] for e in found["missed"]["examples"]]
    assert lines[0] == 4 and lines[-1] == 22 and len(lines) == 3  # first and last of the four
    example = found["missed"]["examples"][0]
    assert example["gold_focus"] == [["A", 0, 1]] and example["tagged_focus"] == []
    assert json.loads(json.dumps(found)) == found
    assert error_examples(sentences, per_kind=0) == {"missed": {"sentences": 4, "examples": []}}


# --- text -----------------------------------------------------------------------------------


def _summary() -> dict:
    gold = [
        ["B-COMP", "I-COMP", "O", "B-ASSET", "O"],
        ["O", "O", "B-DEF", "O", "O"],
        ["B-ASSET", "O", "O", "O", "O"],
    ]
    tagged = [
        ["B-DEF", "I-DEF", "O", "B-ASSET", "O"],
        ["O", "O", "O", "O", "O"],
        ["B-ASSET", "O", "O", "O", "O"],
    ]
    summary = summarise(count_tag_sequences(gold, tagged))
    paired = [
        PairedSentence("t.txt", 10 * (i + 1), list("abcde"), spans_lenient(g), spans_lenient(t))
        for i, (g, t) in enumerate(zip(gold, tagged, strict=True))
    ]
    return {
        **summary,
        "f1_interval": f1_interval(sentence_counts(
            [p.gold for p in paired], [p.tagged for p in paired]
        )),
        "examples": error_examples(paired),
        "calibration": reliability([0.95, 0.5, 0.99], [False, True, True]),
        "review": {"review_below": 0.8, **review_catch([True, False, False], [True, True, False])},
    }  # fmt: skip


def test_report_prints_the_interval_beside_f1() -> None:
    summary = _summary()
    interval = summary["f1_interval"]
    first, note = format_report(summary).splitlines()[:2]
    low, high = f"{100 * interval['low']:.2f}", f"{100 * interval['high']:.2f}"
    # 2 right of 4 gold and 3 tagged spans -> F1 = 4/7
    assert first == f"Span scores: F1 57.14 % ({low} to {high}) over 4 gold and 3 tagged spans"
    assert "95% of 1,000 draws of 3 sentences with replacement" in note
    plain = {k: v for k, v in summary.items() if k != "f1_interval"}
    assert format_report(plain).splitlines()[0] == (
        "Span scores: F1 57.14 % over 4 gold and 3 tagged spans"
    )


def test_confusion_table_text() -> None:
    lines = confusion_lines(_summary())
    assert lines[0].startswith("Spans with the right edges tagged as another type")
    assert lines[2].split() == ["gold", "type", "DEF"]
    assert lines[4].split() == ["COMP", "1"]
    assert confusion_lines({"type_confusion": {}}) == [] and confusion_lines({}) == []


def test_example_text_marks_spans_and_cuts_long_sentences() -> None:
    lines = example_lines(_summary())
    text = "\n".join(lines)
    assert "  type only    1 sentence, 1 shown" in lines
    assert "  line 10      gold    [COMP a b] c [ASSET d] e" in lines
    assert " " * 15 + "tagged  [DEF a b] c [ASSET d] e" in text
    assert "  line 20      gold    a b [DEF c] d e" in lines
    # A long sentence shows the words around its error, "..." where it is cut.
    tokens = [f"w{i}" for i in range(40)]
    paired = PairedSentence("t.txt", 5, tokens, [("A", 20, 22)], [])
    long_lines = example_lines({"examples": error_examples([paired])})
    gold_line = next(line for line in long_lines if "gold" in line)
    assert gold_line.endswith(
        "gold    ... w14 w15 w16 w17 w18 w19 [A w20 w21] w22 w23 w24 w25 w26 w27 ..."
    )
    assert all(len(line) <= WIDTH for line in long_lines)


def test_calibration_and_review_text() -> None:
    summary = _summary()
    calibration = calibration_lines(summary)
    assert calibration[0] == "How often tagged spans are right, by their score"
    rows = [line.split() for line in calibration[4:6]]
    assert rows == [["0.5", "to", "0.6", "1", "50.00", "100.00"],
                    ["0.9", "to", "1.0", "2", "97.00", "50.00"]]  # fmt: skip
    ece = summary["calibration"]["ece"]
    assert f"  Expected calibration error: {100 * ece:.2f} points" in calibration
    review = review_lines(summary)
    assert review[0].startswith("Review flag at 0.8 ")
    assert "  flagged      1 of 3 sentences (33.3%)" in review
    assert any(line.startswith("  caught       1 of the 2 sentences holding an error (50.0%)")
               for line in review)  # fmt: skip
    assert calibration_lines({"calibration": reliability([], [])}) == []
    assert review_lines({}) == []


def test_notes() -> None:
    assert "not a decision" in CAUTION and len(CAUTION) <= WIDTH  # one short line
    meta = {
        "vocabularies": {"words": {"items": ["a", "b", "c"]}},
        "config": {"model": {"min_word_count": 2}},
        "features": {"columns": [{"column": 1}], "lexicons": [{}, {}]},
    }
    note = " ".join(stored_text_note(meta).split())
    assert note.startswith(
        "note: the model file stores 3 words (the words seen 2 times or more in train), the "
        "values of 1 feature column and 2 lexicons in plain text"
    )
    assert note.endswith("model.min_word_count=K keeps the words seen fewer than K times out of it")
    bare = stored_text_note({"vocabularies": {"words": {"items": ["a" * 5] * 12_000}}})
    assert bare.startswith(
        "note: the model file stores 12,000 words (every word of train) in plain"
    )
    assert all(len(line) <= WIDTH for line in bare.splitlines())
