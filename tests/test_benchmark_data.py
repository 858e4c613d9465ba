"""The benchmark scripts name their own data files: the shipped configs name none."""

from __future__ import annotations

import importlib
from pathlib import Path
from types import SimpleNamespace

import pytest

from tagger.config import apply_overrides, load_config


@pytest.fixture(scope="module")
def benchmark(load_script):
    load_script("benchlib")  # puts scripts/ on the path
    # Imported by name, so that its dataclasses find their module in sys.modules.
    return importlib.import_module("benchmark")


@pytest.fixture(scope="module")
def bench_training(load_script):
    return load_script("bench_training")


def test_every_benchmark_corpus_run_names_its_train_and_dev_files(benchmark) -> None:
    full = SimpleNamespace(mode=benchmark.FULL)  # the whole files: no cutting into a scratch folder
    for corpus in (benchmark.DEMO, *benchmark.CORPUS_RUNS.values()):
        overrides, test = benchmark.Benchmark.files(full, corpus)
        config = apply_overrides(load_config(corpus.config), overrides)
        assert config.data.train == str(corpus.train), corpus.name
        assert config.data.dev == (str(corpus.dev) if corpus.dev else ""), corpus.name
        assert test == corpus.test
        if corpus is benchmark.DEMO:  # the one corpus in the repository
            assert Path(config.data.train).is_file() and Path(config.data.dev).is_file()


def test_the_corpora_that_had_a_time_budget_keep_it_in_the_full_benchmark(benchmark) -> None:
    # The budgets left the shipped configs; the full benchmark still bounds its long runs.
    for corpus in benchmark.CORPUS_RUNS.values():
        config = apply_overrides(load_config(corpus.config), list(corpus.full_overrides))
        assert config.train.max_minutes > 0, corpus.name


def test_every_accuracy_run_of_bench_training_names_its_data(bench_training) -> None:
    for name, (config_path, _) in bench_training.ACCURACY_RUNS.items():
        config = apply_overrides(load_config(config_path), bench_training.DATA_FILES[name])
        assert Path(config.data.train).name == "train.txt", name
        if name == "demo":
            assert Path(config.data.train).is_file() and Path(config.data.dev).is_file()
