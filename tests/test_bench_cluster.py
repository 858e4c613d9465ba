"""scripts/bench_cluster.py's input and chunk sampling (the measurement itself is not run here:
it needs a quiet machine)."""

from __future__ import annotations

import gzip
import json
from pathlib import Path


def test_the_input_is_the_demo_reports_repeated_to_the_size_asked(
    load_script, tmp_path: Path
) -> None:
    bench = load_script("bench_cluster")
    path, documents = bench.write_input(tmp_path, 0.05)
    data = path.read_bytes()
    assert 50_000 <= len(data) < 52_000  # stops at the first record past the size
    records = [json.loads(line) for line in data.decode("utf-8").splitlines()]
    assert len(records) == documents
    assert [r["id"] for r in records] == [f"r{i}" for i in range(documents)]
    with gzip.open(bench.DEMO / "unannotated.txt.gz", "rt", encoding="utf-8") as archive:
        lines = {line.strip() for line in archive if line.strip()}
    assert {r["text"] for r in records} <= lines

    chunks = bench.sample_chunks(path, 5_000, 4)
    assert len(chunks) == 4
    first = [doc.text for chunk in chunks for doc in chunk]
    assert first == [r["text"] for r in records[: len(first)]]  # in input order, none left out
    for chunk in chunks:  # each chunk closes at the first document past the size
        sizes = [len(doc.text) + 1 for doc in chunk]
        assert sum(sizes) >= 5_000 > sum(sizes[:-1])
