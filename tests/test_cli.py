from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tagger.cli import app

runner = CliRunner()

GOLD = "Crew\tO\nswapped\tO\npitch\tB-COMP\nbearing\tI-COMP\non\tO\nT-14\tB-ASSET\n\nOil\tB-DEF\nleak\tI-DEF\n\n"


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def test_check_prints_json_for_machines(tmp_path: Path) -> None:
    result = runner.invoke(app, ["check", str(_write(tmp_path / "a.txt", GOLD)), "--json"])
    assert result.exit_code == 0, result.stderr
    json.loads(result.stdout)


def test_bad_line_exits_1_naming_file_and_line(tmp_path: Path) -> None:
    bad = _write(tmp_path / "bad.txt", "Crew\tO\nswapped\tO\textra\n\n")
    for command in (["check", str(bad)], ["score", str(bad), str(bad)]):
        result = runner.invoke(app, command)
        assert result.exit_code == 1
        assert f"{bad}:2" in result.stderr
        assert result.stderr.count("\n") == 1  # one clear line, no traceback


def test_usage_errors_exit_2(tmp_path: Path) -> None:
    assert runner.invoke(app, ["score", str(tmp_path / "absent.txt")]).exit_code == 2
    assert (
        runner.invoke(app, ["convert", str(_write(tmp_path / "a.txt", GOLD)), "b.txt"]).exit_code
        == 2
    )
    assert (
        runner.invoke(app, ["check", "--delimiter", "comma", str(tmp_path / "a.txt")]).exit_code
        == 2
    )


def test_convert_round_trip_keeps_the_file(tmp_path: Path) -> None:
    source = _write(tmp_path / "a.txt", GOLD)
    assert (
        runner.invoke(
            app, ["convert", str(source), str(tmp_path / "b.txt"), "--to", "BIOES"]
        ).exit_code
        == 0
    )
    assert "S-ASSET" in (tmp_path / "b.txt").read_text()
    assert (
        runner.invoke(
            app, ["convert", str(tmp_path / "b.txt"), str(tmp_path / "c.txt"), "--to", "IOB2"]
        ).exit_code
        == 0
    )
    assert (tmp_path / "c.txt").read_text() == GOLD


def test_failed_convert_leaves_no_output(tmp_path: Path) -> None:
    bad = _write(tmp_path / "bad.txt", GOLD + "x\tO\ty\n")
    result = runner.invoke(app, ["convert", str(bad), str(tmp_path / "out.txt"), "--to", "BIOES"])
    assert result.exit_code == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.txt"]


def test_score_of_a_file_against_itself(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    result = runner.invoke(app, ["score", str(gold), str(gold), "--json"])
    assert result.exit_code == 0
    report = json.loads(result.stdout)
    assert report["micro"]["f1"] == 1.0 and report["per_type"]["COMP"]["gold"] == 1


def test_score_names_both_lines_on_a_token_mismatch(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    pred = _write(tmp_path / "pred.txt", GOLD.replace("bearing", "bearings"))
    result = runner.invoke(app, ["score", str(gold), str(pred)])
    assert result.exit_code == 1
    assert f"{gold}:4" in result.stderr and f"{pred}:4" in result.stderr


@pytest.mark.slow
def test_train_evaluate_and_score_agree(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD * 3)
    out = tmp_path / "run"
    result = runner.invoke(
        app,
        [
            "train",
            "--train",
            str(gold),
            "--dev",
            str(gold),
            "--out",
            str(out),
            "--set",
            "model.hidden_size=16",
            "--set",
            "model.layers=1",
            "--set",
            "train.epochs=3",
            "--set",
            "train.threads=1",
        ],
    )
    assert result.exit_code == 0, result.stderr
    assert "best dev F1" in result.stderr and result.stdout == ""
    evaluated = runner.invoke(
        app,
        [
            "evaluate",
            str(out / "model.tagger"),
            str(gold),
            "--json",
            "--predictions",
            str(tmp_path / "pred.txt"),
        ],
    )
    assert evaluated.exit_code == 0, evaluated.stderr
    scored = runner.invoke(app, ["score", str(gold), str(tmp_path / "pred.txt"), "--json"])
    assert json.loads(scored.stdout)["micro"] == json.loads(evaluated.stdout)["overall"]["micro"]


def test_unknown_config_key_on_the_command_line(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    result = runner.invoke(
        app,
        ["train", "--train", str(gold), "--set", "model.cels=gru", "--out", str(tmp_path / "r")],
    )
    assert result.exit_code == 1
    assert "unknown key model.cels" in result.stderr
