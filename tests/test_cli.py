from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from tagger.cli import app
from tagger.version import package_version

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


@pytest.fixture(scope="module")
def trained(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """A tiny model trained once through the command line, and its gold file."""
    folder = tmp_path_factory.mktemp("cli")
    gold = _write(folder / "gold.txt", GOLD * 3)
    out = folder / "run"
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
    return out / "model.tagger", gold


@pytest.mark.slow
def test_train_evaluate_and_score_agree(trained: tuple[Path, Path], tmp_path: Path) -> None:
    model, gold = trained
    evaluated = runner.invoke(
        app,
        [
            "evaluate",
            str(model),
            str(gold),
            "--json",
            "--predictions",
            str(tmp_path / "pred.txt"),
        ],
    )
    assert evaluated.exit_code == 0, evaluated.stderr
    scored = runner.invoke(app, ["score", str(gold), str(tmp_path / "pred.txt"), "--json"])
    assert json.loads(scored.stdout)["micro"] == json.loads(evaluated.stdout)["overall"]["micro"]


@pytest.mark.slow
def test_evaluate_reads_gold_from_stdin(trained: tuple[Path, Path]) -> None:
    model, gold = trained
    from_file = runner.invoke(app, ["evaluate", str(model), str(gold), "--json"])
    from_stdin = runner.invoke(
        app, ["evaluate", str(model), "-", "--json"], input=gold.read_text(encoding="utf-8")
    )
    assert from_stdin.exit_code == 0, from_stdin.stderr
    by_file, by_stdin = json.loads(from_file.stdout), json.loads(from_stdin.stdout)
    assert by_stdin["files"][0]["file"] == "-"
    assert by_stdin["overall"]["micro"] == by_file["overall"]["micro"]
    assert by_stdin["overall"]["sentences"] == 6
    text = runner.invoke(app, ["evaluate", str(model), "-"], input=GOLD)
    assert text.exit_code == 0 and text.stdout.startswith("== - (2 sentences)\nSpan scores: F1")
    twice = runner.invoke(app, ["evaluate", str(model), "-", "-"], input=GOLD)
    assert twice.exit_code == 2 and "only once" in twice.stderr


def test_unknown_config_key_on_the_command_line(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    result = runner.invoke(
        app,
        ["train", "--train", str(gold), "--set", "model.cels=gru", "--out", str(tmp_path / "r")],
    )
    assert result.exit_code == 1
    assert "unknown key model.cels" in result.stderr


# --- standard input --------------------------------------------------------------------------------


def test_score_reads_either_file_from_stdin(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    pred = _write(tmp_path / "pred.txt", GOLD.replace("B-ASSET", "O"))
    from_files = json.loads(runner.invoke(app, ["score", str(gold), str(pred), "--json"]).stdout)
    for args, text in ((["-", str(pred)], GOLD), ([str(gold), "-"], pred.read_text())):
        result = runner.invoke(app, ["score", *args, "--json"], input=text)
        assert result.exit_code == 0, result.stderr
        report = json.loads(result.stdout)
        assert report["micro"] == from_files["micro"] and report["micro"]["gold"] == 3
        assert "-" in (report["gold"], report["predicted"])
    table = runner.invoke(app, ["score", "-", str(pred)], input=GOLD)
    # Hand-worked: 3 gold spans, 2 tagged, both right: F1 = 2 * 2 / (3 + 2) = 80 %.
    assert table.exit_code == 0 and table.stdout.startswith("Span scores: F1 80.00 % over 3 gold")


def test_stdin_mismatch_is_located_in_stdin(tmp_path: Path) -> None:
    pred = _write(tmp_path / "pred.txt", GOLD.replace("bearing", "bearings"))
    result = runner.invoke(app, ["score", "-", str(pred)], input=GOLD)
    assert result.exit_code == 1
    assert "<stdin>:4:" in result.stderr and f"{pred}:4" in result.stderr


def test_check_and_convert_read_stdin(tmp_path: Path) -> None:
    checked = runner.invoke(app, ["check", "-", "--json"], input=GOLD)
    assert checked.exit_code == 0, checked.stderr
    (entry,) = json.loads(checked.stdout)["files"]
    assert (entry["file"], entry["sentences"], entry["tokens"]) == ("-", 2, 8)
    converted = runner.invoke(app, ["convert", "-", "-", "--to", "BIOES"], input=GOLD)
    assert converted.exit_code == 0, converted.stderr
    assert "S-ASSET" in converted.stdout and "E-COMP" in converted.stdout
    assert "converted 2 sentences from IOB2 to BIOES" in converted.stderr


def test_check_reads_a_lexicon_from_stdin(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    result = runner.invoke(
        app, ["check", str(gold), "--lexicon", "-", "--json"], input="pitch bearing\tCOMP\n"
    )
    assert result.exit_code == 0, result.stderr
    (coverage,) = json.loads(result.stdout)["files"][0]["lexicon_coverage"]
    assert (coverage["lexicon"], coverage["exact"], coverage["spans"]) == ("stdin", 1, 3)


@pytest.mark.parametrize(
    ("args", "second"),
    [
        (["score", "-", "-"], "'predicted'"),
        (["check", "-", "-"], "'files'"),
        (["check", "-", "--lexicon", "-"], "'files'"),
    ],
)
def test_stdin_can_be_named_only_once(args: list[str], second: str) -> None:
    result = runner.invoke(app, args, input=GOLD)
    assert result.exit_code == 2
    assert second in result.stderr and "only once" in result.stderr


@pytest.mark.parametrize(
    ("command", "argument"),
    [
        (["score", "{}", "{gold}"], "'gold'"),
        (["score", "{gold}", "{}"], "'predicted'"),
        (["check", "{gold}", "{}"], "'files'"),
        (["check", "{gold}", "--lexicon", "{}"], "'--lexicon'"),
        (["convert", "{}", "out.txt", "--to", "IOB2"], "'source'"),
    ],
)
@pytest.mark.parametrize("kind", ["missing", "folder"])
def test_a_missing_file_or_a_folder_is_a_usage_error_naming_the_argument(
    tmp_path: Path, command: list[str], argument: str, kind: str
) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    bad = tmp_path / "absent.txt" if kind == "missing" else tmp_path
    args = [part.format(str(bad), gold=str(gold)) for part in command]
    result = runner.invoke(app, args)
    assert result.exit_code == 2
    reason = "does not exist" if kind == "missing" else "is a directory"
    shown = _words(result.stderr)
    assert argument in shown and reason in shown


def test_evaluate_refuses_a_missing_gold_file_before_loading_the_model(tmp_path: Path) -> None:
    model = _write(tmp_path / "m.tagger", "not a model")
    result = runner.invoke(app, ["evaluate", str(model), str(tmp_path / "absent.txt")])
    assert result.exit_code == 2
    assert "'files'" in result.stderr and "does not exist" in result.stderr


# --- version and help ----------------------------------------------------------------------------


def test_version_comes_from_the_package_metadata() -> None:
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0
    assert result.stdout == f"tagger {package_version()}\n"
    # The same for any command after it: --version acts first.
    assert runner.invoke(app, ["--version", "score"]).stdout == result.stdout


def _words(text: str) -> str:
    """Help text without its box drawing, on one line."""
    return " ".join(re.sub(r"[\u2500-\u257f]", " ", text).split())


def test_every_positional_argument_has_a_description_in_help() -> None:
    group = typer.main.get_command(app)
    commands = group.commands
    assert {"check", "convert", "score", "train", "evaluate", "tag", "tokenize"} <= set(commands)
    described = []
    for name, command in commands.items():
        shown = _words(runner.invoke(app, [name, "--help"], env={"COLUMNS": "100"}).stdout)
        for param in command.params:
            if param.param_type_name != "argument":
                continue
            text = _words(param.help or "")
            assert text, f"{name} {param.name}: no help text"
            assert re.search(rf"\b{param.name}\b", shown), f"{name} help lacks {param.name}"
            assert text in shown, f"{name} help lacks the description of {param.name}"
            described.append(f"{name} {param.name}")
    assert {"score gold", "score predicted", "convert source", "convert target"} <= set(described)
    assert {"evaluate model", "evaluate files", "check files", "tag model"} <= set(described)
