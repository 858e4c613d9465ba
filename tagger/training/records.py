"""The plain files a run folder holds beside its model and checkpoint.

    config.toml          the resolved config (reads back with `load_config`)
    history.json / .csv  one row per epoch
    metrics.json         the best epoch's dev scores and how the run ended

Every file is replaced whole (written aside, then renamed), so a reader never sees half of one.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

from tagger.config import Config
from tagger.data.atomic import atomic_output

CONFIG_NAME = "config.toml"
HISTORY_NAMES = ("history.json", "history.csv")
METRICS_NAME = "metrics.json"  # written when a run ends: its presence marks a finished run
RECORD_NAMES = (CONFIG_NAME, *HISTORY_NAMES, METRICS_NAME)


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


def write_metrics(run_dir: Path, metrics: dict[str, Any]) -> None:
    with atomic_output(run_dir / METRICS_NAME) as out:
        json.dump(metrics, out, indent=2)
