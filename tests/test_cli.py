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


@pytest.mark.slow
def test_evaluate_writes_the_page_with_the_runs_epochs(
    trained: tuple[Path, Path], tmp_path: Path
) -> None:
    model, gold = trained
    page = tmp_path / "page.html"
    result = runner.invoke(app, ["evaluate", str(model), str(gold), "--html", str(page), "--json"])
    assert result.exit_code == 0, result.stderr
    scores = json.loads(result.stdout)
    text = page.read_text(encoding="utf-8")
    # the page's table holds the figures the JSON holds, and the run's three epochs are drawn
    for type_, figures in scores["overall"]["per_type"].items():
        assert f'<tr><th>{type_}</th><td class="n">{figures["precision"]:.3f}</td>' in text
    training = text.split('data-chart="training"')[1].split("<figcaption>")[0]
    assert training.count("<circle") == 3  # dev F1 after each epoch, the legend aside
    assert len(scores["worst"]) <= 12 and "No epochs.json" not in result.stderr
    # the model alone, away from its run folder: the page says there is no curve, and so does stderr
    alone = tmp_path / "alone" / "model.tagger"
    alone.parent.mkdir()
    alone.write_bytes(model.read_bytes())
    result = runner.invoke(app, ["evaluate", str(alone), str(gold), "--html", str(page)])
    assert result.exit_code == 0, result.stderr
    assert "note: No epochs.json beside the model" in result.stderr
    assert 'data-chart="training"' not in page.read_text(encoding="utf-8")


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
        (["score", "-", "-"], "PREDICTED: "),
        (["check", "-", "-"], "FILES: "),
        (["check", "-", "--lexicon", "-"], "FILES: "),
    ],
)
def test_stdin_can_be_named_only_once(args: list[str], second: str) -> None:
    result = runner.invoke(app, args, input=GOLD)
    assert result.exit_code == 2
    (line,) = result.stderr.splitlines()
    assert second in line and "only once" in line


@pytest.mark.parametrize(
    ("command", "argument"),
    [
        (["score", "{}", "{gold}"], "GOLD: "),
        (["score", "{gold}", "{}"], "PREDICTED: "),
        (["check", "{gold}", "{}"], "FILES: "),
        (["check", "{gold}", "--lexicon", "{}"], "--lexicon: "),
        (["convert", "{}", "out.txt", "--to", "IOB2"], "SOURCE: "),
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
    (line,) = result.stderr.splitlines()  # one line, the long file name never cut in two
    assert f"{args[0]}: error: {argument}" in line and f"{bad}' {reason}" in line


def test_evaluate_refuses_a_missing_gold_file_before_loading_the_model(tmp_path: Path) -> None:
    model = _write(tmp_path / "m.tagger", "not a model")
    result = runner.invoke(app, ["evaluate", str(model), str(tmp_path / "absent.txt")])
    assert result.exit_code == 2
    assert "error: FILES: " in result.stderr and "does not exist" in result.stderr


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
            shown_name = param.name.upper()  # as the usage line and the errors name it
            assert re.search(rf"\b{shown_name}\b", shown), f"{name} help lacks {shown_name}"
            assert text in shown, f"{name} help lacks the description of {param.name}"
            described.append(f"{name} {param.name}")
    assert {"score gold", "score predicted", "convert source", "convert target"} <= set(described)
    assert {"evaluate model", "evaluate files", "check files", "tag model"} <= set(described)


# --- outputs: never an input, checked before work, one line when writing fails --------------------

TEXT = "Crew swapped the pitch bearing on T-14. Oil leak at T-3.\n"


def _output_commands(model: Path, gold: Path, text: Path) -> dict[str, tuple[list[str], Path]]:
    """Each command that writes a file: its arguments with OUT where the output goes, and the
    input it reads (besides the model)."""
    return {
        "convert": (["convert", str(gold), "OUT", "--to", "BIOES"], gold),
        "tag": (["tag", str(model), str(text), "--out", "OUT"], text),
        "tokenize": (["tokenize", str(text), "--out", "OUT"], text),
        "evaluate": (["evaluate", str(model), str(gold), "--predictions", "OUT"], gold),
    }


def _one_error_line(stderr: str) -> str:
    assert stderr.count("\n") == 1, stderr  # one line, no traceback
    assert stderr.startswith("tagger: error: "), stderr
    return stderr.strip()


@pytest.mark.slow
@pytest.mark.parametrize("command", ["convert", "tag", "tokenize", "evaluate"])
@pytest.mark.parametrize(
    "problem", ["the input", "the model", "no folder", "read-only", "disk full"]
)
def test_output_problems_are_one_line_and_exit_1(
    trained: tuple[Path, Path],
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    command: str,
    problem: str,
) -> None:
    import errno
    import os

    model, gold_source = trained
    gold = _write(tmp_path / "gold.txt", gold_source.read_text(encoding="utf-8"))
    text = _write(tmp_path / "notes.txt", TEXT)
    args, source = _output_commands(model, gold, text)[command]
    if problem == "the model" and command in ("convert", "tokenize"):
        pytest.skip(f"{command} reads no model")
    out = {
        "the input": source,
        "the model": model,
        "no folder": tmp_path / "nowhere" / "out.txt",
    }.get(problem, tmp_path / "out.txt")
    expected = {
        "the input": f"it is the input {source}, which writing the output would replace",
        "the model": f"it is the input {model}, which writing the output would replace",
        "no folder": f"the folder {tmp_path / 'nowhere'} does not exist",
        "read-only": f"no permission to write in the folder {tmp_path}",
        "disk full": os.strerror(errno.ENOSPC),
    }[problem]
    if problem == "read-only":  # as a folder without write permission answers, root or not
        monkeypatch.setattr(os, "access", lambda path, mode: not mode & os.W_OK)
    if problem == "disk full":

        def full(descriptor: int) -> None:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

        monkeypatch.setattr(os, "fsync", full)
    before = {p: p.read_bytes() for p in (gold, text, model)}
    result = runner.invoke(app, [str(out) if part == "OUT" else part for part in args])
    assert result.exit_code == 1, result.stderr
    line = _one_error_line(result.stderr)
    assert line == f"tagger: error: {out}: cannot write the file: {expected}" + (
        "; choose another output file" if problem in ("the input", "the model") else ""
    )
    assert {p: p.read_bytes() for p in before} == before
    assert not [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")]
    if problem in ("no folder", "read-only", "disk full"):
        assert not out.exists()


def test_convert_writes_into_a_fifo_and_leaves_it_a_fifo(tmp_path: Path) -> None:
    import os
    import stat

    gold = _write(tmp_path / "gold.txt", GOLD)
    pipe = tmp_path / "pipe"
    os.mkfifo(pipe)
    reader = os.open(pipe, os.O_RDONLY | os.O_NONBLOCK)
    try:
        result = runner.invoke(app, ["convert", str(gold), str(pipe), "--to", "BIOES"])
        assert result.exit_code == 0, result.stderr
        received = os.read(reader, 10_000).decode()
    finally:
        os.close(reader)
    assert "S-ASSET" in received and received.count("\n\n") == 2
    assert stat.S_ISFIFO(os.lstat(pipe).st_mode)


def test_convert_through_a_symlink_replaces_its_target(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    target = _write(tmp_path / "old.txt", "old\n")
    link = tmp_path / "link.txt"
    link.symlink_to("old.txt")
    result = runner.invoke(app, ["convert", str(gold), str(link), "--to", "BIOES"])
    assert result.exit_code == 0, result.stderr
    assert link.is_symlink() and "S-ASSET" in target.read_text()


def test_an_os_error_is_one_line_naming_the_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)

    def no_permission(*args: object, **kwargs: object) -> None:
        raise PermissionError(13, "Permission denied", str(tmp_path / "somewhere.txt"))

    monkeypatch.setattr("tagger.data.convert.convert_file", no_permission)
    result = runner.invoke(app, ["convert", str(gold), str(tmp_path / "o.txt"), "--to", "IOB2"])
    assert result.exit_code == 1
    assert _one_error_line(result.stderr) == (
        f"tagger: error: {tmp_path / 'somewhere.txt'}: Permission denied"
    )


# --- signals ---------------------------------------------------------------------------------------


def test_sigterm_while_writing_removes_the_partial_output_and_exits_143(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import os
    import signal

    import tagger.data.convert as converting

    gold = _write(tmp_path / "gold.txt", GOLD * 3)
    out = tmp_path / "out.txt"
    real = converting.convert_tags
    calls = []

    def terminated_midway(*args: object) -> object:
        calls.append(sorted(p.name for p in tmp_path.iterdir()))
        if len(calls) == 3:  # the output is open: its temporary file is there
            os.kill(os.getpid(), signal.SIGTERM)
        return real(*args)

    monkeypatch.setattr(converting, "convert_tags", terminated_midway)
    handler = signal.getsignal(signal.SIGTERM)
    result = runner.invoke(app, ["convert", str(gold), str(out), "--to", "BIOES"])
    assert any(name.endswith(".tmp") for name in calls[-1])  # it was there when the signal came
    assert result.exit_code == 143
    assert result.stderr == "tagger: terminated (SIGTERM); unfinished output files were removed\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["gold.txt"]
    assert signal.getsignal(signal.SIGTERM) == handler  # the command's handler is gone again


def test_ctrl_c_is_one_line_and_exits_130(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)

    def interrupted(*args: object, **kwargs: object) -> None:
        raise KeyboardInterrupt

    monkeypatch.setattr("tagger.scoring.files.score_files", interrupted)
    result = runner.invoke(app, ["score", str(gold), str(gold)])
    assert result.exit_code == 130
    assert result.stderr == "tagger: interrupted; unfinished output files were removed\n"


# --- train: run folders, values and files checked first -------------------------------------------


def _train_args(gold: Path, out: Path, *extra: str) -> list[str]:
    return [
        "train", "--train", str(gold), "--dev", str(gold), "--out", str(out),
        "--set", "model.hidden_size=8", "--set", "model.layers=1",
        "--set", "train.epochs=1", "--set", "train.threads=1", *extra,
    ]  # fmt: skip


def test_train_refuses_a_finished_run_unless_overwrite(
    trained: tuple[Path, Path], tmp_path: Path
) -> None:
    import shutil

    model, gold = trained
    run = tmp_path / "run"
    shutil.copytree(model.parent, run)
    before = (run / "model.tagger").read_bytes()
    refused = runner.invoke(app, _train_args(gold, run))
    assert refused.exit_code == 1
    assert _one_error_line(refused.stderr) == (
        f"tagger: error: {run} holds a finished run (model.tagger, resume-state.tagger, "
        "outcome.json): replace it with --overwrite, or train into another folder with --out"
    )
    assert (run / "model.tagger").read_bytes() == before
    replaced = runner.invoke(app, _train_args(gold, run, "--overwrite"))
    assert replaced.exit_code == 0, replaced.stderr
    assert (run / "model.tagger").read_bytes() != before
    assert len(json.loads((run / "epochs.json").read_text())) == 1
    assert not (run / ".lock").exists()
    both = runner.invoke(app, _train_args(gold, run, "--overwrite", "--resume"))
    assert both.exit_code == 2 and "give one of them" in _words(both.stderr)


@pytest.mark.parametrize(
    ("setting", "message"),
    [
        ("train.learning_rate=nan", "train.learning_rate must be a finite number; got nan"),
        ('model.lexicons=["{missing}"]', "{missing}: cannot open the lexicon: No such file"),
        ('model.pretrained_vectors="{missing}"', "{missing}: cannot open the word vectors file"),
    ],
)
def test_train_checks_values_and_named_files_before_making_the_folder(
    tmp_path: Path, setting: str, message: str
) -> None:
    gold = _write(tmp_path / "gold.txt", GOLD)
    missing = tmp_path / "missing.txt"
    run = tmp_path / "runs" / "new"
    result = runner.invoke(app, _train_args(gold, run, "--set", setting.format(missing=missing)))
    assert result.exit_code == 1
    assert message.format(missing=missing) in _one_error_line(result.stderr)
    assert not (tmp_path / "runs").exists()


COMMANDS = [
    "check",
    "convert",
    "score",
    "train",
    "evaluate",
    "export",
    "tag",
    "tokenize",
    "learn-vectors",
    "learn-char-lm",
    "serve",
    "pick",
    "cross-validate",
    "learning-curve",
]
PYTHON_TYPES = ("<bool>", "<list[", "<str>", "<int", "<float>", "<path>", "<file>", "{")


def test_help_lists_every_command() -> None:
    group = typer.main.get_command(app)
    assert sorted(group.commands) == sorted(COMMANDS)
    result = runner.invoke(app, ["--help"])
    assert result.exit_code == 0
    for python_type in PYTHON_TYPES:  # the app's own options (--version, --help) too
        assert python_type not in result.stdout, python_type


@pytest.mark.parametrize("command", COMMANDS)
def test_help_shows_placeholders_a_person_reads(command: str) -> None:
    # No Python types (<bool>, <list[Path]>, <str>, <int range>) and no {REQUIRED} braces.
    result = runner.invoke(app, [command, "--help"], terminal_width=120)
    assert result.exit_code == 0
    for python_type in PYTHON_TYPES:
        assert python_type not in result.stdout, python_type


@pytest.mark.parametrize("command", COMMANDS)
def test_help_ends_with_examples_each_on_one_line(command: str) -> None:
    # At the default width of 80 columns, so that each example can be copied whole.
    lines = [line.strip() for line in runner.invoke(app, [command, "--help"]).stdout.splitlines()]
    shown = lines[lines.index("Examples:") + 1 :]
    examples = shown[: shown.index("")] if "" in shown else shown
    assert 1 <= len(examples) <= 2
    for example in examples:
        assert example.startswith(f"tagger {command} "), example
        arguments = example.split(">")[0].split()[2:]  # what a shell would pass, before ">"
        options = {word for word in arguments if word.startswith("--")}
        # Every option an example uses is one the command has.
        help_text = runner.invoke(app, [command, "--help"], terminal_width=200).stdout
        assert all(option in help_text for option in options), options


def test_help_paragraphs_flow_without_the_source_line_breaks() -> None:
    # The docstrings are wrapped in the source (convert's after "every other column",
    # evaluate's after "unless the column"); wide help screens must not be.
    listed = runner.invoke(app, ["--help"], env={"COLUMNS": "200"}).stdout
    assert "keeping every other column (written as UTF-8)." in listed
    evaluate = runner.invoke(app, ["evaluate", "--help"], env={"COLUMNS": "200"}).stdout
    assert "unless the column options say otherwise." in evaluate
