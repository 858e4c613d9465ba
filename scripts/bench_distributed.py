"""Training speed on two processes against one, side by side in one run.

    .venv/bin/python scripts/bench_distributed.py --rounds 3

Trains the demo for a few epochs as 1 process x 1 thread, 1 process x 2 threads and 2 processes
x 1 thread (`torchrun --standalone --nproc-per-node 2`), the last also with batches of 16 (as many
optimizer steps an epoch as one process), all interleaved round after round so
that a change in the machine's load touches all of them, and records the median of the training
tokens/s `train` writes per epoch (dev scoring apart; with two processes they count the tokens of
both) and the dev F1 after the last epoch. Writes benchmarks/distributed_speed.{json,md}.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, write_record  # noqa: E402

DEMO = ROOT / "data" / "demo"
TORCHRUN = Path(sys.executable).with_name("torchrun")

ONE = [sys.executable, "-m", "tagger"]
TWO = [str(TORCHRUN), "--standalone", "--nproc-per-node", "2", "-m", "tagger"]
# name: (launcher, threads per process, settings beside the config's)
SETUPS: dict[str, tuple[list[str], int, list[str]]] = {
    "1 process x 1 thread": (ONE, 1, []),
    "1 process x 2 threads": (ONE, 2, []),
    "2 processes x 1 thread": (TWO, 1, []),
    # a step of two batches of 16 holds as many sentences as one process's batch of 32, so the
    # run takes as many optimizer steps per epoch as one process does, at the rate as given
    "2 processes x 1 thread, batches of 16": (
        TWO,
        1,
        ["train.batch_size=16", "train.scale_rate_with_processes=false"],
    ),
}


def train_once(
    launcher: list[str], threads: int, settings: list[str], epochs: int, out: Path
) -> list[dict]:
    command = [
        *launcher,
        "train",
        "--train",
        str(DEMO / "train.txt"),
        "--dev",
        str(DEMO / "dev.txt"),
        "--out",
        str(out),
        "--threads",
        str(threads),
        "--set",
        f"train.epochs={epochs}",
        *[part for setting in settings for part in ("--set", setting)],
        "--overwrite",
    ]
    subprocess.run(command, check=True, cwd=ROOT, capture_output=True)
    return json.loads((out / "epochs.json").read_text())


def measure(rounds: int, epochs: int) -> dict:
    found: dict[str, list[dict]] = {name: [] for name in SETUPS}
    work = Path(tempfile.mkdtemp(prefix="tagger-bench-ddp-"))
    try:
        for round_number in range(rounds):
            for name, (launcher, threads, settings) in SETUPS.items():
                history = train_once(launcher, threads, settings, epochs, work / "run")
                rates = [e["train_tokens_per_second"] for e in history]
                found[name].append({"tokens_per_second": rates, "dev_f1": history[-1]["dev_f1"]})
                print(f"round {round_number + 1} {name}: {rates} dev F1 {history[-1]['dev_f1']}")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    summary = {}
    for name, runs in found.items():
        rates = [r for run in runs for r in run["tokens_per_second"]]
        summary[name] = {
            "median_tokens_per_second": statistics.median(rates),
            "range": [min(rates), max(rates)],
            "dev_f1": [run["dev_f1"] for run in runs],
        }
    base = summary["1 process x 1 thread"]["median_tokens_per_second"]
    for entry in summary.values():
        entry["ratio_to_one_thread"] = round(entry["median_tokens_per_second"] / base, 2)
    return {"rounds": rounds, "epochs": epochs, "runs": found, "summary": summary}


def render(result: dict) -> str:
    m = result["machine"]
    lines = [
        "# Training on two processes against one, side by side",
        "",
        f"The demo (`data/demo/train.txt`, dev `data/demo/dev.txt`, `configs/default.toml`), "
        f"{result['epochs']} epochs a run, {result['rounds']} interleaved rounds; tokens/s are "
        "those `train` writes per epoch (training only; two processes count the tokens of both), "
        "medians over every epoch of every round. Two processes train on a batch each per step, "
        "so with the config's 32 a step holds 64 sentences and an epoch has half the steps, "
        "at twice the learning rate (train.scale_rate_with_processes); with batches of 16 "
        "and the rate as given, the steps are one process's. Load average before the run: "
        f"{m['load_before']}.",
        "",
        "| setup | tokens/s (median) | range | against 1 x 1 | dev F1 after the last epoch |",
        "|---|---:|---:|---:|---|",
    ]
    for name, entry in result["summary"].items():
        low, high = entry["range"]
        f1 = ", ".join(f"{100 * f:.2f}" for f in entry["dev_f1"])
        lines.append(
            f"| {name} | {entry['median_tokens_per_second']:,.0f} | {low:,.0f}-{high:,.0f} | "
            f"{entry['ratio_to_one_thread']:.2f}x | {f1} |"
        )
    lines += ["", f"_{m['date']}, commit {m['commit']}, `{m['command']}`._", ""]
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--epochs", type=int, default=2)
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "distributed_speed")
    args = parser.parse_args()
    result = measure(args.rounds, args.epochs)
    result["machine"] = machine()
    write_record(args.out, result, render(result))


if __name__ == "__main__":
    main()
