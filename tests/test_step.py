"""One training step (tagger.training.step): what it reads as unknown, what it trains, and what
it refuses to train on."""

from __future__ import annotations

import pytest
import torch

from tagger.config import config_from_dict
from tagger.data.corpus import Sentence
from tagger.network.batching import collate
from tagger.network.net import TaggerNet
from tagger.training.data import prepare_sentences
from tagger.training.setup import TrainingSetup, new_network, setup_training, step_tools
from tagger.training.step import (
    UNKNOWN,
    LossNotFinite,
    StepTools,
    StepWork,
    read_rare_as_unknown,
    train_step,
)

# Three columns: token, a feature column (a part-of-speech-like tag), label.
ROWS = [
    [("Oil", "N", "B-DEF"), ("leak", "N", "I-DEF"), ("at", "P", "O"), ("tower", "X", "B-ASSET")],
    [("Oil", "N", "B-DEF"), ("on", "P", "O"), ("tower", "Z", "B-ASSET")],
    [("at", "P", "O"), ("hub", "X", "B-ASSET")],
]


def _setup(unknown_replace: float) -> tuple[TrainingSetup, StepTools]:
    config = config_from_dict(
        {
            "model": {
                "hidden_size": 8,
                "layers": 1,
                "word_dim": 8,
                "char_dim": 4,
                "char_features": 4,
                "dropout": 0.0,
                "feature_columns": [1],
                "feature_dim": 4,
            },
            "train": {"learning_rate": 0.05},
        }
    )
    sentences = [Sentence(tuple(rows), (), 0, 2, 0) for rows in ROWS]
    setup = setup_training(config, prepare_sentences(config, sentences, sentences))
    torch.manual_seed(1)
    net, _ = new_network(config, setup)
    tools = step_tools(config, setup, net)
    # Set here, not in the config: a config refuses 1.0, which makes the draws certain.
    tools.unknown_replace = unknown_replace
    return setup, tools


def test_rare_words_and_values_are_read_as_unknown_without_touching_the_batch() -> None:
    setup, tools = _setup(unknown_replace=1.0)  # every rare item, every time
    batch = collate(setup.encoded, [0, 1, 2])
    words, features = batch.words.clone(), batch.features.clone()
    work = StepWork(batch)
    read_rare_as_unknown(tools, work)
    assert torch.equal(batch.words, words) and torch.equal(batch.features, features)
    vocabs, values = setup.vocabs, setup.features.columns[0].values
    # Seen once in train: "leak", "on", "hub" and the value "Z"; "Oil", "at", "tower" twice.
    for b, sentence in enumerate(ROWS):
        for t, (token, value, _) in enumerate(sentence):
            once = token in ("leak", "on", "hub")
            assert work.words[b, t] == (UNKNOWN if once else vocabs.words.index(token))
            assert batch.words[b, t] == vocabs.words.index(token)
            expected_value = UNKNOWN if value == "Z" else values.index(value)
            assert work.features[b, t, 0] == expected_value


def test_without_replacement_the_batch_is_read_as_it_is() -> None:
    setup, tools = _setup(unknown_replace=0.0)
    batch = collate(setup.encoded, [0, 1, 2])
    work = StepWork(batch)
    read_rare_as_unknown(tools, work)
    assert work.words is batch.words and work.features is batch.features


def test_a_step_returns_the_batch_loss_and_moves_the_weights() -> None:
    setup, tools = _setup(unknown_replace=0.0)
    batch = collate(setup.encoded, [0, 1, 2])
    before = {k: v.clone() for k, v in tools.net.state_dict().items()}
    with torch.no_grad():
        emissions = tools.net.emissions(
            batch.words, batch.chars, batch.lengths, features=batch.features
        )
        expected = tools.net.loss(emissions, batch.labels, batch.mask).item()
    assert train_step(tools, batch) == pytest.approx(expected)
    after = tools.net.state_dict()
    assert any(not torch.equal(before[k], after[k]) for k in before)


def test_a_loss_that_is_not_finite_stops_before_any_update(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    setup, tools = _setup(unknown_replace=0.0)
    batch = collate(setup.encoded, [0, 1])
    before = {k: v.clone() for k, v in tools.net.state_dict().items()}
    real_loss = TaggerNet.loss
    monkeypatch.setattr(
        TaggerNet, "loss", lambda self, *args: real_loss(self, *args) * float("inf")
    )
    with pytest.raises(LossNotFinite, match="became inf") as error:
        train_step(tools, batch)
    assert error.value.value == float("inf")
    for name, tensor in tools.net.state_dict().items():
        assert torch.equal(tensor, before[name]), name
    assert not tools.optimizer.state  # the optimizer never stepped
