"""The files of a run folder: their names, the plain ones written here, and the folder's guide.

    README.txt            this list, for whoever opens the folder (`write_guide`)
    resolved-config.toml  the resolved config (reads back with `load_config`)
    epochs.json / .csv    one row per epoch
    outcome.json          the best epoch's dev scores and how the run ended: its presence marks
                          a finished run
    resume-state.tagger   the state after the last finished epoch, for --resume (checkpoint.py)
    model.tagger          the best model by dev span F1 (loop.py)

Run folders written by the release before this one used other names (`EARLIER_NAMES`); resuming
in such a folder renames its files once (`tagger.training.run_folder`).

Every file is replaced whole (written aside, then renamed), so a reader never sees half of one.
"""

from __future__ import annotations

import csv
import json
import textwrap
from pathlib import Path
from typing import Any

from tagger.config import Config
from tagger.data.atomic import atomic_output

MODEL_NAME = "model.tagger"
CHECKPOINT_NAME = "resume-state.tagger"
CONFIG_NAME = "resolved-config.toml"
HISTORY_NAMES = ("epochs.json", "epochs.csv")
OUTCOME_NAME = "outcome.json"  # written when a run ends: its presence marks a finished run
GUIDE_NAME = "README.txt"
RECORD_NAMES = (GUIDE_NAME, CONFIG_NAME, *HISTORY_NAMES, OUTCOME_NAME)
GUIDE_WIDTH = 88  # README.txt is wrapped to this many characters

# The names of the release before this one -> the names now; read for one release more.
EARLIER_NAMES = {
    "config.toml": CONFIG_NAME,
    "history.json": HISTORY_NAMES[0],
    "history.csv": HISTORY_NAMES[1],
    "metrics.json": OUTCOME_NAME,
    "checkpoint.tagger": CHECKPOINT_NAME,
}


def write_config(run_dir: Path, config: Config) -> None:
    with atomic_output(run_dir / CONFIG_NAME) as out:
        out.write(config.to_toml())


def write_history(run_dir: Path, history: list[dict[str, Any]]) -> None:
    as_json, as_csv = HISTORY_NAMES
    with atomic_output(run_dir / as_json) as out:
        json.dump(history, out, indent=2)
    columns = list(history[0]) if history else []
    with atomic_output(run_dir / as_csv) as out:
        writer = csv.DictWriter(out, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        writer.writerows(history)


def write_outcome(run_dir: Path, outcome: dict[str, Any]) -> None:
    with atomic_output(run_dir / OUTCOME_NAME) as out:
        json.dump(outcome, out, indent=2)


def guide_text(config: Config, ended: str = "") -> str:
    """The README.txt of a run folder: each file the run writes and what it holds. `ended` is
    how the run ended ("" while it runs, or when it was stopped before its end)."""
    averaged = (
        f", with the moving average of the weights (train.weight_average={config.train.weight_average})"
        if config.train.weight_average
        else ""
    )
    state = (
        f"The run has ended: {ended}."
        if ended
        else "The run is under way, or was stopped before its end: the same train command with "
        "--resume continues it after its last finished epoch."
    )
    files = [
        (GUIDE_NAME, "this list"),
        (CONFIG_NAME, "the config the run uses, every default filled in (train --config reads it)"),
        (HISTORY_NAMES[0], "one row per finished epoch: training loss, dev scores, speed, stop"),
        (HISTORY_NAMES[1], f"the rows of {HISTORY_NAMES[0]} as a CSV sheet"),
        (
            OUTCOME_NAME,
            "written when the run ends: the best epoch, its dev scores, why the run stopped and "
            "the score temperature fitted on dev",
        ),
        (CHECKPOINT_NAME, "everything --resume needs to continue after the last finished epoch"),
        (MODEL_NAME, f"the model of the epoch with the best dev span F1{averaged}"),
    ]
    width = max(len(name) for name, _ in files) + 2
    lines = ["A training run of tagger.", ""]
    for name, what in files:  # the description wrapped under itself
        lines += textwrap.wrap(
            what, GUIDE_WIDTH, initial_indent=name.ljust(width), subsequent_indent=" " * width
        )
    lines += ["", *textwrap.wrap(state, GUIDE_WIDTH)]
    return "\n".join(lines) + "\n"


def write_guide(run_dir: Path, config: Config, ended: str = "") -> None:
    """Write README.txt unless it already says the same."""
    text = guide_text(config, ended)
    path = run_dir / GUIDE_NAME
    try:
        if path.read_text(encoding="utf-8") == text:
            return
    except OSError:
        pass
    with atomic_output(path) as out:
        out.write(text)
