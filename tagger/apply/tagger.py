"""A trained tagger in memory: network + vocabularies + config, saved to and loaded from one model file."""

from __future__ import annotations

import platform
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
import torch

from tagger.config import Config, config_from_dict
from tagger.data.schemes import (
    OUTSIDE,
    Span,
    allowed_transitions,
    spans_to_tags,
    split_tag,
)
from tagger.errors import ModelFileError, TaggerError
from tagger.network.batching import EncodedSentence, encode_sentence
from tagger.network.modelfile import load_model_file, save_model_file
from tagger.network.net import TaggerNet
from tagger.text.features import FeatureSpec
from tagger.text.vocab import Vocabularies
from tagger.version import __version__

# Prefixes that close / open a span in the lenient reading (schemes.spans_lenient).
_CLOSES = frozenset("ESLU")
_OPENS = frozenset("BSU")

PREDICT_BATCH = 64  # sentences per batch when predicting (PERFORMANCE.md: 64-128 on 2 threads)

ScoredSpan = tuple[str, int, int, float]  # (type, start, end, score), end exclusive
TOKEN_CACHE = 50_000  # distinct tokens whose ids are remembered between calls (a few MB)
Rows = Sequence[Sequence[Sequence[str]]]  # per sentence, per token: every column of its line


@dataclass
class TrainedTagger:
    net: TaggerNet
    vocabs: Vocabularies
    config: Config
    input_scheme: str  # the scheme of the training files; predictions are written back in it
    meta: dict[str, Any] = field(default_factory=dict)
    features: FeatureSpec | None = None  # extra columns, lexicons, word shape; None: words only

    @property
    def scheme(self) -> str:
        """The scheme the network predicts in."""
        return self.config.model.scheme

    @property
    def needs_columns(self) -> bool:
        """Does the model read extra input columns (so that it can tag column files only)?"""
        return self.features is not None and self.features.needs_columns

    def feature_ids(
        self, token_lists: Sequence[Sequence[str]], rows: Rows | None = None
    ) -> list[list[list[int]] | None]:
        """Per sentence, its feature ids (slot-major), or None for a model without features.

        ``rows`` (per sentence, the column-file lines of its tokens) are needed by models that
        read extra columns; without them such a model raises FeatureInputError.
        """
        spec = self.features
        if spec is None:
            return [None] * len(token_lists)
        if rows is not None and len(rows) != len(token_lists):
            raise ValueError(
                f"got rows for {len(rows)} sentences and {len(token_lists)} token lists"
            )
        return [
            spec.encode(tokens, None if rows is None else rows[i])
            for i, tokens in enumerate(token_lists)
        ]

    def encode(
        self, token_lists: Sequence[Sequence[str]], rows: Rows | None = None
    ) -> list[EncodedSentence]:
        features = self.feature_ids(token_lists, rows)
        return [
            encode_sentence(tokens, self.vocabs, features=f)
            for tokens, f in zip(token_lists, features, strict=True)
        ]

    def predict_spans(
        self,
        token_lists: Sequence[Sequence[str]],
        batch_size: int = PREDICT_BATCH,
        rows: Rows | None = None,
    ) -> list[list[Span]]:
        """Spans (type, start, end) per sentence; empty sentences get no spans."""
        scored = self.predict_scored_spans(token_lists, batch_size, with_scores=False, rows=rows)
        return [[span[:3] for span in spans] for spans in scored]

    def encode_cached(self, token_lists: Sequence[Sequence[str]]) -> list[EncodedSentence]:
        """Like :meth:`encode`, remembering each distinct token's ids: looking up a token's word
        and characters costs far more than a dict hit, and text repeats its tokens."""
        cache = self._token_ids
        if len(cache) > TOKEN_CACHE:
            cache.clear()
        vocabs = self.vocabs
        encoded = []
        for tokens in token_lists:
            words: list[int] = []
            chars: list[list[int]] = []
            for token in tokens:
                ids = cache.get(token)
                if ids is None:
                    one = encode_sentence([token], vocabs)
                    ids = cache[token] = (one.words[0], one.chars[0])
                words.append(ids[0])
                chars.append(ids[1])
            encoded.append(EncodedSentence(words, chars))
        return encoded

    @cached_property
    def _token_ids(self) -> dict[str, tuple[int, list[int]]]:
        return {}

    @cached_property
    def _label_parts(self) -> tuple[list[str], list[str]]:
        """(prefix, type) of each label id, split once."""
        parts = [split_tag(label) for label in self.vocabs.labels.itos]
        return [p for p, _ in parts], [t for _, t in parts]

    def path_spans(self, path: Sequence[int]) -> list[Span]:
        """The spans of a label-id path: ``tags_to_spans`` of its labels, computed on ids.

        ``tags_to_spans`` reads well-formed sequences in the scheme and others leniently, and
        on well-formed sequences the two readings agree; so the lenient reading (CoNLL's: B/S/U
        open a span, E/S/L/U close one, a change of type or O ends one) is always the answer.
        """
        prefixes, types = self._label_parts
        spans: list[Span] = []
        open_type = ""
        start = 0
        previous = OUTSIDE
        for i, j in enumerate(path):
            prefix = prefixes[j]
            if prefix == OUTSIDE:
                if open_type:
                    spans.append((open_type, start, i))
                    open_type = ""
                previous = prefix
                continue
            kind = types[j]
            if open_type and (kind != open_type or previous in _CLOSES or prefix in _OPENS):
                spans.append((open_type, start, i))
                open_type = ""
            if not open_type:
                open_type, start = kind, i
            previous = prefix
        if open_type:
            spans.append((open_type, start, len(path)))
        return spans

    @torch.inference_mode()
    def predict_scored_spans(
        self,
        token_lists: Sequence[Sequence[str]],
        batch_size: int = PREDICT_BATCH,
        with_scores: bool = True,
        rows: Rows | None = None,
    ) -> list[list[ScoredSpan]]:
        """Spans per sentence, each with a confidence score in [0, 1] (1.0 without ``with_scores``).

        A span's score is the smallest, over its tokens, of the probability the model gives the
        label the decoder chose at that token: the CRF's marginal P(label at t | sentence), or the
        softmax probability without a CRF. A span scores high only if every one of its tokens is
        sure, so one doubtful boundary or type is enough to flag it.

        Built for many sentences at once: a token's character features do not depend on its
        neighbours, so they are computed once per distinct token of the call, not per occurrence.
        Feature ids (extra columns, lexicon matches) do depend on the sentence, so they are
        computed per sentence; ``rows`` gives the column-file lines of models that read columns.
        """
        features = self.feature_ids(token_lists, rows)  # before any work: may refuse the input
        was_training = self.net.training
        self.net.eval()
        net = self.net
        # Distinct tokens get ids 1.., 0 is padding:  rows[s][t] = id of token t of sentence s.
        distinct: dict[str, int] = {}
        rows = [
            [distinct.setdefault(t, len(distinct) + 1) for t in tokens] for tokens in token_lists
        ]
        (encoded,) = (
            self.encode_cached([list(distinct)]) if distinct else (EncodedSentence([], []),)
        )
        word_of = torch.tensor([0, *encoded.words])  # (N+1,) word id of each distinct token
        char_table = self._char_features([[0], *encoded.chars])  # (N+1, char features) or None
        result: list[list[ScoredSpan]] = [[] for _ in token_lists]
        real = [i for i, tokens in enumerate(token_lists) if len(tokens) > 0]
        real.sort(key=lambda i: len(token_lists[i]))  # similar lengths together: little padding
        for first in range(0, len(real), batch_size):
            indices = real[first : first + batch_size]
            lengths = [len(rows[i]) for i in indices]
            ids = np.zeros((len(indices), max(lengths)), dtype=np.int64)  # (B, T)
            for b, i in enumerate(indices):
                ids[b, : lengths[b]] = rows[i]
            ids_tensor = torch.from_numpy(ids)
            length_tensor = torch.tensor(lengths)
            mask = ids_tensor != 0  # (B, T)
            char_features = None if char_table is None else char_table[ids_tensor]
            feature_tensor = None
            if self.features is not None:
                slots = np.zeros((*ids.shape, net_slots(net)), dtype=np.int64)  # (B, T, K)
                for b, i in enumerate(indices):
                    slots[b, : lengths[b]] = np.asarray(features[i], dtype=np.int64).T
                feature_tensor = torch.from_numpy(slots)
            emissions = net.emissions(
                word_of[ids_tensor], None, length_tensor, char_features, feature_tensor
            )
            paths = net.decode(emissions, mask)
            if not with_scores:
                for i, path in zip(indices, paths, strict=True):
                    result[i] = [(t, s, e, 1.0) for t, s, e in self.path_spans(path)]
                continue
            probabilities = net.label_probabilities(emissions, mask)  # (B, T, L)
            chosen = np.zeros(ids.shape, dtype=np.int64)  # (B, T) decoded label ids
            for b, path in enumerate(paths):
                chosen[b, : len(path)] = path
            picked = probabilities.gather(2, torch.from_numpy(chosen).unsqueeze(2)).squeeze(2)
            for i, path, p in zip(indices, paths, picked.tolist(), strict=True):
                # exp() of a log-probability may overshoot 1 by a rounding error
                result[i] = [(t, s, e, min(1.0, min(p[s:e]))) for t, s, e in self.path_spans(path)]
        self.net.train(was_training)
        return result

    def _char_features(self, chars: list[list[int]], block: int = 4096) -> torch.Tensor | None:
        """(N, features): the character encoder's output for each token's character ids, in
        blocks of similar length; None when the model has no character encoder."""
        if self.net.chars is None:
            return None
        order = sorted(range(len(chars)), key=lambda i: len(chars[i]))
        out: torch.Tensor | None = None
        for first in range(0, len(order), block):
            chosen = order[first : first + block]
            width = len(chars[chosen[-1]])
            padded = np.zeros((len(chosen), 1, width), dtype=np.int64)  # (n, 1 "time", chars)
            for row, i in enumerate(chosen):
                padded[row, 0, : len(chars[i])] = chars[i]
            features = self.net.chars(torch.from_numpy(padded)).squeeze(1)  # (n, features)
            if out is None:
                out = features.new_empty((len(chars), features.shape[1]))
            out[torch.tensor(chosen)] = features
        return out

    def predict_labels(
        self,
        token_lists: Sequence[Sequence[str]],
        scheme: str | None = None,
        rows: Rows | None = None,
    ) -> list[list[str]]:
        """Labels per token, in ``scheme`` (default: the scheme of the training files)."""
        target = scheme or self.input_scheme
        spans = self.predict_spans(token_lists, rows=rows)
        return [spans_to_tags(s, len(t), target) for s, t in zip(spans, token_lists, strict=True)]

    def save(self, path: str | Path, extra: dict[str, Any] | None = None) -> None:
        meta = {
            **self.meta,
            **(extra or {}),
            "config": self.config.to_dict(),
            "vocabularies": self.vocabs.to_dict(),
            "input_scheme": self.input_scheme,
            **({"features": self.features.to_dict()} if self.features is not None else {}),
            "versions": {
                "tagger": __version__,
                "torch": torch.__version__,
                "python": platform.python_version(),
            },
        }
        save_model_file(path, self.net.state_dict(), meta)


def net_slots(net: TaggerNet) -> int:
    """How many feature slots a network reads."""
    return 0 if net.features is None else len(net.features)


def build_net(
    config: Config, vocabs: Vocabularies, features: FeatureSpec | None = None
) -> TaggerNet:
    transitions = None
    if config.model.output == "crf":
        transitions = allowed_transitions(vocabs.labels.itos, config.model.scheme)
    slots = features.slot_sizes(config.model) if features is not None else ()
    return TaggerNet(
        config.model, len(vocabs.words), len(vocabs.chars), len(vocabs.labels), transitions, slots
    )


def load_trained(path: str | Path) -> TrainedTagger:
    """Rebuild a tagger from its model file (never unpickles)."""
    tensors, meta = load_model_file(path)
    try:
        config = config_from_dict(meta["config"])
        vocabs = Vocabularies.from_dict(meta["vocabularies"])
        input_scheme = meta["input_scheme"]
        features = FeatureSpec.from_dict(meta["features"]) if "features" in meta else None
    except (KeyError, TypeError, IndexError) as error:
        raise ModelFileError(f"{path}: model metadata lacks {error}") from None
    except (TaggerError, ValueError) as error:
        raise ModelFileError(f"{path}: the stored features are unreadable ({error})") from None
    net = build_net(config, vocabs, features)
    try:
        net.load_state_dict(tensors)
    except RuntimeError as error:
        raise ModelFileError(f"{path}: weights do not fit the stored config ({error})") from None
    net.eval()
    return TrainedTagger(net, vocabs, config, input_scheme, meta, features)
