"""The sizing arithmetic of scripts/cluster_sizing.py on hand-made measurements."""

from __future__ import annotations

import pytest


@pytest.fixture()
def sizing(load_script):
    return load_script("cluster_sizing")


def cluster(tokens_per_second: float, chunk_chars: int = 200_000) -> dict:
    return {
        "results": {
            "chunk_chars": chunk_chars,
            "cluster_of_2": {"tokens_per_second": tokens_per_second},
            "model_load_seconds": {"first": [3.0, 5.0]},
            "overhead_share": 0.02,
        }
    }


def test_tagging_time_falls_with_the_machines_until_a_single_point_limits_it(sizing) -> None:
    rows = sizing.tagging_rows(cluster(50_000), (4, 16))
    tokens = sizing.DOCUMENTS * sizing.TOKENS_PER_DOCUMENT
    # workers' time with the chunk overhead, plus the slowest first model load
    assert rows[0]["seconds"] == round(tokens / (4 * 50_000) * 1.02 + 5.0)
    assert rows[0]["bound_by"] == "workers"
    assert rows[1]["seconds"] < rows[0]["seconds"]
    # Workers a thousand times faster: the one process writing the output is the limit, or with
    # small chunks the scheduler's work per chunk.
    assert sizing.tagging_rows(cluster(50_000_000, 20_000), (64,))[0]["bound_by"] == "scheduler"
    fast = sizing.tagging_rows(cluster(50_000_000, 2_000_000), (64,))[0]
    assert fast["bound_by"] == "writing"
    written = tokens * sizing.OUTPUT_BYTES_PER_TOKEN / sizing.CLIENT_WRITE_BYTES_PER_SECOND
    assert fast["seconds"] == round(written + 5.0)


def test_training_steps_shrink_with_the_processes_while_the_exchange_grows(sizing) -> None:
    measured = {
        "summary": {
            "1 process x 1 thread": {"median_tokens_per_second": 10_000},
            "2 processes x 1 thread": {"median_tokens_per_second": 16_000},
        }
    }
    four, sixty_four = sizing.training_rows(measured, (4, 64))
    assert (four["ranks"], four["sentences_per_step"]) == (8, 8 * sizing.BATCH_SENTENCES)
    assert four["steps"] == -(-sizing.SENTENCES // (8 * sizing.BATCH_SENTENCES))
    expected_ms = 1000 * sizing.BATCH_SENTENCES * sizing.TOKENS_PER_SENTENCE / 8_000
    assert four["step_compute_ms"] == round(expected_ms, 1)
    assert sixty_four["step_exchange_ms"] > four["step_exchange_ms"]
    assert sixty_four["seconds_per_epoch"] < four["seconds_per_epoch"]
