"""Tests for `convert` saying what it did: the source scheme checked against the file, ill-formed
sentences refused or repaired and listed, standard input, and a reader that stops early."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from seqeval.metrics.sequence_labeling import get_entities
from typer.testing import CliRunner

from tagger.cli import app
from tagger.cli.common import CLOSED_PIPE
from tagger.data.convert import convert_file
from tagger.data.corpus import read_sentences
from tagger.errors import DataError
from tagger.reports.conversion import format_conversion

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[1]

WELL_FORMED = "a\tB-X\nb\tI-X\nc\tO\n\nd\tB-Y\n\n"  # IOB2; in IOB1 a B- cannot open a span
# Lines 7 and 10 hold I- after O: ill-formed in IOB2, the nearest scheme (IOB1 also refuses a B-
# that opens a sentence, BIOES a B- without an E-).
ILL_FORMED = "a\tB-X\nb\tI-X\n\nc\tB-Y\n\nd\tO\ne\tI-X\n\nf\tO\ng\tI-Y\n\n"


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def test_ill_formed_sentences_are_refused_and_nothing_is_written(tmp_path: Path) -> None:
    src = _write(tmp_path / "in.txt", ILL_FORMED)
    dst = _write(tmp_path / "out.txt", "keep")
    with pytest.raises(DataError) as refused:
        convert_file(src, dst, "BIOES")
    message = str(refused.value)
    assert message.startswith(f"{src}: 2 of 4 sentences are ill-formed in IOB2, the nearest")
    assert "line 7: I-X follows O" in message and "line 10: I-Y follows O" in message
    assert "--repair" in message
    assert dst.read_text(encoding="utf-8") == "keep"


def test_repair_converts_and_lists_what_it_repaired(tmp_path: Path) -> None:
    src = _write(tmp_path / "in.txt", ILL_FORMED)
    dst = tmp_path / "out.txt"
    summary = convert_file(src, dst, "BIOES", repair=True, max_examples=1)
    assert summary["ill_formed_sentences"] == 2
    assert summary["repaired"] == {
        "count": 2,
        "examples": [{"line": 7, "message": "I-X follows O; IOB2 spans start with B-"}],
    }
    # The lenient reading, as seqeval's (outside reference) reads the ill-formed tags too.
    for before, after in zip(read_sentences(src), read_sentences(dst), strict=True):
        assert get_entities(before.labels) == get_entities(after.labels)
    text = format_conversion(summary)
    assert text.splitlines()[0] == "converted 4 sentences from IOB2 to BIOES"
    assert "repaired 2 sentences ill-formed in IOB2, read the lenient CoNLL way:" in text
    assert "- line 7: I-X follows O" in text and "and 1 more" in text


def test_a_wrong_from_is_refused_naming_the_scheme_the_file_fits(tmp_path: Path) -> None:
    src = _write(tmp_path / "in.txt", WELL_FORMED)
    with pytest.raises(DataError) as refused:
        convert_file(src, tmp_path / "out.txt", "BIOES", source_scheme="IOB1")
    message = str(refused.value)
    assert "2 of 2 sentences are ill-formed in IOB1, the scheme given" in message
    assert "The file is well-formed in IOB2." in message
    assert not (tmp_path / "out.txt").exists()


def test_a_right_from_converts_and_says_it_was_given(tmp_path: Path) -> None:
    src = _write(tmp_path / "in.txt", WELL_FORMED)
    summary = convert_file(src, tmp_path / "out.txt", "IOE2", source_scheme="bio")
    assert summary["repaired"] == {"count": 0, "examples": []}
    assert (summary["scheme_given"], summary["changed_labels"]) == (True, 3)
    assert format_conversion(summary) == "converted 2 sentences from IOB2 to IOE2"


def test_the_command_refuses_without_writing_to_stdout(tmp_path: Path) -> None:
    src = _write(tmp_path / "in.txt", ILL_FORMED)
    result = runner.invoke(app, ["convert", str(src), "-", "--to", "BIOES"])
    assert result.exit_code == 1
    assert result.stdout == ""
    assert result.stderr.startswith(f"tagger: error: {src}: 2 of 4 sentences are ill-formed")
    assert result.stderr.count("\n") == 1
    repaired = runner.invoke(app, ["convert", str(src), "-", "--to", "BIOES", "--repair"])
    assert repaired.exit_code == 0, repaired.stderr
    assert repaired.stdout == "a\tB-X\nb\tE-X\n\nc\tS-Y\n\nd\tO\ne\tS-X\n\nf\tO\ng\tS-Y\n\n"
    assert "repaired 2 sentences" in repaired.stderr


def test_the_command_reads_stdin_with_a_given_scheme() -> None:
    # Checking the file against --from reads it once, converting a second time: standard input
    # is kept from the first read.
    result = runner.invoke(
        app, ["convert", "-", "-", "--to", "IOB1", "--from", "IOB2"], input=WELL_FORMED
    )
    assert result.exit_code == 0, result.stderr
    assert result.stdout == "a\tI-X\nb\tI-X\nc\tO\n\nd\tI-Y\n\n"
    bad = runner.invoke(
        app, ["convert", "-", "-", "--to", "BIOES", "--from", "IOB1"], input=WELL_FORMED
    )
    assert bad.exit_code == 1
    assert "<stdin>: 2 of 2 sentences are ill-formed in IOB1" in bad.stderr


def test_a_reader_that_stops_early_ends_the_command_quietly(tmp_path: Path) -> None:
    # Far more output than a pipe holds, so the command is still writing when the reader
    # closes its end, as `tagger convert big.txt - --to BIOES | head -1` does.
    rows = "".join(f"w{i}\tB-X\nv{i}\tI-X\n\n" for i in range(40_000))
    src = _write(tmp_path / "big.txt", rows)
    command = [sys.executable, "-m", "tagger", "convert", str(src), "-", "--to", "BIOES"]
    process = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    assert process.stdout is not None and process.stderr is not None
    assert process.stdout.readline() == b"w0\tB-X\n"
    process.stdout.close()
    errors = process.stderr.read()
    assert process.wait(timeout=120) == CLOSED_PIPE == 141
    assert errors == b""
