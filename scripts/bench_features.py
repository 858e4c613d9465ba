"""Feature benchmark: what the demo lexicon and vectors learnt from the demo's unannotated reports
do for names never seen in training, and what they cost.

    .venv/bin/python scripts/bench_features.py                       # about 9 minutes on 2 cores
    .venv/bin/python scripts/bench_features.py --variants words lexicon shape --minutes 3
    .venv/bin/python scripts/bench_features.py --variants words vectors vectors-lexicon

Each variant trains configs/default.toml on the demo corpus (data/demo train and dev, one seed,
train.max_minutes bounded by --minutes) and tags data/demo/test.txt:

    words     the default config: words and characters only
    lexicon   plus model.lexicons = ["data/demo/lexicon.tsv"], the invented catalogue
    shape     plus the lexicon and model.word_shape = true
    vectors   plus model.pretrained_vectors: vectors learnt first by
              `tagger learn-vectors data/demo/unannotated.txt.gz --config configs/default.toml`
              (timed; --vector-dim and --vector-epochs pass on; --reuse-vectors keeps a file
              learnt before), read with model.vectors_use = both
    vectors-fixed, vectors-initialise
              the same vectors with model.vectors_use = fixed or initialise
    vectors-lexicon
              the vectors and the lexicon

Accuracy: strict span P/R/F1 on the whole test split, and on the spans "unseen in train": recall
over the gold test spans whose (type, text) never occurs as a gold span in train, precision over
the predicted spans whose (type, text) never does, and their F1; also for COMPONENT and DEFECT
alone (the lexicon's types).

Speed, measured side by side in alternating rounds (these machines are shared and noisy):
training tokens/s of full steps on the demo batches (collating a batch, then the trainer's own
`train_step`: unknown-word replacement, forward, backward, clipping, Adam),
and tagging tokens/s of `predict_scored_spans` (the `tag` command's path: feature ids, lexicon
matching, character features per distinct token, CRF decoding and marginals) on the test split.

Writes benchmarks/features.json and benchmarks/features.md, or under --record another name (date,
machine, commit, command, and --note: what else ran on the machine, which makes the speed ratios
and the learning time unclean).
"""

from __future__ import annotations

import argparse
import json
import random
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from statistics import median
from typing import Any

import torch

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, portable_command  # noqa: E402

from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.config import Config, apply_overrides, load_config  # noqa: E402
from tagger.data.corpus import read_sentences  # noqa: E402
from tagger.data.schemes import Span, tags_to_spans  # noqa: E402
from tagger.network.batching import bucketed_batches, collate  # noqa: E402
from tagger.scoring.metrics import count_spans, summarise  # noqa: E402
from tagger.training.loop import train  # noqa: E402
from tagger.training.setup import new_network, prepare_training, step_tools  # noqa: E402
from tagger.training.step import train_step  # noqa: E402

RECORD = "features"  # benchmarks/features.json and .md; --record names others
DEMO = ROOT / "data" / "demo"
LEXICON = "data/demo/lexicon.tsv"
UNANNOTATED = "data/demo/unannotated.txt.gz"
VECTORS = "runs/features/demo.tagvec"  # runs/ is not kept in git
_WITH_LEXICON = f'model.lexicons=["{LEXICON}"]'
_WITH_VECTORS = f'model.pretrained_vectors="{VECTORS}"'
VARIANTS: dict[str, list[str]] = {
    "words": [],
    "lexicon": [_WITH_LEXICON],
    "shape": [_WITH_LEXICON, "model.word_shape=true"],
    # "vectors" keeps the use it was recorded with, both (the default then; fixed is now)
    "vectors": [_WITH_VECTORS, 'model.vectors_use="both"'],
    "vectors-fixed": [_WITH_VECTORS, 'model.vectors_use="fixed"'],
    "vectors-initialise": [_WITH_VECTORS, 'model.vectors_use="initialise"'],
    "vectors-lexicon": [_WITH_VECTORS, _WITH_LEXICON, 'model.vectors_use="both"'],
}
LEXICON_TYPES = ("COMPONENT", "DEFECT")


def variant_config(name: str, threads: int, minutes: float) -> Config:
    config = load_config(ROOT / "configs" / "default.toml")
    overrides = [
        o.replace(LEXICON, str(ROOT / LEXICON)).replace(VECTORS, str(ROOT / VECTORS))
        for o in VARIANTS[name]
    ]
    return apply_overrides(
        config,
        [
            f'data.train="{DEMO / "train.txt"}"',
            f'data.dev="{DEMO / "dev.txt"}"',
            f"train.threads={threads}",
            f"train.max_minutes={minutes}",
            *overrides,
        ],
    )


def learn_vectors(dim: int, epochs: int, reuse: bool) -> dict[str, Any]:
    """Run `tagger learn-vectors` on the demo's unannotated reports as a user would; timed."""
    out = ROOT / VECTORS
    args = ["learn-vectors", UNANNOTATED, "--config", "configs/default.toml", "--out", VECTORS]
    args += ["--dim", str(dim), "--epochs", str(epochs)]
    command = portable_command(["tagger", *args])
    if reuse and out.exists():
        print(f"reusing {VECTORS}", file=sys.stderr, flush=True)
        return {"command": command, "seconds": None, "file_bytes": out.stat().st_size}
    out.parent.mkdir(parents=True, exist_ok=True)
    started = time.monotonic()
    subprocess.run([sys.executable, "-m", "tagger", *args], cwd=ROOT, check=True)
    seconds = time.monotonic() - started
    return {"command": command, "seconds": round(seconds, 1), "file_bytes": out.stat().st_size}


# --- accuracy ------------------------------------------------------------------------------------


def span_keys(tokens: list[str], spans: list[Span]) -> list[tuple[str, str]]:
    return [(kind, " ".join(tokens[a:b])) for kind, a, b in spans]


def unseen_scores(
    token_lists: list[list[str]],
    gold: list[list[Span]],
    predicted: list[list[Span]],
    train_spans: set[tuple[str, str]],
    types: tuple[str, ...] | None = None,
) -> dict[str, float | int]:
    """Recall over gold spans, and precision over predicted spans, whose (type, text) train lacks."""
    gold_unseen = correct_gold = predicted_unseen = correct_predicted = 0
    for tokens, g, p in zip(token_lists, gold, predicted, strict=True):
        g_set, p_set = set(g), set(p)
        for span, key in zip(g, span_keys(tokens, g), strict=True):
            if key not in train_spans and (types is None or span[0] in types):
                gold_unseen += 1
                correct_gold += span in p_set
        for span, key in zip(p, span_keys(tokens, p), strict=True):
            if key not in train_spans and (types is None or span[0] in types):
                predicted_unseen += 1
                correct_predicted += span in g_set
    recall = correct_gold / gold_unseen if gold_unseen else 0.0
    precision = correct_predicted / predicted_unseen if predicted_unseen else 0.0
    f1 = 2 * precision * recall / (precision + recall) if precision + recall else 0.0
    return {
        "gold_spans": gold_unseen,
        "found": correct_gold,
        "predicted_spans": predicted_unseen,
        "correct": correct_predicted,
        "precision": round(precision, 4),
        "recall": round(recall, 4),
        "f1": round(f1, 4),
    }


def accuracy(tagger: Tagger) -> dict[str, Any]:
    train_sentences = read_sentences(DEMO / "train.txt")
    train_spans = {
        key for s in train_sentences for key in span_keys(s.tokens, tags_to_spans(s.labels, "IOB2"))
    }
    test = read_sentences(DEMO / "test.txt")
    token_lists = [s.tokens for s in test]
    gold = [tags_to_spans(s.labels, "IOB2") for s in test]
    predicted = tagger.predict_spans(token_lists, rows=[s.rows for s in test])
    overall = summarise(count_spans(gold, predicted))["micro"]
    return {
        "test": {k: round(overall[k], 4) for k in ("precision", "recall", "f1")},
        "unseen": unseen_scores(token_lists, gold, predicted, train_spans),
        "unseen_component_defect": unseen_scores(
            token_lists, gold, predicted, train_spans, LEXICON_TYPES
        ),
    }


# --- speed ---------------------------------------------------------------------------------------


def training_step(config: Config) -> Any:
    """A function running the trainer's own `train_step` on the next demo batch (collated
    inside, as training does); returns its token count."""
    setup = prepare_training(config)
    encoded = setup.encoded
    torch.manual_seed(1)
    net, _ = new_network(config, setup)
    net.train()
    tools = step_tools(config, setup, net)  # the trainer's optimizer, clipping and averaging
    order = bucketed_batches(
        [len(e.words) for e in encoded], config.train.batch_size, random.Random(1)
    )
    position = [0]

    def step() -> int:
        indices = order[position[0] % len(order)]
        position[0] += 1
        batch = collate(encoded, indices)
        train_step(tools, batch)
        return batch.tokens

    for _ in range(5):  # warm up
        step()
    return step


def side_by_side(runs: dict[str, Any], rounds: int, seconds: float) -> dict[str, float]:
    """Median over alternating rounds of each runner's tokens/s (a runner returns tokens done)."""
    rates: dict[str, list[float]] = {name: [] for name in runs}
    for _ in range(rounds):
        for name, run in runs.items():
            tokens, start = 0, time.perf_counter()
            while time.perf_counter() - start < seconds:
                tokens += run()
            rates[name].append(tokens / (time.perf_counter() - start))
    return {name: round(median(values), 1) for name, values in rates.items()}


def tagging_run(tagger: Tagger) -> Any:
    test = read_sentences(DEMO / "test.txt")
    token_lists = [s.tokens for s in test]
    total = sum(len(t) for t in token_lists)
    tagger.predict_scored_spans(token_lists)  # warm the per-token caches, as a long run would

    def run() -> int:
        tagger.predict_scored_spans(token_lists)
        return total

    return run


# --- report --------------------------------------------------------------------------------------


def render(entry: dict[str, Any]) -> str:
    m = entry["machine"]
    lines = [
        "# Feature benchmark: the demo lexicon, word shapes and vectors from unannotated text",
        "",
        f"- date: {m['date']}; commit {m['commit']}; command: `{m['command']}`",
        f"- machine: {m['cores']} cores, {m['cpu']}; torch {m['torch']}, python {m['python']}, "
        f"{m['threads']} torch thread(s); load average {m['load_before']} before the run",
        f"- training: configs/default.toml on data/demo train/dev, seed 1, at most "
        f"{entry['minutes']} minutes a run; scores on data/demo/test.txt",
        "- unseen: spans whose (type, text) never occurs as a gold span in train; recall over such "
        "gold spans, precision over such predicted spans",
    ]
    learning = entry.get("learning")
    if learning:
        took = (
            f"took {learning['seconds']:.0f} s"
            if learning["seconds"] is not None
            else "was learnt before this run"
        )
        lines.append(
            f"- vectors: `{learning['command']}` {took}; the file holds "
            f"{learning['file_bytes'] / 2**20:.1f} MB"
        )
    if entry.get("note"):
        lines.append(f"- note: {entry['note']}")
    lines += [
        "",
        "| variant | epochs (best) | test F1 | unseen: gold found | unseen R | unseen P | unseen F1 "
        "| COMPONENT+DEFECT unseen F1 |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for name, v in entry["variants"].items():
        u, cd = v["unseen"], v["unseen_component_defect"]
        lines.append(
            f"| {name} | {v['epochs']} ({v['best_epoch']}) | {100 * v['test']['f1']:.2f} | "
            f"{u['found']}/{u['gold_spans']} | {100 * u['recall']:.2f} | {100 * u['precision']:.2f} "
            f"| {100 * u['f1']:.2f} | {100 * cd['f1']:.2f} |"
        )
    lines += [
        "",
        "Speed, side by side (median of alternating rounds; ratio to `words`):",
        "",
        "| variant | training tokens/s | ratio | tagging tokens/s | ratio |",
        "|---|---|---|---|---|",
    ]
    base = entry["variants"].get("words")
    for name, v in entry["variants"].items():
        # Without `words` in the run there is nothing to divide by: no ratio rather than 1.
        ratios = (
            (
                f"{v['train_tokens_per_second'] / base['train_tokens_per_second']:.3f}",
                f"{v['tag_tokens_per_second'] / base['tag_tokens_per_second']:.3f}",
            )
            if base
            else ("-", "-")
        )
        lines.append(
            f"| {name} | {v['train_tokens_per_second']:,.0f} | {ratios[0]} | "
            f"{v['tag_tokens_per_second']:,.0f} | {ratios[1]} |"
        )
    return "\n".join(lines) + "\n"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--variants", nargs="+", choices=list(VARIANTS), default=["words", "lexicon"]
    )
    parser.add_argument("--minutes", type=float, default=3.2, help="training budget per variant")
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument("--rounds", type=int, default=5, help="alternating speed rounds")
    parser.add_argument("--seconds", type=float, default=4.0, help="seconds per speed round")
    parser.add_argument("--runs", type=Path, default=None, help="keep the run folders here")
    parser.add_argument("--vector-dim", type=int, default=100, help="learn-vectors --dim")
    parser.add_argument("--vector-epochs", type=int, default=5, help="learn-vectors --epochs")
    parser.add_argument("--reuse-vectors", action="store_true", help=f"keep {VECTORS} if it exists")
    parser.add_argument("--note", default="", help="what else ran on the machine, say")
    parser.add_argument(
        "--record",
        default=RECORD,
        help="write benchmarks/RECORD.json and .md (another name keeps the main record)",
    )
    args = parser.parse_args()
    torch.set_num_threads(args.threads)
    entry: dict[str, Any] = {
        "machine": {**machine(), "threads": args.threads},
        "minutes": args.minutes,
        "note": args.note,
        "variants": {},
    }
    if any(name.startswith("vectors") for name in args.variants):
        entry["learning"] = learn_vectors(args.vector_dim, args.vector_epochs, args.reuse_vectors)
    taggers: dict[str, Tagger] = {}
    with tempfile.TemporaryDirectory(prefix="bench-features-") as scratch:
        folder = args.runs or Path(scratch)
        for name in args.variants:
            config = variant_config(name, args.threads, args.minutes)
            started = time.monotonic()
            result = train(config, folder / name, overwrite=True)  # a rerun replaces its runs
            seconds = time.monotonic() - started
            tagger = Tagger.load(result.model_path)
            taggers[name] = tagger
            entry["variants"][name] = {
                "overrides": VARIANTS[name],
                "epochs": len(result.history),
                "best_epoch": result.best_epoch,
                "stop": result.stop_reason,
                "train_seconds": round(seconds, 1),
                "dev_f1": round(result.best_dev["micro"]["f1"], 4),
                **accuracy(tagger),
            }
            print(f"{name}: {json.dumps(entry['variants'][name])}", file=sys.stderr, flush=True)
    steps = {name: training_step(variant_config(name, args.threads, 0)) for name in args.variants}
    train_rates = side_by_side(steps, args.rounds, args.seconds)
    tag_rates = side_by_side(
        {name: tagging_run(t) for name, t in taggers.items()}, args.rounds, args.seconds
    )
    for name in args.variants:
        entry["variants"][name]["train_tokens_per_second"] = train_rates[name]
        entry["variants"][name]["tag_tokens_per_second"] = tag_rates[name]
    folder = ROOT / "benchmarks"
    folder.mkdir(exist_ok=True)
    (folder / f"{args.record}.json").write_text(json.dumps(entry, indent=2) + "\n")
    (folder / f"{args.record}.md").write_text(render(entry))
    print(render(entry))
    return 0


if __name__ == "__main__":
    sys.exit(main())
