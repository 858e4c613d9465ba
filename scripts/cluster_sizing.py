"""Sizing a cluster on paper, from what was measured on one 2-core machine.

    .venv/bin/python scripts/cluster_sizing.py

Reads benchmarks/cluster.json (scripts/bench_cluster.py: two Dask workers on one machine, per-chunk
overhead, model load per worker) and benchmarks/distributed_speed.json
(scripts/bench_distributed.py: training tokens/s of 2 processes x 1 thread), and writes
benchmarks/sizing.{json,md}: the expected time to tag 10 million documents of 1,000 tokens and to
train one epoch on 1 million sentences on 4, 16 and 64 machines of 2 cores. Every assumption that
is not a measurement is a named constant below and is printed in the record.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine  # noqa: E402

BENCHMARKS = ROOT / "benchmarks"
MACHINES = (4, 16, 64)

# The jobs to size.
DOCUMENTS = 10_000_000
TOKENS_PER_DOCUMENT = 1_000
SENTENCES = 1_000_000

# Assumptions (not measured here; each is printed in the record).
CHARS_PER_TOKEN = 6.5  # the demo's unannotated reports: 1,099,329 output bytes for 168,619 tokens
OUTPUT_BYTES_PER_TOKEN = 6.5  # JSON Lines out, same source (benchmarks/tagging_profile.json)
TOKENS_PER_SENTENCE = 25  # a typical annotated sentence of reports or abstracts
BATCH_SENTENCES = 32  # train.batch_size of the shipped configs, per process
DEV_SHARE = 0.1  # a dev file a tenth the size of train, scored by rank 0 alone each epoch
NETWORK_BYTES_PER_SECOND = 1.25e9  # 10 Gbit/s between machines
NETWORK_LATENCY_SECONDS = 50e-6  # one message between two machines on one switch
SCHEDULER_SECONDS_PER_TASK = 1e-3  # the Dask scheduler's own work per task, about (from memory)
CLIENT_WRITE_BYTES_PER_SECOND = 200e6  # the one process that receives results and writes them
# Parameters of a model trained on 1 million sentences: the demo network with a word table of
# 50,000 words x 100 numbers (the demo's table holds 1,741 words).
TRAIN_PARAMETERS = 737_064 - 174_100 + 50_000 * 100


def tagging_rows(cluster: dict, machines: tuple[int, ...]) -> list[dict]:
    r = cluster["results"]
    per_machine = r["cluster_of_2"]["tokens_per_second"]  # 2 workers x 1 thread on one machine
    tokens = DOCUMENTS * TOKENS_PER_DOCUMENT
    tasks = tokens * CHARS_PER_TOKEN / r["chunk_chars"]
    load = max(r["model_load_seconds"]["first"])
    rows = []
    for n in machines:
        compute = tokens / (n * per_machine) * (1 + r["overhead_share"])
        floors = {
            "scheduler": tasks * SCHEDULER_SECONDS_PER_TASK,
            "writing": tokens * OUTPUT_BYTES_PER_TOKEN / CLIENT_WRITE_BYTES_PER_SECOND,
        }
        seconds = max(compute, *floors.values()) + load
        bound = "workers" if compute >= max(floors.values()) else max(floors, key=floors.get)
        rows.append({"machines": n, "seconds": round(seconds), "bound_by": bound})
    return rows


def training_rows(distributed: dict, machines: tuple[int, ...]) -> list[dict]:
    summary = distributed["summary"]
    per_rank = summary["2 processes x 1 thread"]["median_tokens_per_second"] / 2
    alone = summary["1 process x 1 thread"]["median_tokens_per_second"]
    gradient_bytes = 4 * TRAIN_PARAMETERS
    step_compute = BATCH_SENTENCES * TOKENS_PER_SENTENCE / per_rank
    dev_seconds = DEV_SHARE * SENTENCES * TOKENS_PER_SENTENCE / (3 * alone)  # forward only: ~3x
    rows = []
    for n in machines:
        ranks = 2 * n
        # Ring all-reduce: each rank sends and receives 2 (R-1)/R of the gradient, in 2
        # messages; the exchange inside a machine is taken to cost as much as between machines.
        exchange = 2 * (ranks - 1) / ranks * gradient_bytes / NETWORK_BYTES_PER_SECOND
        exchange += 2 * (ranks - 1) * NETWORK_LATENCY_SECONDS
        steps = math.ceil(SENTENCES / (BATCH_SENTENCES * ranks))
        seconds = steps * (step_compute + exchange) + dev_seconds
        rows.append(
            {
                "machines": n,
                "ranks": ranks,
                "steps": steps,
                "step_compute_ms": round(1000 * step_compute, 1),
                "step_exchange_ms": round(1000 * exchange, 1),
                "seconds_per_epoch": round(seconds),
                "sentences_per_step": BATCH_SENTENCES * ranks,
            }
        )
    return rows


def duration(seconds: float) -> str:
    if seconds >= 3600:
        return f"{seconds / 3600:.1f} h"
    return f"{seconds / 60:.0f} min" if seconds >= 60 else f"{seconds:.0f} s"


def render(record: dict) -> str:
    c = record["measured"]
    lines = [
        "# Sizing a cluster of 2-core machines",
        "",
        "Written by `scripts/cluster_sizing.py` from measurements on one 2-core machine "
        "(`benchmarks/cluster.md`, `benchmarks/distributed_speed.md`) and the assumptions listed "
        "below. Estimates, not measurements: read them as the order of magnitude an operator "
        "should plan for, and measure a small cluster before buying a large one.",
        "",
        "## Tagging 10 million documents of 1,000 tokens (10^10 tokens)",
        "",
        f"Measured: two Dask workers (1 thread each) on one machine tag "
        f"{c['tagging_tokens_per_second']:,.0f} tokens/s with the demo model; per-chunk "
        f"overhead {100 * c['overhead_share']:.1f}% of a {c['chunk_chars']:,}-character chunk's "
        f"tagging time; first model load on a worker {c['model_load_seconds']:.1f} s.",
        "",
        "| machines | expected time | limited by |",
        "|---:|---:|---|",
    ]
    for row in record["tagging"]:
        lines.append(f"| {row['machines']} | {duration(row['seconds'])} | {row['bound_by']} |")
    lines += [
        "",
        "## Training one epoch on 1 million sentences",
        "",
        f"Measured: 2 processes x 1 thread train {c['training_tokens_per_second_two_ranks']:,.0f} "
        "tokens/s on one machine (the demo network), i.e. "
        f"{c['training_tokens_per_second_two_ranks'] / 2:,.0f} per process.",
        "",
        "| machines | processes | sentences a step | steps | compute a step | exchange a step "
        "| expected epoch |",
        "|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for row in record["training"]:
        lines.append(
            f"| {row['machines']} | {row['ranks']} | {row['sentences_per_step']:,} | "
            f"{row['steps']:,} | {row['step_compute_ms']} ms | {row['step_exchange_ms']} ms | "
            f"{duration(row['seconds_per_epoch'])} |"
        )
    lines += ["", "## Assumptions", ""]
    lines += [f"- `{name}` = {value}" for name, value in record["assumptions"].items()]
    lines += [
        "",
        "## Reading it",
        "",
        "- Tagging scales with the machines until one of the single points is reached: the "
        "scheduler's work per chunk or the one process that receives every result and writes "
        "the output in input order. Larger chunks (`--chunk-chars`) lower the first; several "
        "`tag` runs over parts of the archive, each with its own output file, remove the second.",
        "- Training does not scale as far: every step exchanges the whole gradient, whose size "
        "is set mostly by the word table (a model of 50,000 words holds about 23 MB of "
        "gradient), while its computation shrinks with the batch. With 64 machines a step "
        "trains on 4,096 sentences: fewer steps per epoch at the same learning rate learn less "
        "per epoch (`benchmarks/distributed.md`), so plan more epochs or a higher learning rate; "
        "dev scoring on rank 0 adds a fixed share per epoch.",
        "",
        f"_{record['machine']['date']}, commit {record['machine']['commit']}._",
        "",
    ]
    return "\n".join(lines)


def main() -> int:
    cluster_path = BENCHMARKS / "cluster.json"
    distributed_path = BENCHMARKS / "distributed_speed.json"
    missing = [p for p in (cluster_path, distributed_path) if not p.exists()]
    if missing:
        print(f"missing {', '.join(map(str, missing))}: run the benchmarks that write them first")
        return 1
    cluster = json.loads(cluster_path.read_text())
    distributed = json.loads(distributed_path.read_text())
    r = cluster["results"]
    record = {
        "measured": {
            "tagging_tokens_per_second": r["cluster_of_2"]["tokens_per_second"],
            "overhead_share": r["overhead_share"],
            "chunk_chars": r["chunk_chars"],
            "model_load_seconds": max(r["model_load_seconds"]["first"]),
            "training_tokens_per_second_two_ranks": distributed["summary"][
                "2 processes x 1 thread"
            ]["median_tokens_per_second"],
        },
        "assumptions": {
            name: value
            for name, value in globals().items()
            if name.isupper() and name not in {"ROOT", "BENCHMARKS", "MACHINES"}
        },
        "tagging": tagging_rows(cluster, MACHINES),
        "training": training_rows(distributed, MACHINES),
        "machine": machine(),
    }
    (BENCHMARKS / "sizing.json").write_text(json.dumps(record, indent=1) + "\n")
    (BENCHMARKS / "sizing.md").write_text(render(record))
    print(render(record))
    return 0


if __name__ == "__main__":
    sys.exit(main())
