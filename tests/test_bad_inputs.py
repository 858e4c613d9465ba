"""Bad input to every command: one table, each row an input built here, the command run on it,
the exit code and a piece of the one line that explains it.

Whatever the input, the command ends with one line on stderr naming the file (no traceback, no
framed box), exit code 1 for a file that cannot be used, 2 for a wrong command line (a missing
file, a folder), 3 for `check` finding data unfit to train on; and it leaves no output behind.
"""

from __future__ import annotations

import json
import pickle
import random
from collections.abc import Callable
from pathlib import Path

import pytest
from model_files import tiny_tagger
from typer.testing import CliRunner

from tagger.apply.exporting import export_model
from tagger.cli import app

runner = CliRunner()

GOLD = "Anna\tB-PER\nmet\tO\nBob\tB-PER\nin\tO\nOslo\tB-LOC\n.\tO\n\n"
LONG_SENTENCE = 40_000  # tokens, far above every limit (data.max_sentence_tokens is 300)


def _binary() -> bytes:
    generator = random.Random(7)
    return bytes(generator.randrange(128, 256) for _ in range(4096))


# Each input by name: how its bytes are made (None: made by hand in `inputs`).
CONTENTS: dict[str, Callable[[], bytes] | None] = {
    "gold.txt": lambda: GOLD.encode(),
    "empty.txt": lambda: b"",
    "binary.txt": _binary,
    "latin1.txt": lambda: "Åsa\tB-PER\nmet\tO\n\n".encode("latin-1"),
    "latin1.text": lambda: "Åsa met Bob in Oslo.".encode("latin-1"),
    "array.json": lambda: json.dumps([{"text": "Anna met Bob."}]).encode(),
    "nested.jsonl": lambda: (
        '{"text": "Anna met Bob.", "extra": ' + "[" * 5000 + "]" * 5000 + "}\n"
    ).encode(),
    "b-dash.txt": lambda: GOLD.replace("Bob\tB-PER", "Bob\tB-").encode(),
    "x-foo.txt": lambda: GOLD.replace("Oslo\tB-LOC", "Oslo\tX-FOO").encode(),
    "columns.txt": lambda: GOLD.replace("met\tO", "met\tO\tVBD").encode(),
    "columns.conll": lambda: GOLD.replace("met\tO", "met\tO\tVBD").encode(),
    "one-column.txt": lambda: b"Anna\nmet\nBob\n\n",
    "long.txt": lambda: "".join(f"w{i}\tO\n" for i in range(LONG_SENTENCE)).encode(),
    "long.conll": lambda: "".join(f"w{i}\tO\n" for i in range(LONG_SENTENCE)).encode(),
    "long.text": lambda: " ".join(f"w{i}" for i in range(LONG_SENTENCE)).encode(),
    "two-documents.txt": lambda: f"-DOCSTART-\n\n{GOLD}-DOCSTART-\n\n{GOLD}".encode(),
    "pickle.tagger": lambda: pickle.dumps({"weights": [1.0, 2.0]}),
    "model.tagger": None,
    "truncated.tagger": None,
    "model.tagexport": None,
    "damaged.tagexport": None,
    "truncated.tagexport": None,
    "folder": None,
}


@pytest.fixture(scope="module")
def inputs(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("bad-inputs")
    for name, make in CONTENTS.items():
        if make is not None:
            (folder / name).write_bytes(make())
    tiny_tagger().save(folder / "model.tagger")
    whole = (folder / "model.tagger").read_bytes()
    (folder / "truncated.tagger").write_bytes(whole[: len(whole) // 2])
    export_model(folder / "model.tagger", folder / "model.tagexport")
    exported = bytearray((folder / "model.tagexport").read_bytes())
    (folder / "truncated.tagexport").write_bytes(exported[: len(exported) - 100])
    exported[-50] ^= 0x01  # one bit of the words graph
    (folder / "damaged.tagexport").write_bytes(exported)
    (folder / "folder").mkdir()
    return folder


TRAIN = ["train", "--set", "model.hidden_size=4", "--set", "train.epochs=1", "--out", "{out}"]

# (command with {file} names from CONTENTS, {missing} and {out}, exit code, message fragment,
# the file the message must name). Messages go to stderr; `check` also writes its report to
# stdout, so its rows ask for --json, and its verdict is the line on stderr.
ROWS: list[tuple[str, int, str, str]] = [
    # empty files
    ("check {empty.txt} --json", 3, "holds no sentences", "empty.txt"),
    ("score {gold.txt} {empty.txt}", 1, "ends here but", "empty.txt"),
    ("evaluate {model.tagger} {empty.txt}", 1, "the gold file holds no sentences", "empty.txt"),
    ("train --train {empty.txt} --dev {gold.txt}", 1, "holds no sentences", "empty.txt"),
    ("tag {model.tagger} {empty.txt} -o {out}", 0, "tagged 1 document", "tagged"),
    # a binary file, and text in another encoding
    ("check {binary.txt}", 1, ":1: bytes b'\\x", "binary.txt"),
    ("convert {binary.txt} {out} --to bioes", 1, "are not valid UTF-8", "binary.txt"),
    ("score {binary.txt} {gold.txt}", 1, "are not valid UTF-8", "binary.txt"),
    ("evaluate {model.tagger} {binary.txt}", 1, "are not valid UTF-8", "binary.txt"),
    ("train --train {binary.txt} --dev {gold.txt}", 1, "are not valid UTF-8", "binary.txt"),
    ("tag {model.tagger} {binary.txt} -o {out}", 1, "are not valid UTF-8", "binary.txt"),
    ("tokenize {binary.txt} -o {out}", 1, "are not valid UTF-8", "binary.txt"),
    ("check {latin1.txt}", 1, ":1: bytes b'\\xc5'", "latin1.txt"),
    ("convert {latin1.txt} {out} --to bioes", 1, "--encoding latin-1", "latin1.txt"),
    ("score {gold.txt} {latin1.txt}", 1, "--encoding latin-1", "latin1.txt"),
    ("evaluate {model.tagger} {latin1.txt}", 1, "--encoding latin-1", "latin1.txt"),
    ("train --train {latin1.txt} --dev {gold.txt}", 1, "--encoding latin-1", "latin1.txt"),
    ("tag {model.tagger} {latin1.text} -o {out}", 1, "not valid UTF-8", "latin1.text"),
    ("tokenize {latin1.text} -o {out}", 1, "not valid UTF-8", "latin1.text"),
    ("train --config {binary.txt}", 1, "not a TOML config file", "binary.txt"),
    # a folder, or a file that is not there
    ("check {folder}", 2, "FILES: file", "folder"),
    ("convert {folder} {out} --to bioes", 2, "is a directory", "folder"),
    ("score {gold.txt} {folder}", 2, "PREDICTED: file", "folder"),
    ("evaluate {model.tagger} {folder}", 2, "is a directory", "folder"),
    ("train --train {folder} --dev {gold.txt}", 2, "--train: file", "folder"),
    ("tag {model.tagger} {folder} -o {out}", 2, "a folder, not a file", "folder"),
    ("tokenize {folder} -o {out}", 2, "a folder, not a file", "folder"),
    ("tag {folder} {gold.txt} -o {out}", 2, "MODEL: file", "folder"),
    ("check {missing}", 2, "does not exist", "missing"),
    ("convert {missing} {out} --to bioes", 2, "does not exist", "missing"),
    ("score {missing} {gold.txt}", 2, "GOLD: file", "missing"),
    ("evaluate {missing} {gold.txt}", 2, "MODEL: file", "missing"),
    ("train --config {missing}", 2, "--config: file", "missing"),
    ("tag {model.tagger} {missing} -o {out}", 2, "does not exist", "missing"),
    ("tokenize {missing} -o {out}", 2, "does not exist", "missing"),
    ("tokenize {gold.txt} --model {missing}", 2, "--model: file", "missing"),
    # JSON that is not JSON Lines, or nested too deep
    ("tag {model.tagger} {array.json} -o {out}", 1, ":1: a JSON array; JSON Lines", "array.json"),
    ("tokenize {array.json} -o {out}", 1, ":1: a JSON array; JSON Lines", "array.json"),
    ("tag {model.tagger} {nested.jsonl} -o {out}", 1, ":1: the record nests", "nested.jsonl"),
    ("tokenize {nested.jsonl} -o {out}", 1, "deeper than 100 levels", "nested.jsonl"),
    # labels that are not span tags
    ("check {b-dash.txt} --json", 3, "labels that are not span tags", "b-dash.txt"),
    ("convert {b-dash.txt} {out} --to bioes", 1, ":3: tag 'B-' has no type", "b-dash.txt"),
    ("score {b-dash.txt} {gold.txt}", 1, ":3: tag 'B-' has no type", "b-dash.txt"),
    ("evaluate {model.tagger} {b-dash.txt}", 1, "tag 'B-' has no type", "b-dash.txt"),
    ("train --train {b-dash.txt} --dev {gold.txt}", 1, "tag 'B-' has no type", "b-dash.txt"),
    ("check {x-foo.txt} --json", 3, "labels that are not span tags", "x-foo.txt"),
    ("convert {x-foo.txt} {out} --to bioes", 1, ":5: tag 'X-FOO' is neither O", "x-foo.txt"),
    ("score {gold.txt} {x-foo.txt}", 1, "'X-FOO' is neither O nor", "x-foo.txt"),
    ("evaluate {model.tagger} {x-foo.txt}", 1, "'X-FOO' is neither O nor", "x-foo.txt"),
    ("train --train {gold.txt} --dev {x-foo.txt}", 1, "'X-FOO' is neither O nor", "x-foo.txt"),
    # lines with the wrong number of columns
    ("check {columns.txt}", 1, ":2: expected 2 columns (as on line 1)", "columns.txt"),
    ("convert {columns.txt} {out} --to bioes", 1, ":2: expected 2 columns", "columns.txt"),
    ("score {gold.txt} {columns.txt}", 1, ":2: expected 2 columns", "columns.txt"),
    ("evaluate {model.tagger} {columns.txt}", 1, ":2: expected 2 columns", "columns.txt"),
    ("train --train {columns.txt} --dev {gold.txt}", 1, ":2: expected 2 columns", "columns.txt"),
    ("tag {model.tagger} {columns.conll} -o {out}", 1, ":2: expected 2 columns", "columns.conll"),
    ("check {one-column.txt}", 1, ":1: token and label would both be", "one-column.txt"),
    ("train --train {one-column.txt}", 1, "holds a token and a label", "one-column.txt"),
    # a sentence of 40,000 tokens
    ("evaluate {model.tagger} {long.txt}", 1, "a sentence of 40,000 tokens", "long.txt"),
    ("train --train {long.txt} --dev {gold.txt}", 1, "of 40,000 tokens", "long.txt"),
    ("tag {model.tagger} {long.conll} -o {out}", 1, "a sentence of 40,000 tokens", "long.conll"),
    ("tag {model.tagger} {long.text} -o {out}", 1, "longer than max_sentence_tokens", "long.text"),
    # files that are not models, or not whole ones
    ("tag {pickle.tagger} {gold.txt} -o {out}", 1, "looks like a pickle", "pickle.tagger"),
    ("evaluate {pickle.tagger} {gold.txt}", 1, "which tagger never loads", "pickle.tagger"),
    ("check {gold.txt} --model {pickle.tagger}", 1, "not a tagger model file", "pickle.tagger"),
    ("tokenize {gold.txt} --model {pickle.tagger}", 1, "looks like a pickle", "pickle.tagger"),
    ("train --config {pickle.tagger}", 1, "not a TOML config file", "pickle.tagger"),
    ("tag {truncated.tagger} {gold.txt} -o {out}", 1, "is truncated", "truncated.tagger"),
    ("evaluate {truncated.tagger} {gold.txt}", 1, "is truncated", "truncated.tagger"),
    ("check {gold.txt} --model {truncated.tagger}", 1, "is truncated", "truncated.tagger"),
    ("tag {gold.txt} {gold.txt} -o {out}", 1, "not a tagger model file", "gold.txt"),
    ("train --config {model.tagger}", 1, "not a TOML config file", "model.tagger"),
    # exported models: the wrong kind of file, damaged, cut short
    ("export {missing} {out}", 2, "MODEL: file", "missing"),
    ("export {pickle.tagger} {out}", 1, "looks like a pickle", "pickle.tagger"),
    ("export {truncated.tagger} {out}", 1, "is truncated", "truncated.tagger"),
    ("tag {model.tagger} {gold.txt} -o {out} --backend onnx", 1, "not an export file",
     "model.tagger"),
    ("tag {gold.txt} {gold.txt} -o {out} --backend onnx", 1, "not a tagger export file",
     "gold.txt"),
    ("tag {damaged.tagexport} {gold.txt} -o {out} --backend onnx", 1,
     "export file is corrupted (header or graphs do not match", "damaged.tagexport"),
    ("tag {truncated.tagexport} {gold.txt} -o {out} --backend onnx", 1, "is truncated",
     "truncated.tagexport"),
    ("tag {model.tagexport} {gold.txt} -o {out}", 1, "an export file (from tagger export)",
     "model.tagexport"),
    ("evaluate {model.tagexport} {gold.txt}", 1, "not a model file", "model.tagexport"),
    # serving a model: refused before listening
    ("serve {missing} --port 0", 2, "MODEL: file", "missing"),
    ("serve {folder} --port 0", 2, "MODEL: file", "folder"),
    ("serve {pickle.tagger} --port 0", 1, "looks like a pickle", "pickle.tagger"),
    ("serve {truncated.tagger} --port 0", 1, "is truncated", "truncated.tagger"),
    ("serve {gold.txt} --port 0", 1, "not a tagger model file", "gold.txt"),
    # learning from unannotated text
    ("learn-vectors {empty.txt} -o {out}", 1, "no words to learn from", "empty.txt"),
    ("learn-vectors {binary.txt} -o {out}", 1, "UTF-8", "binary.txt"),
    ("learn-vectors {array.json} -o {out}", 1, "JSON Lines", "array.json"),
    ("learn-vectors {folder} -o {out}", 2, "folder", "folder"),
    ("learn-vectors {missing} -o {out}", 2, "does not exist", "missing"),
    ("learn-char-lm {empty.txt} -o {out}", 1, "no text to learn from", "empty.txt"),
    ("learn-char-lm {binary.txt} -o {out}", 1, "UTF-8", "binary.txt"),
    ("learn-char-lm {nested.jsonl} -o {out}", 1, "nested", "nested.jsonl"),
    # what to annotate next: a pool with nothing in it, or not readable
    ("pick {model.tagger} {empty.txt} -o {out}", 1, "the pool holds no sentences", "empty.txt"),
    ("pick {model.tagger} {latin1.text} -o {out}", 1, "not valid UTF-8", "latin1.text"),
    ("pick {model.tagger} {array.json} -o {out}", 1, ":1: a JSON array", "array.json"),
    ("pick {model.tagger} {long.text} -o {out}", 1, "longer than max_sentence_tokens", "long.text"),
    ("pick {model.tagger} {folder} -o {out}", 2, "a folder, not a file", "folder"),
    ("pick {model.tagger} {missing} -o {out}", 2, "does not exist", "missing"),
    ("pick {pickle.tagger} {gold.txt} -o {out}", 1, "looks like a pickle", "pickle.tagger"),
    # cross-validation: more folds than documents (or sentences), files that cannot be used
    ("cross-validate --train {two-documents.txt} --folds 3 --out {out}", 1,
     "3 folds need at least 3 documents", "two-documents.txt"),
    ("cross-validate --train {gold.txt} --folds 2 --out {out}", 1,
     "2 folds need at least 2 sentences", "gold.txt"),
    ("cross-validate --train {empty.txt} --out {out}", 1, "holds no sentences", "empty.txt"),
    ("cross-validate --train {binary.txt} --out {out}", 1, "are not valid UTF-8", "binary.txt"),
    ("cross-validate --train {b-dash.txt} --out {out}", 1, "tag 'B-' has no type", "b-dash.txt"),
    ("cross-validate --train {folder} --out {out}", 2, "--train: file", "folder"),
    # the learning curve: files with nothing to learn from, shares that are no shares
    ("learning-curve --train {empty.txt} --dev {gold.txt} --out {out}", 1, "holds no sentences",
     "empty.txt"),
    ("learning-curve --train {gold.txt} --dev {binary.txt} --out {out}", 1, "are not valid UTF-8",
     "binary.txt"),
    ("learning-curve --train {gold.txt} --dev {gold.txt} --score-on {empty.txt} --out {out}", 1,
     "holds no sentences", "empty.txt"),
    ("learning-curve --train {folder} --dev {gold.txt} --out {out}", 2, "--train: file", "folder"),
    # the evaluation page: an output that cannot be written, gold with nothing in it, and a
    # model moved out of its run folder (the page is written without the training curve)
    ("evaluate {model.tagger} {gold.txt} --html {folder}", 2, "is a directory", "folder"),
    ("evaluate {model.tagger} {gold.txt} --html {gold.txt}", 1,
     "which writing the output would replace", "gold.txt"),
    ("evaluate {model.tagger} {empty.txt} --html {out}", 1, "the gold file holds no sentences",
     "empty.txt"),
    ("evaluate {model.tagger} {gold.txt} --html {out}", 0, "No epochs.json beside the model",
     "model.tagger"),
]  # fmt: skip


def _arguments(row: str, folder: Path, out: Path) -> list[str]:
    names = {name: str(folder / name) for name in CONTENTS}
    names |= {"missing": str(folder / "missing.txt"), "out": str(out / "result")}
    words = row.split()
    if words[0] == "train":
        words = TRAIN + words[1:]
    return [names.get(word.strip("{}"), word) if word.startswith("{") else word for word in words]


@pytest.mark.parametrize(("row", "code", "fragment", "named"), ROWS, ids=[r[0] for r in ROWS])
def test_bad_input_is_one_line_naming_the_file(
    inputs: Path, tmp_path: Path, row: str, code: int, fragment: str, named: str
) -> None:
    result = runner.invoke(app, _arguments(row, inputs, tmp_path))
    assert result.exit_code == code, result.stderr
    assert "Traceback" not in result.stderr + result.stdout
    if code == 0:  # an empty text is a document with nothing in it, not an error
        assert fragment in result.stderr
        return
    (line,) = result.stderr.splitlines()  # one line, however long the file name
    assert fragment in line
    if named == "missing":
        assert "missing.txt" in line
    else:
        assert str(inputs / named) in line
    assert list(tmp_path.iterdir()) == []  # nothing written, nothing half-written
