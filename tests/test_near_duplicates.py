"""Tests for tagger.text.near_duplicates: n-gram sets, their Jaccard similarity (checked against
sets worked out by hand) and the picker that keeps near-duplicates out of one batch."""

from __future__ import annotations

import pytest

from tagger.text.near_duplicates import DistinctPicker, shingles, similarity


def _words(text: str) -> list[str]:
    return text.split()


def test_shingles_of_a_short_sentence_by_hand() -> None:
    # " ab 12 " with digits read as 0: " ab ", "ab 0", "b 00", " 00 "
    assert shingles(["Ab", "12"]) == {" ab ", "ab 0", "b 00", " 00 "}
    assert shingles(["x"]) == {" x "}  # shorter than one n-gram: the whole padded text


def test_similarity_by_hand() -> None:
    a = frozenset({"a", "b", "c"})
    b = frozenset({"b", "c", "d", "e"})
    assert similarity(a, b) == pytest.approx(2 / 5)  # 2 shared of 5 in either
    assert similarity(a, a) == 1.0
    assert similarity(a, frozenset({"x"})) == 0.0


def test_templated_sentences_are_alike_and_unrelated_ones_are_not() -> None:
    one = shingles(_words("Turbine 13 released to service after gearbox inspection"))
    serial = shingles(_words("Turbine 14 released to service after gearbox inspection"))
    other = shingles(_words("Blade crack found on the leading edge near the root"))
    assert similarity(one, serial) == 1.0  # digits read alike: the serial makes no difference
    assert similarity(one, other) < 0.2


def test_picker_keeps_near_duplicates_out_of_the_batch() -> None:
    picker = DistinctPicker(0.7)
    assert picker.offer(_words("Turbine 13 released to service after gearbox inspection"))
    assert not picker.offer(_words("Turbine 7 released to service after the gearbox inspection"))
    assert picker.offer(_words("Blade crack found on the leading edge near the root"))
    assert not picker.offer(_words("blade crack found on the leading edge near the root ."))


def test_threshold_one_refuses_only_exact_repeats() -> None:
    picker = DistinctPicker(1.0)
    assert picker.offer(["Anna", "met", "Bob"])
    assert picker.offer(["Anna", "met", "Bobby"])
    assert not picker.offer(["anna", "met", "bob"])  # lowercased alike


@pytest.mark.parametrize("threshold", [0.0, -0.5, 1.5])
def test_threshold_outside_the_unit_interval_is_refused(threshold: float) -> None:
    with pytest.raises(ValueError, match="threshold"):
        DistinctPicker(threshold)
