"""The training loop, as a function that returns its history.

A run folder holds everything a run leaves behind:

    config.toml          the resolved config
    model.tagger         the best model so far (by dev span F1), rewritten when dev F1 improves;
                         with train.weight_average, the averaged weights
    checkpoint.tagger    the state after the last finished epoch, for --resume
    history.json / .csv  one row per epoch
    metrics.json         the best epoch's dev scores and how the run ended

Every epoch seeds its own random streams from (seed, epoch), so resuming from the checkpoint
of epoch k replays epochs k+1... exactly as an uninterrupted run would.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import random
import time
from collections import Counter
from collections.abc import Callable, Sequence
from contextlib import nullcontext
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import torch

from tagger.apply.tagger import Tagger
from tagger.config import Config, same_config
from tagger.data.atomic import atomic_output, exclusive_folder
from tagger.data.corpus import ColumnFormat, Sentence, read_sentences
from tagger.data.schemes import Span, detect_scheme, labels_for_types, spans_to_tags, tags_to_spans
from tagger.errors import ConfigError, DataError, ModelFileError
from tagger.network.batching import EncodedSentence, bucketed_batches, collate, encode_sentence
from tagger.network.modelfile import load_model_file, save_model_file
from tagger.network.net import build_net
from tagger.scoring.metrics import count_spans, summarise
from tagger.text.features import FeatureSpec, build_features, check_columns
from tagger.text.tokenizer import TokenizerSettings
from tagger.text.vectors import read_word_vectors
from tagger.text.vocab import Vocabularies, build_vocabularies
from tagger.training.averaging import WeightAverage

Progress = Callable[[dict[str, Any]], None]
MODEL_NAME = "model.tagger"
CHECKPOINT_NAME = "checkpoint.tagger"


@dataclass
class TrainResult:
    history: list[dict[str, Any]]
    best_epoch: int
    best_dev: dict[str, Any]
    stop_reason: str
    diverged: bool
    run_dir: Path
    notes: list[str] = field(default_factory=list)

    @property
    def model_path(self) -> Path:
        return self.run_dir / MODEL_NAME


@dataclass
class PreparedData:
    train: list[Sentence]
    dev: list[Sentence]
    input_scheme: str
    train_spans: list[list[Span]]
    dev_spans: list[list[Span]]
    fingerprint: str
    notes: list[str]


def column_format(config: Config) -> ColumnFormat:
    data = config.data
    delimiter = None if data.delimiter == "auto" else data.delimiter
    return ColumnFormat(
        delimiter=delimiter, token_column=data.token_column, label_column=data.label_column
    )


def _fingerprint(paths: Sequence[str]) -> str:
    digest = hashlib.sha256()
    for path in paths:
        with open(path, "rb") as handle:
            while chunk := handle.read(1 << 20):
                digest.update(chunk)
    return digest.hexdigest()


def prepare_data(config: Config) -> PreparedData:
    """Read train (and dev) files, choose the input scheme, hold out dev from train if needed."""
    data = config.data
    if not data.train:
        raise ConfigError("no training file: set data.train in the config or pass --train")
    fmt = column_format(config)
    train = read_sentences(data.train, fmt)
    if not train:
        raise DataError("the training file holds no sentences", data.train)
    notes: list[str] = []
    if data.dev:
        dev = read_sentences(data.dev, fmt)
    else:
        order = list(range(len(train)))
        if data.dev_holdout == "random":
            random.Random(config.train.seed).shuffle(order)
        size = max(1, round(len(train) * data.dev_fraction))
        held = set(order[-size:])
        dev = [s for i, s in enumerate(train) if i in held]
        train = [s for i, s in enumerate(train) if i not in held]
        how = (
            "the last"
            if data.dev_holdout == "last"
            else f"a random draw (seed {config.train.seed}) of"
        )
        notes.append(
            f"no dev file: held out {how} {len(dev)} of {len(dev) + len(train)} training sentences "
            f"(data.dev_fraction={data.dev_fraction}) to choose the best epoch"
        )
    guess = detect_scheme(s.labels for s in train)
    input_scheme = guess.candidates[0]
    if len(guess.candidates) > 1:
        notes.append(f"input scheme read as {input_scheme}: {guess.note}")
    train_spans = [tags_to_spans(s.labels, input_scheme) for s in train]
    dev_spans = [tags_to_spans(s.labels, input_scheme) for s in dev]
    # Lexicons are training data too: a changed list must not resume an old checkpoint.
    paths = [data.train] + ([data.dev] if data.dev else []) + list(config.model.lexicons)
    return PreparedData(
        train, dev, input_scheme, train_spans, dev_spans, _fingerprint(paths), notes
    )


def _initialise_embeddings(
    net: torch.nn.Module, vocabs: Vocabularies, words: list[str], matrix: Any
) -> int:
    """Copy pretrained vectors into the word embedding; returns how many words found one."""
    weight = net.words.weight
    if matrix.shape[1] != weight.shape[1]:
        raise ConfigError(
            f"model.word_dim is {weight.shape[1]} but the pretrained vectors have {matrix.shape[1]} dimensions"
        )
    rows = {}
    for i, word in enumerate(words):
        key = vocabs.word_key(word)
        rows.setdefault(key, i)
    found = 0
    with torch.no_grad():
        for index, word in enumerate(vocabs.words.itos[2:], start=2):
            if word in rows:
                weight[index] = torch.from_numpy(matrix[rows[word]])
                found += 1
    return found


def _epoch_seed(seed: int, epoch: int) -> int:
    return seed * 1_000_003 + epoch


def make_optimizer(config: Config, net: torch.nn.Module) -> torch.optim.Optimizer:
    # foreach: one kernel per operation over all parameters, about half the time of the
    # per-parameter loop torch takes on CPUs by default
    train = config.train
    if train.optimizer == "adam":
        return torch.optim.Adam(
            net.parameters(), lr=train.learning_rate, weight_decay=train.weight_decay, foreach=True
        )
    return torch.optim.SGD(
        net.parameters(),
        lr=train.learning_rate,
        momentum=0.9,
        weight_decay=train.weight_decay,
        foreach=True,
    )


def _optimizer_to_file(optimizer: torch.optim.Optimizer) -> tuple[dict[str, torch.Tensor], dict]:
    """Split an optimizer state into tensors and JSON (safetensors holds only tensors)."""
    state = optimizer.state_dict()
    tensors: dict[str, torch.Tensor] = {}
    plain: dict[str, dict[str, Any]] = {}
    for index, values in state["state"].items():
        for key, value in values.items():
            if isinstance(value, torch.Tensor):
                tensors[f"optimizer.{index}.{key}"] = value
            else:
                plain.setdefault(str(index), {})[key] = value
    return tensors, {"param_groups": state["param_groups"], "plain": plain}


def _optimizer_from_file(tensors: dict[str, torch.Tensor], saved: dict) -> dict:
    state: dict[int, dict[str, Any]] = {}
    for name, value in tensors.items():
        _, index, key = name.split(".", 2)
        state.setdefault(int(index), {})[key] = value
    for index, values in saved["plain"].items():
        state.setdefault(int(index), {}).update(values)
    return {"state": state, "param_groups": saved["param_groups"]}


def evaluate_spans(
    tagger: Tagger, sentences: Sequence[Sentence], gold: Sequence[list[Span]]
) -> dict:
    rows = [s.rows for s in sentences] if tagger.needs_columns else None
    predicted = tagger.predict_spans([s.tokens for s in sentences], rows=rows)
    counts = count_spans(gold, predicted)
    return summarise(counts)


def _write_history(run_dir: Path, history: list[dict[str, Any]]) -> None:
    with atomic_output(run_dir / "history.json") as out:
        json.dump(history, out, indent=2)
    columns = list(history[0]) if history else []
    with atomic_output(run_dir / "history.csv") as out:
        writer = csv.DictWriter(out, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        writer.writerows(history)


def config_to_toml(config: Config) -> str:
    lines = []
    for section, values in config.to_dict().items():
        lines.append(f"[{section}]")
        for key, value in values.items():
            lines.append(f"{key} = {json.dumps(value, ensure_ascii=False)}")
        lines.append("")
    return "\n".join(lines)  # JSON scalars (numbers, true/false, escaped strings) are valid TOML


@dataclass
class TrainingSetup:
    """Everything a training run needs before the network exists; benchmarks build on it too."""

    data: PreparedData
    types: list[str]
    vocabs: Vocabularies
    features: FeatureSpec | None
    encoded: list[EncodedSentence]  # the training sentences, labels in the model's scheme
    word_counts: Counter[str]
    value_counts: list[Counter[str]]
    vectors: tuple[list[str], Any] | None
    tokenizer: TokenizerSettings


def prepare_training(config: Config) -> TrainingSetup:
    """Read the data, build vocabularies and features, encode the training sentences."""
    data = prepare_data(config)
    internal = config.model.scheme
    types = sorted({span[0] for spans in data.train_spans for span in spans})
    labels = labels_for_types(types, internal)
    vectors = (
        read_word_vectors(config.model.pretrained_vectors)
        if config.model.pretrained_vectors
        else None
    )
    vocabs, word_counts = build_vocabularies(
        (s.tokens for s in data.train),
        labels,
        config.model.lowercase,
        config.model.digits_to_zero,
        config.model.min_word_count,
        extra_words=vectors[0] if vectors else (),
    )
    settings = TokenizerSettings()
    features, value_counts = build_features(config.model, data.train, config.data.train, settings)
    if features is not None:
        check_columns(features, data.dev, config.data.dev or config.data.train)
    encoded = [
        encode_sentence(
            s.tokens,
            vocabs,
            spans_to_tags(spans, len(s.tokens), internal),
            features.encode(s.tokens, s.rows) if features is not None else None,
        )
        for s, spans in zip(data.train, data.train_spans, strict=True)
    ]
    return TrainingSetup(
        data, types, vocabs, features, encoded, word_counts, value_counts, vectors, settings
    )


def train(
    config: Config,
    run_dir: str | Path,
    resume: bool = False,
    progress: Progress | None = None,
) -> TrainResult:
    """Train a tagger; the best model is at ``run_dir/model.tagger``. Returns the per-epoch history.

    One run at a time in a folder: a second one is refused (FolderBusyError)."""
    run_dir = Path(run_dir)
    run_dir.mkdir(parents=True, exist_ok=True)
    with exclusive_folder(run_dir):
        return _train(config, run_dir, resume, progress or (lambda event: None))


def _train(config: Config, run_dir: Path, resume: bool, report: Progress) -> TrainResult:
    if config.train.threads:
        torch.set_num_threads(config.train.threads)
    torch.manual_seed(config.train.seed)
    random.seed(config.train.seed)

    setup = prepare_training(config)
    data, vocabs, features, encoded = setup.data, setup.vocabs, setup.features, setup.encoded
    for note in data.notes:
        report({"event": "note", "message": note})
    lengths = [len(e.words) for e in encoded]
    singletons = torch.zeros(len(vocabs.words), dtype=torch.bool)
    for word, count in setup.word_counts.items():
        if count == 1 and word in vocabs.words:
            singletons[vocabs.words.index(word)] = True
    # Feature-column values seen once are read as unknown now and then too, so that the unknown
    # value's embedding learns something before it meets new values at tagging time.
    value_singletons = [
        (slot, torch.tensor([counts.get(v, 0) == 1 for v in column.values.itos]))
        for slot, (column, counts) in enumerate(
            zip(features.columns if features else [], setup.value_counts, strict=True)
        )
    ]

    net = build_net(config, vocabs, features)
    if setup.vectors:
        found = _initialise_embeddings(net, vocabs, *setup.vectors)
        report(
            {
                "event": "note",
                "message": f"pretrained vectors for {found} of {len(vocabs.words) - 2} words",
            }
        )
    optimizer = make_optimizer(config, net)
    average = (
        WeightAverage(net, config.train.weight_average) if config.train.weight_average else None
    )
    tagger = Tagger(net, vocabs, config, data.input_scheme, features=features)
    meta_common = {
        "training_data": {
            "fingerprint": data.fingerprint,
            "train": config.data.train,
            "dev": config.data.dev,
            "sentences": len(data.train),
        },
        "types": setup.types,
        # How tagging will cut raw text into tokens; stored so that tagging matches training.
        "tokenizer": setup.tokenizer.to_dict(),
    }

    history: list[dict[str, Any]] = []
    best_f1, best_epoch, best_dev, bad_epochs = -1.0, 0, {}, 0
    learning_rate = config.train.learning_rate
    start_epoch = 1
    checkpoint = run_dir / CHECKPOINT_NAME
    if resume and checkpoint.exists():
        tensors, meta = load_model_file(checkpoint)
        if (
            not same_config(meta.get("config"), config)
            or meta.get("fingerprint") != data.fingerprint
        ):
            raise ModelFileError(
                f"{checkpoint}: the checkpoint was made with another config or other data; "
                "resume with the same config and files, or choose a new run folder"
            )
        net.load_state_dict({k[4:]: v for k, v in tensors.items() if k.startswith("net.")})
        optimizer.load_state_dict(
            _optimizer_from_file(
                {k: v for k, v in tensors.items() if k.startswith("optimizer.")}, meta["optimizer"]
            )
        )
        state = meta["state"]
        if average is not None:
            average.load_state(
                {k: v for k, v in tensors.items() if k.startswith("average.")},
                state["average_steps"],
            )
        history, best_f1, best_epoch = state["history"], state["best_f1"], state["best_epoch"]
        best_dev, bad_epochs, learning_rate = (
            state["best_dev"],
            state["bad_epochs"],
            state["learning_rate"],
        )
        start_epoch = state["epoch"] + 1
        report(
            {"event": "note", "message": f"resuming after epoch {state['epoch']} from {checkpoint}"}
        )
    elif resume:
        report(
            {"event": "note", "message": f"no checkpoint in {run_dir}: starting from the beginning"}
        )
    with atomic_output(run_dir / "config.toml") as out:
        out.write(config_to_toml(config))

    started = time.monotonic()
    budget = config.train.max_minutes * 60
    stop_reason, diverged = f"reached train.epochs={config.train.epochs}", False
    if history and history[-1].get("stop"):
        stop_reason = history[-1]["stop"]
        start_epoch = config.train.epochs + 1  # the checkpointed run had already stopped
    for epoch in range(start_epoch, config.train.epochs + 1):
        epoch_started = time.monotonic()
        rng = random.Random(_epoch_seed(config.train.seed, epoch))
        torch.manual_seed(_epoch_seed(config.train.seed, epoch))
        for group in optimizer.param_groups:
            group["lr"] = learning_rate
        net.train()
        batches = bucketed_batches(lengths, config.train.batch_size, rng)
        total_loss, tokens_seen = 0.0, 0
        for number, indices in enumerate(batches, start=1):
            batch = collate(encoded, indices)
            words = batch.words
            if config.train.unknown_replace > 0:
                drop = singletons[words] & (torch.rand(words.shape) < config.train.unknown_replace)
                words = words.masked_fill(drop, 1)
            feature_ids = batch.features
            if feature_ids is not None and value_singletons and config.train.unknown_replace > 0:
                for slot, single in value_singletons:
                    ids = feature_ids[:, :, slot]  # (B, T), a view: collate made a fresh tensor
                    rare = single[ids] & (torch.rand(ids.shape) < config.train.unknown_replace)
                    ids.masked_fill_(rare, 1)
            emissions = net.emissions(words, batch.chars, batch.lengths, features=feature_ids)
            loss = net.loss(emissions, batch.labels, batch.mask)
            if not math.isfinite(loss.item()):
                diverged = True
                kept = (
                    f"{run_dir / MODEL_NAME} keeps epoch {best_epoch}"
                    if best_epoch
                    else "no model was saved"
                )
                stop_reason = (
                    f"the training loss became {loss.item()} at epoch {epoch}, batch {number}; "
                    f"{kept}. Try a lower train.learning_rate or train.clip_norm"
                )
                break
            optimizer.zero_grad(set_to_none=True)
            (loss / len(indices)).backward()
            if config.train.clip_norm > 0:
                torch.nn.utils.clip_grad_norm_(net.parameters(), config.train.clip_norm)
            optimizer.step()
            if average is not None:
                average.update()
            total_loss += loss.item()
            tokens_seen += batch.tokens
            elapsed = time.monotonic() - epoch_started
            epoch_left = elapsed / number * (len(batches) - number)
            # Later epochs are assumed to take as long as the finished ones did (dev scoring
            # included), or as this one will; the budget, when set, caps the estimate.
            per_epoch = (
                sum(row["epoch_seconds"] for row in history) / len(history)
                if history
                else elapsed / number * len(batches)
            )
            run_left = epoch_left + (config.train.epochs - epoch) * per_epoch
            if budget:
                run_left = min(run_left, max(0.0, budget - (time.monotonic() - started)))
            report(
                {
                    "event": "batch",
                    "epoch": epoch,
                    "epochs": config.train.epochs,
                    "batch": number,
                    "batches": len(batches),
                    "loss": total_loss / max(tokens_seen, 1),
                    "tokens_per_second": tokens_seen / max(elapsed, 1e-9),
                    "epoch_seconds_left": epoch_left,
                    "run_seconds_left": run_left,
                    "best_dev_f1": best_f1,
                }
            )
        if diverged:
            break
        train_seconds = time.monotonic() - epoch_started
        # With weight averaging on, the averaged weights are the model: scored and saved.
        with average.swapped_in() if average is not None else nullcontext():
            dev = evaluate_spans(tagger, data.dev, data.dev_spans)
            dev_f1 = dev["micro"]["f1"]
            improved = dev_f1 > best_f1
            if improved:
                best_f1, best_epoch, best_dev, bad_epochs = dev_f1, epoch, dev, 0
                tagger.save(
                    run_dir / MODEL_NAME, {**meta_common, "epoch": epoch, "dev_metrics": dev}
                )
        if not improved:
            bad_epochs += 1
        row = {
            "epoch": epoch,
            "train_loss_per_token": round(total_loss / max(tokens_seen, 1), 6),
            "dev_f1": round(dev_f1, 6),
            "dev_precision": round(dev["micro"]["precision"], 6),
            "dev_recall": round(dev["micro"]["recall"], 6),
            "learning_rate": learning_rate,
            "train_tokens_per_second": round(tokens_seen / max(train_seconds, 1e-9), 1),
            "epoch_seconds": round(time.monotonic() - epoch_started, 2),
            "best": improved,
            "stop": "",
        }
        if (
            config.train.lr_schedule == "exponential"
            or config.train.lr_schedule == "plateau"
            and not improved
        ):
            learning_rate *= config.train.lr_decay
        if bad_epochs >= config.train.patience:
            row["stop"] = (
                f"no better dev F1 for {bad_epochs} epochs (train.patience={config.train.patience})"
            )
        elif budget and time.monotonic() - started >= budget:
            row["stop"] = f"time budget of train.max_minutes={config.train.max_minutes} used"
        history.append(row)
        _write_history(run_dir, history)
        net_tensors = {f"net.{k}": v for k, v in net.state_dict().items()}
        optimizer_tensors, optimizer_meta = _optimizer_to_file(optimizer)
        average_tensors, average_steps = average.state() if average is not None else ({}, 0)
        save_model_file(
            checkpoint,
            {**net_tensors, **optimizer_tensors, **average_tensors},
            {
                "kind": "checkpoint",
                "config": config.to_dict(),
                "fingerprint": data.fingerprint,
                "optimizer": optimizer_meta,
                "state": {
                    "epoch": epoch,
                    "history": history,
                    "best_f1": best_f1,
                    "best_epoch": best_epoch,
                    "best_dev": best_dev,
                    "bad_epochs": bad_epochs,
                    "learning_rate": learning_rate,
                    "average_steps": average_steps,
                },
            },
        )
        report({"event": "epoch", **row, "best_dev_f1": best_f1, "best_epoch": best_epoch})
        if row["stop"]:
            stop_reason = row["stop"]
            break

    result = TrainResult(history, best_epoch, best_dev, stop_reason, diverged, run_dir, data.notes)
    with atomic_output(run_dir / "metrics.json") as out:
        json.dump(
            {
                "best_epoch": best_epoch,
                "dev": best_dev,
                "stop_reason": stop_reason,
                "diverged": diverged,
                "input_scheme": data.input_scheme,
                "notes": data.notes,
            },
            out,
            indent=2,
        )
    return result
