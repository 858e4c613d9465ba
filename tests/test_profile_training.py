"""The training-step profile (scripts/profile_training.py): what it times and how it adds up."""

from __future__ import annotations

import pytest
import torch


@pytest.fixture(scope="module")
def profile_training(load_script):
    return load_script("profile_training")


def test_phases_train_the_network_and_count_its_tokens(profile_training) -> None:
    torch.manual_seed(1)
    net, optimizer, batches = profile_training.demo_training([])
    before = [p.detach().clone() for p in net.parameters()]
    spent, tokens = profile_training.phase_times(net, optimizer, batches, steps=3)
    assert tokens == sum(b.tokens for b in batches[:3])
    assert set(spent) == set(profile_training.PHASES)
    assert all(seconds > 0 for seconds in spent.values())
    changed = [not torch.equal(a, b) for a, b in zip(before, net.parameters(), strict=True)]
    assert any(changed)  # the optimizer phase really stepped

    operators = profile_training.top_operators(net, optimizer, batches, steps=2, count=5)
    assert len(operators) == 5
    shares = [o["share"] for o in operators]
    assert shares == sorted(shares, reverse=True) and 0 < sum(shares) <= 1


def test_lstm_rate_counts_the_flops_the_model_counts(profile_training, monkeypatch) -> None:
    from tagger.network.encoder import BiResidualEncoder

    hidden, batch, length = 8, 2, 3
    one_layer = BiResidualEncoder(hidden, hidden, 1, "lstm", bidirectional=False)
    recurrent_per_token = one_layer.flops_per_token() - 2 * hidden * hidden  # minus the projection
    clock = iter([0.0, 2.0] * 1000)  # every pass "takes" 2 seconds
    monkeypatch.setattr(profile_training.time, "perf_counter", lambda: next(clock))
    gflops = profile_training.lstm_layer_rate(hidden, batch, length, repeats=3)
    # Training counts 3x the forward FLOPs, as the benchmark does (common practice).
    assert gflops * 1e9 * 2.0 == pytest.approx(3 * recurrent_per_token * batch * length)
