"""Word vectors learnt from unannotated text, measured on BC5CDR (or the demo): what they add to
span F1 and to recall on test mentions seen and unseen in train, and what learning them costs.

    .venv/bin/python scripts/bench_vectors.py                         # every variant, seeds 1-3
    .venv/bin/python scripts/bench_vectors.py --seeds 1 --variants both fixed
    .venv/bin/python scripts/bench_vectors.py --seeds 1 --variants char-lm both+char-lm
    .venv/bin/python scripts/bench_vectors.py --corpus demo --variants none fixed

With `--corpus demo` the same steps run on the demo: vectors learnt from
data/demo/unannotated.txt.gz, configs/default.toml trained on data/demo/train.txt with dev.txt,
scored on test.txt; runs in runs/vectors-demo/, records benchmarks/vectors_demo.{json,md}.

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
import os
import statistics
import subprocess
import sys
import time
from dataclasses import dataclass, replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_mentions import mention_set, recall_by_seen, sentence_mentions  # noqa: E402
from benchlib import machine, portable_path  # noqa: E402

from tagger.training.records import CHECKPOINT_NAME, HISTORY_NAMES, OUTCOME_NAME  # noqa: E402

CORPORA = ROOT.parent / "shared" / "corpora"


@dataclass(frozen=True)
class Setting:
    """One corpus with its raw text, config and where its runs and records go."""

    title: str
    raw: Path
    raw_words: str  # how the records describe the raw text
    config: str
    train: Path
    dev: Path
    test: Path
    runs: Path
    results: Path
    summary: Path
    buckets: int | None = None  # n-gram rows of the vectors; None: learn-vectors' default

    @property
    def stem(self) -> str:
        return self.raw.name.split(".")[0]

    @property
    def vectors(self) -> Path:
        rows = f"-{self.buckets}rows" if self.buckets else ""
        return self.runs / f"{self.stem}{rows}.tagvec"

    @property
    def char_lm(self) -> Path:
        return self.runs / f"{self.stem}.tagclm"

    def label(self, variant: str) -> str:
        """The variant's name in the records: with its n-gram rows when they are not the default."""
        return f"{variant}, {self.buckets:,} n-gram rows" if self.buckets else variant


SETTINGS = {
    "bc5cdr": Setting(
        "BC5CDR",
        CORPORA / "unlabeled" / "biomed.txt.gz",
        "3.8 million tokens, none of BC5CDR",
        "configs/bc5cdr.toml",
        CORPORA / "bc5cdr" / "train.tsv",
        CORPORA / "bc5cdr" / "devel.tsv",
        CORPORA / "bc5cdr" / "test.tsv",
        ROOT / "runs" / "vectors",
        ROOT / "benchmarks" / "vectors.json",
        ROOT / "benchmarks" / "vectors.md",
    ),
    "demo": Setting(
        "the demo",
        ROOT / "data" / "demo" / "unannotated.txt.gz",
        "the demo's invented unannotated service reports",
        "configs/default.toml",
        ROOT / "data" / "demo" / "train.txt",
        ROOT / "data" / "demo" / "dev.txt",
        ROOT / "data" / "demo" / "test.txt",
        ROOT / "runs" / "vectors-demo",
        ROOT / "benchmarks" / "vectors_demo.json",
        ROOT / "benchmarks" / "vectors_demo.md",
    ),
}
VARIANTS = {
    "none": "no vectors (the base)",
    "both": "frozen table of 50,000 words + 80,000 n-gram rows, and the trained embedding "
    "starts from the vectors",
    "fixed": "frozen table only; the trained embedding starts random",
    "initialise": "the trained embedding starts from the vectors (train words only)",
    "char-lm": "no vectors; the character language models' word states as features",
    "both+char-lm": "both, and the character language models' word states",
}
LEARN_ARGS = ["--threads", "2", "--epochs", "5"]
CHAR_LM_ARGS = ["--threads", "1", "--max-minutes", "60"]


def tagger(args: list[str]) -> None:
    print("$ tagger " + " ".join(args), flush=True)
    subprocess.run([sys.executable, "-m", "tagger", *args], cwd=ROOT, check=True)


def earlier(setting: Setting, key: str) -> dict:
    if not setting.results.exists():
        return {}
    return json.loads(setting.results.read_text()).get(key, {})


def learn_vectors(setting: Setting) -> dict:
    vectors = setting.vectors
    if vectors.exists():
        print(f"reusing {portable_path(vectors)}", flush=True)
        if setting.buckets:
            return earlier(setting, "learning_other_rows").get(str(setting.buckets), {})
        return earlier(setting, "learning")
    setting.runs.mkdir(parents=True, exist_ok=True)
    args = ["learn-vectors", portable_path(setting.raw), "--config", setting.config, *LEARN_ARGS]
    args += ["--buckets", str(setting.buckets)] if setting.buckets else []
    args += ["--out", portable_path(vectors)]
    started = time.monotonic()
    tagger(args)
    return {
        "command": "tagger " + " ".join(args),
        "seconds": round(time.monotonic() - started, 1),
        "file_bytes": vectors.stat().st_size,
    }


def learn_char_lm(setting: Setting) -> dict:
    """The character language models (an hour's budget on one thread), resumed if stopped."""
    char_lm = setting.char_lm
    if char_lm.exists() and not Path(f"{char_lm}.resume").exists():
        print(f"reusing {portable_path(char_lm)}", flush=True)
        return earlier(setting, "char_lm")
    setting.runs.mkdir(parents=True, exist_ok=True)
    args = ["learn-char-lm", portable_path(setting.raw), "--config", setting.config]
    args += [*CHAR_LM_ARGS, "--out", portable_path(char_lm)]
    resume = ["--resume"] if Path(f"{char_lm}.resume").exists() else []
    started = time.monotonic()
    tagger([*args, *resume])
    from tagger.unannotated.char_lm_file import load_char_lm

    learnt = load_char_lm(char_lm)[1]["learnt"]
    return {
        "command": "tagger " + " ".join(args),
        "seconds": round(time.monotonic() - started, 1),
        "file_bytes": char_lm.stat().st_size,
        **{k: learnt[k] for k in ("characters", "held_out_perplexity", "unigram_perplexity")},
        "stopped": learnt["stopped"],
    }


def train_and_score(setting: Setting, variant: str, seed: int, train_mentions: set) -> dict:
    rows = f"-{setting.buckets}rows" if setting.buckets else ""
    run = setting.runs / f"{variant}{rows}-seed{seed}"
    args = [
        "train",
        "--config",
        setting.config,
        "--train",
        portable_path(setting.train),
        "--dev",
        portable_path(setting.dev),
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
        args += ["--set", f"model.pretrained_vectors={portable_path(setting.vectors)}"]
        args += ["--set", f"model.vectors_use={use}"]
    if variant.endswith("char-lm"):
        args += ["--set", f"model.char_lm={portable_path(setting.char_lm)}"]
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
            portable_path(setting.test),
            "--predictions",
            portable_path(predictions),
        ]
    )
    gold, predicted = sentence_mentions(setting.test), sentence_mentions(predictions)
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
        for kind in sorted({k for s in scores for k in s}):
            for group in ("seen", "unseen"):
                values = [s[kind][group]["recall"] for s in scores if kind in s]
                if values:
                    entry[f"{kind} {group} recall"] = spread(values)
        unseen = [s["all"]["unseen"]["f1"] for s in scores if "f1" in s["all"]["unseen"]]
        if len(unseen) == len(scores):
            entry["unseen f1"] = spread(unseen)
        summary[variant] = entry
    return summary


def figure(value: dict) -> str:
    if value["min"] == value["max"]:
        return f"{100 * value['median']:.2f}"
    return f"{100 * value['median']:.2f} ({100 * value['min']:.2f}-{100 * value['max']:.2f})"


def render(setting: Setting, record: dict) -> str:
    lines = [
        f"# Word vectors from unannotated text on {setting.title}",
        "",
        "Written by `scripts/bench_vectors.py`. Vectors learnt from "
        f"`{portable_path(setting.raw)}` ({setting.raw_words}). Span F1 on "
        f"`{portable_path(setting.test)}`, recall on its mentions seen / unseen in train (same "
        "type and text), and F1 on unseen spans (recall over the unseen gold mentions, precision "
        "over the predicted spans whose type and text are not in train); median of the seeds "
        "with the range.",
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
    suffix = " seen recall"
    types = sorted(
        {
            k.removesuffix(suffix)
            for e in record["summary"].values()
            for k in e
            if k.endswith(suffix)
        }
        - {"all"}
    )
    recalls = [f"{t} {group}" for t in types for group in ("seen", "unseen")]
    header = ["variant", "seeds", "span F1", "unseen-span F1", *(f"{r} recall" for r in recalls)]
    lines += ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    for variant, entry in record["summary"].items():
        cells = [variant, ",".join(map(str, entry["seeds"])), figure(entry["f1"])]
        cells.append(figure(entry["unseen f1"]) if "unseen f1" in entry else "-")
        for key in recalls:
            value = entry.get(f"{key} recall")
            cells.append(figure(value) if value else "-")
        lines.append("| " + " | ".join(cells) + " |")
    lines += ["", "Variants:", ""]
    lines += [f"- {name}: {VARIANTS[name.split(',')[0]]}" for name in record["summary"]]
    lines += ["", f"Config `{setting.config}`, one thread, the config's epochs and patience."]
    lines += ["", f"Machine: {json.dumps(record['machine'])}", ""]
    if record.get("note"):
        lines += [f"Note: {record['note']}", ""]
    return "\n".join(lines)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3])
    parser.add_argument("--variants", nargs="+", choices=list(VARIANTS), default=list(VARIANTS))
    parser.add_argument("--note", default="", help="what else ran on the machine, say")
    parser.add_argument("--corpus", choices=list(SETTINGS), default="bc5cdr")
    parser.add_argument(
        "--buckets", type=int, help="n-gram rows of the vectors (default: learn-vectors' own)"
    )
    parser.add_argument(
        "--rescore", action="store_true", help="score the recorded runs again, train nothing"
    )
    args = parser.parse_args()
    setting = replace(SETTINGS[args.corpus], buckets=args.buckets)
    missing = [p for p in (setting.raw, setting.train, setting.dev, setting.test) if not p.exists()]
    if missing:
        print(f"skipped: {', '.join(map(str, missing))} absent", flush=True)
        return 0
    if args.rescore:
        rescore(setting, mention_set(setting.train))
        print(f"wrote {portable_path(setting.results)} and {portable_path(setting.summary)}")
        return 0
    learning = learn_vectors(setting)
    wants_lm = any(v.endswith("char-lm") for v in args.variants)
    char_lm = learn_char_lm(setting) if wants_lm else {}
    train_mentions = mention_set(setting.train)
    for variant in args.variants:
        for seed in args.seeds:
            result = train_and_score(setting, variant, seed, train_mentions)
            # read again just before writing: another process may run other variants beside
            results = setting.results
            record = json.loads(results.read_text()) if results.exists() else {"runs": {}}
            if setting.buckets:  # the default vectors keep their own record
                rows = record.setdefault("learning_other_rows", {})
                rows[str(setting.buckets)] = learning or rows.get(str(setting.buckets), {})
            else:
                record["learning"] = learning or record.get("learning", {})
            record["char_lm"] = char_lm or record.get("char_lm", {})
            record["runs"].setdefault(setting.label(variant), {})[str(seed)] = result
            record["summary"] = summarise(record["runs"])
            record["machine"] = machine()
            record["note"] = args.note or record.get("note", "")
            write_atomically(results, json.dumps(record, indent=2) + "\n")
            write_atomically(setting.summary, render(setting, record))
    print(f"wrote {portable_path(setting.results)} and {portable_path(setting.summary)}")
    return 0


def rescore(setting: Setting, train_mentions: set) -> None:
    """Score every recorded run again from the predictions it wrote, and write the record and
    its page again: for when the counting changes, without training or tagging anything."""
    record = json.loads(setting.results.read_text())
    for label, seeds in record["runs"].items():
        variant, _, rows = label.partition(", ")
        suffix = f"-{rows.split()[0].replace(',', '')}rows" if rows else ""
        for seed, result in seeds.items():
            predictions = setting.runs / f"{variant}{suffix}-seed{seed}" / "test.predicted.tsv"
            if predictions.exists():
                gold, predicted = sentence_mentions(setting.test), sentence_mentions(predictions)
                result["scores"] = recall_by_seen(gold, predicted, train_mentions.__contains__)
            else:
                print(f"kept the recorded scores of {label} seed {seed}: {predictions} is gone")
    record["summary"] = summarise(record["runs"])
    write_atomically(setting.results, json.dumps(record, indent=2) + "\n")
    write_atomically(setting.summary, render(setting, record))


def write_atomically(path: Path, text: str) -> None:
    """A reader beside (another seed's process) never sees half a record."""
    part = path.with_name(f"{path.name}.{os.getpid()}.part")
    part.write_text(text)
    part.replace(path)


if __name__ == "__main__":
    sys.exit(main())
