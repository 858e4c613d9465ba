"""How training speed holds up when other processes share the cores, by torch thread count.

    .venv/bin/python scripts/bench_threads.py            # about 4 minutes on 2 cores

torch starts as many threads as the machine has cores, whatever else is running. When other
processes are busy, a step that splits its work over every core waits at each split for the
thread that got the least CPU time, so a few busy neighbours can cost far more than their fair
share. This measures the trainer's own step (`bench_training.training_speed`) side by side:

* alone, at 1 thread and at torch's default;
* beside busy processes (pure-Python loops, one core each), at 1 thread, at torch's default,
  and at torch's default with OpenMP told not to spin while it waits (OMP_WAIT_POLICY=PASSIVE);
* two trainings at once, both at 1 thread or both at torch's default: their summed rate.

Each measurement runs in a fresh process, so thread settings and environment never carry over.
Results go to benchmarks/threads.json and benchmarks/threads.md; the ratios are what to read.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine  # noqa: E402

RESULTS = ROOT / "benchmarks" / "threads.json"
SUMMARY = ROOT / "benchmarks" / "threads.md"
BUSY_LOOP = "while True:\n    pass\n"


def measure(threads: int, seconds: float) -> dict:
    """Run in the child: the trainer's step rate at `threads` (0: torch's default)."""
    import torch
    from bench_training import training_speed

    if threads:
        torch.set_num_threads(threads)
    result = training_speed([], seconds)
    return {"threads": torch.get_num_threads(), "tokens_per_second": result["tokens_per_second"]}


def _child(threads: int, seconds: float, passive: bool) -> subprocess.Popen:
    env = dict(os.environ)
    if passive:
        env["OMP_WAIT_POLICY"] = "PASSIVE"
    command = [sys.executable, __file__, "_measure", str(threads), str(seconds)]
    return subprocess.Popen(command, env=env, stdout=subprocess.PIPE, text=True)


def _read(child: subprocess.Popen) -> dict:
    out, _ = child.communicate()
    if child.returncode:
        raise SystemExit(f"a measurement failed (exit {child.returncode})")
    return json.loads(out.strip().splitlines()[-1])


def run_case(
    name: str, threads: int, seconds: float, busy: int = 0, copies: int = 1, passive: bool = False
) -> dict:
    hogs = [subprocess.Popen([sys.executable, "-c", BUSY_LOOP]) for _ in range(busy)]
    try:
        time.sleep(0.5 if busy else 0)
        children = [_child(threads, seconds, passive) for _ in range(copies)]
        results = [_read(child) for child in children]
    finally:
        for hog in hogs:
            hog.kill()
            hog.wait()
    rates = [r["tokens_per_second"] for r in results]
    return {
        "case": name,
        "threads": results[0]["threads"],
        "busy_processes": busy,
        "trainings": copies,
        "omp_wait_policy": "PASSIVE" if passive else "default",
        "tokens_per_second": sum(rates),
        "per_training": rates,
    }


def render(entry: dict) -> str:
    rows = entry["rows"]
    alone = {r["threads"]: r["tokens_per_second"] for r in rows if r["case"] == "alone"}
    best_alone = max(alone.values())
    lines = [
        "# Training speed when the cores are shared",
        "",
        "Written by `scripts/bench_threads.py`. The trainer's own step on demo batches, "
        f"{entry['seconds']:.0f} s a measurement, each in a fresh process.",
        "",
        f"{entry['machine']['date']}, commit {entry['machine']['commit']}, "
        f"{entry['machine']['cores']} cores, torch {entry['machine']['torch']}; "
        f"torch's default thread count here: {entry['default_threads']}.",
        "",
        "| case | torch threads | OpenMP waiting | tokens/s | of the best rate alone |",
        "|---|---|---|---|---|",
    ]
    for r in rows:
        waiting = "sleeps (PASSIVE)" if r["omp_wait_policy"] == "PASSIVE" else "default"
        rate = f"{r['tokens_per_second']:,}"
        if r["trainings"] > 1:
            rate += f" (sum of {' + '.join(f'{x:,}' for x in r['per_training'])})"
        share = r["tokens_per_second"] / best_alone
        lines.append(f"| {r['case']} | {r['threads']} | {waiting} | {rate} | {share:.2f}x |")
    return "\n".join(lines) + "\n"


def main() -> None:
    if len(sys.argv) == 4 and sys.argv[1] == "_measure":
        print(json.dumps(measure(int(sys.argv[2]), float(sys.argv[3]))))
        return
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--seconds", type=float, default=12.0)
    args = parser.parse_args()
    s = args.seconds
    cases = [
        ("alone", 1, {}),
        ("alone", 0, {}),
        ("beside 1 busy process", 1, {"busy": 1}),
        ("beside 1 busy process", 0, {"busy": 1}),
        ("beside 1 busy process", 0, {"busy": 1, "passive": True}),
        ("beside 2 busy processes", 1, {"busy": 2}),
        ("beside 2 busy processes", 0, {"busy": 2}),
        ("beside 2 busy processes", 0, {"busy": 2, "passive": True}),
        ("two trainings at once", 1, {"copies": 2}),
        ("two trainings at once", 0, {"copies": 2}),
        ("two trainings at once", 0, {"copies": 2, "passive": True}),
    ]
    rows = []
    for name, threads, options in cases:
        row = run_case(name, threads, s, **options)
        print(json.dumps(row), flush=True)
        rows.append(row)
    import torch

    entry = {
        "machine": machine(),
        "seconds": s,
        "default_threads": torch.get_num_threads(),
        "command": "scripts/bench_threads.py " + " ".join(sys.argv[1:]),
        "rows": rows,
    }
    RESULTS.write_text(json.dumps(entry, indent=1) + "\n")
    SUMMARY.write_text(render(entry))
    print(SUMMARY.read_text())


if __name__ == "__main__":
    main()
