"""How a saved config differs from the current one: what `--resume` compares before it continues a
run, and what the benchmarks compare before they reuse a finished run."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from tagger.config import Config, config_from_dict
from tagger.errors import ConfigError, quoted

# Keys a resumed run may change: they decide when the run stops and how many threads it uses,
# never what the network is or what it learns from.
RESUMABLE_KEYS = ("train.epochs", "train.patience", "train.max_minutes", "train.threads")


@dataclass(frozen=True)
class Change:
    """One key whose value differs between a saved config and the current one."""

    key: str  # "section.name"
    saved: Any
    current: Any

    def __str__(self) -> str:
        return f"{self.key} {_shown(self.saved)} -> {_shown(self.current)}"


def _shown(value: Any) -> str:
    if isinstance(value, str | list):
        return quoted(value)
    return str(value)


def config_changes(saved: dict[str, Any] | None, config: Config) -> list[Change]:
    """The keys whose values differ between a config saved as a dict (in a checkpoint) and
    `config`, in table order; keys added since it was saved count as their defaults.

    Raises ConfigError when the saved config is missing or no longer valid."""
    if saved is None:
        raise ConfigError("no config was saved with it")
    before = config_from_dict(saved).to_dict()
    now = config.to_dict()
    return [
        Change(f"{section}.{name}", before[section][name], value)
        for section, values in now.items()
        for name, value in values.items()
        if before[section][name] != value
    ]


def same_config(saved: dict[str, Any] | None, config: Config) -> bool:
    """Whether a config saved as a dict (in a checkpoint or run record) is `config`; keys added to
    the config since it was saved count as their defaults, so an upgrade does not strand a run."""
    try:
        return saved is not None and config_from_dict(saved).to_dict() == config.to_dict()
    except ConfigError:
        return False
