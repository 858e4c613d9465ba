"""Typed, validated configuration: loaded from TOML, overridden from the command line, saved in model files.

A config file has three tables, each optional, each key optional:

    [data]   where the annotated files are and how to read them
    [model]  what network to build (travels inside the model file)
    [train]  how to fit it

Unknown keys, wrong types and values outside the allowed set are rejected with the key's name.
List-valued keys (e.g. `feature_columns = [1]`) are TOML arrays, held as tuples so that a config
stays immutable; `Config.to_dict` gives them back as lists.
"""

from __future__ import annotations

import dataclasses
import tomllib
import typing
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

import tomli_w

from tagger.errors import ConfigError

CELLS = ("rnn", "minimal", "gru", "lstm")
OUTPUTS = ("crf", "softmax")
CHAR_ENCODERS = ("cnn", "rnn", "none")
OPTIMIZERS = ("adam", "sgd")
SCHEDULES = ("constant", "exponential", "plateau")
DELIMITERS = ("auto", "tab", "space")
HOLDOUTS = ("random", "last")
LEXICON_CASES = ("ignore", "exact", "smart")  # see tagger.text.lexicon


@dataclass(frozen=True)
class DataConfig:
    train: str = ""
    dev: str = ""
    dev_fraction: float = 0.1  # held out of train when no dev file is given
    dev_holdout: str = (
        "random"  # which sentences: a seeded random draw, or the last ones in the file
    )
    token_column: int = 0
    label_column: int = -1
    delimiter: str = "auto"


@dataclass(frozen=True)
class ModelConfig:
    cell: str = "lstm"
    hidden_size: int = 128  # per direction
    layers: int = 2
    bidirectional: bool = True
    word_dim: int = 100
    char_encoder: str = "cnn"
    char_dim: int = 32
    char_features: int = 64  # CNN filters, or hidden units per direction of the character RNN
    char_kernel: int = 3
    dropout: float = 0.5
    output: str = "crf"
    scheme: str = (
        "BIOES"  # the scheme the network learns; predictions are written in the input's scheme
    )
    lowercase: bool = False
    digits_to_zero: bool = True
    min_word_count: int = 1  # rarer words are not stored in the model file (read as unknown)
    pretrained_vectors: str = ""  # word2vec/GloVe text file; empty for none
    fast_kernels: bool = True  # use torch's fused kernels where a cell has one
    # Extra input features (tagger.text.features); none by default.
    feature_columns: tuple[int, ...] = ()  # 0-based columns of the input files read as features
    feature_dim: int = 16  # embedding size of each feature column's values
    lexicons: tuple[str, ...] = ()  # lexicon files: "entry" or "entry<TAB>type" per line
    lexicon_case: str = "ignore"  # ignore, exact, or smart (lower-case entries ignore case)
    lexicon_dim: int = 8  # embedding size of each lexicon category's match tags
    word_shape: bool = False  # read each token's shape (case, digits, punctuation, length)
    shape_dim: int = 8


@dataclass(frozen=True)
class TrainConfig:
    epochs: int = 30
    batch_size: int = 32
    optimizer: str = "adam"
    learning_rate: float = 0.002
    lr_schedule: str = "exponential"
    lr_decay: float = 0.95  # per epoch (exponential) or on each plateau (plateau)
    weight_decay: float = 0.0
    clip_norm: float = 5.0
    patience: int = 6  # epochs without a better dev F1 before stopping
    unknown_replace: float = 0.3  # chance a word seen once in train is read as unknown
    weight_average: float = 0.0  # decay of a moving average of the weights, e.g. 0.999; 0: off
    seed: int = 1
    threads: int = 0  # 0: torch's default
    max_minutes: float = 0.0  # wall-clock budget; 0: none


@dataclass(frozen=True)
class Config:
    data: DataConfig = field(default_factory=DataConfig)
    model: ModelConfig = field(default_factory=ModelConfig)
    train: TrainConfig = field(default_factory=TrainConfig)

    def to_dict(self) -> dict[str, dict[str, Any]]:
        """Plain JSON-ready tables: list-valued keys come back as lists."""
        return {
            section: {k: list(v) if isinstance(v, tuple) else v for k, v in values.items()}
            for section, values in dataclasses.asdict(self).items()
        }

    def to_toml(self) -> str:
        """The config as a TOML document that `load_config` reads back to an equal Config.

        Written by a TOML writer, so that values JSON cannot spell in TOML (inf, nan) and any
        string escape come out as TOML."""
        return tomli_w.dumps(self.to_dict())


SECTIONS: dict[str, type] = {"data": DataConfig, "model": ModelConfig, "train": TrainConfig}

_CHOICES: dict[tuple[str, str], tuple[str, ...]] = {
    ("model", "cell"): CELLS,
    ("model", "output"): OUTPUTS,
    ("model", "char_encoder"): CHAR_ENCODERS,
    ("train", "optimizer"): OPTIMIZERS,
    ("train", "lr_schedule"): SCHEDULES,
    ("data", "delimiter"): DELIMITERS,
    ("data", "dev_holdout"): HOLDOUTS,
    ("model", "lexicon_case"): LEXICON_CASES,
}
_POSITIVE = {
    ("model", "hidden_size"),
    ("model", "layers"),
    ("model", "word_dim"),
    ("train", "epochs"),
    ("train", "batch_size"),
    ("model", "char_kernel"),
    ("model", "min_word_count"),
    ("model", "feature_dim"),
    ("model", "lexicon_dim"),
    ("model", "shape_dim"),
}
_FRACTIONS = {
    ("model", "dropout"),
    ("train", "unknown_replace"),
    ("train", "weight_average"),
    ("data", "dev_fraction"),
}


def _is_int(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _coerce(section: str, name: str, expected: Any, value: Any) -> Any:
    """Check one value's type; ints are accepted where floats are expected, lists where tuples are."""
    key = f"{section}.{name}"
    if typing.get_origin(expected) is tuple:
        item = typing.get_args(expected)[0]
        check = _is_int if item is int else lambda v: isinstance(v, item)
        if not isinstance(value, list | tuple) or not all(check(v) for v in value):
            raise ConfigError(f"{key} must be a list of {item.__name__}, got {value!r}")
        return tuple(value)
    if expected is bool:
        ok = isinstance(value, bool)
    elif expected is int:
        ok = _is_int(value)
    elif expected is float:
        ok = isinstance(value, int | float) and not isinstance(value, bool)
        value = float(value) if ok else value
    else:
        ok = isinstance(value, expected)
    if not ok:
        raise ConfigError(f"{key} must be {expected.__name__}, got {value!r}")
    return value


def _validate(section: str, name: str, value: Any) -> None:
    key = f"{section}.{name}"
    choices = _CHOICES.get((section, name))
    if choices and value not in choices:
        raise ConfigError(f"{key} must be one of {', '.join(choices)}; got {value!r}")
    if (section, name) in _POSITIVE and value < 1:
        raise ConfigError(f"{key} must be at least 1; got {value!r}")
    if (section, name) in _FRACTIONS and not 0.0 <= value < 1.0:
        raise ConfigError(f"{key} must be in [0, 1); got {value!r}")
    if (
        name in ("learning_rate", "clip_norm", "lr_decay", "weight_decay", "max_minutes")
        and value < 0
    ):
        raise ConfigError(f"{key} must not be negative; got {value!r}")
    if (section, name) == ("model", "feature_columns"):
        if any(v < 0 for v in value):
            raise ConfigError(
                f"{key} must hold column numbers of 0 or more (counted from the first); got {list(value)}"
            )
        if len(set(value)) != len(value):
            raise ConfigError(f"{key} lists a column twice: {list(value)}")
    if (section, name) == ("model", "lexicons") and not all(v.strip() for v in value):
        raise ConfigError(f"{key} must hold file paths, not empty strings; got {list(value)}")
    if (section, name) == ("model", "scheme"):
        from tagger.data.schemes import normalise_scheme_name

        normalise_scheme_name(value)


def _section(section: str, values: dict[str, Any], base: Any) -> Any:
    cls = SECTIONS[section]
    hints = typing.get_type_hints(cls)
    known = {f.name for f in fields(cls)}
    changes = {}
    for name, value in values.items():
        if name not in known:
            raise ConfigError(
                f"unknown key {section}.{name}; known keys: {', '.join(sorted(known))}"
            )
        value = _coerce(section, name, hints[name], value)
        _validate(section, name, value)
        changes[name] = value
    return replace(base, **changes)


def config_from_dict(raw: dict[str, Any], base: Config | None = None) -> Config:
    """Build a validated Config from nested tables, starting from ``base`` (defaults if None)."""
    config = base or Config()
    for section, values in raw.items():
        if section not in SECTIONS:
            raise ConfigError(f"unknown table [{section}]; known tables: data, model, train")
        if not isinstance(values, dict):
            raise ConfigError(f"[{section}] must be a table of keys")
        config = replace(config, **{section: _section(section, values, getattr(config, section))})
    return config


def same_config(saved: dict[str, Any] | None, config: Config) -> bool:
    """Whether a config saved as a dict (in a checkpoint or run record) is `config`; keys added to
    the config since it was saved count as their defaults, so an upgrade does not strand a run."""
    try:
        return saved is not None and config_from_dict(saved).to_dict() == config.to_dict()
    except ConfigError:
        return False


def load_config(path: str | Path | None) -> Config:
    """Read a TOML config file; None gives the defaults."""
    if path is None:
        return Config()
    try:
        with open(path, "rb") as handle:
            raw = tomllib.load(handle)
    except FileNotFoundError:
        raise ConfigError(f"{path}: config file not found") from None
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(f"{path}: not valid TOML ({error})") from None
    try:
        return config_from_dict(raw)
    except ConfigError as error:
        raise ConfigError(f"{path}: {error}") from None


def parse_override(text: str) -> tuple[str, str, Any]:
    """Parse ``section.key=value``; the value is read as TOML (so 0.5, true, "gru"), else as a string."""
    key, sep, value_text = text.partition("=")
    section, dot, name = key.strip().partition(".")
    if not sep or not dot:
        raise ConfigError(
            f"override {text!r} must look like section.key=value, e.g. model.cell=gru"
        )
    try:
        value = tomllib.loads(f"v = {value_text.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        value = value_text.strip()
    return section, name, value


def apply_overrides(config: Config, overrides: list[str]) -> Config:
    raw: dict[str, dict[str, Any]] = {}
    for text in overrides:
        section, name, value = parse_override(text)
        raw.setdefault(section, {})[name] = value
    return config_from_dict(raw, config)
