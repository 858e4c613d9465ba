"""Prediction on token lists: the torch work behind `Tagger.predict_scored_spans`.

Built for many sentences at once: a token's character features do not depend on its neighbours,
so they are computed once per distinct token of a call, not per occurrence, and each distinct
token's word and character ids are remembered between calls. Feature ids (extra columns, lexicon
matches) do depend on the sentence, so they are computed per sentence.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import torch

from tagger.network.batching import EncodedSentence, encode_sentence
from tagger.network.net import TaggerNet
from tagger.text.vocab import Vocabularies

if TYPE_CHECKING:
    from tagger.apply.tagger import Rows, ScoredSpan, Tagger

TOKEN_CACHE = 50_000  # distinct tokens whose ids are remembered between calls (a few MB)


def encode_cached(
    vocabs: Vocabularies,
    cache: dict[str, tuple[int, list[int]]],
    token_lists: Sequence[Sequence[str]],
) -> list[EncodedSentence]:
    """Word and character ids of each sentence, through ``cache`` (token -> ids): looking up a
    token's word and characters costs far more than a dict hit, and text repeats its tokens."""
    if len(cache) > TOKEN_CACHE:
        cache.clear()
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


def net_slots(net: TaggerNet) -> int:
    """How many feature slots a network reads."""
    return 0 if net.features is None else len(net.features)


@torch.inference_mode()
def scored_spans(
    tagger: Tagger,
    token_lists: Sequence[Sequence[str]],
    batch_size: int,
    with_scores: bool,
    rows: Rows | None,
) -> list[list[ScoredSpan]]:
    """See `Tagger.predict_scored_spans`."""
    features = tagger.feature_ids(token_lists, rows)  # before any work: may refuse the input
    net = tagger.net
    was_training = net.training
    net.eval()
    # Distinct tokens get ids 1.., 0 is padding:  token_rows[s][t] = id of token t of sentence s.
    distinct: dict[str, int] = {}
    token_rows = [
        [distinct.setdefault(t, len(distinct) + 1) for t in tokens] for tokens in token_lists
    ]
    (encoded,) = tagger.encode_cached([list(distinct)]) if distinct else (EncodedSentence([], []),)
    word_of = torch.tensor([0, *encoded.words])  # (N+1,) word id of each distinct token
    char_table = _char_features(net, [[0], *encoded.chars])  # (N+1, char features) or None
    result: list[list[ScoredSpan]] = [[] for _ in token_lists]
    real = [i for i, tokens in enumerate(token_lists) if len(tokens) > 0]
    real.sort(key=lambda i: len(token_lists[i]))  # similar lengths together: little padding
    for first in range(0, len(real), batch_size):
        indices = real[first : first + batch_size]
        lengths = [len(token_rows[i]) for i in indices]
        ids = np.zeros((len(indices), max(lengths)), dtype=np.int64)  # (B, T)
        for b, i in enumerate(indices):
            ids[b, : lengths[b]] = token_rows[i]
        ids_tensor = torch.from_numpy(ids)
        length_tensor = torch.tensor(lengths)
        mask = ids_tensor != 0  # (B, T)
        char_features = None if char_table is None else char_table[ids_tensor]
        feature_tensor = None
        if tagger.features is not None:
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
                result[i] = [(t, s, e, 1.0) for t, s, e in tagger.label_ids_to_spans(path)]
            continue
        probabilities = net.label_probabilities(emissions, mask)  # (B, T, L)
        chosen = np.zeros(ids.shape, dtype=np.int64)  # (B, T) decoded label ids
        for b, path in enumerate(paths):
            chosen[b, : len(path)] = path
        picked = probabilities.gather(2, torch.from_numpy(chosen).unsqueeze(2)).squeeze(2)
        for i, path, p in zip(indices, paths, picked.tolist(), strict=True):
            # exp() of a log-probability may overshoot 1 by a rounding error
            result[i] = [
                (t, s, e, min(1.0, min(p[s:e]))) for t, s, e in tagger.label_ids_to_spans(path)
            ]
    net.train(was_training)
    return result


def _char_features(
    net: TaggerNet, chars: list[list[int]], block: int = 4096
) -> torch.Tensor | None:
    """(N, features): the character encoder's output for each token's character ids, in
    blocks of similar length; None when the model has no character encoder."""
    if net.chars is None:
        return None
    order = sorted(range(len(chars)), key=lambda i: len(chars[i]))
    out: torch.Tensor | None = None
    for first in range(0, len(order), block):
        chosen = order[first : first + block]
        width = len(chars[chosen[-1]])
        padded = np.zeros((len(chosen), 1, width), dtype=np.int64)  # (n, 1 "time", chars)
        for row, i in enumerate(chosen):
            padded[row, 0, : len(chars[i])] = chars[i]
        features = net.chars(torch.from_numpy(padded)).squeeze(1)  # (n, features)
        if out is None:
            out = features.new_empty((len(chars), features.shape[1]))
        out[torch.tensor(chosen)] = features
    return out
