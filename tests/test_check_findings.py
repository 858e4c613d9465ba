"""Tests for the `check` findings beyond single sentences: token sequences labelled two ways
(tagger.data.span_labelling), labels that look like typos (tagger.data.label_typos) and annotated
tokens the tagging tokenizer would not give back whole (tagger.data.tokenizer_fit)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from tagger.data.check import check_files
from tagger.data.label_typos import MAX_LABELS, edit_distance, likely_typos
from tagger.data.span_labelling import MAX_SPAN_TOKENS
from tagger.reports.check import format_check
from tagger.text.tokenizer import TokenizerSettings, tokenize


def write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8", newline="")
    return path


def sentences(*blocks: str) -> str:
    """Sentences given as "token label" lines, written tab-separated with blank lines between."""
    out = []
    for block in blocks:
        rows = [line.split() for line in block.strip().splitlines()]
        out.append("".join("\t".join(row) + "\n" for row in rows))
    return "\n".join(out)


def offsets(settings: TokenizerSettings = TokenizerSettings()):
    """The tagging tokenizer as check_files takes it: text -> (start, end) of each token."""
    return lambda text: [(t.start, t.end) for t in tokenize(text, settings)]


# --- token sequences labelled two ways -----------------------------------------------------------

# File lines are given beside each sentence.
SEQUENCES = sentences(
    "Paris B-LOC\nis O\nbig O",  # 1-3
    "Paris B-PER\nsaid O",  # 5-6
    "in O\nParis O\ntoday O",  # 8-10: outside every span
    "New B-LOC\nYork I-LOC",  # 12-13
    "New B-ORG\nYork I-ORG\nTimes I-ORG",  # 15-17: "New York" inside a longer span
    "New O\nYork O\nis O\nfar O",  # 19-22: "New York" outside every span
)


def test_sequences_labelled_as_different_types_or_not_as_spans(tmp_path: Path) -> None:
    entry = check_files([write(tmp_path, "seq.conll", SEQUENCES)])["files"][0]
    found = entry["span_labelling"]
    paris = {
        "text": "Paris",
        "types": {"LOC": {"count": 1, "line": 1}, "PER": {"count": 1, "line": 5}},
        "outside": {"count": 1, "line": 9},
    }
    new_york = {
        "text": "New York",
        "types": {"LOC": {"count": 1, "line": 12}},
        "outside": {"count": 1, "line": 19},
    }
    assert found["types_differ"] == {"count": 1, "examples": [paris]}
    # Paris: 2 of its 3 occurrences disagree with its most frequent labelling, New York 1 of 2;
    # the "New York" of "New York Times" is a different span, not the sequence left unlabelled.
    assert found["span_or_not"] == {"count": 2, "examples": [paris, new_york]}
    assert found["not_followed"] == 0
    text = format_check(check_files([tmp_path / "seq.conll"]))
    assert "'Paris': LOC once (line 1), PER once (line 5), outside spans once (line 9)" in text
    assert "'New York': LOC once (line 12), outside spans once (line 19)" in text


def test_a_sequence_labelled_alike_everywhere_is_not_reported(tmp_path: Path) -> None:
    text = sentences("Rome B-LOC\nwins O", "in O\nRome B-LOC", "Rome B-LOC")
    found = check_files([write(tmp_path, "same.conll", text)])["files"][0]["span_labelling"]
    assert found["types_differ"]["count"] == 0 and found["span_or_not"]["count"] == 0


def test_spans_longer_than_the_limit_are_counted_as_not_followed(tmp_path: Path) -> None:
    long_span = "\n".join(f"w{i} {'B' if i == 0 else 'I'}-X" for i in range(MAX_SPAN_TOKENS + 1))
    outside = "\n".join(f"w{i} O" for i in range(MAX_SPAN_TOKENS + 1))
    path = write(tmp_path, "long.conll", sentences(long_span, outside))
    found = check_files([path])["files"][0]["span_labelling"]
    assert found["not_followed"] == 1
    assert found["span_or_not"]["count"] == 0
    assert "not compared: 1 span longer than 5 tokens" in " ".join(
        format_check(check_files([path])).split()
    )


def test_sentences_with_labels_that_are_not_tags_are_left_out(tmp_path: Path) -> None:
    text = sentences("Paris B-LOC", "in O\nParis O\nnow B_X")
    found = check_files([write(tmp_path, "mixed.conll", text)])["files"][0]["span_labelling"]
    assert found["span_or_not"]["count"] == 0


# --- likely typos --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("a", "b", "distance"),
    [
        ("PER", "PER", 0),
        ("PRE", "PER", 1),  # one swap of neighbours
        ("LOC", "LOCC", 1),
        ("0", "O", 1),
        ("PER", "ORG", 3),
        # The classic worked example of edit distance (from memory): kitten -> sitting is 3.
        ("kitten", "sitting", 3),
        # The restricted swap: "ca" -> "abc" is 3 in the optimal string alignment distance (a
        # swap is not edited again), 2 in the unrestricted Damerau distance (from memory).
        ("ca", "abc", 3),
        ("", "abc", 3),
    ],
)
def test_edit_distance(a: str, b: str, distance: int) -> None:
    assert edit_distance(a, b) == distance
    assert edit_distance(b, a) == distance


def test_rare_labels_close_to_frequent_ones(tmp_path: Path) -> None:
    # One token per sentence, so sentence k is on line 2k - 1: ten B-PER (lines 1-19), then
    # B-PRE on 21, 0 on 23, b-PER on 25, I-PER on 27, B-LOC on 29 and 31, B-Person on 33, ten
    # B-person and five O.
    blocks = ["x B-PER"] * 10 + ["y B-PRE", "z 0", "w b-PER", "v I-PER", "u B-LOC", "u B-LOC"]
    blocks += ["s B-Person"] + ["t B-person"] * 10 + ["o O"] * 5
    path = write(tmp_path, "typos.conll", sentences(*blocks))
    entry = check_files([path])["files"][0]
    found = {(t["kind"], t["name"]): t for t in entry["likely_typos"]}
    assert set(found) == {("type", "PRE"), ("label", "0"), ("label", "b-PER"), ("type", "Person")}
    assert found["type", "PRE"] == {
        "name": "PRE",
        "kind": "type",
        "count": 1,
        "lines": [21],
        "near": "PER",
        "near_count": 11,  # B-PER ten times and I-PER once: types count together
        "how": "1 edit",
    }
    assert (found["label", "0"]["near"], found["label", "0"]["lines"]) == ("O", [23])
    assert (found["label", "b-PER"]["near"], found["label", "b-PER"]["how"]) == ("B-PER", "case")
    assert (found["type", "Person"]["near"], found["type", "Person"]["how"]) == ("person", "case")
    # I-PER (once) is a prefix of a frequent type, LOC (twice) is far from every other type.
    text = format_check(check_files([path]))
    assert "type 'PRE' seen 1 token (line 21), close to 'PER' seen 11 tokens (1 edit)" in text


def test_a_close_name_must_be_much_more_frequent() -> None:
    # PRE twice needs PER ten times (five times as often); four times is not enough.
    assert likely_typos({"B-PRE": 2, "B-PER": 9, "O": 50}) == []
    (typo,) = likely_typos({"B-PRE": 2, "B-PER": 10, "O": 50})
    assert (typo.name, typo.near) == ("PRE", "PER")
    assert likely_typos({"B-PRE": 3, "B-PER": 100}) == []  # seen three times: not rare


def test_short_names_allow_one_edit_long_names_two() -> None:
    assert likely_typos({"B-PR": 1, "B-PERS": 50}) == []  # two edits from a four-letter name
    (typo,) = likely_typos({"B-COMPNETN": 1, "B-COMPONENT": 50})
    assert (typo.name, typo.near, typo.how) == ("COMPNETN", "COMPONENT", "2 edits")


def test_no_typos_looked_for_in_a_column_of_words() -> None:
    labels = {"B-PRE": 1, "B-PER": 100}
    words = {f"w{i}": 1 for i in range(MAX_LABELS - 1)}  # one word too many
    assert likely_typos(labels | words) == []
    (typo,) = likely_typos(labels | dict(list(words.items())[1:]))
    assert (typo.name, typo.near) == ("PRE", "PER")


# --- tokens the tagging tokenizer would cut otherwise ---------------------------------------------


FIT = (
    "Oil\tO\n"  # 1
    "at\tO\n"  # 2
    "106.9°C\tB-READING\n"  # 3: the tokenizer splits the unit off by default
    "and\tO\n"  # 4
    "25%\tB-READING\n"  # 5: "%" is always split
    "crew\tO\n"  # 6
    "'s\tO\n"  # 7: alone it would read as "'" "s", glued to "crew" it comes back whole
    "a\u00a0b\tO\n"  # 8: a no-break space separates tokens
    "\u00a0\tO\n"  # 9: nothing but a separator
    "T-14\tB-ASSET\n"  # 10: kept whole by default
)


def test_tokens_the_tokenizer_would_cut_into_pieces_or_lose(tmp_path: Path) -> None:
    path = write(tmp_path, "fit.conll", FIT)
    fit = check_files([path], tokenizer=offsets())["files"][0]["tokenizer_fit"]
    assert fit["tokens"] == 10
    assert fit["split"] == {
        "count": 3,
        "examples": [
            {"line": 3, "token": "106.9°C", "pieces": ["106.9", "°C"]},
            {"line": 5, "token": "25%", "pieces": ["25", "%"]},
            {"line": 8, "token": "a\u00a0b", "pieces": ["a", "b"]},
        ],
    }
    assert fit["lost"] == {
        "count": 1,
        "examples": [{"line": 9, "token": "\u00a0", "pieces": []}],
    }
    text = format_check(check_files([path], tokenizer=offsets()))
    assert "4 of 10 annotated tokens (40.0%) would not come back whole" in text
    assert "line 3: '106.9°C' -> '106.9' '°C'" in text


def test_tokenizer_settings_change_what_fits(tmp_path: Path) -> None:
    path = write(tmp_path, "fit.conll", FIT)
    kept = offsets(TokenizerSettings(keep_number_units=True, split_hyphens=True))
    fit = check_files([path], tokenizer=kept)["files"][0]["tokenizer_fit"]
    split = [(e["token"], e["pieces"]) for e in fit["split"]["examples"]]
    assert split == [("25%", ["25", "%"]), ("a\u00a0b", ["a", "b"]), ("T-14", ["T", "-", "14"])]


def test_most_frequent_misfits_are_counted_over_the_file(tmp_path: Path) -> None:
    text = sentences("25% B-R\nand O\n25% B-R", "7mm B-R\n25% B-R", "fine O")
    path = write(tmp_path, "many.conll", text)
    fit = check_files([path], tokenizer=offsets(), max_examples=1)["files"][0]["tokenizer_fit"]
    assert fit["split"]["count"] == 4 and len(fit["split"]["examples"]) == 1
    assert fit["most_frequent"] == [
        {"token": "25%", "count": 3, "pieces": ["25", "%"]},
        {"token": "7mm", "count": 1, "pieces": ["7", "mm"]},
    ]


def test_without_a_tokenizer_no_fit_is_reported(tmp_path: Path) -> None:
    report = check_files([write(tmp_path, "fit.conll", FIT)])
    assert "tokenizer_fit" not in report["files"][0]
    assert json.loads(json.dumps(report)) == report
