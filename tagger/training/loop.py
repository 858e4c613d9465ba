"""The training loop, as a function that returns its history.

A run folder holds everything a run leaves behind (`tagger.training.records` names the files):

    README.txt            what each file holds; written at the start and again at the end
    resolved-config.toml  the resolved config
    model.tagger          the best model so far (by dev span F1), rewritten when dev F1 improves;
                          with train.weight_average, the averaged weights
    resume-state.tagger   the state after the last finished epoch, for --resume (checkpoint.py)
    epochs.json / .csv    one row per epoch
    outcome.json          the best epoch's dev scores, how the run ended and the calibration

`train` reads the files the config names; `train_on_sentences` takes sentences from memory. Both
start in a run folder made, held and checked as `run_folder` says (a finished run is replaced only
with overwrite, a failed start leaves nothing behind), then run the same loop: epochs of
`train_step` over seeded batches, each epoch scored on dev, then the schedule, the stopping rules
and the checkpoint. When the epochs end, the saved model's temperature is fitted on dev
(`tagger.apply.calibration`), so that its scores are calibrated.
"""

from __future__ import annotations

import contextlib
import random
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import torch
from torch.optim.lr_scheduler import LRScheduler

from tagger.apply.calibration import calibrate_model_file
from tagger.apply.evaluate import score_sentences
from tagger.apply.tagger import COLUMN_LAYOUT_KEY, Tagger
from tagger.config import Config
from tagger.data.corpus import Sentence
from tagger.network.batching import EncodedSentence, bucketed_batches, collate
from tagger.training import events
from tagger.training.budget import RunClock, now, seconds_left
from tagger.training.checkpoint import RunState, restore_checkpoint, save_checkpoint
from tagger.training.data import (
    TRAIN_IN_MEMORY,
    PreparedData,
    prepare_sentences,
    read_training_files,
)
from tagger.training.distributed import Ranks, process_group, rank_steps, shared_checkpoint
from tagger.training.overview import data_warnings, earliest_stop, run_overview
from tagger.training.records import (
    CHECKPOINT_NAME,
    MODEL_NAME,
    write_config,
    write_guide,
    write_history,
    write_outcome,
)
from tagger.training.run_folder import RunFolder, check_named_files, run_folder
from tagger.training.schedule import end_epoch, learning_rate, new_schedule
from tagger.training.setup import (
    TrainingSetup,
    new_network,
    setup_training,
    step_rate,
    step_tools,
)
from tagger.training.step import LossNotFinite, StepShare, StepTools, train_step

Progress = Callable[[dict[str, Any]], None]


@dataclass
class TrainResult:
    history: list[dict[str, Any]]
    best_epoch: int
    best_dev: dict[str, Any]
    stop_reason: str
    diverged: bool
    run_dir: Path
    notes: list[str] = field(default_factory=list)
    rank: int = 0  # under torchrun, this process's rank; only rank 0 wrote the run folder

    @property
    def model_path(self) -> Path:
        return self.run_dir / MODEL_NAME


def train(
    config: Config,
    run_dir: str | Path,
    resume: bool = False,
    progress: Progress | None = None,
    overwrite: bool = False,
) -> TrainResult:
    """Train a tagger on the files data.train (and data.dev) name; the best model is at
    ``run_dir/model.tagger``. Returns the per-epoch history.

    One run at a time in a folder: a second one is refused (FolderBusyError). A folder holding
    a run is refused (OutputError) unless `resume` continues it or `overwrite` replaces it."""
    check_named_files(config)
    with process_group() as ranks, _folder(ranks, Path(run_dir), resume, overwrite) as folder:
        train_sentences, dev_sentences = read_training_files(config)
        data = prepare_sentences(
            config, train_sentences, dev_sentences, config.data.train, config.data.dev or None
        )
        return _train(config, data, folder, resume, _reporter(ranks, progress), ranks)


def train_on_sentences(
    train_sentences: Sequence[Sentence],
    dev_sentences: Sequence[Sentence] | None,
    config: Config,
    run_dir: str | Path,
    resume: bool = False,
    progress: Progress | None = None,
    overwrite: bool = False,
) -> TrainResult:
    """Train a tagger on sentences in memory (e.g. `Sentence.from_tokens(tokens, labels)`), as
    `train` does on files. Without dev sentences, dev is held out of train as data.dev_fraction
    and data.dev_holdout say. data.train and data.dev are not read, only recorded in the model."""
    check_named_files(config, data_files=False)
    with process_group() as ranks, _folder(ranks, Path(run_dir), resume, overwrite) as folder:
        data = prepare_sentences(config, train_sentences, dev_sentences)
        return _train(config, data, folder, resume, _reporter(ranks, progress), ranks)


def _folder(
    ranks: Ranks, path: Path, resume: bool, overwrite: bool
) -> contextlib.AbstractContextManager[RunFolder]:
    """The run folder, made, checked and held by rank 0 alone; the other ranks never write in
    it (nor need to see it: the checkpoint reaches them from rank 0)."""
    if ranks.lead:
        return run_folder(path, resume, overwrite)
    return contextlib.nullcontext(RunFolder(path, overwrite=False))


def _reporter(ranks: Ranks, progress: Progress | None) -> Progress:
    """Progress is told by rank 0 only, so a run on several ranks prints one run's lines."""
    if progress is None or not ranks.lead:
        return lambda event: None
    return progress


def _train(
    config: Config,
    data: PreparedData,
    folder: RunFolder,
    resume: bool,
    report: Progress,
    ranks: Ranks,
) -> TrainResult:
    run_dir = folder.path
    if folder.renamed:
        report(events.note(folder.renamed_note()))
    epochs = config.train.epochs
    if config.train.threads:
        torch.set_num_threads(config.train.threads)
    torch.manual_seed(config.train.seed)
    random.seed(config.train.seed)

    setup = setup_training(config, data)
    net, vectors_note = new_network(config, setup)
    if vectors_note:
        report(events.note(vectors_note))
    tools = step_tools(config, setup, net, ranks.world)
    # Wrapping checks that every rank built the same network (a collective: every rank is here,
    # rank 0 holding the run folder, before any reads the checkpoint).
    tools.replica, tools.total = ranks.replicate(net), (ranks.total if ranks.spread else None)
    schedule = new_schedule(config, tools.optimizer)
    state = _resume(run_dir, config, data, tools, schedule, report, ranks) if resume else RunState()
    if ranks.lead:
        folder.begin()
        write_guide(run_dir, config)
        write_config(run_dir, config)
    parameters = sum(p.numel() for p in net.parameters())
    report(events.start(run_overview(config, data, parameters, run_dir, state.epoch + 1)))
    if ranks.spread:
        scaling = _rate_scaling(config, ranks)
        scaled = (
            f"; each step holds {ranks.world} batches, so the learning rate is {scaling}"
            if scaling
            else ""
        )
        report(
            events.note(f"training on {ranks.world} processes (torch.distributed, gloo){scaled}")
        )
    for message in data.notes:
        report(events.note(message))
    warnings = data_warnings(data)
    for message in warnings:
        report(events.warning(message))

    clock = RunClock(config.train.max_minutes, state.seconds_used)
    if resume and state.history:  # resumed with a new epoch limit, patience or budget: ask again
        state.history[-1]["stop"] = _stop_reason(state, config, clock, state.epoch)
    # With weight averaging on, the averaged copy is the model: dev scores it and it is saved.
    scored = Tagger(
        tools.average.module if tools.average is not None else net,
        setup.vocabs,
        config,
        data.input_scheme,
        features=setup.features,
    )
    meta = _model_meta(config, setup)
    stop_reason, diverged = state.stop or f"reached train.epochs={epochs}", False
    first = epochs + 1 if state.stop else state.epoch + 1  # a stopped run stays stopped
    for epoch in range(first, epochs + 1):
        started = now()
        totals = _train_epoch(tools, setup.encoded, config, epoch, state, clock, report, ranks)
        if totals.not_finite is not None:
            diverged = True
            stop_reason = _diverged_reason(
                totals.not_finite, epoch, state, run_dir, _rate_scaling(config, ranks)
            )
            break
        train_seconds = now() - started
        # Dev is scored once, by rank 0; every rank takes its scores and its stop decision
        # (its clock is the one that counts), so all keep the same state and stop together.
        dev = ranks.share(score_sentences(scored, data.dev, data.dev_spans) if ranks.lead else None)
        improved = state.score(epoch, dev)
        if improved and ranks.lead:
            scored.save(run_dir / MODEL_NAME, {**meta, "epoch": epoch, "dev_metrics": dev})
        seconds = (train_seconds, now() - started)
        row = _history_row(epoch, totals, dev, learning_rate(tools.optimizer), seconds, improved)
        end_epoch(schedule, dev["micro"]["f1"])
        row["stop"] = ranks.share(_stop_reason(state, config, clock, epoch) if ranks.lead else "")
        state.history.append(row)
        state.epoch, state.seconds_used = epoch, clock.used()
        if ranks.lead:
            write_history(run_dir, state.history)
            save_checkpoint(
                run_dir / CHECKPOINT_NAME, config, data.fingerprint, tools, schedule, state
            )
        report(events.epoch(row, state.best_f1, state.best_epoch))
        if row["stop"]:
            stop_reason = row["stop"]
            break

    result = TrainResult(
        state.history,
        state.best_epoch,
        state.best_dev,
        stop_reason,
        diverged,
        run_dir,
        data.notes,
        ranks.rank,
    )
    if not ranks.lead:
        return result
    calibration = None
    if state.best_epoch and (run_dir / MODEL_NAME).exists():
        calibration = calibrate_model_file(run_dir / MODEL_NAME, data.dev, data.dev_spans)
        if calibration is not None:
            report(
                events.note(
                    f"span scores calibrated on dev: temperature {calibration.temperature:.2f}"
                )
            )
    write_outcome(
        run_dir,
        {
            "best_epoch": state.best_epoch,
            "dev": state.best_dev,
            "stop_reason": stop_reason,
            "diverged": diverged,
            "input_scheme": data.input_scheme,
            "notes": data.notes,
            "warnings": warnings,
            "calibration": None if calibration is None else calibration.to_dict(),
        },
    )
    write_guide(run_dir, config, stop_reason)
    return result


@dataclass
class EpochTotals:
    loss: float = 0.0  # summed over the epoch's sentences
    tokens: int = 0
    not_finite: tuple[int, float] | None = None  # (batch, loss) where the loss stopped being finite


def _epoch_seed(seed: int, epoch: int) -> int:
    return seed * 1_000_003 + epoch


def epoch_batches(
    encoded: list[EncodedSentence], config: Config, epoch: int, world: int = 1
) -> list[list[int]]:
    """The epoch's length-bucketed batches (sentence indices), shuffled by (seed, epoch): the
    same list on every rank, neighbours of about the same length when `world` ranks train
    side by side."""
    rng = random.Random(_epoch_seed(config.train.seed, epoch))
    lengths = [len(e.words) for e in encoded]
    return bucketed_batches(lengths, config.train.batch_size, rng, group=world)


def _train_epoch(
    tools: StepTools,
    encoded: list[EncodedSentence],
    config: Config,
    epoch: int,
    state: RunState,
    clock: RunClock,
    report: Progress,
    ranks: Ranks,
) -> EpochTotals:
    """One pass over the training sentences in seeded batches, a batch event after each step.
    On several ranks, each trains on its share of the batches (`rank_steps`); the loss and
    tokens counted are those of the whole step, over every rank."""
    torch.manual_seed(ranks.seed(_epoch_seed(config.train.seed, epoch)))
    tools.net.train()
    steps = rank_steps(epoch_batches(encoded, config, epoch, ranks.world), ranks.world)
    started = now()
    totals = EpochTotals()
    for number, step in enumerate(steps, start=1):
        batch = collate(encoded, step[ranks.rank])
        share = None
        if ranks.spread:
            share = StepShare(ranks.world, sum(len(indices) for indices in step))
        try:
            totals.loss += train_step(tools, batch, share)
        except LossNotFinite as error:
            totals.not_finite = (number, error.value)
            return totals
        totals.tokens += sum(len(encoded[i].words) for indices in step for i in indices)
        elapsed = now() - started
        epoch_left, run_left = seconds_left(
            state.history, elapsed, number, len(steps), config.train.epochs - epoch
        )
        stop_at = earliest_stop(epoch, config.train.epochs, config.train.patience, state.bad_epochs)
        report(
            events.batch(
                epoch,
                config.train.epochs,
                number,
                len(steps),
                totals.loss / max(totals.tokens, 1),
                totals.tokens / max(elapsed, 1e-9),
                (epoch_left, clock.capped(run_left)),
                state.best_f1,
                may_stop_early=bool(clock.budget) or stop_at < config.train.epochs,
            )
        )
    return totals


def _resume(
    run_dir: Path,
    config: Config,
    data: PreparedData,
    tools: StepTools,
    schedule: LRScheduler | None,
    report: Progress,
    ranks: Ranks,
) -> RunState:
    checkpoint = run_dir / CHECKPOINT_NAME
    state = shared_checkpoint(
        ranks,
        checkpoint,
        lambda path: restore_checkpoint(
            path,
            config,
            data.fingerprint,
            tools,
            schedule,
            note=lambda message: report(events.note(message)),
        ),
    )
    if state is None:
        report(events.note(f"no checkpoint in {run_dir}: starting from the beginning"))
        return RunState()
    budget = ""
    if config.train.max_minutes:
        budget = (
            f"; {state.seconds_used / 60:.1f} of train.max_minutes={config.train.max_minutes} "
            "used before"
        )
    report(events.note(f"resuming after epoch {state.epoch} from {checkpoint}{budget}"))
    return state


def _model_meta(config: Config, setup: TrainingSetup) -> dict[str, Any]:
    """What the model file says about the training run, besides the epoch and its dev scores."""
    layout = {}
    if setup.data.train_source != TRAIN_IN_MEMORY:
        # How the files were read, so that evaluate reads gold files alike without the options.
        data = config.data
        layout[COLUMN_LAYOUT_KEY] = {
            "token_column": data.token_column,
            "label_column": data.label_column,
            "delimiter": data.delimiter,
        }
    return {
        **layout,
        "training_data": {
            "fingerprint": setup.data.fingerprint,
            "train": config.data.train,
            "dev": config.data.dev,
            "sentences": len(setup.data.train),
        },
        "types": setup.types,
        # How tagging will cut raw text into tokens; stored so that tagging matches training.
        "tokenizer": setup.tokenizer.to_dict(),
    }


def _history_row(
    epoch: int,
    totals: EpochTotals,
    dev: dict,
    rate: float,
    seconds: tuple[float, float],
    best: bool,
) -> dict[str, Any]:
    """The epoch's history row; `seconds` are (training, the whole epoch with dev scoring).
    Its "stop" is filled in once the stopping rules have been asked."""
    micro = dev["micro"]
    return {
        "epoch": epoch,
        "train_loss_per_token": round(totals.loss / max(totals.tokens, 1), 6),
        "dev_f1": round(micro["f1"], 6),
        "dev_precision": round(micro["precision"], 6),
        "dev_recall": round(micro["recall"], 6),
        "learning_rate": rate,
        "train_tokens_per_second": round(totals.tokens / max(seconds[0], 1e-9), 1),
        "epoch_seconds": round(seconds[1], 2),
        "best": best,
        "stop": "",
    }


def _stop_reason(state: RunState, config: Config, clock: RunClock, epoch: int) -> str:
    """Why the run stops after `epoch`, or "" to go on (the epoch count aside)."""
    patience = config.train.patience
    if state.bad_epochs >= patience:
        return f"no better dev F1 for {state.bad_epochs} epochs (train.patience={patience})"
    if clock.spent():
        reason = f"time budget of train.max_minutes={config.train.max_minutes} used"
        if state.best_epoch == epoch:
            reason += (
                f"; dev F1 was still improving (best at the last epoch, {state.best_epoch}), so "
                "more epochs may do better: raise or remove train.max_minutes"
            )
        return reason
    return ""


def _rate_scaling(config: Config, ranks: Ranks) -> str:
    """How the learning rate was scaled for several processes, said at the start of a run and
    when it diverges; "" when it was not."""
    given, rate = config.train.learning_rate, step_rate(config, ranks.world)
    if rate == given:
        return ""
    return (
        f"{given:g} x {ranks.world} processes = {rate:g}; "
        "train.scale_rate_with_processes = false keeps it as given"
    )


def _diverged_reason(
    not_finite: tuple[int, float],
    epoch: int,
    state: RunState,
    run_dir: Path,
    scaling: str = "",
) -> str:
    batch, loss = not_finite
    kept = (
        f"{run_dir / MODEL_NAME} keeps epoch {state.best_epoch}"
        if state.best_epoch
        else "no model was saved"
    )
    return (
        f"the training loss became {loss} at epoch {epoch}, batch {batch}; "
        f"{kept}. Try a lower train.learning_rate or train.clip_norm"
        + (f" (the rate was {scaling})" if scaling else "")
    )
