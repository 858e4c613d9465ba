"""Tests for tagger.data.io (opening, line splitting, byte-order marks, UTF-8 errors) and for the
readers built on it: column files, lexicons and word vectors fail alike on the same bytes."""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pytest

from tagger.data.corpus import read_sentences
from tagger.data.io import (
    decode_text,
    decoded_lines,
    input_name,
    open_input,
    raw_lines,
    read_lines,
)
from tagger.errors import DataError
from tagger.text.lexicon import read_lexicon
from tagger.text.vectors import read_word_vectors


def _write(tmp_path: Path, data: bytes, name: str = "in.txt") -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


def _stdin(monkeypatch: pytest.MonkeyPatch, data: bytes) -> None:
    class FakeStdin:
        buffer = io.BytesIO(data)

    monkeypatch.setattr("sys.stdin", FakeStdin())


# --- lines ----------------------------------------------------------------------------------------


def test_lines_end_at_lf_and_only_the_first_bom_goes(tmp_path: Path) -> None:
    data = "\ufeffone\r\n\ufefftwo\rstill two\n\u2028three\u2028four\u0085\n\nlast".encode()
    lines = list(read_lines(_write(tmp_path, data)))
    assert lines == [
        (1, "one"),
        (2, "\ufefftwo\rstill two"),
        (3, "\u2028three\u2028four\u0085"),
        (4, ""),
        (5, "last"),
    ]


def test_raw_lines_give_byte_offsets_that_point_into_the_input() -> None:
    data = b"\xef\xbb\xbfab\r\ncd\n\nef"
    lines = list(raw_lines(io.BytesIO(data)))
    assert [(line.number, line.data, line.offset) for line in lines] == [
        (1, b"ab", 3),
        (2, b"cd", 7),
        (3, b"", 10),
        (4, b"ef", 11),
    ]
    for line in lines:
        assert data[line.offset : line.offset + len(line.data)] == line.data


def test_bad_bytes_name_file_line_offset_and_their_surroundings(tmp_path: Path) -> None:
    # "ok\n" is 3 bytes, then 40 x's: the bad byte is at offset 43 of the file.
    data = b"ok\n" + b"x" * 40 + b"\xff" + b"y" * 40 + b"\n"
    path = _write(tmp_path, data, "bad.txt")
    lines = read_lines(path)
    assert next(lines) == (1, "ok")  # the good lines arrive before the error
    with pytest.raises(DataError) as info:
        next(lines)
    error = info.value
    assert (error.path, error.line) == (str(path), 2)
    assert data[43:44] == b"\xff"
    assert "bytes b'\\xff' at byte offset 43 are not valid UTF-8 (invalid start byte)" in str(error)
    # Sixteen bytes either side, cut on both sides.
    assert "in ...b'" + "x" * 16 + "\\xff" + "y" * 16 + "'..." in str(error)
    assert len(str(error)) < 200


def test_stdin_is_read_for_a_dash_and_named_in_errors(monkeypatch: pytest.MonkeyPatch) -> None:
    _stdin(monkeypatch, b"\xef\xbb\xbfa\r\nb\xe9\n")
    assert input_name("-") == "<stdin>" and input_name(Path("x.txt")) == "x.txt"
    lines = read_lines("-")
    assert next(lines) == (1, "a")
    with pytest.raises(DataError, match=r"^<stdin>:2: bytes b'\\xe9' at byte offset 7 "):
        next(lines)


def test_missing_file_and_folder_are_data_errors(tmp_path: Path) -> None:
    with pytest.raises(DataError, match="cannot open the file") as info:
        list(read_lines(tmp_path / "absent.txt"))
    assert info.value.path == str(tmp_path / "absent.txt")
    with pytest.raises(DataError, match="cannot open the file"), open_input(tmp_path):
        pass


@pytest.mark.parametrize(
    "data",
    [
        b"caf\xe9\n",
        b"\xef\xbb\xbfok\nthen \xc3 a cut-off sequence\n",
        b"one\r\ntwo\r\nbad at the end \xf0\x9f",
        b"\xef\xbb\xbf\xff",
    ],
)
def test_whole_text_and_line_by_line_report_the_same_error(data: bytes) -> None:
    with pytest.raises(DataError) as whole:
        decode_text(data, "doc.txt")
    with pytest.raises(DataError) as by_line:
        list(decoded_lines(io.BytesIO(data), "doc.txt"))
    assert str(whole.value) == str(by_line.value)
    assert whole.value.line == by_line.value.line


def test_whole_text_drops_only_the_leading_bom() -> None:
    assert decode_text("\ufeffa\r\n\ufeffb".encode(), "t") == "a\r\n\ufeffb"


# --- the readers share the layer ------------------------------------------------------------------


def test_column_lexicon_and_vector_readers_fail_alike_on_bad_bytes(tmp_path: Path) -> None:
    messages = set()
    readers = {
        "columns.txt": read_sentences,
        "lexicon.txt": read_lexicon,
        "vectors.txt": read_word_vectors,
    }
    for name, reader in readers.items():
        # Two columns, a lexicon entry, a word with a one-number vector: valid for each reader.
        path = _write(tmp_path, b"ok 1\n\ncaf\xe9 1\n", name)
        with pytest.raises(DataError) as info:
            reader(path)
        assert (info.value.path, info.value.line) == (str(path), 3)
        messages.add(info.value.message)
    assert len(messages) == 1
    assert messages == {
        "bytes b'\\xe9' at byte offset 9 are not valid UTF-8 (invalid continuation byte) "
        "in b'caf\\xe9 1'"
    }


def test_lexicon_from_stdin_with_crlf(monkeypatch: pytest.MonkeyPatch) -> None:
    _stdin(monkeypatch, b"\xef\xbb\xbfgear box\tPART\r\n# note\r\nbrake\r\n")
    lexicon = read_lexicon("-")
    assert lexicon.name == "stdin"
    assert lexicon.entries == [(("gear", "box"), "PART"), (("brake",), "")]


def test_word_vectors_with_a_bom_before_the_word2vec_header(tmp_path: Path) -> None:
    path = _write(tmp_path, b"\xef\xbb\xbf2 3\r\nbearing 0.5 -1 2\r\nleak 0 0.25 1e1\r\n")
    words, matrix = read_word_vectors(path)
    assert words == ["bearing", "leak"]
    assert matrix.dtype == np.float32
    np.testing.assert_array_equal(matrix, [[0.5, -1.0, 2.0], [0.0, 0.25, 10.0]])


def test_word_vector_errors_name_the_line(tmp_path: Path) -> None:
    path = _write(tmp_path, b"a 1 2\nb 1 x\n", "v.txt")
    with pytest.raises(DataError, match=r"v\.txt:2: not a number in 'b 1 x'"):
        read_word_vectors(path)
    path = _write(tmp_path, b"a 1 2\nb 1\n", "w.txt")
    with pytest.raises(DataError, match=r"w\.txt:2: expected 2 numbers after the word, found 1"):
        read_word_vectors(path)
