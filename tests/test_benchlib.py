"""The benchmark records name files the same way on every machine (scripts/benchlib.py): relative
to the project folder, `../shared/...` for the corpora beside it, never an absolute path there."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture(scope="module")
def benchlib(load_script):
    return load_script("benchlib")


def test_a_path_inside_the_project_is_recorded_relative_to_it(benchlib) -> None:
    root = benchlib.ROOT
    assert benchlib.portable_path(root / "data" / "demo" / "test.txt") == "data/demo/test.txt"
    assert (
        benchlib.portable_path(str(root / "runs" / "a" / "model.tagger")) == "runs/a/model.tagger"
    )


def test_a_path_beside_the_project_is_recorded_from_its_parent(benchlib) -> None:
    shared = benchlib.ROOT.parent / "shared" / "corpora" / "bc5cdr" / "test.tsv"
    assert benchlib.portable_path(shared) == "../shared/corpora/bc5cdr/test.tsv"


def test_relative_paths_are_read_from_the_project_folder(benchlib) -> None:
    assert benchlib.portable_path("configs/bc5cdr.toml") == "configs/bc5cdr.toml"
    # The configs name the corpora this way; the record names them the same.
    assert (
        benchlib.portable_path("../shared/corpora/wnut17/emerging.dev.conll")
        == "../shared/corpora/wnut17/emerging.dev.conll"
    )


def test_a_path_elsewhere_is_left_as_it_is(benchlib) -> None:
    elsewhere = Path("/no-such-top-folder-for-tagger/scratch/tagging")
    assert benchlib.portable_path(elsewhere) == str(elsewhere)


def test_commands_have_their_absolute_paths_made_portable(benchlib) -> None:
    model = benchlib.ROOT / "runs" / "benchmark" / "full" / "demo-seed1" / "model.tagger"
    words = ["scripts/bench_tagging.py", str(model), "--speed-mb", "2", "--out", "/no-such/out"]
    assert benchlib.portable_command(words) == (
        "scripts/bench_tagging.py runs/benchmark/full/demo-seed1/model.tagger "
        "--speed-mb 2 --out /no-such/out"
    )
