"""The plain-text memory benchmark (scripts/bench_text_memory.py) writes the inputs it says."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture(scope="module")
def bench(load_script):
    return load_script("bench_text_memory")


SENTENCES = ["Crew B swapped the pitch bearing on T-14.", "Vibration hit 7.2 mm/s.", "No fault."]


def test_paragraphs_text_has_blank_lines_and_the_asked_size(bench, tmp_path: Path) -> None:
    path = tmp_path / "p.txt"
    paragraphs = bench.write_text(SENTENCES, path, 20_000, "paragraphs", seed=1)
    data = path.read_bytes()
    assert 20_000 <= len(data) < 20_000 + 6 * 45
    assert data.count(b"\n\n") == paragraphs
    # Some paragraphs are broken over lines, as prose files often are.
    assert any("\n" in p for p in data.decode().split("\n\n"))


def test_long_lines_text_has_no_blank_line(bench, tmp_path: Path) -> None:
    path = tmp_path / "l.txt"
    paragraphs = bench.write_text(SENTENCES, path, 20_000, "long lines", seed=1)
    text = path.read_text()
    assert text.count("\n") == paragraphs and "\n\n" not in text
    assert all(line.split(" ")[0] in {"Crew", "Vibration", "No"} for line in text.splitlines())
