"""Tests for tagger.reports: the one table renderer, the number style, labelled text, and the
score, evaluation and conversion texts built on them."""

from __future__ import annotations

import pytest

from tagger.reports.conversion import format_conversion
from tagger.reports.layout import (
    LABEL_WIDTH,
    WIDTH,
    Column,
    bullets,
    count,
    labelled,
    number,
    percent,
    render_table,
    share,
)
from tagger.reports.scores import format_evaluation, format_report
from tagger.scoring.metrics import count_tag_sequences, summarise


def test_numbers_share_one_style() -> None:
    assert [number(n) for n in (0, 999, 1_000, 1_234_567, -4_321)] == [
        "0",
        "999",
        "1,000",
        "1,234,567",
        "-4,321",
    ]
    assert percent(2 / 3) == "66.67" and percent(1.0) == "100.00" and percent(0.125, 1) == "12.5"
    assert share(1, 8) == "12.5%" and share(0, 0) == "-"
    assert count(1, "token") == "1 token" and count(12_000, "token") == "12,000 tokens"
    assert count(1, "entry", "entries") == "1 entry" and count(0, "entry", "entries") == (
        "0 entries"
    )


def test_table_aligns_columns_and_rules_off_the_totals() -> None:
    lines = render_table(
        [Column("type", "left"), Column("count"), Column("note", "left")],
        [["PART", 12_345, "x"], ["DEFECT", 7, ""]],
        [["all", 12_352, "sum"]],
    )
    # Hand-laid: widths 6, 6 ("12,345") and 4; three spaces between columns; trailing spaces cut.
    assert lines == [
        "  type" + " " * 6 + "count   note",
        "  " + "-" * (6 + 3 + 6 + 3 + 4),
        "  PART" + " " * 5 + "12,345   x",
        "  DEFECT" + " " * 8 + "7",
        "  " + "-" * 22,
        "  all" + " " * 6 + "12,352   sum",
    ]


def test_table_without_rows_has_one_rule_and_rejects_ragged_rows() -> None:
    lines = render_table([Column("a", "left"), Column("b")], [], [["total", 3]])
    assert lines == ["  a       b", "  ---------", "  total   3"]
    with pytest.raises(ValueError, match="a row of 1 cells in a table of 2 columns"):
        render_table([Column("a"), Column("b")], [["only one"]])
    with pytest.raises(ValueError, match="align"):
        Column("a", "centre")


def test_labelled_text_wraps_beside_its_label() -> None:
    text = " ".join(f"word{i}" for i in range(40))
    lines = labelled("spans", text)
    assert lines[0].startswith("  spans" + " " * (LABEL_WIDTH - len("  spans")) + "word0 ")
    assert len(lines) > 1 and all(len(line) <= WIDTH for line in lines)
    assert all(line.startswith(" " * LABEL_WIDTH + "word") for line in lines[1:])
    assert " ".join(" ".join(lines).split()) == "spans " + text
    assert labelled("ill-formed", "") == ["  ill-formed"]


def test_bullets_count_what_they_leave_out() -> None:
    assert bullets(["line 3: x"], hidden=1_200) == [
        " " * LABEL_WIDTH + "- line 3: x",
        " " * LABEL_WIDTH + "- and 1,200 more",
    ]
    assert bullets([], hidden=0) == []


def _summary(sentences: int) -> dict:
    # Each sentence: one LOC found, one PER missed, one spurious PER.
    gold = [["B-LOC", "O", "B-PER", "O"]] * sentences
    pred = [["B-LOC", "O", "O", "B-PER"]] * sentences
    return summarise(count_tag_sequences(gold, pred))


def test_score_report_writes_large_counts_with_separators_in_aligned_columns() -> None:
    text = format_report(_summary(1_500))
    lines = text.splitlines()
    # 1,500 LOC and 1,500 PER in gold; 1,500 LOC and 1,500 PER tagged; 1,500 right.
    assert lines[0] == "Span scores: F1 50.00 % over 3,000 gold and 3,000 tagged spans"
    assert "Tokens tagged right: 50.00 % of 6,000" in text
    table = lines[2 : lines.index("", 2)]
    # The first column is as wide as "all spans pooled" (16), the scores as "100.00" (6).
    assert (
        table[0] == "  span type" + " " * 12 + "F1 %   prec %    rec %   in gold   tagged   right"
    )
    assert table[2].split() == ["LOC", "100.00", "100.00", "100.00", "1,500", "1,500", "1,500"]
    assert table[3].split() == ["PER", "0.00", "0.00", "0.00", "1,500", "1,500", "0"]
    # Right-aligned counts end in the same column on every row that has them.
    assert len({len(line) for line in table[:5] if not line.startswith("  -")}) == 1


def test_evaluation_text_gives_each_file_then_all_of_them() -> None:
    one, two = _summary(1), _summary(2)
    result = {
        "files": [
            {"file": "a.txt", "sentences": 1, **one},
            {"file": "b.txt", "sentences": 2, **two},
        ],
        "overall": _summary(3),
    }
    text = format_evaluation(result)
    assert text == (
        "== a.txt (1 sentence)\n"
        + format_report(one)
        + "\n== b.txt (2 sentences)\n"
        + format_report(two)
        + "\n== all files\n"
        + format_report(_summary(3))
        + "\n"
    )
    single = format_evaluation({"files": result["files"][:1], "overall": one})
    assert "== all files" not in single and single.startswith("== a.txt (1 sentence)\n")


def test_conversion_line() -> None:
    summary = {"sentences": 12_001, "source_scheme": "IOB2", "target_scheme": "BIOES"}
    assert format_conversion(summary) == "converted 12,001 sentences from IOB2 to BIOES"
