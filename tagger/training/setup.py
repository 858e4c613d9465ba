"""From prepared sentences to a network ready to train: vocabularies, features, encoded
sentences, the network with its pretrained vectors, the optimizer and the step's tools.

The benchmarks build their training steps here too, so they train what a run trains.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, replace
from typing import Any

import torch

from tagger.config import Config
from tagger.data.schemes import labels_for_types, spans_to_tags
from tagger.errors import ConfigError
from tagger.network.batching import EncodedSentence, encode_sentence
from tagger.network.net import TaggerNet, build_net
from tagger.text.features import FeatureSpec, build_features, check_columns
from tagger.text.tokenizer import TokenizerSettings
from tagger.text.vectors import read_word_vectors
from tagger.text.vocab import Vocabularies, build_vocabularies
from tagger.training.averaging import new_average
from tagger.training.data import PreparedData, prepare_data
from tagger.training.step import RareItems, StepTools


@dataclass
class TrainingSetup:
    """Everything a training run needs before the network exists; benchmarks build on it too."""

    data: PreparedData
    types: list[str]
    vocabs: Vocabularies
    features: FeatureSpec | None
    encoded: list[EncodedSentence]  # the training sentences, labels in the model's scheme
    word_counts: Counter[str]
    value_counts: list[Counter[str]]
    vectors: tuple[list[str], Any] | None
    tokenizer: TokenizerSettings


def prepare_training(config: Config) -> TrainingSetup:
    """Read the files the config names and set up training on them."""
    return setup_training(config, prepare_data(config))


def setup_training(config: Config, data: PreparedData) -> TrainingSetup:
    """Build vocabularies and features from the training sentences and encode them."""
    internal = config.model.scheme
    types = sorted({span[0] for spans in data.train_spans for span in spans})
    labels = labels_for_types(types, internal)
    vectors = (
        read_word_vectors(config.model.pretrained_vectors)
        if config.model.pretrained_vectors
        else None
    )
    vocabs, word_counts = build_vocabularies(
        (s.tokens for s in data.train),
        labels,
        config.model.lowercase,
        config.model.digits_to_zero,
        config.model.min_word_count,
        extra_words=vectors[0] if vectors else (),
    )
    # The model stores its tokenizer settings ([tokenizer]), so tagging cuts text as training did;
    # one sentence limit bounds annotated sentences and tagged text alike.
    settings = replace(config.tokenizer, max_sentence_tokens=config.data.max_sentence_tokens)
    features, value_counts = build_features(config.model, data.train, data.train_source, settings)
    if features is not None:
        check_columns(features, data.dev, data.dev_source)
    encoded = [
        encode_sentence(
            s.tokens,
            vocabs,
            spans_to_tags(spans, len(s.tokens), internal),
            features.encode(s.tokens, s.rows) if features is not None else None,
        )
        for s, spans in zip(data.train, data.train_spans, strict=True)
    ]
    return TrainingSetup(
        data, types, vocabs, features, encoded, word_counts, value_counts, vectors, settings
    )


def rare_items(setup: TrainingSetup) -> RareItems:
    """Words and feature-column values seen once in train.

    Values seen once are read as unknown now and then too, so that the unknown value's embedding
    learns something before it meets new values at tagging time."""
    vocabs = setup.vocabs
    words = torch.zeros(len(vocabs.words), dtype=torch.bool)
    for word, count in setup.word_counts.items():
        if count == 1 and word in vocabs.words:
            words[vocabs.words.index(word)] = True
    columns = setup.features.columns if setup.features else []
    values = [
        (slot, torch.tensor([counts.get(v, 0) == 1 for v in column.values.itos]))
        for slot, (column, counts) in enumerate(zip(columns, setup.value_counts, strict=True))
    ]
    return RareItems(words, values)


def new_network(config: Config, setup: TrainingSetup) -> tuple[TaggerNet, str | None]:
    """A freshly initialised network (from torch's global generator), with the pretrained vectors
    copied in; and a note saying how many words found one (None without vectors)."""
    net = build_net(config, setup.vocabs, setup.features)
    if not setup.vectors:
        return net, None
    found = _initialise_embeddings(net, setup.vocabs, *setup.vectors)
    return net, f"pretrained vectors for {found} of {len(setup.vocabs.words) - 2} words"


def _initialise_embeddings(
    net: TaggerNet, vocabs: Vocabularies, words: list[str], matrix: Any
) -> int:
    """Copy pretrained vectors into the word embedding; returns how many words found one."""
    weight = net.words.weight
    if matrix.shape[1] != weight.shape[1]:
        raise ConfigError(
            f"model.word_dim is {weight.shape[1]} but the pretrained vectors have {matrix.shape[1]} dimensions"
        )
    rows: dict[str, int] = {}
    for i, word in enumerate(words):
        rows.setdefault(vocabs.word_key(word), i)
    found = 0
    with torch.no_grad():
        for index, word in enumerate(vocabs.words.itos[2:], start=2):
            if word in rows:
                weight[index] = torch.from_numpy(matrix[rows[word]])
                found += 1
    return found


def make_optimizer(config: Config, net: torch.nn.Module) -> torch.optim.Optimizer:
    # foreach: one kernel per operation over all parameters, about half the time of the
    # per-parameter loop torch takes on CPUs by default
    train = config.train
    if train.optimizer == "adam":
        return torch.optim.Adam(
            net.parameters(), lr=train.learning_rate, weight_decay=train.weight_decay, foreach=True
        )
    return torch.optim.SGD(
        net.parameters(),
        lr=train.learning_rate,
        momentum=0.9,
        weight_decay=train.weight_decay,
        foreach=True,
    )


def step_tools(config: Config, setup: TrainingSetup, net: TaggerNet) -> StepTools:
    """The optimizer, the weight average (if train.weight_average is set) and the rare items a
    training step of this config works with."""
    train = config.train
    return StepTools(
        net=net,
        optimizer=make_optimizer(config, net),
        average=new_average(net, train.weight_average) if train.weight_average else None,
        rare=rare_items(setup),
        unknown_replace=train.unknown_replace,
        clip_norm=train.clip_norm,
    )
