"""What training says before its first epoch: the header (sizes, types, network, run folder,
stopping rule), the warnings about data that cannot train or choose the best epoch, and a
progress line that does not promise the epoch limit when patience or a budget may stop earlier."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from tagger.apply.tagger import Tagger
from tagger.cli.progress import TrainingProgress, batch_line, run_header, stopping_rule
from tagger.config import Config, config_from_dict
from tagger.data.corpus import Sentence
from tagger.errors import DataError
from tagger.training.data import prepare_sentences
from tagger.training.loop import train_on_sentences
from tagger.training.overview import (
    SMALL_DEV_SPANS,
    data_warnings,
    earliest_stop,
    run_overview,
    span_weight,
)

# Three sentences, 11 tokens, 4 spans: ASSET twice, COMP and DEF once each.
TRAIN = [
    Sentence.from_tokens(["Crew", "swapped", "pitch", "bearing", "on", "T-14"],
                         ["O", "O", "B-COMP", "I-COMP", "O", "B-ASSET"]),
    Sentence.from_tokens(["Oil", "leak"], ["B-DEF", "I-DEF"]),
    Sentence.from_tokens(["T-3", "ok", "."], ["B-ASSET", "O", "O"]),
]  # fmt: skip


def _sentences_with_spans(count: int) -> list[Sentence]:
    """`count` one-token sentences, each a one-token ASSET span."""
    return [Sentence.from_tokens([f"T-{i}"], ["B-ASSET"]) for i in range(count)]


def _tiny_config(**train: Any) -> Config:
    return config_from_dict(
        {
            "model": {
                "hidden_size": 8,
                "layers": 1,
                "word_dim": 8,
                "char_dim": 4,
                "char_features": 4,
                "dropout": 0.0,
            },
            "train": {"epochs": 2, "batch_size": 2, "threads": 1, "seed": 3, **train},
        }
    )


# --- the numbers behind the warnings ------------------------------------------------------------


def test_one_span_is_worth_the_f1_points_worked_by_hand() -> None:
    # Hand-worked with 4 gold spans: 3 right of 4 predicted is F1 6/8 = 75.00; 4 right of 5 is
    # 8/9 = 88.89, 13.89 points more. None right of 4 is 0; 1 right of 5 is 2/9 = 22.22.
    low, high = span_weight(4)
    assert low == pytest.approx(88.8889 - 75.0, abs=1e-3)
    assert high == pytest.approx(22.2222, abs=1e-3)
    # The more dev spans, the less one weighs; from 100 on, at most about a point.
    assert span_weight(26)[1] > span_weight(50)[1] > span_weight(SMALL_DEV_SPANS)[1]
    assert span_weight(SMALL_DEV_SPANS)[1] < 1.0 < span_weight(SMALL_DEV_SPANS - 1)[1]


@pytest.mark.parametrize(
    ("epoch", "patience", "bad_epochs", "expected"),
    [
        (3, 6, 0, 8),  # no better dev F1 in epochs 3..8: patience stops after epoch 8
        (3, 6, 5, 3),  # five bad epochs already: one more and it stops after this one
        (3, 40, 0, 30),  # patience longer than the run: the limit
        (3, 0, 0, 3),  # no patience: stops after the epoch in progress
    ],
)
def test_earliest_stop(epoch: int, patience: int, bad_epochs: int, expected: int) -> None:
    assert earliest_stop(epoch, 30, patience, bad_epochs) == expected


# --- warnings ------------------------------------------------------------------------------------


def test_a_dev_set_of_a_few_spans_is_warned_about_with_its_weight() -> None:
    data = prepare_sentences(Config(), TRAIN, _sentences_with_spans(4), "train.txt", "dev.txt")
    (warning,) = data_warnings(data)
    assert "dev (dev.txt) holds only 4 spans" in warning
    assert "13.9 to 22.2 points" in warning
    assert f"{SMALL_DEV_SPANS} dev spans or more" in warning


def test_the_threshold_of_a_small_dev_set() -> None:
    below = prepare_sentences(Config(), TRAIN, _sentences_with_spans(SMALL_DEV_SPANS - 1))
    enough = prepare_sentences(Config(), TRAIN, _sentences_with_spans(SMALL_DEV_SPANS))
    assert len(data_warnings(below)) == 1
    assert data_warnings(enough) == []


def test_training_data_without_spans_and_dev_without_spans_are_refused() -> None:
    # Once warnings; refused before any work since training on nothing was made an error.
    outside = [Sentence.from_tokens(["no", "fault"], ["O", "O"])] * 3
    with pytest.raises(
        DataError, match=r"train.txt: the training labels hold no spans.*label column"
    ):
        prepare_sentences(Config(), outside, outside, "train.txt", "dev.txt")
    with pytest.raises(DataError, match="dev.txt: the dev labels hold no spans"):
        prepare_sentences(Config(), TRAIN, outside, "train.txt", "dev.txt")


def test_a_held_out_dev_set_is_named_as_such() -> None:
    data = prepare_sentences(Config(), TRAIN * 4, None, "train.txt")
    (warning,) = data_warnings(data)
    assert warning.startswith("the held-out dev sentences hold only")


# --- the header ----------------------------------------------------------------------------------


def test_overview_counts_sentences_tokens_spans_and_types() -> None:
    dev = _sentences_with_spans(2)
    data = prepare_sentences(Config(), TRAIN, dev, "train.txt", "dev.txt")
    overview = run_overview(Config(), data, 1234, Path("runs/x"), 1)
    assert overview["train"] == {
        "source": "train.txt",
        "sentences": 3,
        "tokens": 11,
        "spans": 4,
    }
    assert overview["dev"] == {
        "source": "dev.txt",
        "held_out": False,
        "sentences": 2,
        "tokens": 2,
        "spans": 2,
    }
    assert list(overview["types"].items()) == [("ASSET", 2), ("COMP", 1), ("DEF", 1)]
    assert overview["network"]["parameters"] == 1234
    assert overview["stopping"] == {"first_epoch": 1, "epochs": 30, "patience": 6, "max_minutes": 0}


def test_header_lines_say_what_a_user_checks_before_waiting() -> None:
    data = prepare_sentences(Config(), TRAIN * 4, None, "train.txt")  # 1 of 12 held out
    lines = run_header({"event": "start", **run_overview(Config(), data, 1234567, Path("r"), 1)})
    text = "\n".join(lines)
    assert "run folder   r" in text
    assert "train        train.txt: 11 sentences," in text
    assert "held out of train.txt: 1 sentence," in text
    assert "types        3 in train: ASSET " in text
    assert "lstm, 2 layers of 128 per direction, crf output; 1,234,567 parameters" in text
    assert "stops        after epoch 30 (train.epochs), or earlier after 6 epochs" in text


def test_the_header_names_training_tokens_the_tagging_tokenizer_would_cut() -> None:
    reading = Sentence.from_tokens(["Temp", "106.9°C", "on", "T-14"], ["O", "B-READ", "O", "O"])
    dev = _sentences_with_spans(2)
    cut = prepare_sentences(Config(), [*TRAIN, reading, reading], dev, "train.txt", "dev.txt")
    overview = run_overview(Config(), cut, 1, Path("r"), 1)
    assert overview["tokenizer_fit"]["split"]["count"] == 2
    text = " ".join(" ".join(run_header({"event": "start", **overview})).split())
    assert (
        "tokenizer 2 of 19 annotated tokens (10.5%) would not come back whole from the tagging "
        "tokenizer (with the settings this run's model will keep): 2 cut into pieces, 0 not read "
        "as a token at all; most often '106.9°C' -> '106.9' '°C' (2 times); tagger check lists "
        "each one stops"
    ) in text
    # Tokens that all come back whole (T-14 included) add no line.
    whole = prepare_sentences(Config(), TRAIN, dev, "train.txt", "dev.txt")
    lines = run_header({"event": "start", **run_overview(Config(), whole, 1, Path("r"), 1)})
    assert not any(line.lstrip().startswith("tokenizer") for line in lines)


def test_stopping_rule_names_only_the_rules_that_can_stop_the_run() -> None:
    rule = {"epochs": 30, "patience": 6, "max_minutes": 0, "first_epoch": 1}
    assert "train.patience" in stopping_rule(rule)
    assert "no time budget" in stopping_rule(rule)
    assert "train.patience" not in stopping_rule({**rule, "patience": 30})
    budget = stopping_rule({**rule, "max_minutes": 2.5})
    assert "once 2.5 minutes are used (train.max_minutes)" in budget
    assert "resuming at epoch 25" in stopping_rule({**rule, "first_epoch": 25})
    # Five epochs are left on resuming at 26: patience 6 can no longer end the run early.
    assert "train.patience" not in stopping_rule({**rule, "first_epoch": 26})


def test_the_progress_line_shows_a_limit_as_a_limit() -> None:
    event = {
        "epoch": 3,
        "epochs": 30,
        "batch": 5,
        "batches": 20,
        "loss": 0.5,
        "tokens_per_second": 1234.0,
        "run_seconds_left": 125.0,
        "best_dev_f1": 0.8125,
    }
    fixed = batch_line({**event, "may_stop_early": False})
    early = batch_line({**event, "may_stop_early": True})
    # A quarter of the epoch done: 5 of the bar's 20 marks.
    assert fixed.startswith("epoch 3/30 [#####               ] loss 0.5000, 1,234 tok/s")
    assert fixed.endswith("best dev F1 81.25, about 2m05s left")
    assert early.startswith("epoch 3 of at most 30 [#####     ")
    assert early.endswith("best dev F1 81.25, at most 2m05s left")


def test_warnings_and_notes_are_printed_with_their_kind(capsys: pytest.CaptureFixture) -> None:
    progress = TrainingProgress()
    progress.live = False
    progress({"event": "warning", "message": "dev holds only 4 spans"})
    progress({"event": "note", "message": "held out"})
    assert capsys.readouterr().err == "warning: dev holds only 4 spans\nnote: held out\n"


# --- a run tells it before its first epoch -------------------------------------------------------


def _run(tmp_path: Path, config: Config, dev: list[Sentence] | None) -> list[dict[str, Any]]:
    seen: list[dict[str, Any]] = []
    train_on_sentences(TRAIN * 2, dev, config, tmp_path / "run", progress=seen.append)
    return seen


def test_a_run_starts_with_its_header_and_warnings(tmp_path: Path) -> None:
    seen = _run(tmp_path, _tiny_config(), _sentences_with_spans(3))
    kinds = [event["event"] for event in seen]
    assert kinds[0] == "start" and kinds[1] == "warning"
    assert kinds.index("batch") > kinds.index("warning")
    start = seen[0]
    model = Tagger.load(tmp_path / "run" / "model.tagger")
    assert start["network"]["parameters"] == sum(p.numel() for p in model.net.parameters())
    assert (start["train"]["sentences"], start["dev"]["spans"]) == (6, 3)
    assert start["run_folder"] == str(tmp_path / "run")
    metrics = json.loads((tmp_path / "run" / "outcome.json").read_text())
    assert metrics["warnings"] == [seen[1]["message"]]
    assert "only 3 spans" in metrics["warnings"][0]


def test_batches_say_whether_the_run_may_stop_before_its_limit(tmp_path: Path) -> None:
    dev = _sentences_with_spans(SMALL_DEV_SPANS)
    fixed = _run(tmp_path / "a", _tiny_config(epochs=2, patience=5), dev)
    early = _run(tmp_path / "b", _tiny_config(epochs=2, patience=1), dev)
    budget = _run(tmp_path / "c", _tiny_config(epochs=2, patience=5, max_minutes=60.0), dev)

    def flags(events: list[dict[str, Any]]) -> set[bool]:
        """Of the first epoch's batches (in the last epoch the limit is the next stop anyway)."""
        return {e["may_stop_early"] for e in events if e["event"] == "batch" and e["epoch"] == 1}

    assert flags(fixed) == {False}
    assert flags(early) == {True}
    assert flags(budget) == {True}
    assert not any(e["event"] == "warning" for e in fixed)
