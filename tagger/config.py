"""Typed, validated configuration: loaded from TOML, overridden from the command line, saved in model files.

A config file has four tables, each optional, each key optional:

    [data]       where the annotated files are and how to read them
    [model]      what network to build (travels inside the model file)
    [train]      how to fit it
    [tokenizer]  how raw text is cut into tokens at tagging time (travels inside the model file)

Every key with a fixed set of values is an enum owned here or by the module that owns the
concept (schemes, delimiters, lexicon case), and the command line offers the same enums, so a new
value is one edit.

Unknown keys, wrong types and values outside the allowed set are rejected with the key's name.
List-valued keys (e.g. `feature_columns = [1]`) are TOML arrays, held as tuples so that a config
stays immutable; `Config.to_dict` gives them back as lists.

File paths in a config file (data.train, data.dev, model.pretrained_vectors, model.char_lm,
model.lexicons) are
relative to the config file's folder, so a config works from any directory; `load_config` makes
them absolute. Paths given as overrides are the caller's to resolve (`resolve_paths`).

A run resumed from its checkpoint may change only the keys of `RESUMABLE_KEYS`
(`tagger.training.config_changes` lists what differs).
"""

from __future__ import annotations

import dataclasses
import math
import os
import tomllib
import typing
from dataclasses import dataclass, field, fields, replace
from enum import Enum, StrEnum
from pathlib import Path
from typing import Any

import tomli_w

from tagger.data.column_lines import DelimiterChoice
from tagger.data.guards import MAX_SENTENCE_TOKENS
from tagger.data.scheme_rules import SchemeName, normalise_scheme_name
from tagger.errors import QUOTED_CHARS, ConfigError, quoted
from tagger.text.lexicon import LexiconCase
from tagger.text.tokenizer import TokenizerSettings


class CellKind(StrEnum):
    """The recurrent cells (tagger.network.cells)."""

    RNN = "rnn"  # vanilla tanh
    MINIMAL = "minimal"  # minimal gated unit
    GRU = "gru"
    LSTM = "lstm"


class OutputLayer(StrEnum):
    CRF = "crf"
    SOFTMAX = "softmax"


class CharEncoder(StrEnum):
    CNN = "cnn"
    RNN = "rnn"
    NONE = "none"


class VectorUse(StrEnum):
    """How the network reads model.pretrained_vectors (tagger.training.setup)."""

    INITIALISE = "initialise"  # the trained word embedding starts from them
    FIXED = "fixed"  # a frozen input beside the trained embedding, for every token
    BOTH = "both"  # the frozen input, and the trained embedding starts from them


class OptimizerKind(StrEnum):
    ADAM = "adam"
    SGD = "sgd"


class Schedule(StrEnum):
    """How the learning rate moves after each epoch (tagger.training.schedule)."""

    CONSTANT = "constant"
    EXPONENTIAL = "exponential"
    PLATEAU = "plateau"


class Holdout(StrEnum):
    """Which training sentences become dev when no dev file is given."""

    RANDOM = "random"
    LAST = "last"


@dataclass(frozen=True)
class DataConfig:
    train: str = ""
    dev: str = ""
    dev_fraction: float = 0.1  # held out of train when no dev file is given
    dev_holdout: Holdout = Holdout.RANDOM  # a seeded random draw, or the last ones in the file
    token_column: int = 0
    label_column: int = -1
    delimiter: DelimiterChoice = DelimiterChoice.AUTO
    encoding: str = "utf-8"  # of the train and dev files (latin-1, cp1252... for older files)
    # Longer sentences in train, dev or evaluation files are refused (memory grows with length).
    max_sentence_tokens: int = MAX_SENTENCE_TOKENS


@dataclass(frozen=True)
class ModelConfig:
    cell: CellKind = CellKind.LSTM
    hidden_size: int = 128  # per direction
    layers: int = 2
    bidirectional: bool = True
    word_dim: int = 100
    char_encoder: CharEncoder = CharEncoder.CNN
    char_dim: int = 32
    char_features: int = 64  # CNN filters, or hidden units per direction of the character RNN
    char_kernel: int = 3
    dropout: float = 0.5
    output: OutputLayer = OutputLayer.CRF
    # the scheme the network learns; predictions are written in the input's scheme
    scheme: SchemeName = SchemeName["BIOES"]
    lowercase: bool = False
    digits_to_zero: bool = True
    min_word_count: int = 1  # rarer words are not stored in the model file (read as unknown)
    # a vectors file from `tagger learn-vectors`, or a word2vec/GloVe text file; empty for none
    pretrained_vectors: str = ""
    # fixed: the frozen table alone beat "both" on the demo's unseen spans (95.56 against 94.22)
    # and on BC5CDR (83.38 against 81.76; seed 1 each, benchmarks/features_vector_uses.md,
    # benchmarks/vectors.md): a trained copy of the seen words lets the network lean on them
    vectors_use: VectorUse = VectorUse.FIXED
    vector_words: int = 50_000  # most frequent words of the vectors kept in a frozen table
    # a character language model file from `tagger learn-char-lm` (frozen features); empty: none
    char_lm: str = ""
    fast_kernels: bool = True  # use torch's fused kernels where a cell has one
    # Extra input features (tagger.text.features); none by default.
    feature_columns: tuple[int, ...] = ()  # 0-based columns of the input files read as features
    feature_dim: int = 16  # embedding size of each feature column's values
    lexicons: tuple[str, ...] = ()  # lexicon files: "entry" or "entry<TAB>type" per line
    lexicon_case: LexiconCase = LexiconCase.IGNORE  # smart: lower-case entries ignore case
    lexicon_dim: int = 8  # embedding size of each lexicon category's match tags
    word_shape: bool = False  # read each token's shape (case, digits, punctuation, length)
    shape_dim: int = 8


@dataclass(frozen=True)
class TrainConfig:
    epochs: int = 30
    batch_size: int = 32
    optimizer: OptimizerKind = OptimizerKind.ADAM
    learning_rate: float = 0.002
    lr_schedule: Schedule = Schedule.EXPONENTIAL
    lr_decay: float = 0.95  # per epoch (exponential) or on each plateau (plateau)
    weight_decay: float = 0.0
    clip_norm: float = 5.0
    patience: int = 6  # epochs without a better dev F1 before stopping
    unknown_replace: float = 0.3  # chance a word seen once in train is read as unknown
    weight_average: float = 0.0  # decay of a moving average of the weights, e.g. 0.999; 0: off
    seed: int = 1
    # One by default: beside one busy process two threads ran 3x slower than one, while alone
    # they gained only 16% (benchmarks/threads.md). 0: torch's default, one per core.
    threads: int = 1
    max_minutes: float = 0.0  # wall-clock budget; 0: none
    # Under N training processes a step holds N batches (one per process), so an epoch has 1/N
    # of the steps: the learning rate is multiplied by N (the linear scaling rule, Goyal et al.
    # 2017), which on the demo gave the same dev F1 after 3 epochs as one process, where the
    # rate as given lost 1.6 points (benchmarks/distributed.md). No effect in one process.
    scale_rate_with_processes: bool = True


@dataclass(frozen=True)
class Config:
    data: DataConfig = field(default_factory=DataConfig)
    model: ModelConfig = field(default_factory=ModelConfig)
    train: TrainConfig = field(default_factory=TrainConfig)
    tokenizer: TokenizerSettings = field(default_factory=TokenizerSettings)

    def tokenizer_settings(self) -> TokenizerSettings:
        """The tokenizer as training and tagging use it: one sentence limit, data's."""
        return dataclasses.replace(
            self.tokenizer, max_sentence_tokens=self.data.max_sentence_tokens
        )

    def to_dict(self) -> dict[str, dict[str, Any]]:
        """Plain JSON-ready tables: list-valued keys come back as lists, choices as strings."""
        tables = {
            section: {k: _plain(v) for k, v in values.items()}
            for section, values in dataclasses.asdict(self).items()
        }
        del tables["tokenizer"][_ONE_LIMIT]  # data.max_sentence_tokens holds it
        return tables

    def to_toml(self) -> str:
        """The config as a TOML document that `load_config` reads back to an equal Config.

        Written by a TOML writer, so that values JSON cannot spell in TOML (inf, nan) and any
        string escape come out as TOML."""
        return tomli_w.dumps(self.to_dict())


def _plain(value: Any) -> Any:
    if isinstance(value, tuple):
        return list(value)
    return value.value if isinstance(value, Enum) else value


SECTIONS: dict[str, type] = {
    "data": DataConfig,
    "model": ModelConfig,
    "train": TrainConfig,
    "tokenizer": TokenizerSettings,
}

_POSITIVE = {
    ("model", "hidden_size"),
    ("model", "layers"),
    ("model", "word_dim"),
    ("train", "epochs"),
    ("train", "batch_size"),
    ("model", "char_kernel"),
    ("model", "min_word_count"),
    ("model", "vector_words"),
    ("model", "feature_dim"),
    ("model", "lexicon_dim"),
    ("model", "shape_dim"),
    ("data", "max_sentence_tokens"),
}
_FRACTIONS = {
    ("model", "dropout"),
    ("train", "unknown_replace"),
    ("train", "weight_average"),
    ("data", "dev_fraction"),
}


def _cut(name: str) -> str:
    """A key or table name from the file, unquoted, cut as `quoted` cuts what it quotes."""
    return name if len(name) <= QUOTED_CHARS else name[: QUOTED_CHARS - 3] + "..."


def _is_int(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _coerce(section: str, name: str, expected: Any, value: Any) -> Any:
    """Check one value's type; ints are accepted where floats are expected, lists where tuples are."""
    key = f"{section}.{name}"
    if typing.get_origin(expected) is tuple:
        item = typing.get_args(expected)[0]
        check = _is_int if item is int else lambda v: isinstance(v, item)
        if not isinstance(value, list | tuple) or not all(check(v) for v in value):
            raise ConfigError(f"{key} must be a list of {item.__name__}, got {quoted(value)}")
        return tuple(value)
    if expected is bool:
        ok = isinstance(value, bool)
    elif expected is int:
        ok = _is_int(value)
    elif expected is float:
        ok = isinstance(value, int | float) and not isinstance(value, bool)
        value = float(value) if ok else value
    elif isinstance(expected, type) and issubclass(expected, Enum):
        return _choice(key, expected, value)
    else:
        ok = isinstance(value, expected)
    if not ok:
        raise ConfigError(f"{key} must be {expected.__name__}, got {quoted(value)}")
    return value


def _choice(key: str, kind: type[Enum], value: Any) -> Enum:
    """A value of a fixed set, read from its string; scheme names also by alias and any case."""
    if kind is SchemeName and isinstance(value, str):
        try:
            return SchemeName(normalise_scheme_name(value))
        except ConfigError as error:
            raise ConfigError(f"{key}: {error}") from None
    try:
        return kind(value)
    except ValueError:
        allowed = ", ".join(str(member.value) for member in kind)  # type: ignore[attr-defined]
        raise ConfigError(f"{key} must be one of {allowed}; got {quoted(value)}") from None


def _validate(section: str, name: str, value: Any) -> None:
    key = f"{section}.{name}"
    # NaN passes every comparison below; only a time budget may be infinite (no budget).
    if isinstance(value, float) and not (
        math.isfinite(value) or (name == "max_minutes" and value == math.inf)
    ):
        raise ConfigError(f"{key} must be a finite number; got {value!r}")
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
    if (section, name) == ("data", "encoding"):
        from tagger.data.io import checked_encoding

        try:
            checked_encoding(value)
        except ConfigError as error:
            raise ConfigError(f"{key}: {error}") from None


# One sentence limit: the tokenizer's is data.max_sentence_tokens, which also bounds the annotated
# sentences training and evaluation read (tagger.training.setup puts it into the model).
_ONE_LIMIT = "max_sentence_tokens"


def _section(section: str, values: dict[str, Any], base: Any) -> Any:
    cls = SECTIONS[section]
    if section == "tokenizer" and _ONE_LIMIT in values:
        raise ConfigError(
            f"tokenizer.{_ONE_LIMIT}: the sentence limit is data.{_ONE_LIMIT}, which bounds "
            "annotated sentences and where tagging cuts raw text alike"
        )
    hints = typing.get_type_hints(cls)
    known = {f.name for f in fields(cls)}
    changes = {}
    for name, value in values.items():
        if name not in known:
            raise ConfigError(
                f"unknown key {section}.{_cut(name)}; known keys: {', '.join(sorted(known))}"
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
            raise ConfigError(
                f"unknown table [{_cut(section)}]; known tables: {', '.join(SECTIONS)}"
            )
        if not isinstance(values, dict):
            raise ConfigError(f"[{section}] must be a table of keys")
        config = replace(config, **{section: _section(section, values, getattr(config, section))})
    return config


def resolve_paths(config: Config, folder: str | Path) -> Config:
    """The config with every relative file path (data.train, data.dev, model.pretrained_vectors,
    model.lexicons) taken as relative to `folder` and made absolute; empty values and "-"
    (standard input) stay as they are."""

    def resolve(value: str) -> str:
        if not value or value == "-" or os.path.isabs(value):
            return value
        return os.path.abspath(os.path.join(folder, value))

    data, model = config.data, config.model
    return replace(
        config,
        data=replace(data, train=resolve(data.train), dev=resolve(data.dev)),
        model=replace(
            model,
            pretrained_vectors=resolve(model.pretrained_vectors),
            char_lm=resolve(model.char_lm),
            lexicons=tuple(resolve(path) for path in model.lexicons),
        ),
    )


def load_config(path: str | Path | None) -> Config:
    """Read a TOML config file; None gives the defaults. Relative file paths in it are taken
    from the config file's folder (`resolve_paths`)."""
    if path is None:
        return Config()
    try:
        with open(path, "rb") as handle:
            raw = tomllib.load(handle)
    except FileNotFoundError:
        raise ConfigError(f"{path}: config file not found") from None
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(f"{path}: not valid TOML ({error})") from None
    except UnicodeDecodeError as error:  # TOML is UTF-8 text: a binary file or another encoding
        raise ConfigError(
            f"{path}: not a TOML config file: byte {error.start} is not UTF-8 text"
        ) from None
    try:
        config = config_from_dict(raw)
    except ConfigError as error:
        raise ConfigError(f"{path}: {error}") from None
    return resolve_paths(config, Path(path).parent)


def parse_override(text: str) -> tuple[str, str, Any]:
    """Parse ``section.key=value``; the value is read as TOML (so 0.5, true, "gru"), else as a string."""
    key, sep, value_text = text.partition("=")
    section, dot, name = key.strip().partition(".")
    if not sep or not dot:
        raise ConfigError(
            f"override {quoted(text)} must look like section.key=value, e.g. model.cell=gru"
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
