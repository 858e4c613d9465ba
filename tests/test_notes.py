"""What `tag` and `tokenize` say on stderr beside their output: notes that recur per document or
sentence said once per kind, with their count and where the first one is (reports/notes.py
`RepeatedNotes`), and counts in the one number style of reports/layout.py."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from model_files import tiny_tagger
from typer.testing import CliRunner

from tagger.cli import app
from tagger.reports.notes import RepeatedNotes

runner = CliRunner()


def test_a_kind_met_once_is_said_in_full_and_more_often_counted_once() -> None:
    notes = RepeatedNotes()
    for where in ("a:1", "a:7", "b:2"):
        notes.add("cut", f"{where}: cut", lambda n, where=where: f"{n} cut (first: {where})")
    notes.add("other", "x: other", lambda n: f"{n} other")
    assert notes.lines() == ["3 cut (first: a:1)", "x: other"]
    assert RepeatedNotes().lines() == []


def _notes(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if line.startswith("note: ")]


def test_tokenize_counts_the_sentences_it_cuts(tmp_path: Path) -> None:
    # Three lines of 700 words each: with a sentence per line, 3 sentences are cut at 300
    # tokens, then cut again at 600 (each piece counts).
    text = tmp_path / "long.txt"
    text.write_text("\n".join(" ".join(["word"] * 700) for _ in range(3)) + "\n")
    result = runner.invoke(
        app, ["tokenize", str(text), "--input-format", "sentence-lines", "-o", str(tmp_path / "t")]
    )
    assert result.exit_code == 0, result.stderr
    assert _notes(result.stderr) == [
        f"note: 6 sentences were cut at max_sentence_tokens=300 tokens (first: {text}:1); "
        "tag reports them as bad input"
    ]


def test_tokenize_says_a_single_cut_in_full(tmp_path: Path) -> None:
    text = tmp_path / "long.txt"
    text.write_text("short line\n" + " ".join(["word"] * 301) + "\n")
    result = runner.invoke(
        app, ["tokenize", str(text), "--input-format", "sentence-lines", "-o", str(tmp_path / "t")]
    )
    (note,) = _notes(result.stderr)
    assert note.startswith(f"note: {text}:2: a sentence longer than max_sentence_tokens=300")
    assert "was cut at character" in note


@pytest.mark.parametrize("files", [1, 4])
def test_tag_says_once_that_text_inputs_look_like_column_files(tmp_path: Path, files: int) -> None:
    model = tmp_path / "model.tagger"
    tiny_tagger().save(model)
    inputs = []
    for number in range(files):
        path = tmp_path / f"part{number}.txt"
        path.write_text("Anna\tB-PER\nmet\tO\nBob\tB-PER\n\n")
        inputs.append(str(path))
    result = runner.invoke(app, ["tag", str(model), *inputs, "-o", str(tmp_path / "out.jsonl")])
    assert result.exit_code == 0, result.stderr
    (note,) = _notes(result.stderr)
    if files == 1:
        assert note == (
            f"note: {inputs[0]} was read as plain text but looks like a column file; pass "
            "--input-format columns to tag its tokens as they are"
        )
    else:
        assert note == (
            f"note: 4 inputs were read as plain text but look like column files (first: "
            f"{inputs[0]}); pass --input-format columns to tag their tokens as they are"
        )


def test_the_tag_summary_separates_thousands(tmp_path: Path) -> None:
    model = tmp_path / "model.tagger"
    tiny_tagger().save(model)
    lines = tmp_path / "records.log"
    lines.write_text("Anna met Bob .\n" * 1001)
    result = runner.invoke(
        app, ["tag", str(model), str(lines), "--input-format", "lines", "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 0, result.stderr
    (summary,) = [line for line in result.stderr.splitlines() if line.startswith("tagged ")]
    # Every count, the rate included, with its thousands separated (the rate and the review
    # count depend on the model, so only their style is pinned).
    assert re.fullmatch(
        r"tagged 1,001 documents \((1,001|\d{1,3}) to review\), 1,001 sentences, 4,004 tokens, "
        r"(\d{1,3}(,\d{3})*) spans in \d+\.\d s \((\d{1,3}(,\d{3})*) tokens/s\); 0 skipped",
        summary,
    ), summary
