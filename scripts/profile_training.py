"""Where a training step's time goes: the default model on demo batches.

Times the phases of the trainer's own step (tagger.training.step.STEP_PHASES: unknown words,
forward, backward, clipping, optimizer, averaging) with a clock between them, lists the operators
with the most self time (torch.profiler), and times one fused LSTM layer alone at the model's size,
each beside the matrix-product ceiling measured in the same run. Writes
benchmarks/training_profile.{json,md}.

    .venv/bin/python scripts/profile_training.py [--steps 300] [--threads 1] [--set KEY=VALUE]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path
from statistics import median

import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench_training import demo_training  # noqa: E402
from benchlib import machine, matmul_gflops  # noqa: E402

from tagger.data.atomic import atomic_output  # noqa: E402
from tagger.network.batching import Batch  # noqa: E402
from tagger.training.step import STEP_PHASES, StepTools, StepWork, train_step  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
PHASES = tuple(name for name, _ in STEP_PHASES)


def phase_times(tools: StepTools, batches: list[Batch], steps: int) -> tuple[dict[str, float], int]:
    """Seconds spent in each phase of `train_step` over `steps` steps, and the tokens they
    trained on: the step's own phases, in its order, with a clock read between them."""
    spent = dict.fromkeys(PHASES, 0.0)
    tokens = 0
    for i in range(steps):
        batch = batches[i % len(batches)]
        work = StepWork(batch)
        for name, phase in STEP_PHASES:
            started = time.perf_counter()
            phase(tools, work)
            spent[name] += time.perf_counter() - started
        tokens += batch.tokens
    return spent, tokens


def top_operators(
    tools: StepTools, batches: list[Batch], steps: int, count: int = 12
) -> list[dict]:
    """The operators with the most self CPU time over `steps` calls of `train_step`, with their
    share."""
    with torch.profiler.profile(activities=[torch.profiler.ProfilerActivity.CPU]) as prof:
        for i in range(steps):
            train_step(tools, batches[i % len(batches)])
    events = [e for e in prof.key_averages() if e.self_cpu_time_total > 0]
    total = sum(e.self_cpu_time_total for e in events)
    events.sort(key=lambda e: e.self_cpu_time_total, reverse=True)
    return [
        {"operator": e.key, "calls": e.count, "share": round(e.self_cpu_time_total / total, 3)}
        for e in events[:count]
    ]


def lstm_layer_rate(hidden: int, batch: int, length: int, repeats: int = 200) -> float:
    """GFLOP/s of one fused LSTM layer's forward and backward at the model's size (median pass)."""
    layer = torch.nn.LSTM(hidden, hidden, batch_first=True)
    x = torch.randn(batch, length, hidden, requires_grad=True)
    for _ in range(10):
        layer(x)[0].sum().backward()
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        layer(x)[0].sum().backward()
        times.append(time.perf_counter() - started)
    seconds = median(times)
    # 4 gate blocks, input and recurrent products, 2 FLOPs a multiply-add; backward about 2x forward.
    flops = 3 * 2 * 4 * hidden * (hidden + hidden) * batch * length
    return flops / seconds / 1e9


def profile(threads: int, steps: int, overrides: list[str]) -> dict:
    torch.manual_seed(1)
    torch.set_num_threads(threads)
    started_on = machine()
    ceiling_before = matmul_gflops(threads)
    tools, batches = demo_training(overrides)
    net = tools.net
    phase_times(tools, batches, 10)  # warm-up
    spent, tokens = phase_times(tools, batches, steps)
    operators = top_operators(tools, batches, min(steps, 100))
    mean_length = round(sum(b.tokens for b in batches) / sum(len(b.indices) for b in batches))
    hidden = net.encoder.hidden_size
    # The machine's rate drifts within minutes: pair each LSTM timing with a ceiling taken beside it.
    pairs = [(lstm_layer_rate(hidden, 32, mean_length), matmul_gflops(threads)) for _ in range(3)]
    lstm_gflops, lstm_share = median(g for g, _ in pairs), median(g / c for g, c in pairs)
    ceiling = (ceiling_before + matmul_gflops(threads)) / 2
    total = sum(spent.values())
    flops = 3 * net.flops_per_token()
    return {
        "machine": started_on,
        "threads": threads,
        "overrides": overrides,
        "steps": steps,
        "tokens_per_second": round(tokens / total),
        "ceiling_gflops": round(ceiling, 1),
        "ceiling_share": round(tokens / total * flops / 1e9 / ceiling, 3),
        "phases": {name: round(seconds / total, 3) for name, seconds in spent.items()},
        "operators": operators,
        "lstm_layer": {
            "hidden": hidden,
            "batch": 32,
            "length": mean_length,
            "gflops": round(lstm_gflops, 1),
            "ceiling_share": round(lstm_share, 3),
        },
    }


def render(r: dict) -> str:
    m, lstm = r["machine"], r["lstm_layer"]
    overrides = "".join(f", `{o}`" for o in r.get("overrides", []))
    lines = [
        "# Where a training step's time goes",
        "",
        f"Default model (`configs/default.toml`{overrides}) on demo batches, the trainer's own "
        f"step, {r['threads']} thread(s), {r['steps']} steps: {r['tokens_per_second']:,} tokens/s, "
        f"{100 * r['ceiling_share']:.0f}% of the matrix-product ceiling "
        f"({r['ceiling_gflops']} GFLOP/s, 1024^3 float32, measured in this run).",
        "",
        "| phase of a step | share of the time |",
        "|---|---:|",
        *(f"| {name} | {100 * share:.0f}% |" for name, share in r["phases"].items()),
        "",
        "Operators with the most self time (torch.profiler, all phases; the profiler adds its own "
        "overhead, so read shares, not times):",
        "",
        "| operator | calls | share of self time |",
        "|---|---:|---:|",
        *(
            f"| `{o['operator']}` | {o['calls']:,} | {100 * o['share']:.1f}% |"
            for o in r["operators"]
        ),
        "",
        f"One fused LSTM layer alone, forward and backward at the model's size (hidden "
        f"{lstm['hidden']}, batch {lstm['batch']}, {lstm['length']} steps): {lstm['gflops']} "
        f"GFLOP/s, {100 * lstm['ceiling_share']:.0f}% of the ceiling (median of 3 timings, each "
        "beside a ceiling measured right after it). That bounds what the whole step can reach "
        "while the recurrent layers dominate it.",
        "",
        f"_{m['date']}, commit {m['commit']}; {m['cores']} cores ({m['cpu']}), torch {m['torch']}; "
        f"load average {m['load_before']} before the run; `{m['command']}`._",
        "",
    ]
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--steps", type=int, default=300, help="timed training steps")
    parser.add_argument("--threads", type=int, default=1, help="torch threads")
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "training_profile")
    parser.add_argument(
        "--set",
        dest="overrides",
        action="append",
        default=[],
        help="override a config key, e.g. --set train.weight_average=0.999 (repeatable)",
    )
    args = parser.parse_args()
    result = profile(args.threads, args.steps, args.overrides)
    with atomic_output(args.out.with_suffix(".json")) as out:
        out.write(json.dumps(result, indent=2) + "\n")
    with atomic_output(args.out.with_suffix(".md")) as out:
        out.write(render(result))
    print(render(result))


if __name__ == "__main__":
    main()
