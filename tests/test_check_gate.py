"""Tests for `tagger check` as a gate in a pipeline: the exit code that ill-formed tags and leakage
give, the option that relaxes it, the last line that says why, and the tokenizer a model names."""

from __future__ import annotations

import json
import re
from pathlib import Path

import torch
from typer.testing import CliRunner

from tagger.cli import app
from tagger.cli.files import PROBLEMS_FOUND
from tagger.data.file_scan import LONG_SENTENCE
from tagger.network.modelfile import save_model_file
from tagger.text.tokenizer import TokenizerSettings

runner = CliRunner()

CLEAN = "Crew\tO\nswapped\tO\npitch\tB-COMP\nbearing\tI-COMP\n\nOil\tB-DEF\nleak\tI-DEF\n\n"
# Line 10: I-DEF after O, ill-formed in IOB2 (the scheme the other sentences fit).
ILL_FORMED = CLEAN + "no\tO\nleak\tI-DEF\n\n"
LONG = " ".join(f"w{i}" for i in range(LONG_SENTENCE))
SHORT = " ".join(f"s{i}" for i in range(LONG_SENTENCE - 1))


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def _column_file(path: Path, *texts: str) -> Path:
    """Sentences given as text, every token labelled O."""
    return _write(path, "".join("".join(f"{t}\tO\n" for t in s.split()) + "\n" for s in texts))


def _result_line(stdout: str) -> str:
    """The verdict at the end of the text report, on one line."""
    return " ".join(stdout.split("\n  result", 1)[1].split())


def test_clean_files_pass_with_exit_code_0(tmp_path: Path) -> None:
    result = runner.invoke(app, ["check", str(_write(tmp_path / "a.txt", CLEAN))])
    assert result.exit_code == 0, result.stderr
    assert _result_line(result.stdout) == "passed: no ill-formed tags (exit code 0)"


def test_ill_formed_tags_fail_and_the_last_line_says_why(tmp_path: Path) -> None:
    path = _write(tmp_path / "a.txt", ILL_FORMED)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == PROBLEMS_FOUND == 3
    assert _result_line(result.stdout) == (
        f"failed (exit code 3): 1 ill-formed transition in {path}"
    )
    assert "line 10: I-DEF follows O" in result.stdout


def test_report_only_reports_without_failing(tmp_path: Path) -> None:
    path = _write(tmp_path / "a.txt", ILL_FORMED)
    result = runner.invoke(app, ["check", str(path), "--report-only"])
    assert result.exit_code == 0
    assert _result_line(result.stdout) == (
        f"would fail, but --report-only is given (exit code 0): 1 ill-formed transition in {path}"
    )


def test_labels_that_are_not_span_tags_fail(tmp_path: Path) -> None:
    path = _write(tmp_path / "a.txt", CLEAN + "x\tB_DEF\n\n")
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 3
    assert "1 sentence of" in _result_line(result.stdout)
    assert "labels that are not span tags" in _result_line(result.stdout)


def test_a_long_sentence_shared_with_train_fails_a_short_one_does_not(tmp_path: Path) -> None:
    train = _column_file(tmp_path / "train.txt", LONG, SHORT, "other words here")
    short_only = _column_file(tmp_path / "dev.txt", SHORT, "new words")
    result = runner.invoke(app, ["check", str(train), str(short_only)])
    assert result.exit_code == 0, result.stdout
    assert "1 of 2 sentences also occur in train" in result.stdout
    assert _result_line(result.stdout).startswith(
        f"passed: no ill-formed tags, no dev/test sentence of {LONG_SENTENCE} tokens or more"
    )
    leaked = _column_file(tmp_path / "test.txt", "new words", LONG)
    result = runner.invoke(app, ["check", str(train), str(short_only), str(leaked)])
    assert result.exit_code == 3
    assert _result_line(result.stdout) == (
        f"failed (exit code 3): 1 sentence of {leaked} ({LONG_SENTENCE} tokens or more) also in "
        "the training file"
    )


def test_json_output_lists_the_problems_and_says_why_on_stderr(tmp_path: Path) -> None:
    path = _write(tmp_path / "a.txt", ILL_FORMED)
    result = runner.invoke(app, ["check", str(path), "--json"])
    assert result.exit_code == 3
    report = json.loads(result.stdout)
    assert report["problems"] == [{"file": str(path), "finding": "ill_formed", "count": 1}]
    assert report["tokenizer_settings"] == "its default settings"
    assert " ".join(result.stderr.split()).startswith("result failed (exit code 3)")


def test_the_tokenizer_of_a_model_is_the_one_compared(tmp_path: Path) -> None:
    # A model file holding only what check reads: the tokenizer settings in its metadata.
    model = tmp_path / "units.tagger"
    kept = TokenizerSettings(keep_number_units=True)
    save_model_file(model, {"unused": torch.zeros(1)}, {"tokenizer": kept.to_dict()})
    path = _write(tmp_path / "a.txt", "at\tO\n106.9°C\tB-READING\n\n")
    default = json.loads(runner.invoke(app, ["check", str(path), "--json"]).stdout)
    assert default["files"][0]["tokenizer_fit"]["split"]["count"] == 1
    result = runner.invoke(app, ["check", str(path), "--json", "--model", str(model)])
    assert result.exit_code == 0, result.stderr
    report = json.loads(result.stdout)
    assert report["files"][0]["tokenizer_fit"]["split"]["count"] == 0
    assert report["tokenizer_settings"] == f"the settings of {model}"
    text = runner.invoke(app, ["check", str(path), "--model", str(model)]).stdout
    assert re.search(r"all 2 annotated tokens come back whole from the tagging\s+tokenizer", text)


def test_help_says_what_the_exit_codes_mean() -> None:
    shown = " ".join(runner.invoke(app, ["check", "--help"], env={"COLUMNS": "200"}).stdout.split())
    assert "Exit code 3 when a file holds ill-formed tags" in shown
    assert f"shares a sentence of {LONG_SENTENCE} tokens or more with train" in shown
    assert "--report-only" in shown
