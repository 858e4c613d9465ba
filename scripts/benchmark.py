"""The benchmark record: accuracy on public corpora beside published figures, speed beside ceilings.

    .venv/bin/python scripts/benchmark.py --quick     # smoke run: a few minutes
    .venv/bin/python scripts/benchmark.py --full      # the record: ~6 hours on 2 cores
    .venv/bin/python scripts/benchmark.py --full --only conll2000_pos cells
    .venv/bin/python scripts/benchmark.py --list      # the run names and what each does
    .venv/bin/python scripts/benchmark.py --render    # RESULTS.md again from the records, no runs

Runs (names for --only), in the order they run:

    training_speed  training tokens/s of configs/default.toml (and the other cells) on 1 and 2
                    threads, beside the matrix-product ceiling measured in the same run
    tagging_speed   the default model trained on the demo data, then `tagger tag` end to end: 1 vs 2
                    threads, 2 worker processes of 1 thread, the one-sentence-at-a-time reference,
                    the ceiling, peak memory (scripts/bench_tagging.py); and `--workers 2` beside
                    two separate one-thread commands each tagging half the input
    conll2000_pos   CoNLL-2000 chunking with the corpus's POS column, configs/conll2000_pos.toml
                    (last 10% of train as dev)
    conll2000       the same from the words alone, configs/conll2000.toml
    wnut17          WNUT-2017 emerging entities, configs/wnut17.toml
    bc5cdr          BC5CDR chemicals and diseases, configs/bc5cdr.toml, overall and per type
    cells           rnn, minimal, gru and lstm cells on CoNLL-2000 at equal hidden size and layers
    layers          1, 2 and 3 residual layers (default cell) on CoNLL-2000
    parts           with and without character features and the CRF on CoNLL-2000

Each accuracy figure is the median test span F1 of the seeds (3 in full mode) with min and max.
The CoNLL-2000 variants are the default model's size (128 units a direction, as in
configs/default.toml) on a shorter schedule than the corpus runs (full mode: 15 epochs, learning-rate
decay 0.9, about the same start and end rates as 40 epochs at 0.96), so that 27 runs fit in a few
hours; they compare with each other, not with the corpus runs. They share one base run: cells/lstm,
layers/2 and parts/full are one set of trained models. Corpora missing from
../shared/corpora are skipped with a message.

Speed runs go first, alone on the machine. Then every training run of the chosen names is queued
and run `--jobs` at a time (full mode: 2 processes of 1 thread on 2 cores, which trains more per
hour than one process of 2 threads), and the variants' tagging speed is measured once all training
is done. Each training run leaves a record in its folder under runs/benchmark/MODE/; a later
command reuses a finished run of the same config and continues an interrupted one from its
checkpoint, so a stopped benchmark resumes where it was (`--fresh` retrains everything).

Quick mode trains on the first few hundred sentences of each corpus for two epochs, one
seed, one thread: it proves that the whole benchmark runs, and its figures mean nothing else.

Results are merged into benchmarks/results.json (by mode, then run name; re-read just before each
write, so partial runs accumulate) and rendered to benchmarks/RESULTS.md after every run. Each entry
holds the date, the machine, the commit when the command started, and the command. RESULTS.md also
lists the annotation loop's headline figures from the records scripts/simulate_picking.py and
scripts/bench_learning_curve.py write beside it; `--render` rewrites RESULTS.md from what is
recorded, running nothing.
"""

from __future__ import annotations

import argparse
import contextlib
import ctypes
import json
import multiprocessing
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from concurrent.futures import Future, ProcessPoolExecutor, ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path
from statistics import median
from typing import Any

import torch

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

import bench_tagging  # noqa: E402
from bench_training import accuracy_entry, run_speed, speed_table, train_seed  # noqa: E402
from benchlib import machine, matmul_gflops, portable_command, portable_path  # noqa: E402

from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.config import apply_overrides, load_config  # noqa: E402
from tagger.data.atomic import atomic_output  # noqa: E402
from tagger.data.corpus import read_sentences  # noqa: E402

RESULTS_DIR = ROOT / "benchmarks"  # results.json and RESULTS.md
CORPORA = ROOT.parent / "shared" / "corpora"
CONFIGS = ROOT / "configs"


# --- what is measured ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Anchor:
    """A published figure to read ours against."""

    system: str
    f1: str  # as published (a number or a range)
    source: str
    confidence: str  # how sure we are of the figure: all were written down from memory
    entity_type: str = ""  # empty: all types together


@dataclass(frozen=True)
class Corpus:
    name: str
    title: str
    config: Path
    train: Path
    dev: Path | None  # None: held out of train by the config
    test: Path
    anchors: tuple[Anchor, ...]
    full_overrides: tuple[str, ...] = ()  # bounds a full-mode run where the config has none

    def missing(self) -> list[Path]:
        return [p for p in (self.train, self.dev, self.test) if p is not None and not p.exists()]


CONLL2000 = Corpus(
    "conll2000",
    "CoNLL-2000 chunking from the words alone (WSJ newswire; Tjong Kim Sang & Buchholz 2000)",
    CONFIGS / "conll2000.toml",
    CORPORA / "conll2000" / "train.txt",
    None,
    CORPORA / "conll2000" / "test.txt",
    (
        Anchor(
            "shared-task best (SVMs)",
            "93.48",
            "Kudo & Matsumoto 2000",
            "from memory, approximate",
        ),
        Anchor(
            "BiLSTM-CRF with pretrained embeddings and features",
            "94.46",
            "Huang, Xu & Yu 2015",
            "from memory, approximate",
        ),
    ),
    # The config has no time budget; 45 minutes bounds a run (40 epochs take ~30 on 1 thread).
    full_overrides=("train.max_minutes=45",),
)
CONLL2000_POS = Corpus(
    "conll2000_pos",
    "CoNLL-2000 chunking with the corpus's part-of-speech column as a feature",
    CONFIGS / "conll2000_pos.toml",
    CONLL2000.train,
    None,
    CONLL2000.test,
    CONLL2000.anchors,
    full_overrides=CONLL2000.full_overrides,
)
WNUT17 = Corpus(
    "wnut17",
    "WNUT-2017 emerging and rare entities (social media; Derczynski et al. 2017)",
    CONFIGS / "wnut17.toml",
    CORPORA / "wnut17" / "wnut17train.conll",
    CORPORA / "wnut17" / "emerging.dev.conll",
    CORPORA / "wnut17" / "emerging.test.annotated",
    (
        Anchor(
            "shared-task best, entity F1",
            "41.9",
            "Aguilar et al. 2017",
            "from memory, approximate",
        ),
    ),
    full_overrides=("train.max_minutes=20",),  # the config has no time budget
)
BC5CDR = Corpus(
    "bc5cdr",
    "BC5CDR chemical and disease mentions (PubMed abstracts; corpus as prepared by Li et al. 2016)",
    CONFIGS / "bc5cdr.toml",
    CORPORA / "bc5cdr" / "train.tsv",
    CORPORA / "bc5cdr" / "devel.tsv",
    CORPORA / "bc5cdr" / "test.tsv",
    tuple(
        Anchor(
            "BiLSTM-CRF with pretrained word vectors, trained on several biomedical corpora at once",
            figure,
            "Wang et al. 2019, Cross-type biomedical named entity recognition with deep multi-task "
            "learning, Bioinformatics",
            "from memory, low confidence: check the paper's table",
            entity_type,
        )
        for entity_type, figure in (("Chemical", "about 93"), ("Disease", "about 84"))
    ),
    full_overrides=("train.max_minutes=30",),  # the config has no time budget
)
CORPUS_RUNS = {c.name: c for c in (CONLL2000_POS, CONLL2000, WNUT17, BC5CDR)}
DEMO = Corpus(
    "demo",
    "invented wind-farm service reports (data/demo)",
    CONFIGS / "default.toml",
    ROOT / "data" / "demo" / "train.txt",
    ROOT / "data" / "demo" / "dev.txt",
    ROOT / "data" / "demo" / "test.txt",
    (),
)

# CoNLL-2000 variants: (label, what changes, overrides on top of configs/conll2000.toml).
BASE = (  # what every variant starts from
    "configs/conll2000.toml at the default model's width: lstm, 128 units per direction, 2 residual "
    "layers, character CNN, CRF, weight averaging; 15 epochs (full mode); "
    "rnn, gru and lstm run torch's fused kernels, the minimal cell its own time loop"
)
VARIANTS: dict[str, list[tuple[str, str, list[str]]]] = {
    "cells": [
        ("rnn", "vanilla cell (1 gate block)", ['model.cell="rnn"']),
        ("minimal", "minimal gated cell (2 gate blocks)", ['model.cell="minimal"']),
        ("gru", "GRU (3 gate blocks)", ['model.cell="gru"']),
        ("lstm", "LSTM (4 gate blocks), the base", []),
    ],
    "layers": [
        ("1", "1 layer", ["model.layers=1"]),
        ("2", "2 residual layers, the base", []),
        ("3", "3 residual layers", ["model.layers=3"]),
    ],
    "parts": [
        ("full", "characters and CRF, the base", []),
        ("no-chars", "no character features", ['model.char_encoder="none"']),
        ("no-crf", "softmax output instead of the CRF", ['model.output="softmax"']),
        (
            "neither",
            "neither characters nor CRF",
            ['model.char_encoder="none"', 'model.output="softmax"'],
        ),
    ],
}
RUN_NAMES = [
    "training_speed",
    "tagging_speed",
    "conll2000_pos",
    "wnut17",
    "bc5cdr",
    "conll2000",
    "cells",
    "layers",
    "parts",
]


@dataclass(frozen=True)
class Mode:
    """How much of everything a mode measures."""

    name: str
    seeds: tuple[int, ...]
    threads: int  # torch threads of every training run
    jobs: int  # training runs at a time, each its own process
    train_sentences: int  # 0: the whole file; else the first N sentences
    eval_sentences: int  # the same for dev and test files
    overrides: tuple[str, ...]  # applied after the config's and the corpus's own
    variant_overrides: tuple[str, ...]  # the shorter schedule of the CoNLL-2000 variants
    speed_seconds: float  # timing window of each training-speed variant
    speed_threads: list[int]  # thread counts of the training-speed run
    pair_mb: float  # input of `--workers 2` against two separate one-thread processes
    variant_tag_mb: float  # input size for tagging speed of each CoNLL-2000 variant
    variant_tag_rounds: int  # timings of each variant, taken in turn with the others
    tagging_args: tuple[str, ...] = field(default=())  # options of bench_tagging.py


QUICK = Mode(
    "quick",
    seeds=(1,),
    threads=1,
    jobs=2,
    train_sentences=500,
    eval_sentences=200,
    overrides=("train.epochs=2",),
    variant_overrides=(),
    speed_seconds=1.5,
    # One thread only: on a shared 2-core machine a 2-thread process can crawl (threads wait
    # for each other while other work holds a core), and the smoke run must stay short.
    speed_threads=[1],
    pair_mb=0.1,
    variant_tag_mb=0.05,
    variant_tag_rounds=1,
    tagging_args=(
        "--speed-mb",
        "0.1",
        "--reference-sentences",
        "150",
        "--memory-mb",
        "0.05",
        "0.2",
    ),
)
FULL = Mode(
    "full",
    seeds=(1, 2, 3),
    threads=1,
    jobs=2,
    train_sentences=0,
    eval_sentences=0,
    overrides=(),
    # The default model's width; 0.9^15 ~ 0.96^40: the same learning-rate range in 15 epochs.
    variant_overrides=("model.hidden_size=128", "train.epochs=15", "train.lr_decay=0.9"),
    speed_seconds=20.0,
    speed_threads=[1, 2],
    pair_mb=2.0,
    variant_tag_mb=2.0,
    variant_tag_rounds=3,
    tagging_args=("--speed-mb", "2", "--memory-mb", "2", "20"),
)


# --- helpers -------------------------------------------------------------------------------------


def head_sentences(source: Path, target: Path, count: int) -> Path:
    """Copy the first `count` sentences of a column file byte for byte (lines kept as written).

    A whitespace-only line ends a sentence, as the reader has it; lines are split on "\\n" only,
    since tokens may hold other Unicode line-breaking characters.
    """
    kept: list[str] = []
    sentences, inside = 0, False
    for line in source.read_text(encoding="utf-8").split("\n"):
        if line.strip():
            inside = True
        elif inside:
            sentences, inside = sentences + 1, False
            if sentences >= count:
                kept.append(line)
                break
        kept.append(line)
    target.write_text("\n".join(kept) + "\n", encoding="utf-8")
    return target


def quoted(path: Path) -> str:
    """A path as a TOML string for a --set style override."""
    return json.dumps(str(path))


def spread(values: list[float]) -> dict[str, float]:
    ordered = sorted(values)
    return {
        "median": round(median(ordered), 2),
        "min": round(ordered[0], 2),
        "max": round(ordered[-1], 2),
    }


def changed_files() -> list[str]:
    """Tracked files under tagger/, configs/ and scripts/ that differ from the commit."""
    out = subprocess.run(
        ["git", "diff", "--name-only", "HEAD", "--", "tagger", "configs", "scripts"],
        capture_output=True,
        text=True,
        cwd=ROOT,
    ).stdout
    return out.split()


def end_with_parent() -> None:
    """Make a worker process end when the benchmark command does, even if that is killed.

    Otherwise a killed command leaves its training runs going, and the next command would train
    the same folders beside them. Linux only (prctl PR_SET_PDEATHSIG); elsewhere a no-op.
    """
    with contextlib.suppress(OSError, AttributeError):
        ctypes.CDLL("libc.so.6", use_errno=True).prctl(1, signal.SIGTERM)


def variant_label(extra: list[str]) -> str:
    """The run-folder name of a CoNLL-2000 variant, e.g. variant-cell-gru."""
    return "variant" + (
        "".join("-" + o.split(".", 1)[1].replace('"', "").replace("=", "-") for o in extra)
        or "-base"
    )


def with_argv(argv: list[str], run: Callable[[], Any]) -> Any:
    """Call a script's main() as if started with `argv`."""
    saved = sys.argv
    sys.argv = argv
    try:
        return run()
    finally:
        sys.argv = saved


# --- the benchmark -------------------------------------------------------------------------------


class Benchmark:
    """Runs the named runs of one mode and records each as soon as it is done."""

    def __init__(self, mode: Mode, seeds: tuple[int, ...], threads: int, jobs: int) -> None:
        self.mode, self.seeds, self.threads = mode, seeds, threads
        self.started = machine()  # the commit and date when the command began
        self.started["threads"] = threads
        self.started["jobs"] = jobs
        self.started["changed_files"] = changed_files()
        self.scratch = Path(tempfile.mkdtemp(prefix="tagger-benchmark-"))
        self.runs_dir = ROOT / "runs" / "benchmark" / mode.name
        # Spawned, not forked: each training process starts clean with its own torch threads.
        self.pool = ProcessPoolExecutor(
            max_workers=jobs,
            mp_context=multiprocessing.get_context("spawn"),
            initializer=end_with_parent,
        )
        self.queued: dict[str, tuple[list[str], list[Future]]] = {}

    def close(self) -> None:
        self.pool.shutdown(wait=False, cancel_futures=True)
        shutil.rmtree(self.scratch, ignore_errors=True)

    # files ---------------------------------------------------------------------------------------

    def files(self, corpus: Corpus) -> tuple[list[str], Path]:
        """Overrides naming the train/dev files of this mode, and the test file (the shipped
        configs name no data files)."""
        if not self.mode.train_sentences:
            overrides = [f"data.train={quoted(corpus.train)}"]
            if corpus.dev is not None:
                overrides.append(f"data.dev={quoted(corpus.dev)}")
            return overrides, corpus.test
        folder = self.scratch / corpus.name
        if folder.exists():  # cut already
            overrides = [f"data.train={quoted(folder / 'train.txt')}"]
            if corpus.dev is not None:
                overrides.append(f"data.dev={quoted(folder / 'dev.txt')}")
            return overrides, folder / "test.txt"
        folder.mkdir()
        overrides = [
            "data.train="
            + quoted(head_sentences(corpus.train, folder / "train.txt", self.mode.train_sentences))
        ]
        if corpus.dev is not None:
            dev = head_sentences(corpus.dev, folder / "dev.txt", self.mode.eval_sentences)
            overrides.append(f"data.dev={quoted(dev)}")
        test = head_sentences(corpus.test, folder / "test.txt", self.mode.eval_sentences)
        return overrides, test

    def overrides(self, corpus: Corpus, extra: list[str]) -> list[str]:
        files, _ = self.files(corpus)
        budget = list(corpus.full_overrides) if self.mode is FULL else []
        return [
            *files,
            *budget,
            *extra,
            f"train.threads={self.threads}",
            *self.mode.overrides,
        ]

    def queue(self, corpus: Corpus, extra: list[str], label: str) -> None:
        """Queue one training run a seed (once per label); they start as workers come free."""
        if label in self.queued:
            return
        _, test = self.files(corpus)
        overrides = self.overrides(corpus, extra)
        futures = [
            self.pool.submit(
                train_seed,
                corpus.config,
                overrides,
                seed,
                test,
                self.runs_dir / f"{label}-seed{seed}",
            )
            for seed in self.seeds
        ]
        self.queued[label] = (overrides, futures)

    def train_and_score(self, corpus: Corpus, extra: list[str], label: str) -> dict:
        """The seeds' runs of one corpus and variant (queued now if not yet), once all are done."""
        self.queue(corpus, extra, label)
        overrides, futures = self.queued[label]
        _, test = self.files(corpus)
        runs = [future.result() for future in futures]
        entry = accuracy_entry(label, corpus.config, overrides, test, runs, self.started)
        entry["test_file"] = portable_path(corpus.test)
        if self.mode.eval_sentences:
            entry["test_file"] += f" (first {self.mode.eval_sentences} sentences)"
        entry["model_paths"] = [
            str(self.runs_dir / f"{label}-seed{seed}" / "model.tagger") for seed in self.seeds
        ]
        return entry

    def queue_run(self, name: str) -> None:
        """Queue the training a run name needs."""
        if name in CORPUS_RUNS and not CORPUS_RUNS[name].missing():
            self.queue(CORPUS_RUNS[name], [], name)
        elif name in VARIANTS and not CONLL2000.missing():
            for _, _, extra in VARIANTS[name]:
                self.queue(CONLL2000, self.variant_overrides(extra), variant_label(extra))

    def variant_overrides(self, extra: list[str]) -> list[str]:
        return [*self.mode.variant_overrides, *extra]

    def summarise_runs(self, entry: dict) -> dict:
        runs = entry["runs"]
        types = sorted({t for r in runs for t in r["per_type_f1"]})
        return {
            "seeds": [r["seed"] for r in runs],
            "test_f1": spread([r["test_f1"] for r in runs]),
            "dev_f1": spread([r["dev_f1"] for r in runs]),
            "per_type_test_f1": {
                t: spread([r["per_type_f1"].get(t, 0.0) for r in runs]) for t in types
            },
            "train_minutes": spread([r["train_seconds"] / 60 for r in runs]),
            "epochs": spread([r["epochs"] for r in runs]),
            "train_tokens_per_second": round(median(r["train_tokens_per_second"] for r in runs)),
            "model_megabytes": round(median(r["model_bytes"] for r in runs) / 1e6, 2),
            # A resumed benchmark reuses runs an earlier command finished: say where each came from.
            "trained_at": sorted(
                {f"{r['machine']['commit']} ({r['machine']['date'][:10]})" for r in runs}
            ),
        }

    # runs ----------------------------------------------------------------------------------------

    def run(self, name: str) -> dict | None:
        if name in CORPUS_RUNS:
            return self.accuracy(CORPUS_RUNS[name])
        if name in VARIANTS:
            return self.variants(name)
        if name == "training_speed":
            return self.training_speed()
        return self.tagging_speed()

    def accuracy(self, corpus: Corpus) -> dict | None:
        missing = corpus.missing()
        if missing:
            print(f"skipped {corpus.name}: {', '.join(map(str, missing))} absent", flush=True)
            return None
        trained = self.train_and_score(corpus, [], corpus.name)
        train_config = apply_overrides(load_config(corpus.config), trained["overrides"]).train
        return {
            "corpus": corpus.title,
            "config": str(corpus.config.relative_to(ROOT)),
            "overrides": trained["overrides"],
            "budget": {
                "epochs": train_config.epochs,
                "patience": train_config.patience,
                "max_minutes": train_config.max_minutes,
            },
            "test_file": trained["test_file"],
            "anchors": [vars(a) for a in corpus.anchors],
            **self.summarise_runs(trained),
            "runs": trained["runs"],
        }

    def variants(self, name: str) -> dict | None:
        missing = CONLL2000.missing()
        if missing:
            print(f"skipped {name}: {', '.join(map(str, missing))} absent", flush=True)
            return None
        _, test = self.files(CONLL2000)
        sentences = [bench_tagging.detokenise(s.tokens) for s in read_sentences(test)]
        documents = self.scratch / f"{name}-documents.jsonl"
        bench_tagging.write_documents(sentences, documents, int(self.mode.variant_tag_mb * 1e6))
        ceiling_before = matmul_gflops(self.threads)
        rows, models = [], []
        for label, title, extra in VARIANTS[name]:
            trained = self.train_and_score(
                CONLL2000, self.variant_overrides(extra), variant_label(extra)
            )
            models.append(Path(trained["model_paths"][0]))
            rows.append(
                {
                    "variant": label,
                    "title": title,
                    "overrides": extra,
                    **self.summarise_runs(trained),
                    "forward_flops_per_token": Tagger.load(models[-1]).net.flops_per_token(),
                    "runs": trained["runs"],
                }
            )
        # The variants take turns, each round in a shifted order, so that a slow spell of a shared
        # machine lands on all of them rather than on one; each keeps its median round.
        timings: list[list[dict]] = [[] for _ in rows]
        for round_ in range(self.mode.variant_tag_rounds):
            for i in [(round_ + k) % len(rows) for k in range(len(rows))]:
                timings[i].append(
                    bench_tagging.run_command(models[i], documents, "--threads", str(self.threads))
                )
        for row, taken in zip(rows, timings, strict=True):
            middle = sorted(taken, key=lambda t: t["tokens_per_second"])[len(taken) // 2]
            row["tag_tokens_per_second"] = middle["tokens_per_second"]
            row["tag_tokens_per_second_after_start_up"] = middle["after_start_up"]
            row["tag_tokens_per_second_rounds"] = [t["tokens_per_second"] for t in taken]
            row["tag_peak_rss_mb"] = max(t["peak_rss_mb"] for t in taken)
            shown = ("variant", "test_f1", "train_tokens_per_second", "tag_tokens_per_second")
            print(json.dumps({k: row[k] for k in shown}), flush=True)
        gflops = (ceiling_before + matmul_gflops(self.threads)) / 2
        for row in rows:
            # Training costs about 3x the forward FLOPs (PERFORMANCE.md; common practice).
            train_ceiling = gflops * 1e9 / (3 * row["forward_flops_per_token"])
            tag_ceiling = gflops * 1e9 / row["forward_flops_per_token"]
            row["train_ceiling_share"] = round(row["train_tokens_per_second"] / train_ceiling, 3)
            row["tag_ceiling_share"] = round(row["tag_tokens_per_second"] / tag_ceiling, 3)
        return {
            "config": str(CONLL2000.config.relative_to(ROOT)),
            "base": BASE,
            "overrides": self.overrides(CONLL2000, self.variant_overrides([])),
            "test_file": portable_path(CONLL2000.test)
            + (
                f" (first {self.mode.eval_sentences} sentences)" if self.mode.eval_sentences else ""
            ),
            "matmul_gflops": round(gflops, 1),
            "tag_rounds": self.mode.variant_tag_rounds,
            "tagging_input": {
                "documents": "CoNLL-2000 test sentences, detokenised, shuffled into documents",
                "megabytes": round(documents.stat().st_size / 1e6, 2),
            },
            "rows": rows,
            "trained_at": sorted({c for row in rows for c in row["trained_at"]}),
        }

    def training_speed(self) -> dict:
        entry = run_speed(
            argparse.Namespace(threads=self.mode.speed_threads, seconds=self.mode.speed_seconds)
        )
        torch.set_num_threads(self.threads)
        return {
            "config": "configs/default.toml",
            "seconds_per_variant": self.mode.speed_seconds,
            "rows": entry["rows"],
        }

    def tagging_speed(self) -> dict | None:
        missing = DEMO.missing()
        if missing:
            print(f"skipped tagging_speed: {', '.join(map(str, missing))} absent", flush=True)
            return None
        trained = self.train_and_score(DEMO, [], "demo")
        out = self.scratch / "tagging"
        argv = [
            "scripts/bench_tagging.py",
            trained["model_paths"][0],
            *self.mode.tagging_args,
            "--out",
            str(out),
        ]
        with_argv(argv, bench_tagging.main)
        torch.set_num_threads(self.threads)
        tagging = json.loads((out / "tagging.json").read_text())
        tagging.pop("machine", None)  # this entry's machine is the command's, at its start
        model = Path(trained["model_paths"][0])
        return {
            "trained_model": {
                "config": "configs/default.toml",
                "trained_on": "data/demo train.txt (dev.txt to choose the epoch)",
                "demo_test_f1": trained["runs"][0]["test_f1"],
                "epochs": trained["runs"][0]["epochs"],
                "demo_test_f1_seeds": self.summarise_runs(trained)["test_f1"],
            },
            "bench_tagging_command": portable_command(argv),
            **tagging,
            "workers_against_processes": self.workers_against_processes(model),
        }

    def workers_against_processes(self, model: Path) -> dict:
        """`--workers 2` beside two separate one-thread commands, each tagging half the input.

        The pair of processes is what the workers could reach at best: the same two cores, no
        shared reading, ordering or writing. Measured back to back on the same documents.
        """
        sentences = [bench_tagging.detokenise(s.tokens) for s in read_sentences(DEMO.test)]
        source = self.scratch / "pair.jsonl"
        bench_tagging.write_documents(sentences, source, int(self.mode.pair_mb * 1e6))
        lines = source.read_text(encoding="utf-8").split("\n")[:-1]  # JSONL: one per "\n"
        halves = [self.scratch / "half-1.jsonl", self.scratch / "half-2.jsonl"]
        middle = len(lines) // 2
        for half, part in zip(halves, (lines[:middle], lines[middle:]), strict=True):
            half.write_text("".join(line + "\n" for line in part), encoding="utf-8")
        workers = bench_tagging.run_command(model, source, "--workers", "2", "--threads", "1")
        started = time.perf_counter()
        with ThreadPoolExecutor(max_workers=2) as pool:
            pair = list(
                pool.map(
                    lambda half: bench_tagging.run_command(model, half, "--threads", "1"), halves
                )
            )
        seconds = time.perf_counter() - started
        tokens = sum(run["tokens"] for run in pair)
        return {
            "megabytes": round(source.stat().st_size / 1e6, 2),
            "workers_2": workers,
            "two_processes": {
                "tokens": tokens,
                "seconds": round(seconds, 2),
                "tokens_per_second": round(tokens / seconds),
                "peak_rss_mb": [run["peak_rss_mb"] for run in pair],
            },
        }


# --- results -------------------------------------------------------------------------------------


def record(folder: Path, mode: Mode, name: str, entry: dict, started: dict, seconds: float) -> None:
    """Merge one entry into results.json (read just now: others may have written) and re-render."""
    entry = {
        "name": name,
        "quick": mode is QUICK,
        "machine": started,
        "run_minutes": round(seconds / 60, 1),
        **entry,
    }
    path = folder / "results.json"
    results = json.loads(path.read_text()) if path.exists() else {}
    results.setdefault(mode.name, {})[name] = entry
    folder.mkdir(parents=True, exist_ok=True)
    with atomic_output(path) as out:
        out.write(json.dumps(results, indent=2) + "\n")
    with atomic_output(folder / "RESULTS.md") as out:
        out.write(render(results, folder))


TIMED_ALONE = "timed with nothing else running, thread counts as in the table"


def _stamp(entry: dict, settings: str = "") -> str:
    """The provenance line under a section; `settings` replaces the training-thread note where a
    section sets its own thread counts (the speed runs, which run before any training)."""
    m = entry["machine"]
    changed = (
        f"; uncommitted changes in {', '.join(m['changed_files'])}"
        if m.get("changed_files")
        else ""
    )
    trained = (
        f"; its training runs finished at commit(s) {', '.join(entry['trained_at'])}"
        if entry.get("trained_at")
        else ""
    )
    jobs = f" in {m['jobs']} parallel runs" if m.get("jobs", 1) > 1 else ""
    threads = settings or f"{m['threads']} training thread(s){jobs}"
    return (
        f"_{m['date']}, commit {m['commit']}{changed}{trained}; {m['cores']} cores ({m['cpu']}), "
        f"torch {m['torch']}, {threads}; load average "
        f"{entry.get('load_before_run', m['load_before'])} when this run began; "
        f"`{m['command']}`; {entry['run_minutes']} min._"
    )


def _minutes(value: float) -> str:
    return f"{value:.1f} min" if value >= 1 else f"{60 * value:.0f} s"


def _anchor(a: dict) -> str:
    return f"{a['f1']}: {a['system']} ({a['source']}; {a['confidence']})"


def _f1(spread_: dict) -> str:
    return f"{spread_['median']:.2f} ({spread_['min']:.2f}-{spread_['max']:.2f})"


def render_accuracy(entries: dict) -> list[str]:
    rows = [e for e in (entries.get(n) for n in CORPUS_RUNS) if e]
    if not rows:
        return []
    lines = [
        "### Accuracy on public corpora",
        "",
        "Test span F1 (strict: type and both boundaries), median of the seeds with (min-max): seed "
        "variation of about one point is normal for these taggers (Reimers & Gurevych 2017), so "
        "read distributions, not single runs. No pretrained vectors anywhere.",
        "",
        "Published figures were written down from memory: each names its source and how sure "
        "we are of it. Check them against the papers before quoting a comparison.",
        "",
        "| corpus | seeds | test F1, median (min-max) | published | epochs | training | model |",
        "|---|---|---|---|---|---|---|",
    ]
    for e in rows:
        overall = [a for a in e["anchors"] if not a["entity_type"]]
        published = "<br>".join(_anchor(a) for a in overall) or "per type, below"
        lines.append(
            f"| {e['name']} | {len(e['seeds'])} | {_f1(e['test_f1'])} | {published} | "
            f"{e['epochs']['median']:g} | {_minutes(e['train_minutes']['median'])} | "
            f"{e['model_megabytes']} MB |"
        )
    lines.append("")
    for e in rows:
        b = e["budget"]
        bound = f", at most {b['max_minutes']:g} min a run" if b["max_minutes"] else ""
        lines.append(
            f"- **{e['name']}**: {e['corpus']}; `{e['config']}`; test file {e['test_file']}; "
            f"at most {b['epochs']} epochs, stopping after {b['patience']} without a better dev "
            f"F1{bound}; the epoch with the best dev F1 is kept."
        )
        lines.append(f"  {_stamp(e)}")
    lines.append("")
    typed = [e for e in rows if any(a["entity_type"] for a in e["anchors"])]
    for e in typed:
        lines += [
            f"#### {e['name']}: per type",
            "",
            "| type | test F1, median (min-max) | published |",
            "|---|---|---|",
        ]
        for a in e["anchors"]:
            got = e["per_type_test_f1"].get(a["entity_type"])
            lines.append(
                f"| {a['entity_type']} | {_f1(got) if got else 'not found in test'} | "
                f"{_anchor(a)} |"
            )
        lines.append(f"| both | {_f1(e['test_f1'])} | |")
        lines.append("")
    return lines


def render_variants(entries: dict) -> list[str]:
    titles = {
        "cells": "The four cell kinds on CoNLL-2000 (equal hidden size and layers)",
        "layers": "Depth: 1, 2 and 3 residual layers (lstm) on CoNLL-2000",
        "parts": "Which parts earn their cost: character features and the CRF on CoNLL-2000",
    }
    lines: list[str] = []
    for name, title in titles.items():
        e = entries.get(name)
        if not e:
            continue
        base = next(r for r in e["rows"] if not r["overrides"])
        rounds = e.get("tag_rounds", 1)
        taken = f", the median of {rounds} rounds in which the variants take turns" * (rounds > 1)
        lines += [
            f"### {title}",
            "",
            f"Base: {e['base']}. Training tokens/s: median over epochs of the training runs; "
            f"tagging tokens/s: `tagger tag` end to end on {e['tagging_input']['megabytes']} MB of "
            "JSONL documents (CoNLL-2000 test sentences), start-up included, with the training "
            f"thread count{taken}. Ceiling share: tokens/s over the rate the matrix-product ceiling "
            f"({e['matmul_gflops']} GFLOP/s, measured in this run) allows for the encoder and "
            "output layer (3x the forward FLOPs per token for training).",
            "",
            "| variant | test F1, median (min-max) | vs base | training tokens/s (share of "
            "ceiling) | tagging tokens/s (share of ceiling) | tagging vs base | training time, "
            "epochs | model |",
            "|---|---|---|---|---|---|---|---|",
        ]
        for r in e["rows"]:
            delta = r["test_f1"]["median"] - base["test_f1"]["median"]
            lines.append(
                f"| {r['title']} | {_f1(r['test_f1'])} | {delta:+.2f} | "
                f"{r['train_tokens_per_second']:,} ({100 * r['train_ceiling_share']:.0f}%) | "
                f"{r['tag_tokens_per_second']:,} ({100 * r['tag_ceiling_share']:.0f}%) | "
                f"{r['tag_tokens_per_second'] / base['tag_tokens_per_second']:.2f}x | "
                f"{_minutes(r['train_minutes']['median'])}, {r['epochs']['median']:g} ep | "
                f"{r['model_megabytes']} MB |"
            )
        lines += ["", _stamp(e), ""]
    return lines


def render_speed(entries: dict) -> list[str]:
    lines: list[str] = []
    t = entries.get("training_speed")
    if t:
        lines += [
            "### Training speed of the default model against the ceiling",
            "",
            f"Full steps (forward, backward, clipping, Adam) on demo batches, {t['config']}, "
            f"{t['seconds_per_variant']} s a variant. Ceiling: the 1024^3 float32 matrix-product "
            "rate measured in the same run, over 3x the forward FLOPs per token of the encoder and "
            "output layer.",
            "",
        ]
        lines += speed_table(t["rows"])
        lines += ["", _stamp(t, TIMED_ALONE), ""]
    g = entries.get("tagging_speed")
    if g:
        best_ref = max(r["tokens_per_second"] for r in g["reference"])
        spread_ = g["trained_model"].get("demo_test_f1_seeds")
        seeds = f"; over its seeds {_f1(spread_)}" if spread_ else ""
        lines += [
            "### Tagging speed of the default model",
            "",
            f"`tagger tag` end to end in a child process (start-up, reading, tokenising, tagging, "
            f"writing JSONL) on {g['input']['megabytes']} MB of demo test sentences shuffled into "
            f"{g['input']['documents']:,} documents; model {g['trained_model']['config']} "
            "trained on "
            f"the demo data ({g['trained_model']['epochs']} epochs, demo test F1 "
            f"{g['trained_model']['demo_test_f1']}{seeds}). "
            f"Reference: the same model one sentence at a time, best of 1 and 2 threads "
            f"({best_ref:,} tokens/s). Ceiling: matrix-product rate over forward FLOPs per token "
            f"({g['model']['flops_per_token']:,}).",
            "",
            "| setting | tokens/s | without start-up | x one-at-a-time | share of ceiling |",
            "|---|---|---|---|---|",
        ]
        for r in g["runs"]:
            lines.append(
                f"| `{r['options']}` | {r['tokens_per_second']:,} | {r['after_start_up']:,} | "
                f"{r['times_reference']:.1f} | {100 * r['ceiling_share']:.0f}% |"
            )
        pair = g.get("workers_against_processes")
        if pair:
            w, two = pair["workers_2"], pair["two_processes"]
            lines += [
                "",
                f"`--workers 2 --threads 1` against two separate `--threads 1` commands started "
                f"together, each on half of {pair['megabytes']} MB (the most two one-thread "
                f"processes can do): {w['tokens_per_second']:,} against "
                f"{two['tokens_per_second']:,} tokens/s "
                f"({w['tokens_per_second'] / two['tokens_per_second']:.2f}x).",
            ]
        lines += [
            "",
            "Peak resident memory of the tagging process: "
            + "; ".join(f"{m['megabytes']} MB input: {m['peak_rss_mb']} MB" for m in g["memory"])
            + ".",
            "",
            "Targets: " + "; ".join(f"{k}: {v}" for k, v in g["targets"].items()) + ".",
            "",
            _stamp(g, TIMED_ALONE),
            "",
        ]
    return lines


def _read_record(path: Path) -> dict | None:
    return json.loads(path.read_text()) if path.exists() else None


def render_annotation_loop(folder: Path) -> list[str]:
    """The annotation loop's two targets, from the records their own scripts write beside
    results.json (benchmarks/picking*.json, benchmarks/learning_curve.json)."""
    lines: list[str] = []
    for name, corpus in (("picking", "CoNLL-2000"), ("picking_bc5cdr", "BC5CDR")):
        picking = _read_record(folder / f"{name}.json")
        if picking is None:
            continue
        curves, reached = picking["curves"], picking["reach"]
        finals = [points[-1] for points in curves["random"].values()]
        share = reached["median"]
        last_random = median([f["f1"] for f in finals])
        gap = median([points[-1]["f1"] for points in curves["ranked"].values()]) - last_random
        lines.append(
            f"- **What to annotate next** (`benchmarks/{name}.md`, "
            f"`{picking['machine']['command']}`): {corpus}, {len(finals)} seeds, 5 rounds from "
            f"{finals[0]['sentences'] - 4 * picking['step']:,} to {finals[0]['sentences']:,} "
            f"sentences; random picking ends at test F1 "
            f"{100 * last_random:.2f} (median), and ranked picking "
            + (
                "does not reach it in most seeds"
                if share is None
                else f"reaches it with {100 * share:.0f}% of random's sentences (median)"
            )
            + f"; at equal sentences in the final round it is {100 * gap:+.2f} points ahead"
            + f"; target at most {100 * reached['target']:.0f}%: "
            + ("met" if reached["met"] else "NOT met")
            + f"; {picking['minutes']:.0f} min."
        )
    curve = _read_record(folder / "learning_curve.json")
    for entry in (curve or {}).values():
        predicted, measured = entry["predicted"], entry["measured"]
        lines.append(
            f"- **Full-train F1 from a learning curve** (`benchmarks/learning_curve.md`, "
            f"`{entry['machine']['command']}`): {entry['corpus']}, the curve through 10-40% "
            f"(3 seeds each) predicts {100 * predicted['f1']:.2f} "
            f"({100 * predicted['low']:.2f}-{100 * predicted['high']:.2f}) at "
            f"{predicted['sentences']:,} sentences; measured {100 * measured['median']:.2f} "
            f"(median of 3, {100 * measured['min']:.2f}-{100 * measured['max']:.2f}); "
            f"{100 * entry['difference']:+.2f} points, target within 1: "
            + ("met" if entry["within_target"] else "NOT met")
            + f"; {entry['minutes']:.0f} min."
        )
    if not lines:
        return []
    return [
        "## The annotation loop: records of their own scripts",
        "",
        "Each names its settings, date, commit and command in its own file; the lines below are "
        "their headline figures against the targets of issue 12.",
        "",
        *lines,
        "",
    ]


def render(results: dict, folder: Path = RESULTS_DIR) -> str:
    lines = [
        "# Benchmark results",
        "",
        "Written by `scripts/benchmark.py` (see its `--help` and DEVELOPERS.md, Benchmarks); the "
        "figures below are generated, do not edit them by hand. `benchmarks/results.json` holds "
        "the same entries with every seed. Each section names its date, machine, commit and "
        "command.",
        "",
        "## The record (`--full`)",
        "",
    ]
    full = results.get("full", {})
    if full:
        lines += [*render_accuracy(full), *render_variants(full), *render_speed(full)]
    else:
        lines += [
            "No full run is recorded yet: `.venv/bin/python scripts/benchmark.py --full`.",
            "",
        ]
    lines += render_annotation_loop(folder)
    quick = results.get("quick", {})
    if quick:
        lines += [
            "## Smoke run (`--quick`): NOT results",
            "",
            "**Everything in this section comes from quick mode: a few hundred training sentences, "
            "two epochs, one seed, one training thread, tiny inputs. It only shows that the "
            "benchmark runs end to end. Its F1 and speed figures say nothing about the tagger; "
            "never quote them.**",
            "",
            *render_accuracy(quick),
            *render_variants(quick),
            *render_speed(quick),
        ]
    return "\n".join(lines).rstrip() + "\n"


# --- command -------------------------------------------------------------------------------------


def main() -> int:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    which = parser.add_mutually_exclusive_group(required=True)
    which.add_argument("--quick", action="store_true", help="smoke run, a few minutes")
    which.add_argument("--full", action="store_true", help="the record, many hours")
    which.add_argument("--list", action="store_true", help="describe the runs and exit")
    which.add_argument(
        "--render",
        action="store_true",
        help="rewrite RESULTS.md from the records already written, running nothing",
    )
    parser.add_argument("--only", nargs="+", choices=RUN_NAMES, metavar="NAME", default=None)
    parser.add_argument("--seeds", type=int, nargs="+", help="default: 3 (full) or 1 (quick)")
    parser.add_argument("--threads", type=int, help="torch threads of each training run; default 1")
    parser.add_argument("--jobs", type=int, help="training runs at a time; default 2")
    parser.add_argument(
        "--fresh", action="store_true", help="retrain runs this mode has already finished"
    )
    parser.add_argument(
        "--out", type=Path, default=RESULTS_DIR, help="folder of results.json and RESULTS.md"
    )
    args = parser.parse_args()
    if args.list:
        runs = __doc__[__doc__.index("Runs (") : __doc__.index("Each accuracy")]
        print(runs.rstrip())
        return 0
    args.out = args.out.resolve()
    if args.render:
        results = json.loads((args.out / "results.json").read_text())
        with atomic_output(args.out / "RESULTS.md") as out:
            out.write(render(results, args.out))
        return 0
    mode = FULL if args.full else QUICK
    os.chdir(ROOT)  # the configs name their corpora relative to the project folder
    bench = Benchmark(
        mode, tuple(args.seeds or mode.seeds), args.threads or mode.threads, args.jobs or mode.jobs
    )
    if args.fresh:
        shutil.rmtree(bench.runs_dir, ignore_errors=True)
    names = [n for n in RUN_NAMES if args.only is None or n in args.only]
    speed = [n for n in names if n in ("training_speed", "tagging_speed")]
    trained = [n for n in names if n not in speed]
    began = time.monotonic()

    def run_and_record(name: str) -> None:
        print(f"== {name} ({mode.name})", flush=True)
        started = time.monotonic()
        load = round(os.getloadavg()[0], 2)  # other work on the machine when this run began
        entry = bench.run(name)
        if entry is not None:
            entry["load_before_run"] = load
            record(args.out, mode, name, entry, bench.started, time.monotonic() - started)

    try:
        for name in speed:  # alone on the machine: nothing else is queued yet
            run_and_record(name)
        for name in trained:
            bench.queue_run(name)
        # Accuracy entries as their runs finish; the variants' entries time tagging, so they
        # wait until all training is done and the machine is quiet again.
        for name in [n for n in trained if n in CORPUS_RUNS] + [
            n for n in trained if n in VARIANTS
        ]:
            if name in VARIANTS:
                for _, futures in bench.queued.values():
                    wait(futures)
            run_and_record(name)
    finally:
        bench.close()
    print(f"done in {(time.monotonic() - began) / 60:.1f} min; see {args.out / 'RESULTS.md'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
