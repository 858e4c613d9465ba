"""Tests for tagger.network.crf against brute-force enumeration of every label path."""

from __future__ import annotations

import itertools
import math

import pytest
import torch

from tagger.network.crf import CRF, NEG


def _random_crf(n: int, seed: int, constrained: bool) -> CRF:
    g = torch.Generator().manual_seed(seed)
    if constrained:
        # A scheme-like table: label 0 is "outside", odd labels begin a span, the even label
        # after an odd one continues it and may only follow that odd label or itself; to
        # exercise end constraints too, the last label may not end a sentence.
        start_ok = [not (j % 2 == 0 and j > 0) for j in range(n)]
        trans_ok = [
            [not (j % 2 == 0 and j > 0) or i in (j - 1, j) for j in range(n)] for i in range(n)
        ]
        end_ok = [True] * (n - 1) + [False]
        crf = CRF(n, start_ok, trans_ok, end_ok)
    else:
        crf = CRF(n)
    with torch.no_grad():
        crf.transitions.copy_(torch.randn(n, n, generator=g))
        crf.start.copy_(torch.randn(n, generator=g))
        crf.end.copy_(torch.randn(n, generator=g))
    return crf


def _random_batch(
    n: int, lengths: list[int], seed: int, dtype: torch.dtype = torch.float32
) -> tuple[torch.Tensor, torch.Tensor]:
    g = torch.Generator().manual_seed(seed)
    emissions = (torch.randn(len(lengths), max(lengths), n, generator=g) * 2).to(dtype)
    mask = torch.arange(max(lengths)) < torch.tensor(lengths).unsqueeze(1)
    return emissions, mask


def _allowed(crf: CRF, path: tuple[int, ...]) -> bool:
    return (
        bool(crf.start_ok[path[0]])
        and bool(crf.end_ok[path[-1]])
        and all(bool(crf.trans_ok[a, b]) for a, b in itertools.pairwise(path))
    )


def _path_score(crf: CRF, emissions: torch.Tensor, path: tuple[int, ...]) -> float:
    # The textbook linear-chain score, written with plain Python floats.
    s = crf.start[path[0]].item() + crf.end[path[-1]].item()
    s += sum(emissions[t, y].item() for t, y in enumerate(path))
    s += sum(crf.transitions[a, b].item() for a, b in itertools.pairwise(path))
    return s


def _enumerate(crf: CRF, emissions: torch.Tensor, n: int) -> dict[tuple[int, ...], float]:
    """Every allowed path of length n with its score (brute force)."""
    paths = itertools.product(range(crf.num_labels), repeat=n)
    return {p: _path_score(crf, emissions, p) for p in paths if _allowed(crf, p)}


CASES = [
    (n, lengths, constrained, seed)
    for seed, (n, lengths) in enumerate(
        [(3, [1]), (3, [5, 2, 3, 1]), (4, [4, 4]), (4, [5, 1, 3]), (3, [2, 5])]
    )
    for constrained in (False, True)
]


@pytest.mark.parametrize(("n", "lengths", "constrained", "seed"), CASES)
def test_log_partition_viterbi_and_marginals_match_enumeration(
    n: int, lengths: list[int], constrained: bool, seed: int
) -> None:
    # Source: brute-force enumeration of all label paths of each sentence's own length.
    crf = _random_crf(n, seed, constrained)
    emissions, mask = _random_batch(n, lengths, seed + 100)
    with torch.no_grad():
        log_z = crf.log_partition(emissions, mask)
        marginals = crf.marginals(emissions, mask)
    decoded = crf.decode(emissions, mask)
    for b, length in enumerate(lengths):
        scores = _enumerate(crf, emissions[b], length)
        brute_log_z = math.log(sum(math.exp(s) for s in scores.values()))
        assert log_z[b].item() == pytest.approx(brute_log_z, abs=1e-4)
        assert tuple(decoded[b]) == max(scores, key=scores.__getitem__)
        brute = torch.zeros(max(lengths), n)
        for path, s in scores.items():
            for t, y in enumerate(path):
                brute[t, y] += math.exp(s - brute_log_z)
        torch.testing.assert_close(marginals[b], brute, atol=1e-5, rtol=0)
        assert torch.allclose(marginals[b, :length].sum(1), torch.ones(length), atol=1e-5)


@pytest.mark.parametrize("constrained", [False, True])
def test_score_matches_hand_sum(constrained: bool) -> None:
    # Source: the textbook path score summed term by term with Python floats.
    crf = _random_crf(4, 7, constrained)
    lengths = [5, 2, 1]
    emissions, mask = _random_batch(4, lengths, 8)
    labels = torch.tensor([[0, 1, 2, 2, 1], [1, 2, 9, 9, 9], [3, 9, 9, 9, 9]])
    real = torch.where(mask, labels, torch.zeros_like(labels))  # padding labels are ignored
    with torch.no_grad():
        scores = crf.score(emissions, real, mask)
    for b, length in enumerate(lengths):
        path = tuple(labels[b, :length].tolist())
        expected = _path_score(crf, emissions[b], path)
        if _allowed(crf, path):
            assert scores[b].item() == pytest.approx(expected, abs=1e-4)
        else:  # [3] may not end a sentence: its learnt end score is replaced by NEG
            end = crf.end[path[-1]].item()
            assert scores[b].item() == pytest.approx(expected - end + NEG, abs=1e-2)


def test_nll_gradcheck_float64() -> None:
    # Source: torch.autograd.gradcheck (finite differences) on the emissions and on the CRF's
    # own parameters, which gradcheck perturbs in place.
    crf = _random_crf(3, 9, constrained=True).double()
    emissions, mask = _random_batch(3, [4, 2, 3], 10, torch.float64)
    labels = torch.tensor([[0, 1, 2, 0], [1, 2, 0, 0], [0, 0, 1, 0]])

    def nll(em: torch.Tensor, *_params: torch.Tensor) -> torch.Tensor:
        return crf.nll(em, labels, mask)

    inputs = (emissions.requires_grad_(True), crf.transitions, crf.start, crf.end)
    assert torch.autograd.gradcheck(nll, inputs, eps=1e-6, atol=1e-5)


def test_no_nan_gradients_with_forbidden_transitions_and_padding() -> None:
    crf = _random_crf(5, 11, constrained=True)
    emissions, mask = _random_batch(5, [6, 1, 3, 6], 12)
    emissions.requires_grad_(True)
    labels = torch.tensor(
        [[1, 2, 2, 0, 3, 3], [0, 0, 0, 0, 0, 0], [3, 4, 0, 0, 0, 0], [0, 1, 2, 0, 0, 3]]
    )
    loss = crf.nll(emissions, labels, mask)
    marginal_sum = crf.marginals(emissions, mask).pow(2).sum()
    (loss + marginal_sum).backward()
    assert torch.isfinite(loss)
    assert torch.isfinite(emissions.grad).all()
    assert torch.all(emissions.grad[~mask] == 0)
    for p in crf.parameters():
        assert torch.isfinite(p.grad).all()
    # The gold paths are allowed, so no NEG enters their scores.
    assert loss.item() < 1e3


def test_decode_never_uses_a_forbidden_transition() -> None:
    crf = _random_crf(7, 13, constrained=True)
    g = torch.Generator().manual_seed(0)
    lengths = torch.randint(1, 12, (64,), generator=g).tolist()
    emissions, mask = _random_batch(7, lengths, 14)
    decoded = crf.decode(emissions * 5, mask)
    assert [len(p) for p in decoded] == lengths
    assert all(_allowed(crf, tuple(p)) for p in decoded)
    # Without the constraints the same emissions do produce forbidden paths, so the check bites.
    free = CRF(7)
    with torch.no_grad():
        for name in ("transitions", "start", "end"):
            getattr(free, name).copy_(getattr(crf, name))
    assert not all(_allowed(crf, tuple(p)) for p in free.decode(emissions * 5, mask))


def test_nll_reductions_and_bad_arguments() -> None:
    crf = _random_crf(3, 15, constrained=False)
    emissions, mask = _random_batch(3, [3, 2], 16)
    labels = torch.zeros(2, 3, dtype=torch.long)
    per = crf.nll(emissions, labels, mask, reduction="none")
    assert per.shape == (2,) and torch.all(per > 0)  # a probability below 1
    torch.testing.assert_close(crf.nll(emissions, labels, mask), per.sum())
    torch.testing.assert_close(crf.nll(emissions, labels, mask, reduction="mean"), per.mean())
    with pytest.raises(ValueError, match="reduction"):
        crf.nll(emissions, labels, mask, reduction="max")
    with pytest.raises(ValueError, match="trans_ok"):
        CRF(3, trans_ok=[[True] * 3] * 2)
    with pytest.raises(ValueError, match="at least one real position"):
        crf.log_partition(emissions, torch.zeros(2, 3, dtype=torch.bool))
