"""The exported-model benchmark (scripts/bench_onnx.py): one small measurement and its table."""

from __future__ import annotations

from pathlib import Path

import torch
from model_files import tiny_tagger


def test_a_measurement_compares_the_three_backends_on_a_test_file(
    load_script, tmp_path: Path
) -> None:
    bench = load_script("bench_onnx")
    torch.manual_seed(2)
    tiny_tagger(seed=2).save(tmp_path / "model.tagger")
    test = tmp_path / "test.txt"
    test.write_text(
        "Anna\tB-PER\nmet\tO\nBob\tB-PER\nin\tO\nOslo\tB-LOC\n.\tO\n\n"
        "Bob\tB-PER\nleft\tO\nOslo\tB-LOC\n\n",
        encoding="utf-8",
    )
    result = bench.measure(tmp_path / "model.tagger", test, rounds=2)
    assert set(result["tokens_per_second"]) == {"torch", "onnx", "onnx-int8"}
    assert result["test_tokens"] == 9 and all(len(s) == 2 for s in result["seconds"].values())
    # float32 graphs find torch's spans: the same F1, no sentence with other spans
    assert result["span_f1"]["onnx"] == result["span_f1"]["torch"]
    assert result["agreement_with_torch"]["onnx"]["sentences_with_other_spans"] == 0
    assert result["agreement_with_torch"]["onnx"]["largest_confidence_difference"] < 1e-4
    text = bench.render({"demo": result})
    rows = [line for line in text.splitlines() if line.startswith("| onnx")]
    assert len(rows) == 2 and "## demo" in text
