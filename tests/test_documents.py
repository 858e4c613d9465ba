"""Reading documents to tag (tagger.apply.documents, column_input): JSON Lines records that are
bad in depth or numbers, column files where one bad line costs one sentence, the line-based
inputs, and plain messages for a folder, a wildcard or a JSON array."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from tagger.apply.documents import MAX_JSON_DEPTH, Document, Skipped, read_documents

GOOD = "Crew A replaced the gearbox on T-9."


def _read(path: Path, input_format: str = "auto", **options) -> list[Document | Skipped]:
    return list(read_documents([path], input_format, **options))


def _where(items: list[Document | Skipped]) -> list[tuple[str, int | None]]:
    return [(type(item).__name__, item.line) for item in items]


# ---------------------------------------------------------------------------------------------
# JSON Lines


def _nested(levels: int) -> str:
    return '{"text": "T-3", "deep": ' + "[" * (levels - 1) + "]" * (levels - 1) + "}"


def test_deep_json_records_are_bad_records_not_crashes(tmp_path: Path) -> None:
    good = json.dumps({"text": GOOD})
    path = tmp_path / "in.jsonl"
    # 50,000 levels overflow the JSON parser's recursion; 150 parse but nest too deeply.
    lines = [good, _nested(50_000), _nested(MAX_JSON_DEPTH + 50), _nested(MAX_JSON_DEPTH), good]
    path.write_text("\n".join(lines) + "\n")
    items = _read(path)
    assert _where(items) == [
        ("Document", 1),
        ("Skipped", 2),
        ("Skipped", 3),
        ("Document", 4),
        ("Document", 5),
    ]
    assert all(f"deeper than {MAX_JSON_DEPTH} levels" in item.message for item in items[1:3])


@pytest.mark.parametrize("constant", ["NaN", "Infinity", "-Infinity"])
def test_numbers_json_has_not_are_refused(tmp_path: Path, constant: str) -> None:
    path = tmp_path / "in.jsonl"
    path.write_text(
        f'{{"id": {constant}, "text": "T-3"}}\n{{"text": "T-9", "score": [1, {constant}]}}\n'
        + json.dumps({"id": 1.5, "text": GOOD})
        + "\n"
    )
    first, second, third = _read(path)
    assert isinstance(first, Skipped) and isinstance(second, Skipped)
    assert (
        first.message == f"not valid JSON ({constant} is not a JSON number; write null or a string)"
    )
    assert second.line == 2 and constant in second.message
    assert isinstance(third, Document) and third.id == 1.5


def test_a_json_message_says_at_column_once(tmp_path: Path) -> None:
    path = tmp_path / "in.jsonl"
    path.write_text('{"text": "unterminated\n{"text": "a\x01b"}\n')
    first, second = _read(path)
    assert first.message == "not valid JSON (Unterminated string starting at column 10)"
    assert second.message == "not valid JSON (Invalid control character at column 12)"


@pytest.mark.parametrize(
    ("content", "found"),
    [
        ('[\n  {"text": "T-3"},\n  {"text": "T-9"}\n]\n', "a JSON array"),
        ('\n{\n  "text": "T-3"\n}\n', "a JSON object spread over several lines"),
    ],
)
def test_a_pretty_printed_json_file_says_json_lines_are_expected(
    tmp_path: Path, content: str, found: str
) -> None:
    path = tmp_path / "in.json"
    path.write_text(content)
    (item,) = _read(path)  # one message for the file, not one per line
    assert isinstance(item, Skipped) and item.line == 1 + content.startswith("\n")
    assert item.message.startswith(f"the file holds {found}; JSON Lines is expected")


def test_a_one_line_json_array_is_named(tmp_path: Path) -> None:
    path = tmp_path / "in.jsonl"
    path.write_text(json.dumps({"text": GOOD}) + '\n[{"text": "T-3"}]\n')
    items = _read(path)
    assert _where(items) == [("Document", 1), ("Skipped", 2)]
    assert items[1].message == "a JSON array; JSON Lines is expected, one object per line"


# ---------------------------------------------------------------------------------------------
# Column files: one bad line costs its sentence only


def _column_file(tmp_path: Path, content: bytes, name: str = "in.conll") -> Path:
    path = tmp_path / name
    path.write_bytes(content)
    return path


def test_one_bad_line_skips_its_sentence_and_the_rest_is_read(tmp_path: Path) -> None:
    path = _column_file(
        tmp_path,
        b"Crew\tO\nA\tO\n\n"  # 1-3
        b"gearbox\tO\tX\non\tO\n\n"  # 4-6: three columns on line 4
        b"T-9\tO\n\tO\n\n"  # 7-9: an empty token on line 8
        b"caf\xe9\tO\n\n"  # 10-11: not UTF-8
        b"-DOCSTART-\n\nyaw\tO\ndrive\tO\n",  # 12-15
    )
    items = _read(path)
    assert _where(items) == [
        ("Document", 1),
        ("Skipped", 4),
        ("Skipped", 7 + 1),
        ("Skipped", 10),
        ("Document", 14),
    ]
    assert items[1].message == "expected 2 columns (as on line 1), found 3 in 'gearbox\\tO\\tX'"
    assert items[2].message == "empty token (column 0) in '\\tO'"
    assert "not valid UTF-8" in items[3].message
    assert items[4].sentence.tokens == ["yaw", "drive"]
    assert items[4].sentence.line_numbers == (14, 15)


def test_a_bad_first_sentence_keeps_the_first_line_as_the_reference(tmp_path: Path) -> None:
    path = _column_file(tmp_path, b"a b c\nd e\n\nf g h\n\ni j\n", "in.conll")
    items = _read(path)
    assert _where(items) == [("Skipped", 2), ("Document", 4), ("Skipped", 6)]
    assert items[1].separator == " " and items[1].sentence.rows == (("f", "g", "h"),)


def test_a_token_column_outside_the_file_stops_reading_it(tmp_path: Path) -> None:
    path = _column_file(tmp_path, b"Crew\tO\n\nT-9\tO\n")
    (item,) = _read(path, token_column=5)
    assert isinstance(item, Skipped) and item.line == 1
    assert "out of range" in item.message and item.message.endswith(
        "the rest of the file was not read"
    )


@pytest.mark.parametrize(("content", "separator"), [(b"a O\nb O\n", " "), (b"a\tO\nb\tO\n", "\t")])
def test_column_documents_remember_the_separator(
    tmp_path: Path, content: bytes, separator: str
) -> None:
    (doc,) = _read(_column_file(tmp_path, content))
    assert doc.separator == separator and doc.sentence.rows == (("a", "O"), ("b", "O"))


def test_column_lines_reach_the_parser_exactly(tmp_path: Path) -> None:
    # A byte-order mark, CRLF, a CR kept inside a token's last column, a token that is a BOM.
    path = _column_file(tmp_path, b"\xef\xbb\xbf\xef\xbb\xbfx\tO\r\ny\tO\r\r\n\nz\tO")
    first, second = _read(path)
    assert first.sentence.rows == (("\ufeffx", "O"), ("y", "O\r"))
    assert second.sentence.rows == (("z", "O"),) and second.line == 4


# ---------------------------------------------------------------------------------------------
# Line-based inputs


def test_lines_makes_a_document_of_every_line(tmp_path: Path) -> None:
    path = tmp_path / "app.log"
    path.write_bytes(b"\xef\xbb\xbfERROR gearbox on T-14\r\n\n   \nWARN caf\xe9\nINFO T-3 ok")
    items = _read(path, "lines")
    assert _where(items) == [("Document", 1), ("Skipped", 4), ("Document", 5)]
    assert [item.id for item in items if isinstance(item, Document)] == [
        f"{path}:1",
        f"{path}:5",
    ]
    assert items[0].text == "ERROR gearbox on T-14" and items[2].text == "INFO T-3 ok"
    assert "not valid UTF-8" in items[1].message


def test_text_inputs_come_in_pieces_of_one_document(tmp_path: Path) -> None:
    path = tmp_path / "notes.txt"
    text = "".join(f"Crew {i} checked T-{i}.\n" for i in range(200))
    path.write_text(text)
    for input_format in ("text", "sentence-lines"):
        items = _read(path, input_format, piece_chars=500)
        assert len(items) > 5 and all(isinstance(item, Document) for item in items)
        assert {item.id for item in items} == {str(path)}
        assert [item.part.index for item in items] == list(range(len(items)))
        assert [item.first for item in items] == [True] + [False] * (len(items) - 1)
        assert "".join(item.text for item in items) == text
        assert all(text[item.offset :].startswith(item.text) for item in items)
        assert all(item.line_breaks_end_sentences == (input_format != "text") for item in items)


def test_bytes_that_are_not_utf8_end_a_text_document_in_pieces(tmp_path: Path) -> None:
    path = tmp_path / "notes.txt"
    # Longer than one read (64 KiB): pieces come before the bad bytes are met.
    path.write_bytes(b"Crew A left.\n\n" * 8_000 + b"caf\xe9\n")
    items = _read(path, "text", piece_chars=300)
    *pieces, last = items
    assert pieces and all(isinstance(item, Document) for item in pieces)
    assert isinstance(last, Skipped) and last.line == 16_001 and last.document == 0
    assert not any(item.part.last for item in pieces)


# ---------------------------------------------------------------------------------------------
# Inputs that are not files


def test_a_folder_and_an_unexpanded_wildcard_are_named_plainly(tmp_path: Path) -> None:
    folder = tmp_path / "reports"
    folder.mkdir()
    (tmp_path / "a.txt").write_text(GOOD)
    items = list(read_documents([folder, tmp_path / "*.txt", tmp_path / "absent.txt"]))
    assert [item.line for item in items] == [None, None, None]
    assert items[0].message.startswith("a folder, not a file; name the files in it")
    assert "wildcard that no shell expanded" in items[1].message
    assert items[2].message == "cannot open the file: No such file or directory"
