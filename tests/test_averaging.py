from __future__ import annotations

import pytest
import torch

from tagger.training.averaging import average_steps, new_average, ramped_decay


def test_the_average_follows_the_ramped_exponential_formula() -> None:
    # Hand-worked: decay_t = min(decay, (1 + t) / (10 + t)); avg_t = decay_t avg + (1 - decay_t) w.
    net = torch.nn.Linear(1, 1, bias=False)
    with torch.no_grad():
        net.weight.fill_(0.0)
    average = new_average(net, decay=0.5)
    expected = 0.0
    for step, value in enumerate([10.0, 20.0, 30.0], start=1):
        with torch.no_grad():
            net.weight.fill_(value)
        average.update_parameters(net)
        decay = min(0.5, (1 + step) / (10 + step))
        expected = decay * expected + (1 - decay) * value
    assert average.module.weight.item() == pytest.approx(expected)
    # Worked by hand: the ramp gives 2/11, 3/12 and 4/13, all below 0.5.
    assert expected == pytest.approx(
        ((0 * 2 / 11 + 10 * 9 / 11) * 3 / 12 + 20 * 9 / 12) * 4 / 13 + 30 * 9 / 13
    )
    assert average_steps(average) == 3


def test_the_ramp_by_hand() -> None:
    assert ramped_decay(0.999, 1) == pytest.approx(2 / 11)
    assert ramped_decay(0.999, 90) == pytest.approx(91 / 100)
    assert ramped_decay(0.5, 90) == 0.5


def test_the_average_is_a_copy_beside_the_live_network() -> None:
    net = torch.nn.Linear(2, 1)
    average = new_average(net, decay=0.9)
    live = [p.detach().clone() for p in net.parameters()]
    with torch.no_grad():
        for p in average.module.parameters():
            p.fill_(7.0)
    assert all(torch.all(p == 7.0) for p in average.module.parameters())
    for p, before in zip(net.parameters(), live, strict=True):
        assert torch.equal(p, before)
    average.update_parameters(net)  # reads the live weights, never writes them
    for p, before in zip(net.parameters(), live, strict=True):
        assert torch.equal(p, before)
    # Step 1 averages with decay 2/11: 7 * 2/11 + w * 9/11.
    for p, before in zip(average.module.parameters(), live, strict=True):
        assert torch.allclose(p, 7.0 * 2 / 11 + before * 9 / 11)


def test_the_decay_stops_at_the_configured_value() -> None:
    net = torch.nn.Linear(1, 1, bias=False)
    average = new_average(net, decay=0.5)
    for _ in range(100):
        average.update_parameters(net)
    with torch.no_grad():
        net.weight.fill_(average.module.weight.item() + 2.0)
    before = average.module.weight.item()
    average.update_parameters(net)
    assert average.module.weight.item() == pytest.approx(before + 1.0)  # half way: decay 0.5
