"""`tag` and `tokenize` on documents: plain text streamed in pieces gives the output of the whole
text, a bad piece skips its whole document, one bad column-file line skips one sentence, columns
output keeps the input's separator, the line-based inputs, and bad JSON records."""

from __future__ import annotations

import json
import random
from pathlib import Path

import pytest
from test_tagging import (
    _detokenised,
    _sentences,
    model,  # noqa: F401 - a fixture: the same tiny tagger
)
from typer.testing import CliRunner

from tagger import Tagger
from tagger.cli import app
from tagger.text.sentences import split_sentences
from tagger.text.tokenizer import TokenizerSettings

runner = CliRunner()
GOOD = "Crew A replaced the gearbox on T-9."


def _summary_lines(stderr: str) -> list[str]:
    """What `tag` says on stderr, without the caution line every run ends with."""
    lines = stderr.splitlines()
    assert lines and lines[-1].startswith("caution:")
    return lines[:-1]


def _run(*args: str, input: str | bytes | None = None):  # noqa: A002 - CliRunner's name
    return runner.invoke(app, list(args), input=input)


def _strict_records(text: str) -> list[dict]:
    """Every line parsed as strict JSON: NaN and Infinity are refused (json accepts them)."""

    def refuse(name: str) -> None:
        raise ValueError(f"{name} in the output")

    return [json.loads(line, parse_constant=refuse) for line in text.splitlines()]


def _report_text(seed: int, sentences: int) -> str:
    """Reports in paragraphs of one to six sentences, lines ending in LF or CRLF, some lines
    broken inside a sentence, and multi-byte characters (accents, CJK, emoji) throughout."""
    rng = random.Random(seed)
    said = [_detokenised(s) for s in _sentences(seed, sentences, unseen=True)]
    extras = ["", " Ünïcode — ok 🙂.", " 日本の T-3 は停止。", " Café at T-9 é."]
    parts, i = [], 0
    while i < len(said):
        count = rng.randint(1, 6)
        joiner = rng.choice([" ", " ", "\n", "\r\n"])
        parts.append(joiner.join(said[i : i + count]) + rng.choice(extras))
        parts.append(rng.choice(["\n\n", "\r\n\r\n", "\n \n\n"]))
        i += count
    return "".join(parts)


# ---------------------------------------------------------------------------------------------
# Plain text in pieces


@pytest.mark.parametrize("output_format", ["jsonl", "columns", "table"])
def test_text_in_pieces_writes_what_the_whole_text_writes(
    model: Path, tmp_path: Path, output_format: str
) -> None:
    text = _report_text(9, 300)
    source = tmp_path / "reports.txt"
    source.write_bytes(b"\xef\xbb\xbf" + text.encode())
    whole = _run("tag", str(model), str(source), "--output-format", output_format)
    assert whole.exit_code == 0, whole.stderr
    for extra in (["--chunk-chars", "300"], ["--chunk-chars", "700", "--workers", "2"]):
        pieces = _run("tag", str(model), str(source), "--output-format", output_format, *extra)
        assert pieces.exit_code == 0, pieces.stderr
        assert pieces.stdout == whole.stdout
        assert pieces.stderr.split(" in ")[0] == whole.stderr.split(" in ")[0]  # same counts
    if output_format == "jsonl":
        (record,) = _strict_records(whole.stdout)
        assert record["id"] == str(source) and record["text"] == text
        assert len(record["mentions"]) > 50
        for mention in record["mentions"]:
            start, end = mention["at"]
            assert text[start:end] == mention["quote"]
    if output_format == "columns":
        assert whole.stdout.count("-DOCSTART-") == 1


def test_a_bad_piece_skips_its_whole_document(model: Path, tmp_path: Path) -> None:
    text = _report_text(3, 1_000)
    good = tmp_path / "good.txt"
    good.write_text(GOOD)
    late_bytes = tmp_path / "late.txt"  # past the first 64 KiB read, after many pieces
    late_bytes.write_bytes(text.encode() * 2 + b"the caf\xe9 crew\n")
    bad_line = (text * 2).count("\n") + 1
    for extra in ([], ["--workers", "2"]):
        skipped = _run("tag", str(model), str(late_bytes), str(good), "--chunk-chars", "2000",
                       "--on-error", "skip", *extra)  # fmt: skip
        assert skipped.exit_code == 0, skipped.stderr
        assert [r["id"] for r in _strict_records(skipped.stdout)] == [str(good)]
        summary, listed = _summary_lines(skipped.stderr)
        assert summary.startswith("tagged 1 document (") and summary.endswith("; 1 skipped")
        assert "1 sentence, 8 tokens" in summary  # the skipped document's counts are gone
        assert listed.startswith(f"  skipped {late_bytes}:{bad_line}: ")
    out = tmp_path / "out" / "tagged.jsonl"
    out.parent.mkdir()
    stopped = _run("tag", str(model), str(late_bytes), "--chunk-chars", "2000", "--out", str(out))
    assert stopped.exit_code == 1 and f"{late_bytes}:{bad_line}: " in stopped.stderr
    assert list(out.parent.iterdir()) == []


def test_a_long_sentence_in_a_later_piece_skips_the_document_and_names_the_line_inputs(
    model: Path, tmp_path: Path
) -> None:
    text = _report_text(4, 200) + "the crew checked the gearbox and the yaw drive and left\n"
    source = tmp_path / "notes.txt"
    source.write_text(text, newline="")
    result = _run("tag", str(model), str(source), "--chunk-chars", "400",
                  "--max-sentence-tokens", "10", "--on-error", "skip")  # fmt: skip
    assert result.exit_code == 0 and result.stdout == ""
    (listed,) = _summary_lines(result.stderr)[1:]
    assert listed.startswith(f"  skipped {source}:{text.count(chr(10))}: ")
    assert f"starts at character {text.rindex('the crew')} of the document" in listed
    assert "--input-format lines (a document per line) or sentence-lines" in listed


# ---------------------------------------------------------------------------------------------
# Column files


def test_skip_drops_only_the_bad_sentences_of_a_column_file(model: Path, tmp_path: Path) -> None:
    source = tmp_path / "in.conll"
    source.write_text(
        "Crew\tO\nA\tO\n\n"  # 1-3
        "gearbox\tO\tX\n\n"  # 4-5: three columns
        "T-9\tO\nfailed\tO\n\n"  # 6-8
        "on\n\n"  # 9-10: one column
        "yaw\tO\ndrive\tO\n"  # 11-12
    )
    result = _run("tag", str(model), str(source), "--output-format", "columns",
                  "--on-error", "skip")  # fmt: skip
    assert result.exit_code == 0, result.stderr
    blocks = [b.splitlines() for b in result.stdout.strip("\n").split("\n\n")]
    assert [[row.split("\t")[0] for row in block] for block in blocks] == [
        ["Crew", "A"],
        ["T-9", "failed"],
        ["yaw", "drive"],
    ]
    summary, *listed = _summary_lines(result.stderr)
    assert "3 documents" in summary and summary.endswith("; 2 skipped")
    assert [entry.split(": ")[0] for entry in listed] == [
        f"  skipped {source}:4",
        f"  skipped {source}:9",
    ]


def test_columns_output_keeps_the_input_separator(model: Path, tmp_path: Path) -> None:
    rows = [t for s in _sentences(5, 10) for t in [*(f"{w} {lab}" for w, lab in s), ""]]
    source = tmp_path / "in.conll"
    source.write_text("\n".join(rows) + "\n")
    result = _run("tag", str(model), str(source), "--output-format", "columns")
    assert result.exit_code == 0, result.stderr
    lines = [line for line in result.stdout.splitlines() if line]
    assert lines and "\t" not in result.stdout
    assert [line.split(" ")[:2] for line in lines] == [r.split(" ") for r in rows if r]
    assert all(len(line.split(" ")) == 3 for line in lines)


# ---------------------------------------------------------------------------------------------
# Line-based inputs

LOG = (
    "ERROR 12:00:01 gearbox on T-14 failed\n"
    "WARN pitch bearing on T-3 slow\r\n"
    "\n"
    "INFO yaw drive ok on WTG 07. Crew B left\n"
)


def test_lines_tags_every_line_as_a_record(model: Path, tmp_path: Path) -> None:
    source = tmp_path / "app.log"
    source.write_text(LOG, newline="")
    result = _run("tag", str(model), str(source), "--input-format", "lines")
    assert result.exit_code == 0, result.stderr
    records = _strict_records(result.stdout)
    assert [r["id"] for r in records] == [f"{source}:{n}" for n in (1, 2, 4)]
    assert [r["text"] for r in records] == [line.rstrip("\r") for line in LOG.split("\n") if line]
    for record in records:
        for mention in record["mentions"]:
            start, end = mention["at"]
            assert record["text"][start:end] == mention["quote"]
    shown = _run("tokenize", str(source), "--input-format", "lines")
    assert shown.stdout.count("-DOCSTART- ") == 3


def test_sentence_lines_ends_a_sentence_at_every_line_break(model: Path, tmp_path: Path) -> None:
    source = tmp_path / "app.log"
    source.write_text(LOG, newline="")
    shown = _run("tokenize", str(source), "--input-format", "sentence-lines")
    assert shown.exit_code == 0, shown.stderr
    blocks = [b for b in shown.stdout.split("\n\n") if b.strip()]
    expected = [
        [(t.text, start + t.start, start + t.end) for t in s.tokens]
        for line, start in _lines_with_starts(LOG)
        for s in split_sentences(line)
    ]
    assert len(expected) == 4  # the last line holds two sentences
    assert [[tuple(r.split("\t")) for r in b.splitlines()] for b in blocks] == [
        [(t, str(a), str(b)) for t, a, b in sentence] for sentence in expected
    ]
    tagged = _run("tag", str(model), str(source), "--input-format", "sentence-lines",
                  "--max-sentence-tokens", "8")  # fmt: skip
    assert tagged.exit_code == 0, tagged.stderr
    (record,) = _strict_records(tagged.stdout)
    assert record["id"] == str(source) and record["text"] == LOG
    # As plain text, lines 1 and 2 are one sentence of 12 tokens.
    as_text = _run("tag", str(model), str(source), "--max-sentence-tokens", "8")
    assert as_text.exit_code == 1
    assert "--input-format lines (a document per line) or sentence-lines" in as_text.stderr


def _lines_with_starts(text: str) -> list[tuple[str, int]]:
    out, start = [], 0
    for line in text.split("\n"):
        out.append((line, start))
        start += len(line) + 1
    return out


def test_tokenize_points_to_the_line_inputs_for_a_long_sentence(
    model: Path, tmp_path: Path
) -> None:
    short = tmp_path / "short.tagger"
    settings = TokenizerSettings(max_sentence_tokens=20)
    Tagger.load(model).save(short, {"tokenizer": settings.to_dict()})
    source = tmp_path / "app.log"
    source.write_text("".join(f"INFO unit {n} ok\n" for n in range(30)))
    as_text = _run("tokenize", str(source), "--model", str(short))
    assert as_text.exit_code == 0
    (note,) = as_text.stderr.splitlines()  # five cut sentences, counted in one note
    assert note.startswith(
        f"note: 5 sentences were cut at max_sentence_tokens=20 tokens (first: {source}:1)"
    )
    assert "--input-format lines (a document per line) or sentence-lines" in note
    as_lines = _run("tokenize", str(source), "--model", str(short), "--input-format", "lines")
    assert as_lines.exit_code == 0 and as_lines.stderr == ""


# ---------------------------------------------------------------------------------------------
# JSON records


def test_bad_json_records_are_skipped_and_the_output_stays_json(
    model: Path, tmp_path: Path
) -> None:
    source = tmp_path / "in.jsonl"
    deep = '{"text": "T-3", "a": ' + "[" * 50_000 + "]" * 50_000 + "}"
    source.write_text(
        "\n".join([json.dumps({"id": "a", "text": GOOD}), deep, '{"id": NaN, "text": "T-9"}',
                   '{"id": "b", "text": "T-3", "n": -Infinity}', json.dumps({"text": GOOD})])
        + "\n"
    )  # fmt: skip
    result = _run("tag", str(model), str(source), "--on-error", "skip")
    assert result.exit_code == 0, result.stderr
    assert [r["id"] for r in _strict_records(result.stdout)] == ["a", f"{source}:5"]
    assert [entry.split(": ")[0] for entry in _summary_lines(result.stderr)[1:]] == [
        f"  skipped {source}:{n}" for n in (2, 3, 4)
    ]
    stopped = _run("tag", str(model), str(source), "--on-error", "stop")
    assert stopped.exit_code == 1 and f"{source}:2: the record nests" in stopped.stderr
    shown = _run("tokenize", str(source))
    assert shown.exit_code == 1 and f"{source}:2: the record nests" in shown.stderr


def test_a_json_array_file_and_paths_that_are_not_files(model: Path, tmp_path: Path) -> None:
    source = tmp_path / "reports.json"
    source.write_text(json.dumps([{"text": GOOD}], indent=2))
    result = _run("tag", str(model), str(source), "--on-error", "skip")
    assert "holds a JSON array; JSON Lines is expected" in result.stderr
    folder = tmp_path / "reports"
    folder.mkdir()
    for command in (["tag", str(model)], ["tokenize"]):
        as_folder = _run(*command, str(folder))
        assert as_folder.exit_code == 2
        assert "a folder, not a file; name the files in it" in as_folder.stderr
        as_glob = _run(*command, str(tmp_path / "*.txt"))
        assert as_glob.exit_code == 2
        assert "holds a wildcard that no shell expanded" in as_glob.stderr
