"""A trained tagger in memory: network + vocabularies + config, saved to and loaded from one model file."""

from __future__ import annotations

import platform
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import torch

from tagger import __version__
from tagger.batching import EncodedSentence, collate, encode_sentence
from tagger.config import Config, config_from_dict
from tagger.errors import ModelFileError
from tagger.model import TaggerNet
from tagger.modelfile import load_model_file, save_model_file
from tagger.schemes import Span, allowed_transitions, spans_to_tags, tags_to_spans
from tagger.vocab import Vocabularies

PREDICT_BATCH = 64  # sentences per batch when predicting (PERFORMANCE.md: 64-128 on 2 threads)


@dataclass
class TrainedTagger:
    net: TaggerNet
    vocabs: Vocabularies
    config: Config
    input_scheme: str  # the scheme of the training files; predictions are written back in it
    meta: dict[str, Any] = field(default_factory=dict)

    @property
    def scheme(self) -> str:
        """The scheme the network predicts in."""
        return self.config.model.scheme

    def encode(self, token_lists: Sequence[Sequence[str]]) -> list[EncodedSentence]:
        return [encode_sentence(tokens, self.vocabs) for tokens in token_lists]

    @torch.inference_mode()
    def predict_spans(
        self, token_lists: Sequence[Sequence[str]], batch_size: int = PREDICT_BATCH
    ) -> list[list[Span]]:
        """Spans (type, start, end) per sentence; empty sentences get no spans."""
        was_training = self.net.training
        self.net.eval()
        encoded = self.encode(token_lists)
        result: list[list[Span]] = [[] for _ in token_lists]
        real = [i for i, tokens in enumerate(token_lists) if len(tokens) > 0]
        real.sort(key=lambda i: len(token_lists[i]))  # similar lengths together: little padding
        labels = self.vocabs.labels.itos
        for start in range(0, len(real), batch_size):
            batch = collate(encoded, real[start : start + batch_size])
            emissions = self.net.emissions(batch.words, batch.chars, batch.lengths)
            for i, path in zip(batch.indices, self.net.decode(emissions, batch.mask), strict=True):
                result[i] = tags_to_spans([labels[j] for j in path], self.scheme)
        self.net.train(was_training)
        return result

    def predict_labels(
        self, token_lists: Sequence[Sequence[str]], scheme: str | None = None
    ) -> list[list[str]]:
        """Labels per token, in ``scheme`` (default: the scheme of the training files)."""
        target = scheme or self.input_scheme
        spans = self.predict_spans(token_lists)
        return [spans_to_tags(s, len(t), target) for s, t in zip(spans, token_lists, strict=True)]

    def save(self, path: str | Path, extra: dict[str, Any] | None = None) -> None:
        meta = {
            **self.meta,
            **(extra or {}),
            "config": self.config.to_dict(),
            "vocabularies": self.vocabs.to_dict(),
            "input_scheme": self.input_scheme,
            "versions": {
                "tagger": __version__,
                "torch": torch.__version__,
                "python": platform.python_version(),
            },
        }
        save_model_file(path, self.net.state_dict(), meta)


def build_net(config: Config, vocabs: Vocabularies) -> TaggerNet:
    transitions = None
    if config.model.output == "crf":
        transitions = allowed_transitions(vocabs.labels.itos, config.model.scheme)
    return TaggerNet(
        config.model, len(vocabs.words), len(vocabs.chars), len(vocabs.labels), transitions
    )


def load_trained(path: str | Path) -> TrainedTagger:
    """Rebuild a tagger from its model file (never unpickles)."""
    tensors, meta = load_model_file(path)
    try:
        config = config_from_dict(meta["config"])
        vocabs = Vocabularies.from_dict(meta["vocabularies"])
        input_scheme = meta["input_scheme"]
    except (KeyError, TypeError) as error:
        raise ModelFileError(f"{path}: model metadata lacks {error}") from None
    net = build_net(config, vocabs)
    try:
        net.load_state_dict(tensors)
    except RuntimeError as error:
        raise ModelFileError(f"{path}: weights do not fit the stored config ({error})") from None
    net.eval()
    return TrainedTagger(net, vocabs, config, input_scheme, meta)
