"""The column layout given once: train takes the column options, the model keeps its layout and
evaluate reads gold files with it unless the options are given again; check says which column
holds the tags when the label column does not; --encoding reads legacy files."""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.config import config_from_dict, load_config
from tagger.data.check import check_files
from tagger.data.corpus import ColumnFormat, read_sentences
from tagger.data.io import decoded_lines
from tagger.errors import ConfigError, DataError, ModelFileError, NotDecodableError
from tagger.network.modelfile import load_model_file
from tagger.reports.check import format_check

runner = CliRunner()

# (token, label) rows; written label first below, and in latin-1 for the encoding tests.
ROWS = [
    [("Crew", "O"), ("swapped", "O"), ("pitch", "B-COMP"), ("bearing", "I-COMP"), ("on", "O"),
     ("T-14", "B-ASSET")],
    [("Oil", "B-DEF"), ("leak", "I-DEF"), ("at", "O"), ("45°", "B-READ")],
]  # fmt: skip


def _text(rows: list[list[tuple[str, ...]]]) -> str:
    return "".join("".join("\t".join(row) + "\n" for row in sentence) + "\n" for sentence in rows)


def _label_first() -> str:
    return _text([[(label, token) for token, label in sentence] for sentence in ROWS])


def _words(text: str) -> str:
    """Text without box drawing and line breaks, its words one space apart."""
    return " ".join(re.sub(r"[\u2500-\u257f]", " ", text).split())


def _write(path: Path, text: str, encoding: str = "utf-8") -> Path:
    path.write_bytes(text.encode(encoding))
    return path


TINY_MODEL = [
    "--set", "model.hidden_size=8", "--set", "model.layers=1", "--set", "model.word_dim=8",
    "--set", "model.char_features=8", "--set", "train.epochs=2",
]  # fmt: skip


@pytest.fixture(scope="module")
def label_first_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, str]:
    """A model trained through the command line on a label-first latin-1 file, given the column
    options and the encoding once; the file; the command's stderr."""
    folder = tmp_path_factory.mktemp("layout")
    gold = _write(folder / "gold.txt", _label_first() * 3, "latin-1")
    out = folder / "run"
    result = runner.invoke(
        app,
        [
            "train", "--train", str(gold), "--dev", str(gold), "--out", str(out),
            "--token-column", "1", "--label-column", "0", "--encoding", "latin-1",
            "--threads", "1", *TINY_MODEL,
        ],
    )  # fmt: skip
    assert result.exit_code == 0, result.stderr
    return out, gold, result.stderr


# --- train takes the options; the model keeps the layout -----------------------------------------


def test_train_reads_the_options_into_its_config(label_first_run: tuple[Path, Path, str]) -> None:
    out, _, _ = label_first_run
    config = load_config(out / "resolved-config.toml")
    assert (config.data.token_column, config.data.label_column) == (1, 0)
    assert (config.data.encoding, config.train.threads) == ("latin-1", 1)


def test_the_header_comes_before_the_first_epoch(label_first_run: tuple[Path, Path, str]) -> None:
    _, gold, stderr = label_first_run
    assert stderr.index("Training a tagger") < stderr.index("epoch   1")
    # Read with the options given, the file holds 6 sentences of 30 tokens and 12 spans; 45°
    # decoded from latin-1 is one of the READ spans.
    assert f"train        {gold}: 6 sentences, 30 tokens, 12 spans" in stderr
    assert f"dev          {gold}: 6 sentences, 30 tokens, 12 spans" in stderr
    assert "READ 3" in stderr
    assert f"warning: dev ({gold}) holds only 12 spans" in stderr


def test_the_model_keeps_its_column_layout(label_first_run: tuple[Path, Path, str]) -> None:
    out, _, _ = label_first_run
    _, meta = load_model_file(out / "model.tagger")
    assert meta["column_layout"] == {"token_column": 1, "label_column": 0, "delimiter": "auto"}
    layout = Tagger.load(out / "model.tagger").column_layout
    assert layout == ColumnFormat(token_column=1, label_column=0)


def test_a_model_without_a_stored_layout_or_with_a_broken_one(
    label_first_run: tuple[Path, Path, str],
) -> None:
    tagger = Tagger.load(label_first_run[0] / "model.tagger")
    del tagger.meta["column_layout"]
    assert tagger.column_layout is None
    tagger.meta["column_layout"] = {"token_column": "one", "label_column": 0, "delimiter": "auto"}
    with pytest.raises(ModelFileError, match="column layout"):
        tagger.column_layout  # noqa: B018 - the property is what is tested


def test_evaluate_reads_gold_files_in_the_stored_layout(
    label_first_run: tuple[Path, Path, str],
) -> None:
    out, gold, _ = label_first_run
    model = str(out / "model.tagger")
    stored = runner.invoke(app, ["evaluate", model, str(gold), "--encoding", "latin-1", "--json"])
    assert stored.exit_code == 0, stored.stderr
    assert "token column 1, label column 0" in stored.stderr
    given = runner.invoke(
        app,
        ["evaluate", model, str(gold), "--encoding", "latin-1", "--json",
         "--token-column", "1", "--label-column", "0"],
    )  # fmt: skip
    assert given.exit_code == 0, given.stderr
    # nothing taken from the model, nothing to say but the caution every evaluation ends with
    assert "gold files read as" not in given.stderr
    assert given.stderr.strip().splitlines()[-1].startswith("caution:")
    assert json.loads(stored.stdout)["overall"] == json.loads(given.stdout)["overall"]
    assert json.loads(stored.stdout)["overall"]["micro"]["gold"] == 12


def test_column_options_given_to_evaluate_win(label_first_run: tuple[Path, Path, str]) -> None:
    out, gold, _ = label_first_run
    model = str(out / "model.tagger")
    # The default layout given explicitly reads the words as labels.
    wrong = runner.invoke(
        app,
        ["evaluate", model, str(gold), "--encoding", "latin-1",
         "--token-column", "0", "--label-column", "-1"],
    )  # fmt: skip
    assert wrong.exit_code == 1
    assert "neither O nor PREFIX-TYPE" in wrong.stderr
    # One option given, the other from the model.
    half = runner.invoke(
        app, ["evaluate", model, str(gold), "--encoding", "latin-1", "--label-column", "0"]
    )
    assert half.exit_code == 0, half.stderr
    assert "token column 1" in half.stderr and "label column" not in half.stderr


def test_the_encoding_is_not_kept_in_the_model(label_first_run: tuple[Path, Path, str]) -> None:
    # A file in another encoding than the one named would read as wrong words, not fail: so the
    # encoding is named for each file read, and the error says how.
    out, gold, _ = label_first_run
    result = runner.invoke(app, ["evaluate", str(out / "model.tagger"), str(gold)])
    assert result.exit_code == 1
    assert f"{gold}:" in result.stderr and "not valid UTF-8" in result.stderr
    assert "name it with --encoding, e.g. --encoding latin-1" in result.stderr


def test_an_option_given_to_train_wins_over_set(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", _label_first() * 2)
    result = runner.invoke(
        app,
        ["train", "--train", str(gold), "--dev", str(gold), "--out", str(tmp_path / "run"),
         "--set", "data.token_column=0", "--set", "train.threads=2",
         "--token-column", "1", "--label-column", "0", "--threads", "1",
         *TINY_MODEL, "--set", "train.epochs=1"],
    )  # fmt: skip
    assert result.exit_code == 0, result.stderr
    config = load_config(tmp_path / "run" / "resolved-config.toml")
    assert (config.data.token_column, config.train.threads) == (1, 1)


@pytest.mark.parametrize(
    ("args", "shown"),
    [
        (["--delimiter", "comma"], "'comma' is not one of 'auto', 'tab', 'space'"),
        (["--encoding", "no-such-codec"], "unknown encoding"),
        (["--encoding", "utf-16"], "does not write ASCII as ASCII"),
        (["--threads", "-1"], "--threads"),
    ],
)
def test_train_refuses_bad_option_values_as_usage_errors(
    tmp_path: Path, args: list[str], shown: str
) -> None:
    gold = _write(tmp_path / "gold.txt", _text(ROWS))
    result = runner.invoke(
        app, ["train", "--train", str(gold), "--out", str(tmp_path / "r"), *args]
    )
    assert result.exit_code == 2
    assert shown in _words(result.stderr)
    assert not (tmp_path / "r").exists()


# --- --encoding ----------------------------------------------------------------------------------


def test_train_without_the_encoding_stops_at_the_first_bad_line_with_a_hint(
    tmp_path: Path,
) -> None:
    gold = _write(tmp_path / "gold.txt", _text(ROWS), "latin-1")
    result = runner.invoke(app, ["train", "--train", str(gold), "--out", str(tmp_path / "r")])
    assert result.exit_code == 1
    # Line 11 holds 45° (bytes 34 35 b0), the first byte that is not UTF-8.
    assert f"{gold}:11: bytes b'\\xb0'" in result.stderr
    assert "--encoding latin-1" in result.stderr


def test_check_convert_and_score_read_a_latin1_file(tmp_path: Path) -> None:
    gold = _write(tmp_path / "gold.txt", _text(ROWS), "latin-1")
    refused = runner.invoke(app, ["check", str(gold)])
    assert refused.exit_code == 1 and "--encoding" in refused.stderr
    checked = runner.invoke(app, ["check", str(gold), "--encoding", "latin-1", "--json"])
    assert checked.exit_code == 0, checked.stderr
    assert json.loads(checked.stdout)["files"][0]["span_types"]["READ"] == 1
    converted = tmp_path / "bioes.txt"
    result = runner.invoke(
        app, ["convert", str(gold), str(converted), "--to", "BIOES", "--encoding", "latin-1"]
    )
    assert result.exit_code == 0, result.stderr
    assert "45°\tS-READ\n" in converted.read_text(encoding="utf-8")  # written as UTF-8
    scored = runner.invoke(app, ["score", str(gold), str(gold), "--encoding", "latin-1", "--json"])
    assert scored.exit_code == 0, scored.stderr
    assert json.loads(scored.stdout)["micro"]["f1"] == 1.0


def test_a_lexicon_that_does_not_decode_gets_no_encoding_hint(tmp_path: Path) -> None:
    # --encoding names the column files' encoding only: pointing at it for a lexicon would mislead.
    gold = _write(tmp_path / "gold.txt", _text(ROWS))
    lexicon = _write(tmp_path / "lexicon.txt", "45°\tREAD\n", "latin-1")
    result = runner.invoke(app, ["check", str(gold), "--lexicon", str(lexicon)])
    assert result.exit_code == 1
    assert f"{lexicon}:1:" in result.stderr and "--encoding" not in result.stderr


def test_the_reading_layer_decodes_in_the_named_encoding() -> None:
    data = b"ok\n45\xb0\n\x81\n"
    lines = decoded_lines(io.BytesIO(data), "in.txt", "latin-1")
    assert list(lines) == [(1, "ok"), (2, "45°"), (3, "\x81")]
    cp1252 = decoded_lines(io.BytesIO(data), "in.txt", "cp1252")
    assert next(cp1252) == (1, "ok") and next(cp1252) == (2, "45°")
    with pytest.raises(NotDecodableError, match=r"in\.txt:3: bytes b'\\x81' .* not valid cp1252"):
        next(cp1252)  # 0x81 is one of the five bytes cp1252 leaves undefined (from memory)


def test_column_format_and_config_refuse_encodings_the_reader_cannot_use(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="unknown encoding"):
        ColumnFormat(encoding="no-such-codec")
    with pytest.raises(ConfigError, match="data.encoding: .*ASCII as ASCII"):
        config_from_dict({"data": {"encoding": "utf-32"}})
    path = _write(tmp_path / "gold.txt", _text(ROWS), "cp1252")
    (_, second) = read_sentences(path, ColumnFormat(encoding="cp1252"))
    assert second.tokens[-1] == "45°"
    with pytest.raises(DataError, match="not valid UTF-8"):
        read_sentences(path)


# --- check says which column holds the tags ------------------------------------------------------


def test_check_names_the_tag_column_of_a_label_first_file(tmp_path: Path) -> None:
    path = _write(tmp_path / "label_first.txt", _label_first() * 20)
    (entry,) = check_files([path])["files"]
    assert entry["tag_column_hint"] == {
        "label_column": 1,
        "token_column": 0,
        "tag_columns": [0],
        "tokens_from": 1,
    }
    text = format_check(check_files([path]))
    assert "--label-column 0 --token-column 1" in text
    assert "'Crew' on line 1" in text
    # Short: the file's name, its size and the advice, none of the words listed as labels.
    shown = [line.split()[0] for line in text.splitlines() if line.startswith("  ")]
    assert "labels" not in shown and "spans" not in shown and "scheme" not in shown
    assert len(text.splitlines()) <= 8

    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 1
    assert "--label-column 0 --token-column 1" in result.stdout
    assert f"the label column of {path} holds no span tags" in result.stderr
    fixed = runner.invoke(app, ["check", str(path), "--label-column", "0", "--token-column", "1"])
    assert fixed.exit_code == 0, fixed.stderr
    assert "tag_column_hint" not in fixed.stdout and "spans" in fixed.stdout


def test_check_names_a_middle_tag_column_and_keeps_the_token_column(tmp_path: Path) -> None:
    rows = [[(token, label, "NN") for token, label in sentence] for sentence in ROWS]
    path = _write(tmp_path / "three.txt", _text(rows))
    (entry,) = check_files([path])["files"]
    assert entry["tag_column_hint"]["tag_columns"] == [1]
    assert entry["tag_column_hint"]["tokens_from"] is None
    text = format_check(check_files([path]))
    assert "read the file with --label-column 1 (" in text


def test_with_tags_in_the_token_column_of_three_the_token_column_is_asked_for(
    tmp_path: Path,
) -> None:
    rows = [[(label, token, "NN") for token, label in sentence] for sentence in ROWS]
    path = _write(tmp_path / "three.txt", _text(rows))
    (entry,) = check_files([path])["files"]
    assert entry["tag_column_hint"]["tag_columns"] == [0]
    assert entry["tag_column_hint"]["tokens_from"] is None  # column 1 or 2: it cannot be told
    text = _words(format_check(check_files([path])))
    assert "--label-column 0 and the column of the tokens with --token-column" in text


def test_no_hint_when_no_column_holds_span_tags(tmp_path: Path) -> None:
    # Part-of-speech labels: not span tags, and no other column is either; checked as before.
    path = _write(tmp_path / "pos.txt", "The\tDT\ncat\tNN\n\nsat\tVBD\n\n")
    (entry,) = check_files([path])["files"]
    assert "tag_column_hint" not in entry
    result = runner.invoke(app, ["check", str(path)])
    # Labels that are not span tags fail the gate (exit 3), not the column reading (exit 1).
    assert result.exit_code == 3, result.stderr
    assert "not span tags" in result.stdout
    assert runner.invoke(app, ["check", str(path), "--report-only"]).exit_code == 0


def test_a_column_of_o_alone_is_not_taken_for_a_tag_column(tmp_path: Path) -> None:
    path = _write(tmp_path / "o.txt", "O\tCrew\nO\tswapped\n\n")
    (entry,) = check_files([path])["files"]
    assert "tag_column_hint" not in entry


def test_files_read_with_the_wrong_label_column_are_not_compared(tmp_path: Path) -> None:
    train = _write(tmp_path / "train.txt", _label_first())
    dev = _write(tmp_path / "dev.txt", _text(ROWS))
    text = format_check(check_files([train, dev]))
    assert "not compared" in text
    assert "new labels" not in text
    # The dev file itself is read right, and reported in full.
    assert "READ=1" in text
