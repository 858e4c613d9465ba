"""From prepared sentences to a network ready to train: vocabularies, features, encoded
sentences, the network with its pretrained vectors, the optimizer and the step's tools.

The benchmarks build their training steps here too, so they train what a run trains.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import Any

import numpy as np
import torch

from tagger.config import Config, VectorUse
from tagger.data.schemes import labels_for_types, spans_to_tags
from tagger.errors import ConfigError, DataError
from tagger.network.batching import EncodedSentence, encode_sentence
from tagger.network.char_lm import CharLanguageModel
from tagger.network.net import TaggerNet, build_net
from tagger.reports.layout import number
from tagger.text.features import FeatureSpec, build_features, check_columns
from tagger.text.subword import SubwordSettings, SubwordVectors
from tagger.text.tokenizer import TokenizerSettings
from tagger.text.vectors import read_word_vectors
from tagger.text.vocab import Vocabularies, build_vocabularies
from tagger.training.averaging import new_average
from tagger.training.data import PreparedData, prepare_data
from tagger.training.step import RareItems, StepTools
from tagger.unannotated.char_lm_file import load_char_lm
from tagger.unannotated.vectors_file import is_vectors_file, load_vectors


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
    vectors: SubwordVectors | None  # model.pretrained_vectors, read
    tokenizer: TokenizerSettings
    char_lm: CharLanguageModel | None = None  # model.char_lm, read


def prepare_training(config: Config) -> TrainingSetup:
    """Read the files the config names and set up training on them."""
    return setup_training(config, prepare_data(config))


def setup_training(config: Config, data: PreparedData) -> TrainingSetup:
    """Build vocabularies and features from the training sentences and encode them."""
    internal = config.model.scheme
    types = sorted({span[0] for spans in data.train_spans for span in spans})
    labels = labels_for_types(types, internal)
    # The model stores its tokenizer settings ([tokenizer]), so tagging cuts text as training did;
    # one sentence limit bounds annotated sentences and tagged text alike.
    settings = config.tokenizer_settings()
    vectors = read_pretrained(config.model.pretrained_vectors, settings)
    use = config.model.vectors_use
    vocabs, word_counts = build_vocabularies(
        (s.tokens for s in data.train),
        labels,
        config.model.lowercase,
        config.model.digits_to_zero,
        config.model.min_word_count,
        # only the trained embedding can hold the vectors' other words
        extra_words=vectors.words if vectors and use == VectorUse.INITIALISE else (),
    )
    if vectors is not None and use != VectorUse.INITIALISE:
        vocabs.subwords = vectors.index(config.model.vector_words)
    char_lm = read_char_lm(config.model.char_lm, settings)
    if char_lm is not None:
        vocabs.char_lm = char_lm.spec
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
        data,
        types,
        vocabs,
        features,
        encoded,
        word_counts,
        value_counts,
        vectors,
        settings,
        char_lm,
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


def read_pretrained(path: str, tokenizer: TokenizerSettings) -> SubwordVectors | None:
    """model.pretrained_vectors: a vectors file of ours (learnt with the same tokenizer settings)
    or a word2vec/GloVe text file (words only, no n-grams); None when the config names none."""
    if not path:
        return None
    if not is_vectors_file(path):
        words, matrix = read_word_vectors(path)
        empty = np.zeros((0, matrix.shape[1]), dtype=np.float32)
        no_ngrams = SubwordSettings(buckets=0)
        return SubwordVectors(words, [1] * len(words), matrix, empty, no_ngrams, {})
    vectors = load_vectors(path)
    _same_tokenizer(vectors.tokenizer, tokenizer, path, "word vectors", "learn-vectors")
    return vectors


def read_char_lm(path: str, tokenizer: TokenizerSettings) -> CharLanguageModel | None:
    """model.char_lm, learnt with the same tokenizer settings; None when the config names none."""
    if not path:
        return None
    model, meta, _ = load_char_lm(path)
    _same_tokenizer(meta["tokenizer"], tokenizer, path, "character language model", "learn-char-lm")
    return model


def _same_tokenizer(
    stored: dict[str, Any], tokenizer: TokenizerSettings, path: str, what: str, command: str
) -> None:
    for key, value in tokenizer.to_dict().items():
        if key != "max_sentence_tokens" and stored.get(key) != value:
            raise DataError(
                f"the {what} was learnt with tokenizer setting {key} = {stored.get(key)!r}, the "
                f"config has {value!r}: learn it again with this config ({command} --config) or "
                "change [tokenizer]",
                path,
            )


def new_network(config: Config, setup: TrainingSetup) -> tuple[TaggerNet, str | None]:
    """A freshly initialised network (from torch's global generator) with the pretrained vectors
    in it; and a note saying what they reach (None without vectors)."""
    net = build_net(config, setup.vocabs, setup.features)
    if setup.char_lm is not None and net.char_lm is not None:
        net.char_lm.model.load_state_dict(setup.char_lm.state_dict())
    vectors = setup.vectors
    if vectors is None:
        return net, None
    use = config.model.vectors_use
    parts = []
    index = setup.vocabs.subwords
    if index is not None and net.fixed_vectors is not None:
        with torch.no_grad():
            net.fixed_vectors.table.copy_(
                torch.from_numpy(vectors.table(config.model.vector_words))
            )
        parts.append(
            f"a frozen table of {number(len(index.words))} words"
            + (
                f" and {number(index.settings.buckets)} n-gram rows"
                if index.settings.buckets
                else ""
            )
        )
    if use != VectorUse.FIXED:
        found = _initialise_embeddings(net, setup.vocabs, vectors, config.model.vectors_use)
        words = len(setup.vocabs.words) - 2
        parts.append(f"the trained embedding's start for {number(found)} of {number(words)} words")
    return net, f"pretrained vectors ({vectors.dim} numbers): " + "; ".join(parts)


def _initialise_embeddings(
    net: TaggerNet, vocabs: Vocabularies, vectors: SubwordVectors, use: VectorUse
) -> int:
    """Copy pretrained vectors into the trained word embedding; returns how many words got one
    (with n-grams every word does; without, the words the vectors list)."""
    weight = net.words.weight
    if vectors.dim != weight.shape[1]:
        hint = "" if use == VectorUse.INITIALISE else ', or set model.vectors_use = "fixed"'
        raise ConfigError(
            f"model.word_dim is {weight.shape[1]} but the pretrained vectors have "
            f"{vectors.dim} numbers: set model.word_dim = {vectors.dim}{hint}"
        )
    keys = vocabs.words.itos[2:]
    if vectors.settings.buckets:
        rows = range(2, len(vocabs.words))
        with torch.no_grad():
            weight[2:] = torch.from_numpy(vectors.vectors(keys))
        return len(rows)
    position: dict[str, int] = {}
    for i, word in enumerate(vectors.words):
        position.setdefault(vocabs.word_key(word), i)
    found = 0
    with torch.no_grad():
        for index, word in enumerate(keys, start=2):
            if word in position:
                weight[index] = torch.from_numpy(vectors.word_vectors[position[word]])
                found += 1
    return found


def step_rate(config: Config, processes: int = 1) -> float:
    """The learning rate a step starts with when `processes` train together (each step holds
    one batch of each): train.learning_rate, times `processes` unless
    train.scale_rate_with_processes is off."""
    train = config.train
    return train.learning_rate * (processes if train.scale_rate_with_processes else 1)


def make_optimizer(
    config: Config, net: torch.nn.Module, processes: int = 1
) -> torch.optim.Optimizer:
    # foreach: one kernel per operation over all parameters, about half the time of the
    # per-parameter loop torch takes on CPUs by default
    train = config.train
    rate = step_rate(config, processes)
    if train.optimizer == "adam":
        return torch.optim.Adam(
            net.parameters(), lr=rate, weight_decay=train.weight_decay, foreach=True
        )
    return torch.optim.SGD(
        net.parameters(),
        lr=rate,
        momentum=0.9,
        weight_decay=train.weight_decay,
        foreach=True,
    )


def step_tools(
    config: Config, setup: TrainingSetup, net: TaggerNet, processes: int = 1
) -> StepTools:
    """The optimizer, the weight average (if train.weight_average is set) and the rare items a
    training step of this config works with, in each of `processes` training together."""
    train = config.train
    return StepTools(
        net=net,
        optimizer=make_optimizer(config, net, processes),
        average=new_average(net, train.weight_average) if train.weight_average else None,
        rare=rare_items(setup),
        unknown_replace=train.unknown_replace,
        clip_norm=train.clip_norm,
    )
