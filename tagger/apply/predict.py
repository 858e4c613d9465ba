"""Prediction on token lists: the torch work behind `Tagger.predict_sentences` (spans, their
scores and each sentence's certainty for the review flag), and label probabilities at a
temperature (`tagger.apply.calibration` fits it).

Built for many sentences at once: a token's character features do not depend on its neighbours,
so they are computed once per distinct token, not per occurrence, and remembered between calls
(`tagger.apply.token_rows`), as each distinct token's word and character ids are. Feature ids
(extra columns, lexicon matches) do depend on the sentence, so they are computed per sentence.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from typing import TYPE_CHECKING

import numpy as np
import torch

from tagger.apply.label_decoding import LabelDecoder
from tagger.apply.review import ScoredSentence, score_paths
from tagger.network.batching import EncodedSentence, collate_lm, encode_sentence
from tagger.network.crf import CRF
from tagger.network.net import TaggerNet
from tagger.text.vocab import Vocabularies

if TYPE_CHECKING:
    from tagger.apply.tagger import Rows, Tagger

TOKEN_CACHE = 50_000  # distinct tokens whose ids are remembered between calls (a few MB)


TokenIds = tuple[int, list[int], list[int] | None]  # word id, character ids, fixed-table rows


def encode_cached(
    vocabs: Vocabularies,
    cache: dict[str, TokenIds],
    token_lists: Sequence[Sequence[str]],
) -> list[EncodedSentence]:
    """Word and character ids (and fixed-table rows) of each sentence, through ``cache`` (token
    -> ids): looking up a token costs far more than a dict hit, and text repeats its tokens."""
    if len(cache) > TOKEN_CACHE:
        cache.clear()
    encoded = []
    with_bags = vocabs.subwords is not None
    for tokens in token_lists:
        words: list[int] = []
        chars: list[list[int]] = []
        bags: list[list[int]] = []
        for token in tokens:
            ids = cache.get(token)
            if ids is None:
                one = encode_sentence([token], vocabs)
                ids = cache[token] = (one.words[0], one.chars[0], one.bags[0] if one.bags else None)
            words.append(ids[0])
            chars.append(ids[1])
            if with_bags:
                bags.append(ids[2] or [])
        encoded.append(EncodedSentence(words, chars, bags=bags if with_bags else None))
    return encoded


def net_slots(net: TaggerNet) -> int:
    """How many feature slots a network reads."""
    return 0 if net.features is None else len(net.features)


def label_probabilities(
    net: TaggerNet, emissions: torch.Tensor, mask: torch.Tensor, temperature: float = 1.0
) -> torch.Tensor:
    """(B, T, L): P(label at t | sentence), the CRF's marginals (or the softmax without a CRF),
    with every score of the model divided by ``temperature``.

    Dividing all scores of a label path (emissions, and the CRF's start, transition and end
    scores) by the same temperature keeps the best path and spreads (above 1) or sharpens
    (below 1) the probabilities around it; forbidden transitions stay forbidden."""
    if temperature == 1.0:
        return net.label_probabilities(emissions, mask)
    if net.crf is None:
        return (emissions / temperature).softmax(-1)
    return tempered_crf(net.crf, temperature).marginals(emissions / temperature, mask)


def tempered_crf(crf: CRF, temperature: float) -> CRF:
    """A copy of ``crf`` whose learnt start, transition and end scores are divided by
    ``temperature`` (forbidden ones stay forbidden: the constraints are copied as they are)."""
    with torch.inference_mode(False), torch.no_grad():
        tempered = CRF(
            crf.num_labels, crf.start_ok.tolist(), crf.trans_ok.tolist(), crf.end_ok.tolist()
        )
        for name in ("transitions", "start", "end"):
            getattr(tempered, name).copy_(getattr(crf, name) / temperature)
    return tempered


def crf_decoder(crf: CRF, temperature: float = 1.0) -> LabelDecoder:
    """The numpy decoder of ``crf``'s scores divided by ``temperature`` (as `tempered_crf`)."""
    return LabelDecoder.from_scores(
        crf.start.detach().numpy(),
        crf.transitions.detach().numpy(),
        crf.end.detach().numpy(),
        crf.start_ok.numpy(),
        crf.trans_ok.numpy(),
        crf.end_ok.numpy(),
        temperature,
    )


def emission_batches(
    tagger: Tagger,
    token_lists: Sequence[Sequence[str]],
    batch_size: int,
    rows: Rows | None = None,
) -> Iterator[tuple[list[int], torch.Tensor, torch.Tensor]]:
    """(indices into ``token_lists``, emissions (B, T, L), mask (B, T)) of each batch of the
    non-empty sentences, the network in evaluation mode and without gradients.

    Sentences of similar lengths are batched together, so the indices are not in order."""
    features = tagger.feature_ids(token_lists, rows)  # before any work: may refuse the input
    net = tagger.net
    was_training = net.training
    if was_training:  # walking every module costs a visible share of tagging one sentence
        net.eval()
    try:
        with torch.inference_mode():
            # Distinct tokens get ids 1.., 0 is padding:  token_rows[s][t] = id of token t of s.
            distinct: dict[str, int] = {}
            token_rows = [
                [distinct.setdefault(t, len(distinct) + 1) for t in tokens]
                for tokens in token_lists
            ]
            (encoded,) = (
                tagger.encode_cached([list(distinct)]) if distinct else (EncodedSentence([], []),)
            )
            word_of = torch.tensor([0, *encoded.words])  # (N+1,) word id of each distinct token
            seen, chars, bags = list(distinct), encoded.chars, encoded.bags or []
            char_table = _remembered(  # (N+1, F): row 0 zeros, for padding
                tagger,
                "chars",
                net.chars,
                seen,
                lambda at: _char_features(net, [chars[i] for i in at]),
            )
            fixed_table = _remembered(  # (N+1, dim)
                tagger,
                "vectors",
                net.fixed_vectors,
                seen,
                lambda at: _fixed_vectors(net, [bags[i] for i in at]),
            )
            real = [i for i, tokens in enumerate(token_lists) if len(tokens) > 0]
            real.sort(key=lambda i: len(token_lists[i]))  # similar lengths: little padding
        for first in range(0, len(real), batch_size):
            with torch.inference_mode():
                indices = real[first : first + batch_size]
                lengths = [len(token_rows[i]) for i in indices]
                ids = np.zeros((len(indices), max(lengths)), dtype=np.int64)  # (B, T)
                for b, i in enumerate(indices):
                    ids[b, : lengths[b]] = token_rows[i]
                ids_tensor = torch.from_numpy(ids)
                mask = ids_tensor != 0  # (B, T)
                char_features = None if char_table is None else char_table[ids_tensor]
                fixed = None if fixed_table is None else fixed_table[ids_tensor]
                lm = None
                if tagger.vocabs.char_lm is not None:
                    reading = tagger.vocabs.char_lm.encode
                    lm = collate_lm([reading(token_lists[i]) for i in indices])
                feature_tensor = None
                if tagger.features is not None:
                    slots = np.zeros((*ids.shape, net_slots(net)), dtype=np.int64)  # (B, T, K)
                    for b, i in enumerate(indices):
                        slots[b, : lengths[b]] = np.asarray(features[i], dtype=np.int64).T
                    feature_tensor = torch.from_numpy(slots)
                emissions = net.emissions(
                    word_of[ids_tensor],
                    None,
                    torch.tensor(lengths),
                    char_features,
                    feature_tensor,
                    fixed,
                    lm,
                )
            yield indices, emissions, mask
    finally:
        if was_training:
            net.train()


def scored_sentences(
    tagger: Tagger,
    token_lists: Sequence[Sequence[str]],
    batch_size: int,
    with_scores: bool,
    rows: Rows | None,
    temperature: float | None = None,
) -> list[ScoredSentence]:
    """See `Tagger.predict_sentences`; ``temperature`` None is the model's own."""
    net = tagger.net
    temperature = tagger.temperature if temperature is None else temperature
    decoder = None
    if with_scores and net.crf is not None:
        # The marginals in numpy, float64, rescaled each step: 1.7x (batches of 256) to 3x
        # (batches of 8) faster than the log-space recursion in torch, measured on a quiet
        # machine, and the same probabilities to 1e-12 (tests/test_label_decoding.py).
        decoder = crf_decoder(net.crf, temperature)
    result = [ScoredSentence([]) for _ in token_lists]
    for indices, emissions, mask in emission_batches(tagger, token_lists, batch_size, rows):
        with torch.inference_mode():
            paths = net.decode(emissions, mask)
            real = mask.numpy()
            probabilities = None
            if decoder is not None:
                probabilities = decoder.marginals((emissions / temperature).numpy(), real)
            elif with_scores:
                probabilities = label_probabilities(net, emissions, mask, temperature).numpy()
        found = score_paths(paths, probabilities, real, tagger.label_ids_to_spans)
        for i, sentence in zip(indices, found, strict=True):
            result[i] = sentence
    return result


def _remembered(
    tagger: Tagger,
    store: str,
    module: torch.nn.Module | None,
    tokens: list[str],
    compute: Callable[[list[int]], torch.Tensor],
) -> torch.Tensor | None:
    """(N+1, width): row 0 zeros, then each of the N ``tokens``' row from the tagger's store
    ``store``, ``compute(positions)`` giving the rows of those not held; None for a network
    without ``module`` (or no tokens)."""
    if module is None or not tokens:
        return None
    table = tagger.token_rows[store].table(
        tokens, lambda at: compute(at).numpy(), weights_key(module)
    )
    return torch.from_numpy(table)


def weights_key(module: torch.nn.Module) -> tuple[int, ...]:
    """Changes whenever ``module``'s weights do (an optimizer step, a loaded state): what
    `TokenRows` keeps a network's per-token rows under."""
    return (id(module), *(p._version for p in module.parameters()))


def _char_features(net: TaggerNet, chars: list[list[int]], block: int = 4096) -> torch.Tensor:
    """(N, features): the character encoder's output for each token's character ids, in
    blocks of similar length."""
    assert net.chars is not None
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


def _fixed_vectors(net: TaggerNet, bags: list[list[int]], block: int = 4096) -> torch.Tensor:
    """(N, dim): each token's vector from the frozen pretrained table (the mean of its bag's
    rows), in blocks."""
    assert net.fixed_vectors is not None
    parts = []
    for first in range(0, len(bags), block):
        chosen = bags[first : first + block]
        width = max(1, max(len(bag) for bag in chosen))
        padded = np.zeros((len(chosen), width), dtype=np.int64)
        for row, bag in enumerate(chosen):
            padded[row, : len(bag)] = bag
        parts.append(net.fixed_vectors(torch.from_numpy(padded)))
    return torch.cat(parts)
