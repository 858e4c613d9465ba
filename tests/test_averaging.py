from __future__ import annotations

import pytest
import torch

from tagger.training.averaging import WeightAverage


def test_the_average_follows_the_ramped_exponential_formula() -> None:
    # Hand-worked: decay_t = min(decay, (1 + t) / (10 + t)); avg_t = decay_t avg + (1 - decay_t) w.
    net = torch.nn.Linear(1, 1, bias=False)
    with torch.no_grad():
        net.weight.fill_(0.0)
    average = WeightAverage(net, decay=0.5)
    expected = 0.0
    for step, value in enumerate([10.0, 20.0, 30.0], start=1):
        with torch.no_grad():
            net.weight.fill_(value)
        average.update()
        decay = min(0.5, (1 + step) / (10 + step))
        expected = decay * expected + (1 - decay) * value
    assert average.averaged[0].item() == pytest.approx(expected)
    # Worked by hand: the ramp gives 2/11, 3/12 and 4/13, all below 0.5.
    assert expected == pytest.approx(
        ((0 * 2 / 11 + 10 * 9 / 11) * 3 / 12 + 20 * 9 / 12) * 4 / 13 + 30 * 9 / 13
    )


def test_swapped_in_uses_the_average_and_restores_the_live_weights() -> None:
    net = torch.nn.Linear(2, 1)
    average = WeightAverage(net, decay=0.9)
    live = [p.detach().clone() for p in net.parameters()]
    with torch.no_grad():
        for a in average.averaged:
            a.fill_(7.0)
    with average.swapped_in():
        assert all(torch.all(p == 7.0) for p in net.parameters())
    for p, before in zip(net.parameters(), live, strict=True):
        assert torch.equal(p, before)


def test_the_decay_stops_at_the_configured_value() -> None:
    net = torch.nn.Linear(1, 1, bias=False)
    average = WeightAverage(net, decay=0.5)
    for _ in range(100):
        average.update()
    with torch.no_grad():
        net.weight.fill_(average.averaged[0].item() + 2.0)
    before = average.averaged[0].item()
    average.update()
    assert average.averaged[0].item() == pytest.approx(before + 1.0)  # half way: decay 0.5


def test_load_state_refuses_a_different_network() -> None:
    average = WeightAverage(torch.nn.Linear(2, 1), decay=0.9)  # weight and bias
    with pytest.raises(ValueError, match="1 averaged tensors"):
        average.load_state({"average.0": torch.zeros(1, 2)}, 5)
