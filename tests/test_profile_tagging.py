"""The tagging profile (scripts/profile_tagging.py): how its clock charges phases, and that a
clocked run writes what the command writes."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from model_files import tiny_tagger


@pytest.fixture(scope="module")
def profile_tagging(load_script):
    return load_script("profile_tagging")


def test_each_phase_is_charged_its_own_time_only(profile_tagging, monkeypatch) -> None:
    ticks = iter([0.0, 1.0, 4.0, 10.0, 20.0, 22.0, 30.0, 31.0, 40.0, 45.0])
    monkeypatch.setattr(profile_tagging.time, "perf_counter", lambda: next(ticks))
    clock = profile_tagging.PhaseClock()
    inner = clock.timed("word network", lambda: "emissions")
    outer = clock.timed("tokenising", lambda: inner())
    assert outer() == "emissions"  # tokenising 0-10 around word network 1-4
    reading = clock.timed("reading", lambda: iter(["a", "b"]))
    # The generator is created (20-22), then each item and the end are read: 30-31, 40-45,
    # and the end, which takes the last two ticks the test gave.
    items = reading()
    assert next(items) == "a"
    assert next(items) == "b"
    with pytest.raises(StopIteration):
        ticks = iter([50.0, 53.0])
        monkeypatch.setattr(profile_tagging.time, "perf_counter", lambda: next(ticks))
        next(items)
    assert clock.spent["word network"] == 3.0
    assert clock.spent["tokenising"] == 10.0 - 3.0
    assert clock.spent["reading"] == 2.0 + 1.0 + 5.0 + 3.0
    assert sum(clock.spent.values()) == 10.0 + 11.0


def test_a_clocked_run_writes_what_the_command_writes(profile_tagging, tmp_path: Path) -> None:
    model = tmp_path / "model.tagger"
    tiny_tagger(seed=3).save(model)
    source = tmp_path / "in.jsonl"
    texts = ["Anna met Bob in Oslo.", "Bob left Oslo. Anna stayed!", "Oslo", "Met Anna in Oslo."]
    source.write_text("".join(json.dumps({"id": i, "text": t}) + "\n" for i, t in enumerate(texts)))
    originals = [getattr(owner, name) for _, owner, name in profile_tagging.PHASES]
    clock = profile_tagging.PhaseClock()
    clocked = profile_tagging.run_once(model, source, tmp_path / "clocked.jsonl", clock)
    plain = profile_tagging.run_once(model, source, tmp_path / "plain.jsonl")
    assert (tmp_path / "clocked.jsonl").read_bytes() == (tmp_path / "plain.jsonl").read_bytes()
    assert clocked["tokens"] == plain["tokens"] == 6 + 7 + 1 + 5
    # Every wrapped function is put back, and each phase of this model's pipeline ran.
    assert [getattr(owner, name) for _, owner, name in profile_tagging.PHASES] == originals
    assert all(seconds > 0 for seconds in clock.spent.values()), clock.spent
