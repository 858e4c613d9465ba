"""The feature benchmark (scripts/bench_features.py): its variants' configs, the unseen-span
scores, the vectors it learns first and the record it writes."""

from __future__ import annotations

import subprocess
from pathlib import Path
from typing import Any

import pytest


@pytest.fixture(scope="module")
def bench(load_script):
    return load_script("bench_features")


@pytest.mark.parametrize(
    ("variant", "use", "lexicons"),
    [
        ("vectors", "both", 0),
        ("vectors-fixed", "fixed", 0),
        ("vectors-initialise", "initialise", 0),
        ("vectors-lexicon", "both", 1),
    ],
)
def test_vector_variants_name_the_learnt_file_and_their_use(
    bench, variant: str, use: str, lexicons: int
) -> None:
    config = bench.variant_config(variant, 1, 2.5)
    assert config.model.pretrained_vectors == str(bench.ROOT / bench.VECTORS)
    assert config.model.vectors_use == use
    assert len(config.model.lexicons) == lexicons
    assert config.train.max_minutes == 2.5 and config.train.threads == 1


def test_the_words_variant_reads_no_vectors_and_no_lexicon(bench) -> None:
    config = bench.variant_config("words", 1, 1)
    assert config.model.pretrained_vectors == "" and not config.model.lexicons
    assert config.data.train.endswith("data/demo/train.txt")


def test_unseen_scores_count_only_spans_train_lacks(bench) -> None:
    # Hand-worked: train knows ("C", "pitch bearing") only.
    tokens = [["pitch", "bearing", "and", "yaw", "brake"], ["oil", "leak"]]
    gold = [[("C", 0, 2), ("C", 3, 5)], [("D", 0, 2)]]
    predicted = [[("C", 0, 2), ("C", 4, 5)], [("D", 0, 2)]]
    scores = bench.unseen_scores(tokens, gold, predicted, {("C", "pitch bearing")})
    # Unseen gold: "yaw brake" (missed) and "oil leak" (found); unseen predicted: "brake"
    # (wrong) and "oil leak" (right).
    assert scores["gold_spans"] == 2 and scores["found"] == 1
    assert scores["predicted_spans"] == 2 and scores["correct"] == 1
    assert scores["recall"] == scores["precision"] == scores["f1"] == 0.5
    only_d = bench.unseen_scores(tokens, gold, predicted, {("C", "pitch bearing")}, ("D",))
    assert only_d["f1"] == 1.0 and only_d["gold_spans"] == 1


def test_learning_runs_learn_vectors_on_the_unannotated_reports(
    bench, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    calls: list[list[str]] = []

    def run(args: list[str], cwd: Path, check: bool) -> None:
        calls.append(args)
        (cwd / bench.VECTORS).write_bytes(b"x" * 10)

    monkeypatch.setattr(bench, "ROOT", tmp_path)
    monkeypatch.setattr(subprocess, "run", run)
    learnt = bench.learn_vectors(50, 7, reuse=True)  # nothing to reuse yet: it learns
    assert calls and calls[0][1:3] == ["-m", "tagger"]
    assert calls[0][3:] == [
        "learn-vectors", "data/demo/unannotated.txt.gz", "--config", "configs/default.toml",
        "--out", "runs/features/demo.tagvec", "--dim", "50", "--epochs", "7",
    ]  # fmt: skip
    assert learnt["file_bytes"] == 10 and learnt["seconds"] is not None
    assert learnt["command"].startswith("tagger learn-vectors data/demo/unannotated.txt.gz")
    again = bench.learn_vectors(50, 7, reuse=True)
    assert len(calls) == 1 and again["seconds"] is None  # the file is there: kept
    bench.learn_vectors(50, 7, reuse=False)
    assert len(calls) == 2


def _variant(train: float, tag: float) -> dict[str, Any]:
    scores = {"found": 1, "gold_spans": 2, "recall": 0.5, "precision": 0.5, "f1": 0.5}
    return {
        "epochs": 3,
        "best_epoch": 2,
        "test": {"f1": 0.9},
        "unseen": scores,
        "unseen_component_defect": scores,
        "train_tokens_per_second": train,
        "tag_tokens_per_second": tag,
    }


def _entry(variants: dict[str, Any], **extra: Any) -> dict[str, Any]:
    machine = {
        "date": "d", "commit": "c", "command": "cmd", "cores": 2, "cpu": "cpu", "torch": "t",
        "python": "p", "threads": 1, "load_before": 1.5,
    }  # fmt: skip
    return {"machine": machine, "minutes": 3, "variants": variants, **extra}


def test_the_record_says_how_the_vectors_were_learnt_and_what_else_ran(bench) -> None:
    learning = {"command": "tagger learn-vectors X", "seconds": 44.2, "file_bytes": 3 * 2**20}
    text = bench.render(
        _entry(
            {"words": _variant(100, 400), "vectors": _variant(90, 300)},
            learning=learning,
            note="another run shared the cores",
        )
    )
    assert "- vectors: `tagger learn-vectors X` took 44 s; the file holds 3.0 MB" in text
    assert "- note: another run shared the cores" in text
    assert "| vectors | 90 | 0.900 | 300 | 0.750 |" in text
    reused = bench.render(
        _entry({"vectors": _variant(90, 300)}, learning={**learning, "seconds": None})
    )
    assert "was learnt before this run" in reused
    assert "| vectors | 90 | - | 300 | - |" in reused  # no words run: no ratio
    assert "note" not in bench.render(_entry({"words": _variant(100, 400)}))
