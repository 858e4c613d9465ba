"""Mentions seen in training: how many test mentions of a public corpus already occur in its training
split, and how a model's recall differs between those and new ones.

A mention is a gold span; it is *seen* when a span of the same type and the same text (its tokens
joined by single spaces, exactly as written) occurs in the training split, *unseen* otherwise.
Counts are over occurrences (a name mentioned three times counts three times); distinct texts are
given beside them, and the seen count ignoring case for corpora where casing is erratic.

    .venv/bin/python scripts/bench_mentions.py            # the shares; needs no model
    .venv/bin/python scripts/bench_mentions.py --train    # also recall on seen and unseen BC5CDR
                                                          # mentions (trains seed 1 first, ~20 min)
    .venv/bin/python scripts/bench_mentions.py --model runs/mentions/bc5cdr-seed1/model.tagger

The model is trained and run through the `tagger` command (`train`, then `evaluate --predictions`)
and the predicted file is compared with the gold one here. Without --train or --model the recall
figures of the previous record are kept as they were, with the machine and commit that made them.
Writes benchmarks/mentions.json and benchmarks/mentions.md. The corpora are read from
../shared/corpora; a corpus that is absent there is skipped and said so.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from collections import Counter
from collections.abc import Callable
from pathlib import Path
from typing import NamedTuple

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, portable_path  # noqa: E402

from tagger.data.corpus import read_sentences  # noqa: E402
from tagger.data.schemes import tags_to_spans  # noqa: E402

CORPORA = ROOT.parent / "shared" / "corpora"
RESULTS = ROOT / "benchmarks" / "mentions.json"
SUMMARY = ROOT / "benchmarks" / "mentions.md"
RUN = Path("runs") / "mentions" / "bc5cdr-seed1"  # relative to the project folder
TRAIN_ARGS = [
    "train",
    "--config",
    "configs/bc5cdr.toml",
    "--out",
    RUN.as_posix(),
    "--set",
    "train.seed=1",
    "--set",
    "train.threads=1",
]

Mention = tuple[str, str]  # (type, text)


class Corpus(NamedTuple):
    name: str
    title: str
    train: Path
    test: Path

    def missing(self) -> list[Path]:
        return [p for p in (self.train, self.test) if not p.exists()]


WNUT17 = Corpus(
    "wnut17",
    "WNUT-2017 emerging and rare entities (Derczynski et al. 2017)",
    CORPORA / "wnut17" / "wnut17train.conll",
    CORPORA / "wnut17" / "emerging.test.annotated",
)
BC5CDR = Corpus(
    "bc5cdr",
    "BC5CDR chemical and disease mentions (corpus as prepared by Li et al. 2016)",
    CORPORA / "bc5cdr" / "train.tsv",
    CORPORA / "bc5cdr" / "test.tsv",
)
CORPUS_LIST = (WNUT17, BC5CDR)


# --- counting --------------------------------------------------------------------------------------


def sentence_mentions(path: Path) -> list[list[tuple[Mention, tuple[int, int]]]]:
    """Per sentence of an IOB2 column file: each gold span as ((type, text), (start, end))."""
    found = []
    for sentence in read_sentences(path):
        tokens = sentence.tokens
        found.append(
            [
                ((kind, " ".join(tokens[start:end])), (start, end))
                for kind, start, end in tags_to_spans(sentence.labels, "IOB2")
            ]
        )
    return found


def mention_set(path: Path) -> set[Mention]:
    return {mention for sentence in sentence_mentions(path) for mention, _ in sentence}


def ratio(part: int, whole: int) -> float:
    return round(part / whole, 4) if whole else 0.0


def seen_shares(train: set[Mention], test: list[Mention]) -> dict:
    """Of the test mentions (occurrences, in order), how many occur in `train`, per type and in all."""
    folded = {(kind, text.casefold()) for kind, text in train}
    folded_texts = {text.casefold() for _, text in train}

    def share(mentions: list[Mention]) -> dict:
        seen = sum(m in train for m in mentions)
        seen_folded = sum((kind, text.casefold()) in folded for kind, text in mentions)
        seen_any_type = sum(text.casefold() in folded_texts for _, text in mentions)
        distinct = set(mentions)
        return {
            "mentions": len(mentions),
            "seen": seen,
            "unseen": len(mentions) - seen,
            "seen_share": ratio(seen, len(mentions)),
            "unseen_share": ratio(len(mentions) - seen, len(mentions)),
            "seen_ignoring_case_share": ratio(seen_folded, len(mentions)),
            # the loosest reading: the text, ignoring case, is a training span of any type
            "seen_as_any_type_ignoring_case_share": ratio(seen_any_type, len(mentions)),
            "distinct_texts": len(distinct),
            "distinct_seen": len(distinct & train),
        }

    types = sorted({kind for kind, _ in test})
    return {
        "all": share(test),
        "per_type": {t: share([m for m in test if m[0] == t]) for t in types},
    }


def ignoring_case(train: set[Mention]) -> Callable[[Mention], bool]:
    """Whether a mention is seen when case is ignored (the type must still match)."""
    folded = {(kind, text.casefold()) for kind, text in train}
    return lambda mention: (mention[0], mention[1].casefold()) in folded


def recall_by_seen(
    gold: list[list[tuple[Mention, tuple[int, int]]]],
    predicted: list[list[tuple[Mention, tuple[int, int]]]],
    seen: Callable[[Mention], bool],
) -> dict:
    """Per type and for all types pooled ("all"): how many gold mentions for which `seen` holds the
    prediction found exactly (type and edges), and the same for the others; with precision, recall
    and F1 over all spans."""
    if len(gold) != len(predicted):
        raise ValueError(f"{len(gold)} gold sentences but {len(predicted)} predicted")
    found: Counter[tuple[str, str]] = Counter()  # (type, "seen"/"unseen") -> found
    total: Counter[tuple[str, str]] = Counter()
    right: Counter[tuple[str, str]] = Counter()  # (type, group) -> predicted spans that are right
    tagged: Counter[tuple[str, str]] = Counter()
    for gold_sentence, predicted_sentence in zip(gold, predicted, strict=True):
        predicted_spans = {(m[0], edges) for m, edges in predicted_sentence}
        gold_spans = {(m[0], edges) for m, edges in gold_sentence}
        for mention, edges in gold_sentence:
            group = (mention[0], "seen" if seen(mention) else "unseen")
            total[group] += 1
            found[group] += (mention[0], edges) in predicted_spans
        for mention, edges in predicted_sentence:
            group = (mention[0], "seen" if seen(mention) else "unseen")
            tagged[group] += 1
            right[group] += (mention[0], edges) in gold_spans

    def scores(kinds: list[str]) -> dict:
        def sum_of(counts: Counter, keys: list) -> int:
            return sum(counts[key] for key in keys)

        groups = ("seen", "unseen")
        hits = {g: sum_of(found, [(k, g) for k in kinds]) for g in groups}
        mentions = {g: sum_of(total, [(k, g) for k in kinds]) for g in groups}
        rights = {g: sum_of(right, [(k, g) for k in kinds]) for g in groups}
        tags = {g: sum_of(tagged, [(k, g) for k in kinds]) for g in groups}
        n_right, n_tagged = sum(rights.values()), sum(tags.values())
        n_found, n_gold = sum(hits.values()), sum(mentions.values())
        f1 = 2 * n_right / (n_tagged + n_gold) if n_tagged + n_gold else 0.0  # n_right == n_found
        entry: dict = {
            "precision": ratio(n_right, n_tagged),
            "recall": ratio(n_found, n_gold),
            "f1": round(f1, 4),
        }
        for group in groups:
            # A predicted span is "unseen" when its own type and text are not in train: the
            # precision of what the model says about names it never saw annotated.
            both = mentions[group] + tags[group]
            entry[group] = {
                "mentions": mentions[group],
                "found": hits[group],
                "recall": ratio(hits[group], mentions[group]),
                "predicted": tags[group],
                "precision": ratio(rights[group], tags[group]),
                "f1": round((hits[group] + rights[group]) / both, 4) if both else 0.0,
            }
        return entry

    types = sorted({kind for kind, _ in total} | {kind for kind, _ in tagged})
    return {**{t: scores([t]) for t in types}, "all": scores(types)}


# --- the model ------------------------------------------------------------------------------------


def run_tagger(args: list[str]) -> None:
    """Run a `tagger` subcommand from the project folder (whose configs name ../shared/...)."""
    command = [sys.executable, "-m", "tagger", *args]
    print("$ tagger " + " ".join(args), flush=True)
    subprocess.run(command, cwd=ROOT, check=True)


def train_model() -> Path:
    """Train the seed-1 BC5CDR model, or reuse (or resume) the one in runs/mentions/."""
    run = ROOT / RUN
    if (run / "outcome.json").exists() and (run / "model.tagger").exists():
        print(f"reusing the finished run in {RUN}", flush=True)
    else:
        # A run folder of the earlier names (checkpoint.tagger) is renamed by --resume.
        states = ("resume-state.tagger", "checkpoint.tagger", "metrics.json")
        resume = ["--resume"] if any((run / name).exists() for name in states) else []
        run_tagger([*TRAIN_ARGS, *resume])
    return run / "model.tagger"


def measure_recall(model: Path, train: set[Mention]) -> dict:
    predictions = model.parent / "test.predicted.tsv"
    run_tagger(
        [
            "evaluate",
            portable_path(model),
            portable_path(BC5CDR.test),
            "--predictions",
            portable_path(predictions),
        ]
    )
    gold, predicted = sentence_mentions(BC5CDR.test), sentence_mentions(predictions)
    history = model.parent / "epochs.json"
    epochs = len(json.loads(history.read_text())) if history.exists() else None
    return {
        "machine": machine(),
        "model": portable_path(model),
        "trained_by": "tagger " + " ".join(TRAIN_ARGS)
        if model == ROOT / RUN / "model.tagger"
        else None,
        "epochs_run": epochs,
        "predictions_by": f"tagger evaluate {portable_path(model)} {portable_path(BC5CDR.test)} "
        f"--predictions {portable_path(predictions)}",
        "per_type": recall_by_seen(gold, predicted, train.__contains__),
        "per_type_seen_ignoring_case": recall_by_seen(gold, predicted, ignoring_case(train)),
    }


# --- the record -----------------------------------------------------------------------------------


def percent(share: float) -> str:
    return f"{100 * share:.1f}"


def render(record: dict) -> str:
    m = record["machine"]
    lines = [
        "# Test mentions seen in training",
        "",
        f"_{m['date']}, commit {m['commit']}; `{m['command']}`. A mention is seen when a training "
        "span has the same type and text (tokens joined by single spaces, as written); counts are "
        "occurrences. Ignoring case and type: no training span of any type has the same text in "
        "any case._",
        "",
        "| corpus | type | test mentions | seen in train | unseen | unseen % | "
        "unseen % ignoring case | unseen % ignoring case and type |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for name, entry in record["shares"].items():
        rows = [("all", entry["all"]), *entry["per_type"].items()]
        for kind, s in rows:
            lines.append(
                f"| {name} | {kind} | {s['mentions']} | {s['seen']} | {s['unseen']} | "
                f"{percent(s['unseen_share'])} | "
                f"{percent(1 - s['seen_ignoring_case_share'])} | "
                f"{percent(1 - s['seen_as_any_type_ignoring_case_share'])} |"
            )
    files = "; ".join(
        f"{n}: train {e['train']}, test {e['test']}" for n, e in record["shares"].items()
    )
    lines += ["", f"Files: {files}."]
    recall = record.get("bc5cdr_recall")
    if recall:
        r = recall["machine"]
        trained = f"trained by `{recall['trained_by']}`" if recall["trained_by"] else "given"
        lines += [
            "",
            "## BC5CDR: recall on test mentions seen and unseen in train",
            "",
            f"_{r['date']}, commit {r['commit']}, {r['cores']} cores, torch {r['torch']}; model "
            f"`{recall['model']}` {trained} ({recall['epochs_run']} epochs run, the one with the "
            f"best dev F1 kept); predictions by `{recall['predictions_by']}`. Found means the same "
            "type and edges; percentages._",
        ]
        for key, heading in (
            ("per_type", "Seen: same type and text as written"),
            ("per_type_seen_ignoring_case", "Seen: same type and text, ignoring case"),
        ):
            lines += ["", f"{heading}:", "", *recall_table(recall[key])]
    return "\n".join(lines) + "\n"


def recall_table(per_type: dict) -> list[str]:
    lines = [
        "| type | test F1 | precision | recall | seen: found / mentions | recall on seen | "
        "unseen: found / mentions | recall on unseen |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for kind, s in per_type.items():
        seen, unseen = s["seen"], s["unseen"]
        lines.append(
            f"| {kind} | {percent(s['f1'])} | {percent(s['precision'])} | "
            f"{percent(s['recall'])} | {seen['found']} / {seen['mentions']} | "
            f"{percent(seen['recall'])} | {unseen['found']} / {unseen['mentions']} | "
            f"{percent(unseen['recall'])} |"
        )
    return lines


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    chosen = parser.add_mutually_exclusive_group()
    chosen.add_argument("--train", action="store_true", help=f"train (or reuse) {RUN} first")
    chosen.add_argument("--model", type=Path, help="a BC5CDR model to measure recall with")
    args = parser.parse_args()

    record: dict = {"machine": machine(), "shares": {}}
    train_sets: dict[str, set[Mention]] = {}
    for corpus in CORPUS_LIST:
        missing = corpus.missing()
        if missing:
            print(f"skipped {corpus.name}: {', '.join(map(str, missing))} absent", flush=True)
            continue
        train_sets[corpus.name] = mention_set(corpus.train)
        test = [m for sentence in sentence_mentions(corpus.test) for m, _ in sentence]
        shares = seen_shares(train_sets[corpus.name], test)
        record["shares"][corpus.name] = {
            "title": corpus.title,
            "train": portable_path(corpus.train),
            "test": portable_path(corpus.test),
            **shares,
        }
        print(f"{corpus.name}: {json.dumps(shares['all'])}", flush=True)

    if (args.train or args.model) and "bc5cdr" not in train_sets:
        sys.exit("BC5CDR is absent: no recall to measure")
    if args.train or args.model:
        model = train_model() if args.train else args.model.resolve()
        record["bc5cdr_recall"] = measure_recall(model, train_sets["bc5cdr"])
    elif RESULTS.exists():
        kept = json.loads(RESULTS.read_text()).get("bc5cdr_recall")
        if kept:
            record["bc5cdr_recall"] = kept
            print("kept the recorded BC5CDR recall figures (no --train or --model)", flush=True)

    RESULTS.write_text(json.dumps(record, indent=2) + "\n")
    SUMMARY.write_text(render(record))
    print(f"wrote {portable_path(RESULTS)} and {portable_path(SUMMARY)}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
