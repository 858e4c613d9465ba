"""Tagging on a Dask cluster against one worker, on one machine.

    .venv/bin/python scripts/bench_cluster.py runs/demo/model.tagger            # the record
    .venv/bin/python scripts/bench_cluster.py --megabytes 0.2 --out /tmp/c     # a smoke run

Writes a JSON Lines input of at least `--megabytes` MB in a temporary folder (the demo's
unannotated reports, a record per non-empty line, repeated), then measures

* one worker: `tagger tag --threads 1` as a child process, end to end;
* a `LocalCluster` of 2 worker processes x 1 thread (started before the clock starts):
  `tagger tag --cluster ADDRESS` as a child process, end to end, and its output compared with
  one worker's byte for byte;
* model load time per worker: `Tagger.load` run on each worker (`Client.run`);
* per-chunk overhead: chunks of the real input (`--chunk-chars` characters, as `tag` cuts them)
  sent through the same cluster to a task that hands them back, one at a time (the latency a
  chunk pays) and all at once (the cost per chunk when the scheduler is kept busy, as `tag` keeps
  it), set beside the time one worker takes to tag a chunk. The smallest chunk for which the
  overhead stays under 5% follows: overhead x characters/s / 0.05.

Without a model, one is trained on the demo with the default config for one epoch (speed does
not depend on how well it learnt). Writes benchmarks/cluster.{json,md} (or `--out`).
"""

from __future__ import annotations

import argparse
import gzip
import json
import pickle
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, portable_path, write_record  # noqa: E402

DEMO = ROOT / "data" / "demo"
OVERHEAD_SHARE = 0.05  # the most of a chunk's time that scheduling may take
OVERHEAD_CHUNKS = 20  # chunks sent through the cluster for the overhead
SUMMARY = re.compile(r"tagged .*?, ([0-9,]+) tokens?,")


def write_input(folder: Path, megabytes: float) -> tuple[Path, int]:
    """A JSON Lines file of at least `megabytes` MB: the demo's unannotated reports, a record per
    non-empty line, repeated; returns it and its number of documents."""
    with gzip.open(DEMO / "unannotated.txt.gz", "rt", encoding="utf-8") as archive:
        lines = [line.strip() for line in archive if line.strip()]
    path = folder / "archive.jsonl"
    size, documents = 0, 0
    with path.open("w", encoding="utf-8") as out:
        while size < megabytes * 1_000_000:
            for line in lines:
                record = json.dumps({"id": f"r{documents}", "text": line}, ensure_ascii=False)
                out.write(record + "\n")
                size += len(record.encode("utf-8")) + 1
                documents += 1
                if size >= megabytes * 1_000_000:
                    break
    return path, documents


def train_model(folder: Path) -> Path:
    run = folder / "model"
    subprocess.run(
        [sys.executable, "-m", "tagger", "train", "--train", str(DEMO / "train.txt"),
         "--dev", str(DEMO / "dev.txt"), "--out", str(run), "--set", "train.epochs=1"],
        check=True, cwd=ROOT, capture_output=True,
    )  # fmt: skip
    return run / "model.tagger"


def tag(model: Path, source: Path, out: Path, chunk_chars: int, *extra: str) -> dict:
    """`tagger tag` as a child process, timed end to end; its tokens from the summary line."""
    command = [sys.executable, "-m", "tagger", "tag", str(model), str(source), "-o", str(out),
               "--threads", "1", "--chunk-chars", str(chunk_chars), *extra]  # fmt: skip
    started = time.perf_counter()
    done = subprocess.run(command, check=True, cwd=ROOT, capture_output=True, text=True)
    seconds = time.perf_counter() - started
    tokens = int(SUMMARY.search(done.stderr).group(1).replace(",", ""))
    return {"seconds": round(seconds, 3), "tokens": tokens,
            "tokens_per_second": round(tokens / seconds, 1)}  # fmt: skip


def two_alone(model: Path, source: Path, work: Path, chunk_chars: int) -> dict:
    """Two `tagger tag --threads 1` child processes at once, each on half of the input, no
    cluster: what this machine gives two processes at all, the ceiling any cluster of two
    workers on it is held to."""
    lines = source.read_text(encoding="utf-8").splitlines(keepends=True)
    halves = [work / "first-half.jsonl", work / "second-half.jsonl"]
    halves[0].write_text("".join(lines[: len(lines) // 2]), encoding="utf-8")
    halves[1].write_text("".join(lines[len(lines) // 2 :]), encoding="utf-8")
    started = time.perf_counter()
    children = [
        subprocess.Popen(
            [
                sys.executable,
                "-m",
                "tagger",
                "tag",
                str(model),
                str(half),
                "-o",
                str(half.with_suffix(".out")),
                "--threads",
                "1",
                "--chunk-chars",
                str(chunk_chars),
            ],
            cwd=ROOT,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )  # fmt: skip
        for half in halves
    ]
    tokens = 0
    for child in children:
        _, stderr = child.communicate()
        if child.returncode != 0:
            raise RuntimeError(stderr)
        tokens += int(SUMMARY.search(stderr).group(1).replace(",", ""))
    seconds = time.perf_counter() - started
    return {"seconds": round(seconds, 3), "tokens": tokens,
            "tokens_per_second": round(tokens / seconds, 1)}  # fmt: skip


def _median_run(runs: list[dict]) -> dict:
    """The run of median tokens/s (the lower middle one of an even number), with every round's
    tokens/s beside it."""
    ranked = sorted(runs, key=lambda run: run["tokens_per_second"])
    return {**ranked[(len(ranked) - 1) // 2], "rounds": [r["tokens_per_second"] for r in runs]}


def _load_seconds(model: str) -> list[float]:
    """Run on a worker: how long `Tagger.load` takes there (one thread, as `tag` loads it), the
    first time (what a worker's first chunk pays: torch and the network code imported too) and
    again (the model file alone)."""
    from tagger.apply.tagger import Tagger

    times = []
    for _ in range(2):
        started = time.perf_counter()
        Tagger.load(model, threads=1)
        times.append(round(time.perf_counter() - started, 3))
    return times


def _hand_back(items: bytes) -> bytes:
    """A chunk's trip without the tagging: unpacked and packed again, as `tag_chunk` does."""
    return pickle.dumps(pickle.loads(items), protocol=pickle.HIGHEST_PROTOCOL)


def sample_chunks(source: Path, chunk_chars: int, count: int) -> list[list]:
    """The first `count` chunks of `source` as `tag` cuts them."""
    from tagger.apply.documents import read_documents
    from tagger.apply.engine import chunks

    found = []
    for chunk in chunks(read_documents([source], "jsonl"), chunk_chars, stop_at_skip=False):
        found.append(chunk)
        if len(found) == count:
            break
    return found


def chunk_overhead(client, sample: list) -> dict:
    """Seconds per chunk sent to a worker and handed back: one at a time and all at once."""
    one_by_one = []
    sample = [pickle.dumps(chunk, protocol=pickle.HIGHEST_PROTOCOL) for chunk in sample]
    for index, chunk in enumerate(sample):
        started = time.perf_counter()
        client.submit(_hand_back, chunk, key=f"bench-one-{index}", pure=False).result()
        one_by_one.append(time.perf_counter() - started)
    started = time.perf_counter()
    futures = [
        client.submit(_hand_back, chunk, key=f"bench-all-{index}", pure=False)
        for index, chunk in enumerate(sample)
    ]
    client.gather(futures)
    together = (time.perf_counter() - started) / len(sample)
    return {"one_at_a_time": round(statistics.median(one_by_one), 4),
            "all_at_once": round(together, 4)}  # fmt: skip


def measure(model: Path, source: Path, chunk_chars: int, work: Path, rounds: int = 1) -> dict:
    from distributed import Client, LocalCluster

    found: dict[str, list[dict]] = {"one": [], "alone": [], "spread": []}
    for round_number in range(1, rounds + 1):
        found["one"].append(tag(model, source, work / "one.jsonl", chunk_chars))
        found["alone"].append(two_alone(model, source, work, chunk_chars))
        # a cluster of its own each round: idle workers would tick beside the other runs
        with (
            LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
            as cluster,
            Client(cluster) as client,
        ):  # fmt: skip
            if round_number == 1:  # before any chunk: the first load is a worker's first
                loads = client.run(_load_seconds, str(model.resolve()))
            spread = tag(model, source, work / "cluster.jsonl", chunk_chars,
                         "--cluster", cluster.scheduler_address)  # fmt: skip
            found["spread"].append(spread)
            if round_number == rounds:
                overhead = chunk_overhead(
                    client, sample_chunks(source, chunk_chars, OVERHEAD_CHUNKS)
                )
        print(
            f"round {round_number}: "
            + ", ".join(
                f"{k} {v[-1]['tokens_per_second']:,.0f} tokens/s" for k, v in found.items()
            ),
            flush=True,
        )
    one, alone, spread = (_median_run(found[k]) for k in ("one", "alone", "spread"))
    by_round = {
        kind: [
            round(run["tokens_per_second"] / single["tokens_per_second"], 2)
            for single, run in zip(found["one"], found[kind], strict=True)
        ]
        for kind in ("alone", "spread")
    }
    same = (work / "one.jsonl").read_bytes() == (work / "cluster.jsonl").read_bytes()
    chars_per_second = source.stat().st_size / one["seconds"]  # input bytes: close to characters
    chunk_seconds = chunk_chars / chars_per_second
    worst = max(overhead.values())
    return {
        "chunk_chars": chunk_chars,
        "one_worker": one,
        "cluster_of_2": spread,
        # each round's ratio, then their median: a slow spell falls on one round's runs, not
        # on a median run of one kind set beside a median run of another
        "speed_up": round(statistics.median(by_round["spread"]), 2),
        "rounds": rounds,
        "speed_up_by_round": by_round["spread"],
        "two_processes_alone": alone,
        "machine_two_process_speed_up": round(statistics.median(by_round["alone"]), 2),
        "machine_two_process_speed_up_by_round": by_round["alone"],
        "byte_identical": same,
        "model_load_seconds": {
            "first": sorted(s[0] for s in loads.values()),
            "again": sorted(s[1] for s in loads.values()),
        },  # fmt: skip
        "chunk_overhead_seconds": overhead,
        "chunk_tagging_seconds": round(chunk_seconds, 3),
        "overhead_share": round(worst / chunk_seconds, 4),
        "smallest_chunk_chars_under_5_percent": round(worst * chars_per_second / OVERHEAD_SHARE),
    }


def render(result: dict) -> str:
    m, r = result["machine"], result["results"]
    one, two, overhead = r["one_worker"], r["cluster_of_2"], r["chunk_overhead_seconds"]
    ratios = r.get("speed_up_by_round", [])
    spread_rounds = _by_round(ratios, f"the median of {len(ratios)} rounds' ratios: ")
    lines = [
        "# Tagging on a Dask cluster against one worker",
        "",
        f"Model `{result['model']}`; input {result['input']['megabytes']:.1f} MB of JSON Lines "
        f"({result['input']['documents']:,} documents: the demo's unannotated reports, "
        f"repeated); chunks of {r['chunk_chars']:,} characters. Both runs are `tagger tag` child "
        "processes timed end to end (start-up, reading, tagging, writing); the cluster is a "
        "`LocalCluster` of 2 worker processes x 1 thread on this machine, started before the "
        f"clock. Load average before the run: {m['load_before']}."
        + (
            f" {r['rounds']} rounds, the three runs in turn in each; a row is the run of median "
            "tokens/s of its kind, the ratios below the median of each round's own."
            if r.get("rounds", 1) > 1
            else ""
        ),
        "",
        "| run | tokens | seconds | tokens/s |",
        "|---|---:|---:|---:|",
        f"| one worker (`--threads 1`) | {one['tokens']:,} | {one['seconds']:.1f} | "
        f"{one['tokens_per_second']:,.0f} |",
        f"| cluster of 2 (`--cluster`) | {two['tokens']:,} | {two['seconds']:.1f} | "
        f"{two['tokens_per_second']:,.0f} |",
        *_alone_row(r),
        "",
        f"- Cluster against one worker: {r['speed_up']:.2f}x{spread_rounds}; output "
        f"byte-identical: {'yes' if r['byte_identical'] else 'NO'}.",
        *_alone_line(r),
        f"- Model load per worker: {_seconds(r['model_load_seconds']['first'])} the first time "
        f"(torch and the network code imported too), {_seconds(r['model_load_seconds']['again'])} "
        "again.",
        f"- Per-chunk overhead (a chunk sent to a worker and handed back): "
        f"{1000 * overhead['one_at_a_time']:.1f} ms one at a time, "
        f"{1000 * overhead['all_at_once']:.1f} ms each when {OVERHEAD_CHUNKS} go at once; one "
        f"worker tags a chunk in {r['chunk_tagging_seconds']:.2f} s, so the overhead is at most "
        f"{100 * r['overhead_share']:.1f}% of it. Under 5% needs chunks of at least "
        f"{r['smallest_chunk_chars_under_5_percent']:,} characters.",
        "",
        f"_{m['date']}, commit {m['commit']}, `{m['command']}`._",
        "",
    ]
    return "\n".join(lines)


def _by_round(ratios: list[float], lead: str) -> str:
    """`lead` and each round's ratio, in brackets; nothing for a single round."""
    if len(ratios) < 2:
        return ""
    return f" ({lead}" + ", ".join(f"{x:.2f}x" for x in ratios) + ")"


def _alone_row(r: dict) -> list[str]:
    if "two_processes_alone" not in r:
        return []
    alone = r["two_processes_alone"]
    return [
        f"| two `tag` processes at once, half the input each, no cluster | {alone['tokens']:,} | "
        f"{alone['seconds']:.1f} | {alone['tokens_per_second']:,.0f} |"
    ]


def _alone_line(r: dict) -> list[str]:
    if "two_processes_alone" not in r:
        return []
    ceiling = r["machine_two_process_speed_up"]
    alone_rounds = _by_round(r.get("machine_two_process_speed_up_by_round", []), "round by round ")
    return [
        f"- Two processes with no cluster at all reach {ceiling:.2f}x one process on this "
        f"machine{alone_rounds}: the ceiling for any two workers here; the cluster gets "
        f"{100 * r['speed_up'] / ceiling:.0f}% of it."
    ]


def _seconds(values: list[float]) -> str:
    return " and ".join(f"{value:.2f} s" for value in values)


def main() -> None:
    from tagger.apply.engine import CHUNK_CHARS

    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("model", type=Path, nargs="?", help="model file (default: train one)")
    parser.add_argument("--megabytes", type=float, default=20.0)
    parser.add_argument("--chunk-chars", type=int, default=CHUNK_CHARS)
    parser.add_argument("--rounds", type=int, default=1, help="rounds of the three runs, in turn")
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "cluster")
    args = parser.parse_args()
    work = Path(tempfile.mkdtemp(prefix="tagger-bench-cluster-"))
    try:
        model = args.model or train_model(work)
        source, documents = write_input(work, args.megabytes)
        started_on = machine()  # the load before the runs, not the load they made
        results = measure(model, source, args.chunk_chars, work, args.rounds)
        result = {
            "model": portable_path(args.model) if args.model else "demo, default config, 1 epoch",
            "input": {"megabytes": source.stat().st_size / 1e6, "documents": documents},
            "results": results,
            "machine": started_on,
        }
    finally:
        shutil.rmtree(work, ignore_errors=True)
    write_record(args.out, result, render(result))


if __name__ == "__main__":
    main()
