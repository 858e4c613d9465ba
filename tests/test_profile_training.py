"""The training-step profile (scripts/profile_training.py): what it times and how it adds up."""

from __future__ import annotations

import pytest
import torch


@pytest.fixture(scope="module")
def profile_training(load_script):
    return load_script("profile_training")


def test_the_profiled_steps_train_as_the_training_step_does(profile_training) -> None:
    from tagger.training.step import train_step

    trained = []
    for run in ("profiled", "train_step"):
        torch.manual_seed(1)  # the same initial weights, then the same unknown-word draws
        tools, batches = profile_training.demo_training(["train.weight_average=0.9"])
        torch.manual_seed(2)
        if run == "profiled":
            profile_training.phase_times(tools, batches, steps=2)
        else:
            for batch in batches[:2]:
                train_step(tools, batch)
        live = {f"net.{k}": v.clone() for k, v in tools.net.state_dict().items()}
        average = {f"average.{k}": v.clone() for k, v in tools.average.state_dict().items()}
        trained.append({**live, **average})
    profiled, stepped = trained
    assert profiled.keys() == stepped.keys()
    for name, tensor in profiled.items():
        assert torch.equal(tensor, stepped[name]), name


def test_phases_train_the_network_and_count_its_tokens(profile_training) -> None:
    torch.manual_seed(1)
    # Weight averaging on, so that every phase of the step has work to do.
    tools, batches = profile_training.demo_training(["train.weight_average=0.9"])
    net = tools.net
    before = [p.detach().clone() for p in net.parameters()]
    spent, tokens = profile_training.phase_times(tools, batches, steps=3)
    assert tokens == sum(b.tokens for b in batches[:3])
    assert set(spent) == set(profile_training.PHASES)
    assert all(seconds > 0 for seconds in spent.values())
    changed = [not torch.equal(a, b) for a, b in zip(before, net.parameters(), strict=True)]
    assert any(changed)  # the optimizer phase really stepped
    assert int(tools.average.n_averaged) == 1 + 3  # the averaging phase took in each step

    operators = profile_training.top_operators(tools, batches, steps=2, count=5)
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
