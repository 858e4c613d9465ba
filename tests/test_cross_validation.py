"""Tests for tagger.training.cross_validation and the `cross-validate` command: one tiny model
per fold, each scored on the documents it did not train on, as `evaluate` scores them."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tagger.apply.evaluate import evaluate_files
from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.config import config_from_dict
from tagger.data.corpus import read_sentences
from tagger.training.cross_validation import SUMMARY_NAME, cross_validate

runner = CliRunner()

NAMES = ["Anna", "Bob", "Carl", "Dina", "Eva", "Finn"]
PLACES = ["Oslo", "Bergen", "Paris", "Rome", "Lima", "Kyiv"]
SMALL = ["--set", "model.hidden_size=4", "--set", "model.word_dim=4", "--set", "model.layers=1",
         "--set", "train.epochs=2", "--set", "train.threads=1"]  # fmt: skip


def _corpus(path: Path, documents: int) -> Path:
    """Documents of four sentences each, every sentence holding a PER and a LOC span."""
    lines = []
    for d in range(documents):
        lines.append(f"-DOCSTART- report-{d}\n\n")
        for s in range(4):
            name, place = NAMES[(d + s) % 6], PLACES[(d * 2 + s) % 6]
            lines.append(f"{name}\tB-PER\nwent\tO\nto\tO\n{place}\tB-LOC\n.\tO\n\n")
    path.write_text("".join(lines), encoding="utf-8")
    return path


def _config(train: Path) -> object:
    return config_from_dict(
        {
            "data": {"train": str(train)},
            "model": {"hidden_size": 4, "word_dim": 4, "char_dim": 3, "char_features": 4,
                      "layers": 1},
            "train": {"epochs": 2, "threads": 1, "seed": 5},
        }
    )  # fmt: skip


def test_each_fold_is_scored_on_the_documents_it_did_not_train_on(tmp_path: Path) -> None:
    train = _corpus(tmp_path / "train.txt", 6)
    result = cross_validate(_config(train), tmp_path / "cv", 3)
    sentences = read_sentences(train)
    assert result.folds.by_documents and result.folds.documents == 6
    assert sum(f["held_out"] for f in result.per_fold) == len(sentences) == 24
    for fold in result.per_fold:
        assert fold["trained_on"] + fold["held_out"] == 24
        # The held-out part scored again from a file, by `evaluate`: the same counts.
        _, held = result.folds.parts(fold["fold"] - 1)
        held_file = tmp_path / f"held-{fold['fold']}.txt"
        held_file.write_text(
            "".join("".join(f"{t}\t{lab}\n" for t, lab in zip(s.tokens, s.labels, strict=True))
                    + "\n" for s in (sentences[i] for i in held)),
            encoding="utf-8",
        )  # fmt: skip
        tagger = Tagger.load(Path(fold["run_folder"]) / "model.tagger")
        again = evaluate_files(tagger, [held_file], examples=0, resamples=0)["files"][0]
        assert again["micro"]["correct"] == fold["scores"]["micro"]["correct"]
        assert again["micro"]["gold"] == fold["scores"]["micro"]["gold"] == 2 * fold["held_out"]
    stored = json.loads((tmp_path / "cv" / SUMMARY_NAME).read_text())
    assert stored["summary"] == result.summary
    per_fold_f1 = [f["scores"]["micro"]["f1"] for f in result.per_fold]
    assert stored["summary"]["micro"]["f1_per_fold"] == per_fold_f1
    assert stored["summary"]["micro"]["mean"] == pytest.approx(sum(per_fold_f1) / 3)


def test_the_command_prints_a_table_per_type_and_refuses_to_replace_a_run(tmp_path: Path) -> None:
    train = _corpus(tmp_path / "train.txt", 4)
    out = tmp_path / "cv"
    arguments = ["cross-validate", "--train", str(train), "--folds", "2", "--out", str(out), *SMALL]
    result = runner.invoke(app, arguments)
    assert result.exit_code == 0, result.stderr
    lines = result.stdout.splitlines()
    assert "2-fold cross-validation" in lines[0] and "4 documents each kept whole" in lines[0]
    header = next(line for line in lines if "F1 mean %" in line).split()
    assert header[-4:] == ["fold", "2", "in", "gold"]
    rows = {line.split()[0]: line.split() for line in lines if line.strip()[:3] in ("PER", "LOC")}
    assert set(rows) == {"PER", "LOC"} and rows["PER"][-1] == "16"  # gold spans over all folds
    assert "fold 1 of 2" in result.stderr and "fold 2 of 2" in result.stderr
    again = runner.invoke(app, arguments)
    assert again.exit_code == 1
    assert "--overwrite" in again.stderr
    page = tmp_path / "folds.html"
    replaced = runner.invoke(app, [*arguments, "--overwrite", "--json", "--html", str(page)])
    assert replaced.exit_code == 0, replaced.stderr
    data = json.loads(replaced.stdout)
    assert data["folds"] == 2
    # the page's table holds what the JSON holds: each type's mean F1 and its gold spans
    text = page.read_text(encoding="utf-8")
    for type_, entry in data["summary"]["per_type"].items():
        assert f'<tr><th>{type_}</th><td class="n">{entry["mean"]:.3f}</td>' in text
        assert f'<td class="n">{entry["gold"]:,}</td></tr>' in text
    assert 'data-chart="folds"' in text and "http" not in text
