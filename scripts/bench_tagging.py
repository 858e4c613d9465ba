"""Tagging benchmark: end-to-end speed of `tagger tag` (text in, JSONL out) and its peak memory.

    .venv/bin/python scripts/bench_tagging.py [MODEL]          # quick: a few minutes
    .venv/bin/python scripts/bench_tagging.py [MODEL] --big    # peak memory on ~100 MB and ~1 GB

MODEL defaults to runs/demo/model.tagger (made by `bash scripts/demo.sh`); when it is absent, a
model with configs/default.toml is trained on the demo data with a small epoch budget first.

Measured in one run, side by side (these machines are shared and noisy, so ratios matter more than
absolute figures):
  * tokens/s end to end of the command in a child process (start-up and model loading included),
    with 1 and 2 torch threads in one process and with 2 worker processes of 1 thread each;
  * a straightforward reference: the same model called one sentence at a time, in this process;
  * the encoder's ceiling: FLOPs per token (net.flops_per_token) over the rate of a 1024^3
    float32 matrix product timed now, at 1 and 2 threads;
  * peak resident memory of the command on two input sizes (VmHWM of the command and its worker
    processes, sampled while it runs; wait4's ru_maxrss would count this process's own size,
    which Linux carries into a child across exec).
The input is the demo test sentences, detokenised and shuffled into documents of 2 to 8 sentences.
Results go to benchmarks/tagging.json and benchmarks/tagging.md.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import re
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import torch

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, matmul_gflops, portable_command, portable_path  # noqa: E402

from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.data.corpus import read_sentences  # noqa: E402
from tagger.text.sentences import split_sentences  # noqa: E402

RESULTS_DIR = ROOT / "benchmarks"
DEFAULT_MODEL = ROOT / "runs" / "demo" / "model.tagger"
DEMO = ROOT / "data" / "demo"
TARGETS = {"tokens_per_second_2_cores": 25_000, "times_reference": 5.0, "ceiling_share": 0.6}
_NO_SPACE_BEFORE = re.compile(r" ([.,;:!?)%])")
_NO_SPACE_AFTER = re.compile(r"([(]) ")
_SUMMARY = re.compile(
    r"tagged ([\d,]+) documents?.*?([\d,]+) sentences?, ([\d,]+) tokens?.*?([\d,]+) tokens/s"
)


def demo_data(folder: Path | None) -> Path:
    """The demo corpus folder; generated into a temporary folder when it is not in the tree."""
    if folder is not None:
        return folder
    if (DEMO / "test.txt").exists():
        return DEMO
    out = Path(tempfile.mkdtemp(prefix="tagger-demo-"))
    subprocess.run(
        [sys.executable, str(ROOT / "scripts" / "make_demo_data.py"), "--out", str(out)],
        check=True,
        stdout=subprocess.DEVNULL,
    )
    return out


def ensure_model(path: Path, data: Path, epochs: int) -> Path:
    if path.exists():
        return path
    from tagger.config import apply_overrides, load_config
    from tagger.training.loop import train

    print(f"no model at {path}: training configs/default.toml for {epochs} epochs", flush=True)
    config = apply_overrides(
        load_config(ROOT / "configs" / "default.toml"),
        [
            f"data.train={json.dumps(str(data / 'train.txt'))}",
            f"data.dev={json.dumps(str(data / 'dev.txt'))}",
            f"train.epochs={epochs}",
        ],
    )
    return train(config, path.parent).model_path


def detokenise(tokens: list[str]) -> str:
    text = " ".join(tokens)
    return _NO_SPACE_AFTER.sub(r"\1", _NO_SPACE_BEFORE.sub(r"\1", text))


def write_documents(sentences: list[str], path: Path, target_bytes: int, seed: int = 1) -> int:
    """JSONL documents of 2-8 shuffled sentences until the file holds `target_bytes`."""
    rng = random.Random(seed)
    written = 0
    number = 0
    with open(path, "w", encoding="utf-8") as out:
        while written < target_bytes:
            text = " ".join(rng.choice(sentences) for _ in range(rng.randint(2, 8)))
            line = json.dumps({"id": number, "text": text}, ensure_ascii=False) + "\n"
            out.write(line)
            written += len(line.encode("utf-8"))
            number += 1
    return number


def high_water_kib(pid: int) -> int:
    """Peak resident KiB (VmHWM) of a process and its children, 0 for one that has ended."""
    try:
        status = Path(f"/proc/{pid}/status").read_text()
        children = Path(f"/proc/{pid}/task/{pid}/children").read_text().split()
    except OSError:
        return 0
    found = re.search(r"^VmHWM:\s+(\d+) kB", status, re.MULTILINE)
    own = int(found.group(1)) if found else 0
    return own + sum(high_water_kib(int(child)) for child in children)


def run_command(model: Path, source: Path, *options: str) -> dict:
    """Run `tagger tag` in a child process; wall time, the summary's counts and peak memory."""
    out = source.with_suffix(".tagged.jsonl")
    command = [sys.executable, "-m", "tagger", "tag", str(model), str(source), "--out", str(out)]
    started = time.perf_counter()
    child = subprocess.Popen([*command, *options], stderr=subprocess.PIPE, cwd=ROOT)
    stderr_parts: list[bytes] = []
    reader = threading.Thread(target=lambda: stderr_parts.append(child.stderr.read()))
    reader.start()
    peak_kib = 0
    while child.poll() is None:
        peak_kib = max(peak_kib, high_water_kib(child.pid))
        time.sleep(0.02)
    seconds = time.perf_counter() - started
    reader.join()
    stderr = b"".join(stderr_parts).decode()
    if child.returncode != 0:
        raise RuntimeError(f"tagger tag failed ({child.returncode}): {stderr}")
    found = _SUMMARY.search(stderr)
    if found is None:
        raise RuntimeError(f"no summary line in: {stderr}")
    documents, sentences, tokens, inside = (int(g.replace(",", "")) for g in found.groups())
    out.unlink()
    return {
        "options": " ".join(options),
        "documents": documents,
        "sentences": sentences,
        "tokens": tokens,
        "seconds": round(seconds, 2),
        "tokens_per_second": round(tokens / seconds),
        "after_start_up": inside,  # the command's own figure: from model loading to the end
        "peak_rss_mb": round(peak_kib / 1024, 1),
    }


def reference(model: Path, source: Path, threads: int, limit_sentences: int) -> dict:
    """One sentence at a time through the same model, tokeniser and JSON output, in-process."""
    torch.set_num_threads(threads)
    tagger = Tagger.load(model)
    settings = tagger.tokenizer_settings
    tokens = sentences = 0
    started = time.perf_counter()
    with open(source, encoding="utf-8") as lines, open(os.devnull, "w") as sink:
        for line in lines:
            record = json.loads(line)
            text = record["text"]
            mentions = []
            for sentence in split_sentences(text, settings):
                words = [t.text for t in sentence.tokens]
                (found,) = tagger.predict_spans([words])
                for label, first, last in found:
                    start, end = sentence.tokens[first].start, sentence.tokens[last - 1].end
                    mentions.append({"type": label, "at": [start, end], "quote": text[start:end]})
                tokens += len(words)
                sentences += 1
            sink.write(json.dumps({**record, "mentions": mentions}, ensure_ascii=False) + "\n")
            if sentences >= limit_sentences:
                break
    seconds = time.perf_counter() - started
    return {
        "threads": threads,
        "sentences": sentences,
        "tokens": tokens,
        "seconds": round(seconds, 2),
        "tokens_per_second": round(tokens / seconds),
    }


def render(entry: dict) -> str:
    m, runs, ref = entry["machine"], entry["runs"], entry["reference"]
    lines = [
        "# Tagging benchmark",
        "",
        f"- date: {m['date']}; commit {m['commit']}; command: `{entry['command']}`",
        f"- machine: {m['cores']} cores, {m['cpu']}; torch {m['torch']}, python {m['python']};"
        f" load average before the run {m['load_before']:.2f}",
        f"- model: {entry['model']['path']} ({entry['model']['cell']}, hidden "
        f"{entry['model']['hidden_size']}, {entry['model']['layers']} layers, "
        f"{entry['model']['output']}); {entry['model']['flops_per_token']:,} FLOPs per token",
        f"- input: {entry['input']['documents']:,} JSONL documents, "
        f"{entry['input']['megabytes']} MB, demo test sentences shuffled",
        "",
        "## Speed, end to end (child process: start-up, reading, tokenising, tagging, writing)",
        "",
        "| setting | tokens | seconds | tokens/s | without start-up | x reference | share of ceiling |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for run in runs:
        lines.append(
            f"| `{run['options']}` | {run['tokens']:,} | {run['seconds']} | "
            f"{run['tokens_per_second']:,} | {run['after_start_up']:,} | "
            f"{run['times_reference']:.1f} | "
            f"{100 * run['ceiling_share']:.0f}% |"
        )
    lines += [
        "",
        "Reference (one sentence at a time, same tokeniser and output, in-process): "
        + "; ".join(
            f"{r['threads']} thread{'s' if r['threads'] > 1 else ''}: {r['tokens_per_second']:,} tokens/s"
            f" ({r['sentences']:,} sentences)"
            for r in ref
        ),
        "",
        f"Encoder ceiling: 1024^3 matrix product at {entry['matmul_gflops']['1']:.0f} GFLOP/s "
        f"(1 thread) and {entry['matmul_gflops']['2']:.0f} GFLOP/s (2 threads), i.e. "
        f"{entry['ceiling_tokens_per_second']['1']:,} and {entry['ceiling_tokens_per_second']['2']:,}"
        " tokens/s for the encoder and output layer alone.",
        "",
        "## Peak memory (resident, the tagging process)",
        "",
        "| input | documents | tokens | peak MB |",
        "|---|---:|---:|---:|",
    ]
    for run in entry["memory"]:
        lines.append(
            f"| {run['megabytes']} MB | {run['documents']:,} | {run['tokens']:,} | {run['peak_rss_mb']} |"
        )
    lines += ["", "## Targets", ""]
    for name, verdict in entry["targets"].items():
        lines.append(f"- {name}: {verdict}")
    return "\n".join(lines) + "\n"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("model", nargs="?", type=Path, default=DEFAULT_MODEL)
    parser.add_argument("--data", type=Path, default=None, help="demo corpus folder")
    parser.add_argument("--epochs", type=int, default=3, help="epochs if a model must be trained")
    parser.add_argument("--speed-mb", type=float, default=2.0, help="input size of speed runs")
    parser.add_argument("--reference-sentences", type=int, default=1500)
    parser.add_argument(
        "--memory-mb",
        type=float,
        nargs=2,
        default=(1.0, 8.0),
        help="the two input sizes of the memory runs",
    )
    parser.add_argument("--big", action="store_true", help="memory on ~100 MB and ~1 GB inputs")
    parser.add_argument(
        "--out", type=Path, default=RESULTS_DIR, help="folder for tagging.json and tagging.md"
    )
    args = parser.parse_args()

    info = machine()
    data = demo_data(args.data)
    model_path = ensure_model(args.model, data, args.epochs)
    tagger = Tagger.load(model_path)
    flops = tagger.net.flops_per_token()
    sentences = [detokenise(s.tokens) for s in read_sentences(data / "test.txt")]

    folder = Path(tempfile.mkdtemp(prefix="tagger-bench-"))
    speed_input = folder / "speed.jsonl"
    documents = write_documents(sentences, speed_input, int(args.speed_mb * 1e6))

    rates = {str(t): matmul_gflops(t) for t in (1, 2)}
    ceiling = {t: round(rate * 1e9 / flops) for t, rate in rates.items()}
    refs = [reference(model_path, speed_input, t, args.reference_sentences) for t in (1, 2)]
    best_reference = max(r["tokens_per_second"] for r in refs)
    settings = [("--threads", "1"), ("--threads", "2"), ("--workers", "2", "--threads", "1")]
    runs = []
    for options in settings:
        run = run_command(model_path, speed_input, *options)
        cores = 1 if options == ("--threads", "1") else 2
        run["times_reference"] = run["tokens_per_second"] / best_reference
        run["ceiling_share"] = run["tokens_per_second"] / ceiling[str(cores)]
        runs.append(run)
        print(json.dumps(run), flush=True)

    sizes = (100e6, 1e9) if args.big else tuple(mb * 1e6 for mb in args.memory_mb)
    memory = []
    for size in sizes:
        source = folder / f"memory-{int(size)}.jsonl"
        count = write_documents(sentences, source, int(size), seed=2)
        run = run_command(model_path, source, "--threads", "2")
        memory.append(
            {**run, "megabytes": round(source.stat().st_size / 1e6, 1), "documents": count}
        )
        source.unlink()
        print(json.dumps(memory[-1]), flush=True)

    two_core = max(r["tokens_per_second"] for r in runs[1:])
    growth = memory[1]["peak_rss_mb"] / memory[0]["peak_rss_mb"]
    share = max(r["ceiling_share"] for r in runs)

    def verdict(ok: bool, text: str) -> str:
        return ("met" if ok else "NOT met") + f" ({text})"

    entry = {
        "machine": info,
        "command": portable_command([Path(sys.executable).name, *sys.argv]),
        "model": {
            "path": portable_path(model_path),
            "flops_per_token": flops,
            **{
                k: getattr(tagger.config.model, k)
                for k in ("cell", "hidden_size", "layers", "output")
            },
        },
        "input": {"documents": documents, "megabytes": round(speed_input.stat().st_size / 1e6, 1)},
        "matmul_gflops": {k: round(v, 1) for k, v in rates.items()},
        "ceiling_tokens_per_second": ceiling,
        "reference": refs,
        "runs": runs,
        "memory": memory,
        "targets": {
            ">= 25,000 tokens/s on 2 cores": verdict(two_core >= 25_000, f"{two_core:,} tokens/s"),
            ">= 5x the one-sentence reference": verdict(
                two_core / best_reference >= 5, f"{two_core / best_reference:.1f}x"
            ),
            ">= 60% of the encoder ceiling": verdict(share >= 0.6, f"best {100 * share:.0f}%"),
            "peak memory independent of input size": verdict(
                growth < 1.1,
                f"{memory[1]['megabytes']} MB input uses {growth:.2f}x the memory of "
                f"{memory[0]['megabytes']} MB",
            ),
        },
    }
    speed_input.unlink()
    args.out.mkdir(parents=True, exist_ok=True)
    (args.out / "tagging.json").write_text(json.dumps(entry, indent=2) + "\n")
    (args.out / "tagging.md").write_text(render(entry))
    print(render(entry))
    return 0


if __name__ == "__main__":
    sys.exit(main())
