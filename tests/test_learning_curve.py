"""Tests of the learning-curve command: which sentences each share trains on, the warnings for a
share lacking a type, tiny seeded training runs through the command line, in one process and in
two, and the refusals."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tagger.cli import app
from tagger.errors import ConfigError
from tagger.training.learning_curve import (
    SUMMARY_NAME,
    check_fractions,
    missing_types,
    plan_points,
)

runner = CliRunner()

# Ten sentences: COMP in most, ASSET in every other one, DEF in one only (the last).
SENTENCES = [
    "Crew\tO\nswapped\tO\npitch\tB-COMP\nbearing\tI-COMP\n\n",
    "Check\tO\nT-14\tB-ASSET\nrotor\tB-COMP\n\n",
] * 4 + ["Blade\tB-COMP\ncleaned\tO\n\n", "Oil\tB-DEF\nleak\tI-DEF\non\tO\nT-3\tB-ASSET\n\n"]


def test_each_seed_shuffles_once_and_larger_shares_hold_the_smaller() -> None:
    points = plan_points(50, [0.1, 0.4, 1.0], [1, 2])
    assert [(p.fraction, p.seed, len(p.indices)) for p in points] == [
        (0.1, 1, 5), (0.4, 1, 20), (1.0, 1, 50), (0.1, 2, 5), (0.4, 2, 20), (1.0, 2, 50),
    ]  # fmt: skip
    for a, b in ((0, 1), (1, 2), (3, 4), (4, 5)):
        assert set(points[a].indices) < set(points[b].indices)
    assert points[0].indices != points[3].indices  # another seed, another shuffle
    assert plan_points(50, [0.1, 0.4, 1.0], [1, 2]) == points  # seeded: the same every time
    assert len(plan_points(3, [0.01], [1])[0].indices) == 1  # never an empty share
    assert points[1].folder == "40pc-seed-1"


def test_missing_types_are_those_no_span_of_the_share_has() -> None:
    spans = [[("COMP", 0, 1)], [], [("ASSET", 2, 3), ("COMP", 0, 1)]]
    assert missing_types({"ASSET", "COMP", "DEF"}, spans) == ["DEF"]
    assert missing_types({"COMP"}, spans) == []


@pytest.mark.parametrize("shares", [[], [0.0], [1.5], [-0.2, 0.5]])
def test_shares_outside_zero_to_all_are_refused(shares: list[float]) -> None:
    with pytest.raises(ConfigError):
        check_fractions(shares)


def test_shares_are_sorted_and_repeats_dropped() -> None:
    assert check_fractions([1.0, 0.2, 0.2, 0.5]) == [0.2, 0.5, 1.0]


TINY = [
    "--set", "model.hidden_size=4", "--set", "model.word_dim=8", "--set", "model.char_dim=4",
    "--set", "model.char_features=4", "--set", "train.epochs=1", "--set", "train.threads=1",
]  # fmt: skip


def _curve(tmp_path: Path, *extra: str) -> tuple[int, str, str]:
    train = tmp_path / "train.txt"
    train.write_text("".join(SENTENCES), encoding="utf-8")
    dev = tmp_path / "dev.txt"
    dev.write_text("".join(SENTENCES[:4]) + SENTENCES[-1], encoding="utf-8")
    result = runner.invoke(
        app,
        ["learning-curve", "--train", str(train), "--dev", str(dev), *TINY, *extra],
    )
    return result.exit_code, result.stdout, result.stderr


@pytest.mark.slow
def test_a_tiny_curve_trains_a_model_a_share_scores_them_and_answers(tmp_path: Path) -> None:
    out = tmp_path / "curve"
    # train.seed 5: the shuffle leaves the one DEF sentence out of the 30 % and 60 % shares
    code, stdout, stderr = _curve(
        tmp_path, "--shares", "30,60,100", "--set", "train.seed=5", "--out", str(out), "--json",
        "--html", str(tmp_path / "curve.html"),
    )  # fmt: skip
    assert code == 0, stderr
    result = json.loads(stdout)
    assert json.loads((out / SUMMARY_NAME).read_text(encoding="utf-8")) == result
    assert [(p["fraction"], p["sentences"]) for p in result["points"]] == [
        (0.3, 3), (0.6, 6), (1.0, 10),
    ]  # fmt: skip
    for point in result["points"]:
        assert (Path(point["run_folder"]) / "model.tagger").is_file()
        assert point["f1"] == point["scores"]["micro"]["f1"]
        # the dev file's spans (1 + 2 + 1 + 2 + 2), every model scored on all of them
        assert point["scores"]["micro"]["gold"] == 8
    assert result["fit"] is not None and result["answer"].startswith("Doubling the annotation")
    # DEF is in the last sentence only: a share without it is trained all the same, and said
    # to lack it, by the same shuffle the plan makes
    seed = result["points"][0]["seed"]
    planned = plan_points(10, [0.3, 0.6, 1.0], [seed])
    expected = [
        f"{p.fraction:.0%} ({len(p.indices)} sentences, seed {seed}) holds no example of DEF"
        for p in planned
        if 9 not in p.indices
    ]
    assert len(expected) == 2
    assert [w.split(":")[0] for w in result["warnings"] if "DEF" in w] == expected
    assert "span F1" in stderr  # each model's score as it finishes
    page = (tmp_path / "curve.html").read_text(encoding="utf-8")
    assert result["answer"] in page and 'data-chart="learning-curve"' in page


@pytest.mark.slow
def test_two_processes_train_the_same_models_as_one(tmp_path: Path) -> None:
    one = _curve(tmp_path, "--shares", "50,100", "--out", str(tmp_path / "one"), "--json")
    two = _curve(
        tmp_path, "--shares", "50,100", "--jobs", "2", "--out", str(tmp_path / "two"), "--json"
    )
    assert one[0] == 0 and two[0] == 0, one[2] + two[2]
    scores = [[p["scores"] for p in json.loads(run[1])["points"]] for run in (one, two)]
    assert scores[0] == scores[1]
    # two sizes cannot fix a curve of three parameters: said, not guessed
    assert json.loads(one[1])["fit"] is None
    assert "No curve: it needs models trained on at least 3" in json.loads(one[1])["answer"]


def test_without_dev_or_a_file_to_score_on_the_command_says_what_to_give(tmp_path: Path) -> None:
    train = tmp_path / "train.txt"
    train.write_text("".join(SENTENCES), encoding="utf-8")
    result = runner.invoke(
        app, ["learning-curve", "--train", str(train), "--out", str(tmp_path / "o"), *TINY]
    )
    assert result.exit_code == 1
    assert "--score-on FILE or data.dev" in result.stderr and result.stderr.count("\n") == 1
    assert not (tmp_path / "o").exists()


def test_shares_that_are_not_numbers_are_a_usage_error(tmp_path: Path) -> None:
    code, _, stderr = _curve(tmp_path, "--shares", "10,lots", "--out", str(tmp_path / "o"))
    assert code == 2 and "expected numbers separated by commas" in stderr


def test_the_table_puts_each_seed_in_a_column_beside_the_curve() -> None:
    from tagger.reports.annotation import format_learning_curve

    def point(fraction: float, seed: int, sentences: int, f1: float) -> dict:
        return {"fraction": fraction, "seed": seed, "sentences": sentences, "f1": f1}

    result = {
        "training_file": "train.txt",
        "scored_file": "dev.txt",
        "training_sentences": 400,
        "points": [point(0.25, 1, 100, 0.5), point(0.25, 2, 100, 0.54), point(1.0, 1, 400, 0.7)],
        "fit": {"a": 0.9, "b": 4.0, "c": 0.5, "sse": 0.0},
        "answer": "Doubling the annotation from 400 to 800 sentences is expected to ...",
        "warnings": [
            "25% (100 sentences, seed 2) holds no example of DEF: its F1 on that type is 0"
        ],
    }
    lines = format_learning_curve(result).splitlines()
    assert lines[2].split() == ["share", "of", "train", "sentences", "F1", "%", "seed", "1",
                                "F1", "%", "seed", "2", "curve", "%"]  # fmt: skip
    # the curve at 100 sentences: 0.9 - 4 / 10 = 0.5; at 400: 0.9 - 4 / 20 = 0.7
    assert lines[4].split() == ["25%", "100", "50.00", "54.00", "50.00"]
    assert lines[5].split() == ["100%", "400", "70.00", "-", "70.00"]
    text = "\n".join(lines)
    assert "answer       Doubling the annotation" in text and "warning      25% (100" in text
