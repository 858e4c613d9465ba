"""Tests for tagger.data.corpus (column files) and tagger.data.atomic (all-or-nothing output)."""

from __future__ import annotations

import io
import os
from collections.abc import Iterator
from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from tagger.data.atomic import atomic_output
from tagger.data.corpus import (
    ColumnFormat,
    ColumnReader,
    ColumnSource,
    Sentence,
    format_sentence,
    read_columns,
    read_sentences,
    write_columns,
)
from tagger.errors import ConfigError, DataError

CORPORA = Path(__file__).resolve().parents[2] / "shared" / "corpora"


def write_bytes(tmp_path: Path, data: bytes | str, name: str = "data.conll") -> Path:
    path = tmp_path / name
    path.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
    return path


def rows_of(sentences: list[Sentence]) -> list[list[tuple[str, ...]]]:
    return [list(s.rows) for s in sentences]


# --- delimiters ---------------------------------------------------------------------------


def test_tab_separated_keeps_every_other_space_inside_tokens(tmp_path: Path) -> None:
    text = "New York\tB-LOC\na\u00a0b\tO\nc\u3000d\tO\ne\u200bf\tO\n g \tO\n"
    sentences = read_sentences(write_bytes(tmp_path, text))
    assert sentences[0].tokens == ["New York", "a\u00a0b", "c\u3000d", "e\u200bf", " g "]
    assert sentences[0].labels == ["B-LOC", "O", "O", "O", "O"]


def test_space_separated_splits_on_runs_of_spaces_and_tabs(tmp_path: Path) -> None:
    text = "Confidence  NN B-NP\n  in IN\tB-PP  \na\u00a0b DT O\n"
    (sentence,) = read_sentences(write_bytes(tmp_path, text), ColumnFormat(delimiter="space"))
    assert list(sentence.rows) == [
        ("Confidence", "NN", "B-NP"),
        ("in", "IN", "B-PP"),
        ("a\u00a0b", "DT", "O"),
    ]


def test_detection_looks_past_blank_and_docstart_lines(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "-DOCSTART- -X- O\n\nNew York\tB-LOC\n")
    reader = ColumnReader(path)
    (sentence,) = list(reader)
    assert reader.stats.delimiter == "tab"
    assert sentence.tokens == ["New York"]


def test_explicit_delimiter_overrides_detection(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "a b\tX\n")
    (as_tab,) = read_sentences(path, ColumnFormat(delimiter="tab"))
    assert as_tab.rows == (("a b", "X"),)
    (as_space,) = read_sentences(path, ColumnFormat(delimiter="space"))
    assert as_space.rows == (("a", "b", "X"),)


def test_tab_separated_keeps_empty_middle_columns(tmp_path: Path) -> None:
    (sentence,) = read_sentences(write_bytes(tmp_path, "tok\t\tO\n"))
    assert sentence.rows == (("tok", "", "O"),)


# --- sentence and document boundaries ---------------------------------------------------------


def test_lone_tab_and_whitespace_only_lines_end_sentences(tmp_path: Path) -> None:
    text = "a\tO\nb\tO\n\t\nc\tO\n  \t \nd\tO\n\n\n\ne\tO\n"
    path = write_bytes(tmp_path, text)
    reader = ColumnReader(path)
    sentences = list(reader)
    assert [s.tokens for s in sentences] == [["a", "b"], ["c"], ["d"], ["e"]]
    assert reader.stats.whitespace_only_lines == 2
    assert [s.line_numbers for s in sentences] == [(1, 2), (4,), (6,), (10,)]


def test_unicode_space_alone_is_a_token_not_a_separator(tmp_path: Path) -> None:
    (sentence,) = read_sentences(write_bytes(tmp_path, "a\tO\n\u3000\tO\nb\tO\n"))
    assert sentence.tokens == ["a", "\u3000", "b"]


def test_docstart_with_and_without_blank_line(tmp_path: Path) -> None:
    text = (
        "-DOCSTART- -X- -X- O\n\n"
        "EU NNP B-NP\nrejects VBZ B-VP\n\n"
        "-DOCSTART- -X- -X- O\n"
        "Peter NNP B-NP\n"
        "-DOCSTART- -X- -X- O\n"
        "Blackburn NNP B-NP\n"
    )
    path = write_bytes(tmp_path, text)
    reader = ColumnReader(path)
    sentences = list(reader)
    assert [s.tokens for s in sentences] == [["EU", "rejects"], ["Peter"], ["Blackburn"]]
    assert [s.document for s in sentences] == [0, 1, 2]
    assert sentences[0].prefix_lines == ("-DOCSTART- -X- -X- O", "")
    assert sentences[1].prefix_lines == ("-DOCSTART- -X- -X- O",)
    assert [s.labels for s in sentences] == [["B-NP", "B-VP"], ["B-NP"], ["B-NP"]]
    assert reader.stats.documents == 3
    assert reader.stats.docstart_lines == 3


def test_documents_count_from_zero_without_a_leading_docstart(tmp_path: Path) -> None:
    text = "a\tO\n\n-DOCSTART-\tO\n\nb\tO\n-DOCSTART-\tO\n-DOCSTART-\tO\nc\tO\n"
    reader = ColumnReader(write_bytes(tmp_path, text))
    sentences = list(reader)
    # An empty document (two -DOCSTART- lines in a row) still takes a number.
    assert [s.document for s in sentences] == [0, 1, 3]
    assert reader.stats.documents == 4


def test_writing_reproduces_docstart_layout(tmp_path: Path) -> None:
    text = "-DOCSTART- O\n\nEU B-ORG\nrejects O\n\n-DOCSTART- O\nPeter B-PER\n\n"
    path = write_bytes(tmp_path, text)
    out = tmp_path / "out.conll"
    write_columns(out, read_columns(path), delimiter=" ")
    assert out.read_text(encoding="utf-8") == text


def test_docstart_followed_by_no_sentence(tmp_path: Path) -> None:
    reader = ColumnReader(write_bytes(tmp_path, "a\tO\n\n-DOCSTART-\tO\n\n"))
    assert [s.tokens for s in reader] == [["a"]]
    assert reader.stats.trailing_lines == 2
    assert reader.stats.documents == 2
    assert read_sentences(write_bytes(tmp_path, "-DOCSTART- -X- O\n", "only.conll")) == []


def test_docstart_needs_to_be_the_whole_first_column(tmp_path: Path) -> None:
    (sentence,) = read_sentences(write_bytes(tmp_path, "-DOCSTART-x\tO\nb\tO\n"))
    assert sentence.tokens == ["-DOCSTART-x", "b"]


def test_empty_file_and_blank_only_file(tmp_path: Path) -> None:
    assert read_sentences(write_bytes(tmp_path, "")) == []
    assert read_sentences(write_bytes(tmp_path, "\n\t\n \n", "blank.conll")) == []


# --- comments, column choice, labels ------------------------------------------------------------


def test_hash_is_a_token_when_comments_are_off(tmp_path: Path) -> None:
    (sentence,) = read_sentences(write_bytes(tmp_path, "#\tSYM\nhello\tO\n"), ColumnFormat())
    assert sentence.rows == (("#", "SYM"), ("hello", "O"))


def test_comments_are_skipped_and_kept_for_writing(tmp_path: Path) -> None:
    text = "# sent_id = 1\nhello\tO\n\n# sent_id = 2\n# text = x\nx\tB-T\n\n"
    path = write_bytes(tmp_path, text)
    fmt = ColumnFormat(comment_prefix="# ")
    sentences = read_sentences(path, fmt)
    assert [s.tokens for s in sentences] == [["hello"], ["x"]]
    assert sentences[1].prefix_lines == ("# sent_id = 2", "# text = x")
    assert [s.line_numbers for s in sentences] == [(2,), (6,)]
    out = tmp_path / "out.conll"
    write_columns(out, sentences)
    assert out.read_text(encoding="utf-8") == text


def test_label_first_and_negative_columns(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "B-PER\tNNP\tJohn\nO\tVBZ\truns\n")
    fmt = ColumnFormat(token_column=-1, label_column=0)
    (sentence,) = read_sentences(path, fmt)
    assert (sentence.token_column, sentence.label_column) == (2, 0)
    assert sentence.tokens == ["John", "runs"]
    assert sentence.labels == ["B-PER", "O"]
    (middle,) = read_sentences(path, ColumnFormat(token_column=-1, label_column=-2))
    assert middle.labels == ["NNP", "VBZ"]


def test_unlabelled_file_and_adding_labels(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "John\nruns\n\nhome\n")
    sentences = read_sentences(path, ColumnFormat(has_labels=False))
    assert [s.tokens for s in sentences] == [["John", "runs"], ["home"]]
    assert sentences[0].label_column is None
    with pytest.raises(DataError, match="without labels"):
        _ = sentences[0].labels
    tagged = sentences[0].with_labels(["B-PER", "O"])
    assert tagged.rows == (("John", "B-PER"), ("runs", "O"))
    assert tagged.label_column == 1
    assert tagged.labels == ["B-PER", "O"]
    assert format_sentence(tagged) == "John\tB-PER\nruns\tO\n\n"


def test_with_labels_replaces_only_the_label_column(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "B-X\tw1\tNN\nO\tw2\tVB\n")
    (sentence,) = read_sentences(path, ColumnFormat(token_column=1, label_column=0))
    relabelled = sentence.with_labels(["I-X", "B-Y"])
    assert relabelled.rows == (("I-X", "w1", "NN"), ("B-Y", "w2", "VB"))
    assert relabelled.line_numbers == sentence.line_numbers
    with pytest.raises(ValueError, match="1 labels for a sentence of 2 tokens"):
        sentence.with_labels(["O"])


def test_from_tokens() -> None:
    sentence = Sentence.from_tokens(["a", "b"], ["B-X", "O"])
    assert sentence.tokens == ["a", "b"] and sentence.labels == ["B-X", "O"]
    assert Sentence.from_tokens(["a"]).label_column is None


# --- encodings and line endings ---------------------------------------------------------------


def test_bom_at_file_start_is_removed_only_there(tmp_path: Path) -> None:
    data = "\ufeffa\tO\n\ufeffb\tO\nDubbz\ufeff\tB-person\nwatched\u200bwas\tO\n"
    (sentence,) = read_sentences(write_bytes(tmp_path, data))
    assert sentence.tokens == ["a", "\ufeffb", "Dubbz\ufeff", "watched\u200bwas"]


def test_bom_on_a_separator_first_line(tmp_path: Path) -> None:
    (sentence,) = read_sentences(write_bytes(tmp_path, "\ufeff\na\tO\n"))
    assert sentence.line_numbers == (2,)


def test_crlf_line_endings(tmp_path: Path) -> None:
    data = "a\tB-X\r\nb\tI-X\r\n\r\nc\tO\r\n"
    sentences = read_sentences(write_bytes(tmp_path, data))
    assert rows_of(sentences) == [[("a", "B-X"), ("b", "I-X")], [("c", "O")]]


def test_carriage_return_inside_a_line_is_kept(tmp_path: Path) -> None:
    (sentence,) = read_sentences(write_bytes(tmp_path, "a\rb\tO\r\n"))
    assert sentence.tokens == ["a\rb"]


def test_no_trailing_newline(tmp_path: Path) -> None:
    sentences = read_sentences(write_bytes(tmp_path, "a\tO\n\nb\tB-X\nc\tI-X"))
    assert [s.labels for s in sentences] == [["O"], ["B-X", "I-X"]]


def test_line_separators_other_than_lf_stay_inside_tokens(tmp_path: Path) -> None:
    # str.splitlines() would split at each of these; a column file only breaks at LF.
    token = "a\u2028b\u0085c\x1cd\x0be"
    (sentence,) = read_sentences(write_bytes(tmp_path, f"{token}\tO\n"))
    assert sentence.tokens == [token]


# --- errors -----------------------------------------------------------------------------------


def test_inconsistent_column_count_within_a_sentence(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "a\tNN\tO\nb\tO\n", "bad.conll")
    with pytest.raises(DataError) as info:
        read_sentences(path)
    message = str(info.value)
    assert "bad.conll:2:" in message
    assert "expected 3 columns" in message and "found 2" in message
    assert repr("b\tO") in message
    assert info.value.line == 2 and info.value.path == str(path)


def test_inconsistent_column_count_across_sentences(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "a NN O\n\nb c d O\n", "bad.txt")
    with pytest.raises(DataError, match=r"bad\.txt:3: expected 3 columns .*found 4"):
        read_sentences(path)


def test_long_offending_lines_are_shortened(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "a\tO\n" + "x" * 500 + "\n")
    with pytest.raises(DataError) as info:
        read_sentences(path)
    assert len(str(info.value)) < 200
    assert "xxx'..." in str(info.value)


def test_empty_label_and_empty_token(tmp_path: Path) -> None:
    with pytest.raises(DataError, match=r"e\.conll:2: empty label"):
        read_sentences(write_bytes(tmp_path, "a\tO\nb\t\n", "e.conll"))
    with pytest.raises(DataError, match=r"t\.conll:1: empty token"):
        read_sentences(write_bytes(tmp_path, "\tO\n", "t.conll"))


def test_bytes_that_are_not_utf8(tmp_path: Path) -> None:
    data = b"ab\tO\n\ncaf\xe9\tO\n"
    path = write_bytes(tmp_path, data, "latin.conll")
    with pytest.raises(DataError) as info:
        read_sentences(path)
    message = str(info.value)
    assert "latin.conll:3:" in message
    # "ab\tO\n\n" is 6 bytes and "caf" 3 more: the bad byte is at offset 9 (counting from 0).
    assert "byte offset 9" in message and "\\xe9" in message
    assert data[9:10] == b"\xe9"


def test_byte_offset_counts_the_initial_bom(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, b"\xef\xbb\xbfa\xff\tO\n")
    with pytest.raises(DataError, match="byte offset 4"):
        read_sentences(path)


def test_label_column_out_of_range(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "a\tO\n", "two.conll")
    with pytest.raises(DataError, match=r"two\.conll:1: label column 5 is out of range.*2 columns"):
        read_sentences(path, ColumnFormat(label_column=5))
    with pytest.raises(DataError, match=r"token column -3 is out of range"):
        read_sentences(path, ColumnFormat(token_column=-3))


def test_single_column_file_needs_has_labels_false(tmp_path: Path) -> None:
    path = write_bytes(tmp_path, "a\nb\n", "one.conll")
    with pytest.raises(
        DataError, match=r"one\.conll:1: .*both be column 0, as the line has 1 column; an annotated"
    ):
        read_sentences(path)


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(DataError, match="cannot open"):
        read_sentences(tmp_path / "absent.conll")


@pytest.mark.parametrize(
    "kwargs",
    [{"delimiter": "comma"}, {"token_column": "0"}, {"label_column": True}, {"comment_prefix": ""}],
)
def test_bad_format_options(kwargs: dict) -> None:
    with pytest.raises(ConfigError):
        ColumnFormat(**kwargs)


# --- writing ----------------------------------------------------------------------------------


def test_format_sentence_refuses_columns_that_would_not_read_back() -> None:
    bad_rows = [
        ("a\tb", "O"),  # the delimiter
        ("a\nb", "O"),  # a line break
        ("a", "O\r"),  # looks like a CRLF ending
        (" ", " "),  # a blank line
        ("-DOCSTART-", "O"),
    ]
    for row in bad_rows:
        sentence = Sentence((row,), (7,), 0, 1, 0)
        with pytest.raises(DataError) as info:
            format_sentence(sentence)
        assert info.value.line == 7
    with pytest.raises(DataError, match="TAB"):
        format_sentence(Sentence((("a\tb", "O"),), (1,), 0, 1, 0), delimiter=" ")
    with pytest.raises(DataError, match="delimiter"):
        format_sentence(Sentence((("a b", "O"),), (1,), 0, 1, 0), delimiter="space")


def test_write_error_names_the_output_and_keeps_the_old_file(tmp_path: Path) -> None:
    out = tmp_path / "out.conll"
    out.write_text("old\n", encoding="utf-8")
    sentences = [Sentence.from_tokens(["a"], ["O"]), Sentence((("x\ty", "O"),), (4,), 0, 1, 0)]
    with pytest.raises(DataError, match=r"out\.conll:4: cannot write"):
        write_columns(out, sentences)
    assert out.read_text(encoding="utf-8") == "old\n"
    assert os.listdir(tmp_path) == ["out.conll"]


def test_token_starting_with_bom_survives_a_round_trip(tmp_path: Path) -> None:
    out = tmp_path / "bom.conll"
    sentence = Sentence.from_tokens(["\ufeffx", "y"], ["O", "O"])
    write_columns(out, [sentence])
    (back,) = read_sentences(out)
    assert back.tokens == ["\ufeffx", "y"]


def test_write_to_stdout(tmp_path: Path, capsysbinary: pytest.CaptureFixture[bytes]) -> None:
    write_columns("-", [Sentence.from_tokens(["é"], ["O"])])
    assert capsysbinary.readouterr().out == "é\tO\n\n".encode()


def test_read_from_stdin(monkeypatch: pytest.MonkeyPatch) -> None:
    class FakeStdin:
        buffer = io.BytesIO(b"a\tO\n\nb\tB-X\n")

    monkeypatch.setattr("sys.stdin", FakeStdin())
    assert [s.tokens for s in read_columns("-")] == [["a"], ["b"]]


def test_a_column_source_rereads_a_file_and_keeps_stdin(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = write_bytes(tmp_path, "a\tO\n\nb\tB-X\n")
    source = ColumnSource(path)
    assert [s.tokens for s in source.sentences()] == [["a"], ["b"]]
    path.write_text("c\tO\n", encoding="utf-8")  # a file is read from disk each time
    assert [s.tokens for s in source.sentences()] == [["c"]]
    assert source.stats.sentences == 1

    class FakeStdin:
        buffer = io.BytesIO(b"d e O\n")

    monkeypatch.setattr("sys.stdin", FakeStdin())
    kept = ColumnSource("-")
    first = [s.rows for s in kept.sentences()]
    assert first == [(("d", "e", "O"),)] and kept.stats.delimiter == "space"
    assert [s.rows for s in kept.sentences()] == first  # stdin, already drained, was kept


def test_any_stream_of_byte_lines_parses(tmp_path: Path) -> None:
    # Readers of other inputs hand the column parser lines they repaired or buffered.
    reader = ColumnReader("repaired.conll")
    sentences = list(reader._parse([b"\xef\xbb\xbfa\tO\r\n", b"\n", b"b\tB-X"]))
    assert [s.tokens for s in sentences] == [["a"], ["b"]]
    assert [s.line_numbers for s in sentences] == [(1,), (3,)]


# --- streaming --------------------------------------------------------------------------------


def test_read_columns_is_a_lazy_generator(tmp_path: Path) -> None:
    # Many sentences, far more than one read buffer, with a bad byte near the end: the first
    # sentences arrive before the reader gets there, which a whole-file reader could not do.
    good = "".join(f"w{i}\tB-X\nv{i}\tI-X\n\n" for i in range(20_000))
    data = good.encode() + b"bad\xff\tO\n"
    assert len(data) > 50 * io.DEFAULT_BUFFER_SIZE
    path = write_bytes(tmp_path, data)
    sentences = read_columns(path)
    assert isinstance(sentences, Iterator)
    first = next(sentences)
    assert first.tokens == ["w0", "v0"]
    count = 1
    with pytest.raises(DataError, match=f":{3 * 20_000 + 1}: "):
        for _ in sentences:
            count += 1
    assert count == 20_000


def test_large_file_reads_completely(tmp_path: Path) -> None:
    path = tmp_path / "big.conll"
    sentences = [Sentence.from_tokens([f"t{i}"] * 40, ["O"] * 40) for i in range(2_000)]
    write_columns(path, sentences)
    assert path.stat().st_size > 50 * io.DEFAULT_BUFFER_SIZE
    reader = ColumnReader(path)
    total = sum(len(s) for s in reader)
    assert total == 80_000 and reader.stats.sentences == 2_000


# --- round trip property ------------------------------------------------------------------------

_FORBIDDEN = {"tab": "\n\t", "space": "\n\t "}


@st.composite
def column_files(draw: st.DrawFn) -> tuple[str, list[list[tuple[str, ...]]]]:
    delimiter = draw(st.sampled_from(["tab", "space"]))
    columns = draw(st.integers(min_value=2, max_value=5))
    field = st.text(
        alphabet=st.characters(
            blacklist_categories=("Cs",), blacklist_characters=_FORBIDDEN[delimiter]
        ),
        min_size=1,
        max_size=6,
    )
    row = st.tuples(*[field] * columns)
    sentences = draw(st.lists(st.lists(row, min_size=1, max_size=5), min_size=1, max_size=4))
    return delimiter, sentences


@settings(
    max_examples=150,
    derandomize=True,
    deadline=None,
    # Every example overwrites the same file, so one tmp_path serves them all.
    suppress_health_check=[HealthCheck.function_scoped_fixture],
)
@given(column_files())
def test_round_trip_of_random_columns(
    tmp_path: Path, case: tuple[str, list[list[tuple[str, ...]]]]
) -> None:
    delimiter, rows = case
    for sentence_rows in rows:
        for row in sentence_rows:
            line = ("\t" if delimiter == "tab" else " ").join(row)
            # Lines a reader must take for something else are not token lines.
            assume(line.strip(" \t\r\f\v") and not line.endswith("\r"))
            assume(not row[0].startswith("-DOCSTART-"))
    sentences = [Sentence(tuple(r), tuple(range(len(r))), 0, len(r[0]) - 1, 0) for r in rows]
    path = tmp_path / "random.conll"
    write_columns(path, sentences, delimiter=delimiter)
    back = read_sentences(path, ColumnFormat(delimiter=delimiter))
    assert rows_of(back) == rows
    # Detection agrees with what was written (every line holds the delimiter).
    reader = ColumnReader(path)
    assert rows_of(list(reader)) == rows
    assert reader.stats.delimiter == delimiter


@settings(
    max_examples=100,
    derandomize=True,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture],
)
@given(
    st.text(
        alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\n\t"),
        min_size=1,
    )
)
def test_tokens_of_any_unicode_are_kept_byte_exact(tmp_path: Path, token: str) -> None:
    assume(token.strip(" \t\r\f\v") and not token.startswith("-DOCSTART-"))
    path = tmp_path / "one.conll"
    # The token comes first in the file, so a leading U+FEFF meets the byte-order-mark rule.
    write_columns(path, [Sentence.from_tokens([token, "x"], ["O", "O"])])
    (back,) = read_sentences(path, ColumnFormat(delimiter="tab"))
    assert back.tokens == [token, "x"]


# --- atomic output ----------------------------------------------------------------------------


def test_atomic_output_replaces_only_on_success(tmp_path: Path) -> None:
    target = tmp_path / "t.txt"
    target.write_text("old", encoding="utf-8")
    with pytest.raises(RuntimeError), atomic_output(target) as out:
        out.write("half")
        raise RuntimeError("stop")
    assert target.read_text(encoding="utf-8") == "old"
    assert os.listdir(tmp_path) == ["t.txt"]
    with atomic_output(target) as out:
        out.write("new\r\n")
    assert target.read_bytes() == b"new\r\n"  # newline="" writes line endings as given
    assert os.listdir(tmp_path) == ["t.txt"]


def test_atomic_output_creates_with_ordinary_permissions(tmp_path: Path) -> None:
    target = tmp_path / "fresh.bin"
    with atomic_output(target, "wb") as out:
        out.write(b"\x00\x01")
    assert target.read_bytes() == b"\x00\x01"
    umask = os.umask(0)
    os.umask(umask)
    assert target.stat().st_mode & 0o777 == 0o666 & ~umask


def test_atomic_output_to_stdout(capsys: pytest.CaptureFixture[str]) -> None:
    with atomic_output("-") as out:
        out.write("hello\n")
    assert capsys.readouterr().out == "hello\n"


# --- the shared public corpora ------------------------------------------------------------------

CORPUS_FILES = {
    # Sentence and token counts as documented in shared/corpora/README.md.
    "conll2000/train.txt": (8_936, 211_727),
    "conll2000/test.txt": (2_012, 47_377),
    "wnut17/wnut17train.conll": (3_394, None),
    "wnut17/emerging.dev.conll": (1_009, None),
    "wnut17/emerging.test.annotated": (1_287, None),
    "bc5cdr/train.tsv": (4_560, None),
    "bc5cdr/devel.tsv": (4_581, None),
    "bc5cdr/test.tsv": (4_797, None),
}


@pytest.mark.parametrize("name", sorted(CORPUS_FILES))
def test_shared_corpus_round_trip(name: str, tmp_path: Path) -> None:
    path = CORPORA / name
    if not path.is_file():
        pytest.skip(f"shared corpus file {path} is not available")
    reader = ColumnReader(path)
    sentences = list(reader)
    expected_sentences, expected_tokens = CORPUS_FILES[name]
    assert len(sentences) == expected_sentences
    if expected_tokens is not None:
        assert sum(len(s) for s in sentences) == expected_tokens
    out = tmp_path / "copy"
    write_columns(out, sentences, delimiter="\t" if reader.stats.delimiter == "tab" else " ")
    back = read_sentences(out)
    assert [s.tokens for s in back] == [s.tokens for s in sentences]
    assert [s.labels for s in back] == [s.labels for s in sentences]
    assert rows_of(back) == rows_of(sentences)
    if reader.stats.whitespace_only_lines == 0:
        # Without whitespace-only separators the file was already in the written layout.
        assert out.read_bytes() == path.read_bytes()
