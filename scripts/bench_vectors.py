"""Word vectors learnt from unannotated text, measured on BC5CDR: what they add to span F1 and to
recall on test mentions seen and unseen in train, and what learning them costs.

    .venv/bin/python scripts/bench_vectors.py                         # every variant, seeds 1-3
    .venv/bin/python scripts/bench_vectors.py --seeds 1 --variants both fixed
    .venv/bin/python scripts/bench_vectors.py --seeds 1 --variants char-lm both+char-lm

1. `tagger learn-vectors ../shared/corpora/unlabeled/biomed.txt.gz --config configs/bc5cdr.toml`
   (3.8 million tokens of biomedical text holding none of BC5CDR), timed; reused when present.
2. For each variant and seed: `tagger train --config configs/bc5cdr.toml` on train.tsv with
   devel.tsv as dev (the config's epochs and patience, one thread), `--set model.vectors_use=...`; then
   `tagger evaluate --predictions` on test.tsv, and recall on seen and unseen mentions computed
   by scripts/bench_mentions.py's counting. "none" is the same run without vectors.
3. For the char-lm variants, first `tagger learn-char-lm` on the same text (an hour's budget,
   one thread; resumed where it stopped), then training with `--set model.char_lm=...`.
Runs live in runs/vectors/ (git ignores it); a finished run is reused, an interrupted one resumed,
so the command goes on where it stopped. Writes benchmarks/vectors.json and benchmarks/vectors.md.
Time figures mean something only when nothing else runs on the machine; the record says what
else ran if told (--note).
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_mentions import BC5CDR, mention_set, recall_by_seen, sentence_mentions  # noqa: E402
from benchlib import machine, portable_path  # noqa: E402

from tagger.training.records import CHECKPOINT_NAME, HISTORY_NAMES, OUTCOME_NAME  # noqa: E402

CORPORA = ROOT.parent / "shared" / "corpora"
RAW = CORPORA / "unlabeled" / "biomed.txt.gz"
DEV = CORPORA / "bc5cdr" / "devel.tsv"
RUNS = ROOT / "runs" / "vectors"
VECTORS = RUNS / "biomed.tagvec"
RESULTS = ROOT / "benchmarks" / "vectors.json"
SUMMARY = ROOT / "benchmarks" / "vectors.md"
VARIANTS = {
    "none": "no vectors (the base)",
    "both": "frozen table of 50,000 words + 80,000 n-gram rows, and the trained embedding "
    "starts from the vectors",
    "fixed": "frozen table only; the trained embedding starts random",
    "initialise": "the trained embedding starts from the vectors (train words only)",
    "char-lm": "no vectors; the character language models' word states as features",
    "both+char-lm": "both, and the character language models' word states",
}
LEARN_ARGS = ["--config", "configs/bc5cdr.toml", "--threads", "2", "--epochs", "5"]
CHAR_LM = RUNS / "biomed.tagclm"
CHAR_LM_ARGS = ["--config", "configs/bc5cdr.toml", "--threads", "1", "--max-minutes", "60"]


def tagger(args: list[str]) -> None:
    print("$ tagger " + " ".join(args), flush=True)
    subprocess.run([sys.executable, "-m", "tagger", *args], cwd=ROOT, check=True)


def learn_vectors() -> dict:
    if VECTORS.exists():
        print(f"reusing {portable_path(VECTORS)}", flush=True)
        return json.loads(RESULTS.read_text()).get("learning", {}) if RESULTS.exists() else {}
    RUNS.mkdir(parents=True, exist_ok=True)
    args = ["learn-vectors", portable_path(RAW), *LEARN_ARGS, "--out", portable_path(VECTORS)]
    started = time.monotonic()
    tagger(args)
    return {
        "command": "tagger " + " ".join(args),
        "seconds": round(time.monotonic() - started, 1),
        "file_bytes": VECTORS.stat().st_size,
    }


def learn_char_lm() -> dict:
    """The character language models (an hour's budget on one thread), resumed if stopped."""
    if CHAR_LM.exists() and not Path(f"{CHAR_LM}.resume").exists():
        print(f"reusing {portable_path(CHAR_LM)}", flush=True)
        return json.loads(RESULTS.read_text()).get("char_lm", {}) if RESULTS.exists() else {}
    RUNS.mkdir(parents=True, exist_ok=True)
    args = ["learn-char-lm", portable_path(RAW), *CHAR_LM_ARGS, "--out", portable_path(CHAR_LM)]
    resume = ["--resume"] if Path(f"{CHAR_LM}.resume").exists() else []
    started = time.monotonic()
    tagger([*args, *resume])
    from tagger.unannotated.char_lm_file import load_char_lm

    learnt = load_char_lm(CHAR_LM)[1]["learnt"]
    return {
        "command": "tagger " + " ".join(args),
        "seconds": round(time.monotonic() - started, 1),
        "file_bytes": CHAR_LM.stat().st_size,
        **{k: learnt[k] for k in ("characters", "held_out_perplexity", "unigram_perplexity")},
        "stopped": learnt["stopped"],
    }


def train_and_score(variant: str, seed: int, train_mentions: set) -> dict:
    run = RUNS / f"{variant}-seed{seed}"
    args = [
        "train",
        "--config",
        "configs/bc5cdr.toml",
        "--train",
        portable_path(BC5CDR.train),
        "--dev",
        portable_path(DEV),
        "--out",
        portable_path(run),
        "--set",
        f"train.seed={seed}",
        "--set",
        "train.threads=1",
        "--set",
        "train.max_minutes=90",  # a safety net: the config's epochs and patience decide
    ]
    use = variant.removesuffix("+char-lm")
    if use in ("both", "fixed", "initialise"):
        args += ["--set", f"model.pretrained_vectors={portable_path(VECTORS)}"]
        args += ["--set", f"model.vectors_use={use}"]
    if variant.endswith("char-lm"):
        args += ["--set", f"model.char_lm={portable_path(CHAR_LM)}"]
    if not (run / OUTCOME_NAME).exists():
        started = time.monotonic()
        tagger([*args, *(["--resume"] if (run / CHECKPOINT_NAME).exists() else [])])
        seconds = round(time.monotonic() - started)
    else:
        print(f"reusing {portable_path(run)}", flush=True)
        seconds = None
    predictions = run / "test.predicted.tsv"
    model = run / "model.tagger"
    tagger(
        [
            "evaluate",
            portable_path(model),
            portable_path(BC5CDR.test),
            "--predictions",
            portable_path(predictions),
        ]
    )
    gold, predicted = sentence_mentions(BC5CDR.test), sentence_mentions(predictions)
    history = json.loads((run / HISTORY_NAMES[0]).read_text())
    return {
        "trained_by": "tagger " + " ".join(args),
        "train_seconds": seconds,
        "epochs_run": len(history),
        "model_bytes": model.stat().st_size,
        "scores": recall_by_seen(gold, predicted, train_mentions.__contains__),
    }


def spread(values: list[float]) -> dict:
    return {"median": statistics.median(values), "min": min(values), "max": max(values)}


def summarise(runs: dict[str, dict[str, dict]]) -> dict:
    """Per variant: F1 and seen/unseen recall per type, median with range over the seeds."""
    summary = {}
    for variant, seeds in runs.items():
        scores = [run["scores"] for run in seeds.values()]
        entry = {
            "seeds": sorted(int(s) for s in seeds),
            "f1": spread([s["all"]["f1"] for s in scores]),
        }
        for kind in ("Chemical", "Disease", "all"):
            for group in ("seen", "unseen"):
                values = [s[kind][group]["recall"] for s in scores if kind in s]
                if values:
                    entry[f"{kind} {group} recall"] = spread(values)
        summary[variant] = entry
    return summary


def figure(value: dict) -> str:
    if value["min"] == value["max"]:
        return f"{100 * value['median']:.2f}"
    return f"{100 * value['median']:.2f} ({100 * value['min']:.2f}-{100 * value['max']:.2f})"


def render(record: dict) -> str:
    lines = [
        "# Word vectors from unannotated text on BC5CDR",
        "",
        "Written by `scripts/bench_vectors.py`. Vectors learnt from "
        f"`{portable_path(RAW)}` (3.8 million tokens, none of BC5CDR). Span F1 on test.tsv and "
        "recall on test mentions seen / unseen in train (same type and text), median of the "
        "seeds with the range.",
        "",
    ]
    learning = record.get("learning") or {}
    if learning:
        lines += [
            f"Learning: `{learning['command']}` took {learning['seconds']:.0f} s; the file holds "
            f"{learning['file_bytes'] / 2**20:.1f} MB.",
            "",
        ]
    char_lm = record.get("char_lm") or {}
    if char_lm:
        lines += [
            f"Character language models: `{char_lm['command']}` took {char_lm['seconds']:.0f} s "
            f"({char_lm['stopped']}) on a text of {char_lm['characters']:,} characters; held-out "
            f"perplexity {char_lm['held_out_perplexity']:.2f} per character against "
            f"{char_lm['unigram_perplexity']:.2f} for a unigram model.",
            "",
        ]
    header = ["variant", "seeds", "span F1", "Chemical seen", "Chemical unseen", "Disease seen"]
    header += ["Disease unseen"]
    lines += ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    for variant, entry in record["summary"].items():
        cells = [variant, ",".join(map(str, entry["seeds"])), figure(entry["f1"])]
        for key in ("Chemical seen", "Chemical unseen", "Disease seen", "Disease unseen"):
            value = entry.get(f"{key} recall")
            cells.append(figure(value) if value else "-")
        lines.append("| " + " | ".join(cells) + " |")
    lines += ["", "Variants:", ""]
    lines += [f"- {name}: {VARIANTS[name]}" for name in record["summary"]]
    lines += ["", f"Machine: {json.dumps(record['machine'])}", ""]
    if record.get("note"):
        lines += [f"Note: {record['note']}", ""]
    return "\n".join(lines)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3])
    parser.add_argument("--variants", nargs="+", choices=list(VARIANTS), default=list(VARIANTS))
    parser.add_argument("--note", default="", help="what else ran on the machine, say")
    args = parser.parse_args()
    missing = [p for p in (RAW, BC5CDR.train, DEV, BC5CDR.test) if not p.exists()]
    if missing:
        print(f"skipped: {', '.join(map(str, missing))} absent", flush=True)
        return 0
    learning = learn_vectors()
    char_lm = learn_char_lm() if any(v.endswith("char-lm") for v in args.variants) else {}
    train_mentions = mention_set(BC5CDR.train)
    for variant in args.variants:
        for seed in args.seeds:
            result = train_and_score(variant, seed, train_mentions)
            # read again just before writing: another process may run other variants beside
            record = json.loads(RESULTS.read_text()) if RESULTS.exists() else {"runs": {}}
            record["learning"] = learning or record.get("learning", {})
            record["char_lm"] = char_lm or record.get("char_lm", {})
            record["runs"].setdefault(variant, {})[str(seed)] = result
            record["summary"] = summarise(record["runs"])
            record["machine"] = machine()
            record["note"] = args.note or record.get("note", "")
            RESULTS.write_text(json.dumps(record, indent=2) + "\n")
            SUMMARY.write_text(render(record))
    print(f"wrote {portable_path(RESULTS)} and {portable_path(SUMMARY)}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
