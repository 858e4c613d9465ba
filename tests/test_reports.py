"""Tests for the `check` analysis (tagger.data.check) and its text (tagger.reports.check), and for
conversion between schemes (tagger.data.convert)."""

from __future__ import annotations

import io
import json
from collections import Counter
from pathlib import Path

import pytest
from seqeval.metrics.sequence_labeling import get_entities

from tagger.data.check import check_files
from tagger.data.convert import convert_file
from tagger.data.corpus import ColumnFormat, read_sentences
from tagger.errors import ConfigError, DataError
from tagger.reports.check import format_check

CORPORA = Path(__file__).resolve().parents[2] / "shared" / "corpora"


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


# --- one file ------------------------------------------------------------------------------------

# Line numbers are those of the file the text makes (see the comments).
ILL_FORMED = (
    "John\tB-PER\n"  # 1
    "Smith\tI-PER\n"  # 2
    "\n"
    "Paris\tB-LOC\n"  # 4
    "\n"
    "the\tO\n"  # 6
    "Rhine\tI-LOC\n"  # 7: I- after O, ill-formed in IOB2
    "\n"
    "Anna\tB-PER\n"  # 9
    "Berlin\tI-LOC\n"  # 10: I- of another type than the open span, ill-formed in IOB2
    "\n"
    "Maria\tB-PER\n"  # 12
)


def test_ill_formed_transitions_are_reported_with_file_lines(tmp_path: Path) -> None:
    # Hand-worked: IOB2 breaks in 2 sentences (lines 7 and 10), every other scheme in at least
    # 4 (IOB1 and BIOES reject the lone B- tags), so IOB2 is the nearest scheme.
    report = check_files([write(tmp_path, "ill.conll", ILL_FORMED)])
    (entry,) = report["files"]
    assert entry["scheme"]["checked_as"] == "IOB2"
    assert entry["ill_formed"]["count"] == 2
    assert [e["line"] for e in entry["ill_formed"]["examples"]] == [7, 10]
    assert all("I-LOC" in e["message"] for e in entry["ill_formed"]["examples"])
    text = format_check(report)
    assert "line 7:" in text and "line 10:" in text


def test_max_examples_limits_examples_not_counts(tmp_path: Path) -> None:
    report = check_files([write(tmp_path, "ill.conll", ILL_FORMED)], max_examples=1)
    found = report["files"][0]["ill_formed"]
    assert found["count"] == 2
    assert [e["line"] for e in found["examples"]] == [7]
    assert "and 1 more" in format_check(report)


def test_counts_labels_spans_and_longest_sentence(tmp_path: Path) -> None:
    text = "-DOCSTART-\tO\n\n" + sentences(
        "EU B-ORG\nrejects O\nGerman B-MISC\ncall O\n. O",
        "Peter B-PER\nBlackburn I-PER",
    )
    text += "\t\n-DOCSTART-\tO\n\nBRUSSELS\tB-LOC\n"
    report = check_files([write(tmp_path, "a.conll", text)])
    entry = report["files"][0]
    assert (entry["sentences"], entry["tokens"], entry["documents"]) == (3, 8, 2)
    assert entry["labels"] == {"O": 3, "B-ORG": 1, "B-MISC": 1, "B-PER": 1, "I-PER": 1, "B-LOC": 1}
    assert entry["span_types"] == {"LOC": 1, "MISC": 1, "ORG": 1, "PER": 1}
    assert entry["longest_sentence"] == {"tokens": 5, "line": 3}
    assert entry["whitespace_only_lines"] == 1
    assert entry["ill_formed"] == {"count": 0, "examples": []}


def test_span_counts_agree_with_seqeval(tmp_path: Path) -> None:
    # Outside reference: seqeval's get_entities reads tags the CoNLL way, as our span count does.
    text = sentences(
        "a B-PER\nb I-PER\nc I-LOC\nd O\ne I-ORG",
        "f B-ORG\ng B-ORG\nh I-ORG\ni O",
        "j I-PER\nk B-PER\nl O",
    )
    path = write(tmp_path, "mixed.conll", text)
    report = check_files([path])
    expected: Counter[str] = Counter()
    for sentence in read_sentences(path):
        expected.update(kind for kind, _, _ in get_entities(sentence.labels))
    assert report["files"][0]["span_types"] == dict(expected)


def test_ambiguous_scheme_is_stated(tmp_path: Path) -> None:
    # Hand-worked: with only I- tags, IO and IOB1 (and IOE1) read the file alike, while IOB2
    # needs B- to open a span and IOE2 needs E- to close one.
    path = write(tmp_path, "io.conll", sentences("a I-X\nb I-X\nc O", "d O\ne I-Y"))
    scheme = check_files([path])["files"][0]["scheme"]
    assert scheme["ambiguous"] is True
    assert {"IO", "IOB1"} <= set(scheme["candidates"])
    assert scheme["checked_as"] == scheme["candidates"][0]
    assert "several fit equally well" in format_check(check_files([path]))


def test_invisible_and_control_characters(tmp_path: Path) -> None:
    text = (
        "plain\tO\n"  # 1
        "caf\u00e9\tO\n"  # 2: ordinary non-ASCII letters are fine
        "\u65e5\u672c\tO\n"  # 3
        "watched\u200bwas\tO\n"  # 4: zero-width space
        "Dubbz\ufeff\tB-person\n"  # 5: byte-order mark inside a token
        "a\u00a0b\tO\n"  # 6: no-break space
        "bell\x07\tO\n"  # 7: a control character
    )
    report = check_files([write(tmp_path, "odd.conll", text)], max_examples=10)
    found = report["files"][0]["invisible_characters"]
    assert found["count"] == 4
    assert [e["line"] for e in found["examples"]] == [4, 5, 6, 7]
    assert found["examples"][0]["token"] == repr("watched\u200bwas")
    assert found["examples"][0]["characters"] == ["U+200B ZERO WIDTH SPACE (Cf)"]
    assert found["examples"][1]["characters"] == ["U+FEFF ZERO WIDTH NO-BREAK SPACE (Cf)"]
    assert found["examples"][2]["characters"] == ["U+00A0 NO-BREAK SPACE (Zs)"]
    assert found["examples"][3]["characters"] == ["U+0007 (Cc)"]
    assert "\\u200b" in format_check(report)


def test_inconsistent_labelling_within_a_file(tmp_path: Path) -> None:
    text = (
        "Paris\tB-LOC\nis\tO\nnice\tO\n"  # lines 1-3
        "\n"
        "Paris\tB-PER\nis\tO\nnice\tO\n"  # lines 5-7: same tokens, other labels
        "\n"
        "Paris\tB-LOC\nis\tO\nnice\tO\n"  # lines 9-11: the first labelling again
        "\n"
        "Rome\tB-LOC\n"  # 13
        "\n"
        "Rome\tB-LOC\n"  # 15: repeated, same labels
    )
    report = check_files([write(tmp_path, "dup.conll", text)])
    entry = report["files"][0]
    assert entry["repeated_sentences"] == 3
    found = entry["inconsistent_labelling"]
    assert found["count"] == 1
    (example,) = found["examples"]
    assert example["lines"] == [1, 5]
    assert example["text"] == "Paris is nice"
    assert example["first_difference"] == {
        "position": 1,
        "token": "Paris",
        "labels": ["B-LOC", "B-PER"],
    }
    assert "lines 1 and 5" in format_check(report)


def test_labels_that_are_not_span_tags(tmp_path: Path) -> None:
    path = write(tmp_path, "pos.txt", "The DT B-NP\ncat NN I-NP\nsat VBD B-VP\n")
    report = check_files([path], ColumnFormat(label_column=1))
    entry = report["files"][0]
    assert entry["scheme"]["checked_as"] is None
    assert "'DT' on line 1" in entry["scheme"]["note"]
    assert entry["not_span_tags"]["count"] == 1
    assert entry["ill_formed"] is None
    assert entry["span_types"] == {}
    assert "not span tags" in format_check(report)
    no_examples = check_files([path], ColumnFormat(label_column=1), max_examples=0)
    assert "'DT' on line 1" in no_examples["files"][0]["scheme"]["note"]


def test_a_few_bad_labels_leave_the_rest_checked(tmp_path: Path) -> None:
    # Lines: a 1, b 2, c 4, d 6, e 7, f 9. IOB2 breaks only at line 7, IOB1 at lines 1 and 9.
    text = sentences("a B-X\nb I-X", "c B_X", "d O\ne I-X", "f B-Y")
    entry = check_files([write(tmp_path, "typo.conll", text)])["files"][0]
    assert entry["not_span_tags"] == {"count": 1, "examples": [{"line": 4, "label": "B_X"}]}
    assert entry["scheme"]["checked_as"] == "IOB2"
    assert "left out" in entry["scheme"]["note"]
    assert [e["line"] for e in entry["ill_formed"]["examples"]] == [7]


def test_unlabelled_file(tmp_path: Path) -> None:
    path = write(tmp_path, "raw.txt", "a\nb\n\nc\u200b\n")
    report = check_files([path], ColumnFormat(has_labels=False))
    entry = report["files"][0]
    assert entry["tokens"] == 3
    assert "scheme" not in entry and "labels" not in entry
    assert entry["invisible_characters"]["count"] == 1
    format_check(report)


def test_check_reads_stdin_once_for_both_passes(monkeypatch: pytest.MonkeyPatch) -> None:
    class FakeStdin:
        buffer = io.BytesIO(ILL_FORMED.encode())

    monkeypatch.setattr("sys.stdin", FakeStdin())
    entry = check_files(["-"])["files"][0]
    assert entry["file"] == "-" and entry["sentences"] == 5
    assert [e["line"] for e in entry["ill_formed"]["examples"]] == [7, 10]


def test_report_is_json_serialisable(tmp_path: Path) -> None:
    train = write(tmp_path, "train.conll", ILL_FORMED)
    dev = write(tmp_path, "dev.conll", "x\u200b\tB-NEW\n\nJohn\tB-PER\nSmith\tI-PER\n")
    report = check_files([train, dev])
    assert json.loads(json.dumps(report)) == report


# --- several files -------------------------------------------------------------------------------


def test_dev_and_test_against_train(tmp_path: Path) -> None:
    train = write(
        tmp_path,
        "train.conll",
        sentences("John B-PER\nlives O\nin O\nParis B-LOC", "Hello O\nworld O"),
    )
    dev = write(
        tmp_path,
        "dev.conll",
        sentences(
            "Acme B-ORG\nhires O",  # lines 1-2: a type train lacks
            "Hello O\nworld O",  # lines 4-5: also in train, at line 6
            "John B-PER\nlives O\nin O\nParis B-ORG",  # lines 7-10: in train, labels differ
        ),
    )
    test = write(tmp_path, "test.conll", sentences("Paris I-LOC"))
    report = check_files([train, dev, test])
    assert report["train"] == str(train)
    assert "taken as training data" in report["note"]
    dev_cmp, test_cmp = report["against_train"]
    assert dev_cmp["file"] == str(dev)
    assert dev_cmp["span_types_not_in_train"] == ["ORG"]
    assert dev_cmp["labels_not_in_train"] == ["B-ORG"]
    assert dev_cmp["train_labels_absent_here"] == ["B-LOC"]
    assert dev_cmp["sentences_also_in_train"] == 2
    assert dev_cmp["longer_sentences_also_in_train"] == 0
    shared = report["files"][1]["also_in_train"]
    assert shared["examples"] == [
        {"line": 4, "train_line": 6, "text": "Hello world"},
        {"line": 7, "train_line": 1, "text": "John lives in Paris"},
    ]
    assert test_cmp["labels_not_in_train"] == ["I-LOC"]
    assert test_cmp["span_types_not_in_train"] == []
    assert test_cmp["sentences_also_in_train"] == 0
    assert "also_in_train" not in report["files"][0]
    text = format_check(report)
    assert "line 4 (train line 6)" in text
    assert "B-ORG" in text


def test_check_reports_file_and_line_of_bad_input(tmp_path: Path) -> None:
    path = write(tmp_path, "bad.conll", "a\tO\nb\n")
    with pytest.raises(DataError, match=r"bad\.conll:2: expected 2 columns"):
        check_files([path])


# --- conversion ----------------------------------------------------------------------------------

CONLL_STYLE = (
    "-DOCSTART- -X- O\n"
    "\n"
    "EU NNP B-ORG\n"
    "rejects VBZ O\n"
    "German JJ B-MISC\n"
    "call NN O\n"
    ". . O\n"
    "\n"
    "Peter NNP B-PER\n"
    "Blackburn NNP I-PER\n"
)


def test_convert_to_bioes_keeps_other_columns_and_layout(tmp_path: Path) -> None:
    src = write(tmp_path, "in.txt", CONLL_STYLE)
    dst = tmp_path / "out.txt"
    summary = convert_file(src, dst, "bioes")
    # Hand-worked: one-token spans get S-, the two-token span B- then E-.
    assert dst.read_text(encoding="utf-8") == (
        "-DOCSTART- -X- O\n"
        "\n"
        "EU NNP S-ORG\n"
        "rejects VBZ O\n"
        "German JJ S-MISC\n"
        "call NN O\n"
        ". . O\n"
        "\n"
        "Peter NNP B-PER\n"
        "Blackburn NNP E-PER\n"
        "\n"
    )
    assert summary["sentences"] == 2 and summary["tokens"] == 7
    assert summary["source_scheme"] == "IOB2" and summary["target_scheme"] == "BIOES"
    assert summary["changed_labels"] == 3
    assert summary["ill_formed_sentences"] == 0
    # Outside reference: seqeval reads the same entities from both label columns.
    before = read_sentences(src)
    after = read_sentences(dst)
    for old, new in zip(before, after, strict=True):
        assert get_entities(old.labels) == get_entities(new.labels)
        assert [r[:2] for r in old.rows] == [r[:2] for r in new.rows]


def test_convert_round_trip_and_given_source_scheme(tmp_path: Path) -> None:
    src = write(tmp_path, "in.txt", CONLL_STYLE)
    mid = tmp_path / "iob1.txt"
    back = tmp_path / "back.txt"
    convert_file(src, mid, "IOB1")
    assert [s.labels for s in read_sentences(mid)] == [
        ["I-ORG", "O", "I-MISC", "O", "O"],
        ["I-PER", "I-PER"],
    ]
    summary = convert_file(mid, back, "BIO", source_scheme="iob1")
    assert summary["source_scheme"] == "IOB1" and summary["target_scheme"] == "IOB2"
    assert back.read_text(encoding="utf-8") == CONLL_STYLE + "\n"


def test_convert_label_first_tab_file(tmp_path: Path) -> None:
    src = write(tmp_path, "in.tsv", "B-X\tNew York\nI-X\tCity\nO\tis\n")
    dst = tmp_path / "out.tsv"
    convert_file(src, dst, "BILOU", ColumnFormat(token_column=1, label_column=0))
    assert dst.read_text(encoding="utf-8") == "B-X\tNew York\nL-X\tCity\nO\tis\n\n"


def test_convert_counts_ill_formed_sentences(tmp_path: Path) -> None:
    src = write(tmp_path, "in.conll", sentences("a B-X\nb I-X", "c O\nd I-X"))
    dst = tmp_path / "out.conll"
    summary = convert_file(src, dst, "BIOES", source_scheme="IOB2", repair=True)
    assert summary["ill_formed_sentences"] == 1
    # The lenient reading takes the stray I-X as a one-token span.
    assert [s.labels for s in read_sentences(dst)] == [["B-X", "E-X"], ["O", "S-X"]]


def test_convert_error_names_file_and_line(tmp_path: Path) -> None:
    src = write(tmp_path, "touch.conll", sentences("a O", "b B-X\nc B-X"))
    dst = tmp_path / "out.conll"
    dst.write_text("keep", encoding="utf-8")
    # IO cannot separate two touching spans of one type.
    with pytest.raises(DataError, match=r"touch\.conll:3: "):
        convert_file(src, dst, "IO")
    assert dst.read_text(encoding="utf-8") == "keep"


def test_convert_unknown_scheme_name(tmp_path: Path) -> None:
    src = write(tmp_path, "in.conll", sentences("a B-X"))
    with pytest.raises(ConfigError):
        convert_file(src, tmp_path / "out.conll", "XYZ")


def test_convert_to_stdout(tmp_path: Path, capsysbinary: pytest.CaptureFixture[bytes]) -> None:
    src = write(tmp_path, "in.conll", sentences("a B-X\nb I-X"))
    convert_file(src, "-", "IOE2")
    assert capsysbinary.readouterr().out == b"a\tI-X\nb\tE-X\n\n"


def test_convert_from_stdin_detects_then_converts_what_it_kept(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Detecting the scheme reads the input once and converting reads it again: standard input
    # is kept from the first read.
    class FakeStdin:
        buffer = io.BytesIO(CONLL_STYLE.encode())

    monkeypatch.setattr("sys.stdin", FakeStdin())
    dst = tmp_path / "out.txt"
    summary = convert_file("-", dst, "IOB1")
    assert summary["source_scheme"] == "IOB2" and summary["sentences"] == 2
    assert [s.labels for s in read_sentences(dst)] == [
        ["I-ORG", "O", "I-MISC", "O", "O"],
        ["I-PER", "I-PER"],
    ]


# --- the shared public corpora -------------------------------------------------------------------


def corpus_files(*names: str) -> list[Path]:
    paths = [CORPORA / name for name in names]
    missing = [str(p) for p in paths if not p.is_file()]
    if missing:
        pytest.skip(f"shared corpus files not available: {', '.join(missing)}")
    return paths


def test_wnut17_oddities_are_reported() -> None:
    # shared/corpora/README.md: in the WNUT-2017 train file most sentence separators are a
    # line holding a single TAB; dev has tokens with a zero-width space and a byte-order mark.
    train, dev = corpus_files("wnut17/wnut17train.conll", "wnut17/emerging.dev.conll")
    report = check_files([train, dev], max_examples=20)
    train_entry, dev_entry = report["files"]
    assert train_entry["whitespace_only_lines"] > train_entry["sentences"] / 2
    assert train_entry["sentences"] == 3_394 and dev_entry["sentences"] == 1_009
    odd = {c for e in dev_entry["invisible_characters"]["examples"] for c in e["characters"]}
    assert {"U+200B ZERO WIDTH SPACE (Cf)", "U+FEFF ZERO WIDTH NO-BREAK SPACE (Cf)"} <= odd
    # README: IOB2, six types.
    assert train_entry["scheme"]["candidates"][0] == "IOB2"
    assert set(train_entry["span_types"]) == {
        "person",
        "location",
        "group",
        "corporation",
        "product",
        "creative-work",
    }
    assert "blank lines" in format_check(report)


def test_conll2000_test_labels_unseen_in_train() -> None:
    # shared/corpora/README.md: test.txt has tags never seen in train (I-LST) and lacks some
    # train tags; 11 chunk types; IOB2.
    train, test = corpus_files("conll2000/train.txt", "conll2000/test.txt")
    report = check_files([train, test])
    (comparison,) = report["against_train"]
    assert "I-LST" in comparison["labels_not_in_train"]
    assert comparison["train_labels_absent_here"]
    train_entry = report["files"][0]
    assert len(train_entry["span_types"]) == 11
    assert train_entry["scheme"]["checked_as"] == "IOB2"
    assert train_entry["delimiter"] == "space" and train_entry["columns"] == 3
