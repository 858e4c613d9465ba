"""Training benchmark: speed against the machine's ceiling, and accuracy on the demo and CoNLL-2000 data.

    .venv/bin/python scripts/bench_training.py speed              # a minute or two
    .venv/bin/python scripts/bench_training.py demo               # trains configs/default.toml (minutes)
    .venv/bin/python scripts/bench_training.py conll2000 [--seeds 1 2 3]   # ~30 min a seed
    .venv/bin/python scripts/bench_training.py conll2000_pos [--seeds 1 2 3]

Results are merged into benchmarks/training.json and rendered to benchmarks/training.md, each entry
with the date, machine, torch version, threads, commit and command that produced it.
Speed figures are ratios measured side by side in one run: absolute numbers on shared machines are noisy.
"""

from __future__ import annotations

import argparse
import json
import random
import shutil
import sys
import time
from pathlib import Path
from statistics import median

import torch

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, matmul_gflops, portable_path  # noqa: E402

from tagger.apply.evaluate import evaluate_files  # noqa: E402
from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.config import apply_overrides, load_config  # noqa: E402
from tagger.data.atomic import atomic_output  # noqa: E402
from tagger.errors import ModelFileError  # noqa: E402
from tagger.network.batching import Batch, bucketed_batches, collate  # noqa: E402
from tagger.training.config_changes import same_config  # noqa: E402
from tagger.training.loop import train  # noqa: E402
from tagger.training.setup import new_network, prepare_training, step_tools  # noqa: E402
from tagger.training.step import StepTools, train_step  # noqa: E402

RESULTS = ROOT / "benchmarks" / "training.json"
SUMMARY = ROOT / "benchmarks" / "training.md"
CORPORA = ROOT.parent / "shared" / "corpora"
ACCURACY_RUNS = {  # name: (config, test file)
    "demo": (ROOT / "configs" / "default.toml", ROOT / "data" / "demo" / "test.txt"),
    "conll2000": (ROOT / "configs" / "conll2000.toml", CORPORA / "conll2000" / "test.txt"),
    "conll2000_pos": (ROOT / "configs" / "conll2000_pos.toml", CORPORA / "conll2000" / "test.txt"),
}
# The data each accuracy run trains on, as overrides: the shipped configs name no data files.
DATA_FILES = {
    "demo": [
        f"data.train={json.dumps(str(ROOT / 'data' / 'demo' / 'train.txt'))}",
        f"data.dev={json.dumps(str(ROOT / 'data' / 'demo' / 'dev.txt'))}",
    ],
    "conll2000": [f"data.train={json.dumps(str(CORPORA / 'conll2000' / 'train.txt'))}"],
    "conll2000_pos": [f"data.train={json.dumps(str(CORPORA / 'conll2000' / 'train.txt'))}"],
}


def demo_training(overrides: list[str]) -> tuple[StepTools, list[Batch]]:
    """The default config's network with the trainer's own step tools, and the demo batches."""
    config = apply_overrides(
        load_config(ROOT / "configs" / "default.toml"), [*DATA_FILES["demo"], *overrides]
    )
    setup = prepare_training(config)
    net, _ = new_network(config, setup)
    tools = step_tools(config, setup, net)
    encoded = setup.encoded
    batches = [
        collate(encoded, b)
        for b in bucketed_batches(
            [len(e.words) for e in encoded], config.train.batch_size, random.Random(1)
        )
    ]
    net.train()
    return tools, batches


def training_speed(overrides: list[str], seconds: float = 20.0) -> dict:
    """Training tokens/s of the trainer's own `train_step` on demo batches (unknown-word
    replacement, forward, backward, clipping, the optimizer, weight averaging when on)."""
    tools, batches = demo_training(overrides)
    for batch in batches[:5]:
        train_step(tools, batch)
    tokens, start, i = 0, time.perf_counter(), 0
    while time.perf_counter() - start < seconds:
        batch = batches[i % len(batches)]
        train_step(tools, batch)
        tokens += batch.tokens
        i += 1
    rate = tokens / (time.perf_counter() - start)
    # Training costs about 3x the forward FLOPs (PERFORMANCE.md, common practice for dense layers).
    flops = 3 * tools.net.flops_per_token()
    return {
        "overrides": overrides,
        "tokens_per_second": round(rate),
        "train_flops_per_token": flops,
        "achieved_gflops": round(rate * flops / 1e9, 2),
    }


def run_speed(args: argparse.Namespace) -> dict:
    started_on = machine()
    rows = []
    for threads in args.threads:
        torch.set_num_threads(threads)
        ceiling_before = matmul_gflops(threads)
        variants = [[]] + [[f"model.cell={c!r}"] for c in ("rnn", "minimal", "gru")]
        variants += [["model.fast_kernels=false"]]
        for overrides in variants:
            result = training_speed(overrides, args.seconds)
            rows.append({"threads": threads, **result})
        ceiling_after = matmul_gflops(threads)
        ceiling = (ceiling_before + ceiling_after) / 2
        for row in rows:
            if row["threads"] == threads:
                row["ceiling_gflops"] = round(ceiling, 1)
                row["ceiling_tokens_per_second"] = round(
                    ceiling * 1e9 / row["train_flops_per_token"]
                )
                row["efficiency"] = round(
                    row["tokens_per_second"] / row["ceiling_tokens_per_second"], 3
                )
    return {"kind": "speed", "machine": started_on, "rows": rows}


RUN_RECORD = "benchmark-run.json"  # in a run folder: the config trained and what it scored


def train_seed(
    config_path: Path, overrides: list[str], seed: int, test_file: Path, out: Path
) -> dict:
    """Train one seed into `out` and score it on `test_file`; return the run's figures.

    A finished run whose record names the same config and test file is reused, not retrained; an
    interrupted one goes on from its last checkpoint. So a benchmark stopped half way (a session
    ends, a machine restarts) picks up where it was. Delete the run folder to retrain.
    """
    config = apply_overrides(load_config(config_path), [*overrides, f"train.seed={seed}"])
    record = out / RUN_RECORD
    if record.exists():
        saved = json.loads(record.read_text())
        if same_config(saved["config"], config) and saved["test_file"] == str(test_file):
            print(
                f"[{out.name}] reused (trained at commit {saved['machine']['commit']})", flush=True
            )
            return {**saved["result"], "machine": saved["machine"], "reused": True}
    label = f"[{out.name}]"
    try:
        result = train(config, out, resume=True, progress=lambda e: _print_epoch(e, label))
    except ModelFileError:  # a checkpoint of another config or other data: start again
        shutil.rmtree(out)
        result = train(config, out, progress=lambda e: _print_epoch(e, label))
    tagger = Tagger.load(result.model_path)
    test = evaluate_files(tagger, [test_file])["overall"]
    figures = {
        "seed": seed,
        "test_f1": round(100 * test["micro"]["f1"], 2),
        "dev_f1": round(100 * result.best_dev["micro"]["f1"], 2),
        "per_type_f1": {t: round(100 * v["f1"], 2) for t, v in test["per_type"].items()},
        # Summed over epochs, so a run resumed after an interruption counts its training only.
        "train_seconds": round(sum(row["epoch_seconds"] for row in result.history), 1),
        "epochs": len(result.history),
        "best_epoch": result.best_epoch,
        "stop": result.stop_reason,
        "model_bytes": result.model_path.stat().st_size,
        "train_tokens_per_second": round(
            median(row["train_tokens_per_second"] for row in result.history)
        )
        if result.history
        else 0,
        "threads": torch.get_num_threads(),
    }
    finished = machine()
    with atomic_output(record) as handle:
        json.dump(
            {
                "config": config.to_dict(),
                "test_file": str(test_file),
                "machine": finished,
                "result": figures,
            },
            handle,
            indent=2,
        )
    print(f"{label} {json.dumps(figures)}", flush=True)
    return {**figures, "machine": finished, "reused": False}


def accuracy_entry(
    label: str,
    config_path: Path,
    overrides: list[str],
    test_file: Path,
    runs: list[dict],
    started_on: dict,
) -> dict:
    f1s = sorted(r["test_f1"] for r in runs)
    return {
        "kind": label,
        "machine": started_on,
        "config": str(config_path.relative_to(ROOT)),
        "overrides": overrides,
        "test_file": portable_path(test_file),
        "runs": runs,
        "threads": runs[0]["threads"],
        "test_f1_median": median(f1s),
        "test_f1_min": f1s[0],
        "test_f1_max": f1s[-1],
    }


def run_accuracy(
    config_path: Path,
    overrides: list[str],
    test_file: Path,
    seeds: list[int],
    label: str,
    runs_dir: Path | None = None,
) -> dict:
    """Train one model a seed and score it on `test_file`; runs go to `runs_dir/LABEL-seedN`
    (by default runs/bench-LABEL-seedN)."""
    started_on = machine()  # the commit and date when the run began, not when it ended
    runs = [
        train_seed(
            config_path,
            overrides,
            seed,
            test_file,
            runs_dir / f"{label}-seed{seed}"
            if runs_dir is not None
            else ROOT / "runs" / f"bench-{label}-seed{seed}",
        )
        for seed in seeds
    ]
    return accuracy_entry(label, config_path, overrides, test_file, runs, started_on)


def _print_epoch(event: dict, label: str = "") -> None:
    if event["event"] == "epoch":
        print(
            f"{label}  epoch {event['epoch']} dev F1 {100 * event['dev_f1']:.2f} "
            f"{event['train_tokens_per_second']:.0f} tok/s {event['epoch_seconds']:.0f}s",
            flush=True,
        )
    elif event["event"] == "note":
        print(f"{label}  note: {event['message']}", flush=True)


def speed_table(rows: list[dict]) -> list[str]:
    """Markdown rows of training speed beside the ceiling, one per (threads, variant)."""
    lines = [
        "| threads | variant | tokens/s | ceiling tokens/s | share of ceiling | matmul GFLOP/s |",
        "|---|---|---|---|---|---|",
    ]
    for row in rows:
        variant = ", ".join(row["overrides"]) or "default (lstm, fused kernel)"
        lines.append(
            f"| {row['threads']} | {variant} | {row['tokens_per_second']:,} | "
            f"{row['ceiling_tokens_per_second']:,} | {100 * row['efficiency']:.0f}% | "
            f"{row['ceiling_gflops']} |"
        )
    return lines


def render(results: dict) -> str:
    lines = [
        "# Training benchmarks",
        "",
        "Written by `scripts/bench_training.py`; each section names the run that produced it.",
        "",
    ]
    speed = results.get("speed")
    if speed:
        m = speed["machine"]
        lines += [
            "## Training speed against the machine's ceiling",
            "",
            f"{m['date']}, commit {m['commit']}, {m['cores']} cores ({m['cpu']}), torch {m['torch']}; "
            f"`{m['command']}`",
            "",
            "Ceiling = measured 1024^3 float32 matrix-product rate / (3 x forward FLOPs per token of "
            "the word-level encoder and output layer). Full steps, the trainer's own `train_step`: "
            "unknown-word replacement, forward, backward, clipping, Adam.",
            "",
        ]
        lines += speed_table(speed["rows"])
        lines.append("")
    for key, title in (
        ("demo", "Demo corpus (configs/default.toml)"),
        ("conll2000", "CoNLL-2000 chunking, words only (configs/conll2000.toml)"),
        ("conll2000_pos", "CoNLL-2000 chunking with the POS column (configs/conll2000_pos.toml)"),
    ):
        acc = results.get(key)
        if not acc:
            continue
        m = acc["machine"]
        note = f" Note: {m['note']}." if m.get("note") else ""
        lines += [
            f"## {title}",
            "",
            f"{m['date']}, commit {m['commit']}, {m['cores']} cores, torch {m['torch']}, "
            f"{acc.get('threads', m.get('threads'))} threads; `{m['command']}`.{note}",
            "",
            f"Test span F1: median {acc['test_f1_median']} (min {acc['test_f1_min']}, max "
            f"{acc['test_f1_max']}) over {len(acc['runs'])} seed(s).",
            "",
            "| seed | test F1 | dev F1 | epochs (best) | training time | model size | stopped because |",
            "|---|---|---|---|---|---|---|",
        ]
        for r in acc["runs"]:
            lines.append(
                f"| {r['seed']} | {r['test_f1']} | {r['dev_f1']} | {r['epochs']} ({r['best_epoch']}) | "
                f"{r['train_seconds'] / 60:.1f} min | {r['model_bytes'] / 1e6:.1f} MB | {r['stop']} |"
            )
        lines.append("")
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("what", choices=["speed", *ACCURACY_RUNS])
    parser.add_argument("--seeds", type=int, nargs="+", default=[1])
    parser.add_argument("--threads", type=int, nargs="+", default=[2])
    parser.add_argument(
        "--seconds", type=float, default=20.0, help="timing window per speed variant"
    )
    parser.add_argument("--set", dest="overrides", action="append", default=[])
    args = parser.parse_args()
    if args.what == "speed":
        entry = run_speed(args)
    else:
        config, test_file = ACCURACY_RUNS[args.what]
        if not test_file.exists():
            sys.exit(f"skipped: {test_file} is absent")
        overrides = [*DATA_FILES[args.what], *args.overrides]
        entry = run_accuracy(config, overrides, test_file, args.seeds, args.what)
    # Read the results only now: another benchmark may have written them while this one ran.
    results = json.loads(RESULTS.read_text()) if RESULTS.exists() else {}
    results[args.what] = entry
    RESULTS.parent.mkdir(exist_ok=True)
    RESULTS.write_text(json.dumps(results, indent=2) + "\n")
    SUMMARY.write_text(render(results))
    print(SUMMARY.read_text())


if __name__ == "__main__":
    main()
