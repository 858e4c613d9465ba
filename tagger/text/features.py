"""Per-token input features beyond words and characters: extra columns, lexicon matches, word shapes.

This module owns which feature *slots* a model reads, the value vocabularies of its extra
columns, and turning a sentence (its tokens, plus the rows of its column file when it has one)
into feature ids. No torch here: the ids become tensors in `batching`, embeddings in `model`.

For every token a model with features reads one id per slot, in this order:

    columns   one slot per entry of model.feature_columns: the column's value
              (0 padding, 1 a value training never saw, 2.. the values seen in training)
    lexicons  one slot per lexicon category, lexicon/type (0 padding, 1 no match, 2-5 B I E S)
    shape     one slot when model.word_shape is on (0 padding, 1 unused, 2.. the shape class)

Id 1 always means "nothing known here"; the network starts that embedding row at zero.

Column features need the columns: a model that reads them refuses input without them (plain
text, JSON Lines) with `FeatureInputError` rather than tagging with the features missing.
Lexicons and shapes come from the tokens alone, so they work on any input.
"""

from __future__ import annotations

import functools
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.errors import ConfigError, DataError, TaggerError
from tagger.text.lexicon import TAG_IDS, Lexicon, read_lexicon
from tagger.text.tokenizer import TokenizerSettings
from tagger.text.vocab import Vocab

if TYPE_CHECKING:
    from tagger.config import ModelConfig
    from tagger.data.corpus import Sentence

UNKNOWN = 1  # the id of a column value training never saw


class FeatureInputError(TaggerError):
    """Input that lacks what a model's features need: the extra columns it was trained with."""


# ---------------------------------------------------------------------------------------------
# Word shapes

SHAPE_CASES = ("none", "lower", "upper", "title", "mixed", "uncased")
SHAPE_AMOUNTS = ("none", "some", "all")
SHAPE_LENGTHS = ("1", "2-3", "4-6", "7-10", "11+")
_LENGTH_LIMITS = (1, 3, 6, 10)
SHAPE_IDS = 2 + len(SHAPE_CASES) * len(SHAPE_AMOUNTS) ** 2 * len(SHAPE_LENGTHS)


@dataclass(frozen=True)
class WordShape:
    """The look of a token: its letters' case, how much of it is digits and punctuation, its length."""

    case: str  # none (no letters), lower, upper, title (Xxxx), mixed, uncased (e.g. CJK)
    digits: str  # none, some, all (of its characters)
    punctuation: str  # none, some, all: characters that are neither letters nor digits
    length: str  # in characters: 1, 2-3, 4-6, 7-10, 11+

    @property
    def id(self) -> int:
        """2.. SHAPE_IDS-1; 0 and 1 are padding and "unknown", as in every feature slot."""
        index = SHAPE_CASES.index(self.case)
        index = index * 3 + SHAPE_AMOUNTS.index(self.digits)
        index = index * 3 + SHAPE_AMOUNTS.index(self.punctuation)
        return 2 + index * len(SHAPE_LENGTHS) + SHAPE_LENGTHS.index(self.length)


def _amount(count: int, total: int) -> str:
    return "none" if count == 0 else "all" if count == total else "some"


def word_shape(token: str) -> WordShape:
    """The shape of a non-empty token ("T-14": upper, some digits, some punctuation, length 4-6)."""
    letters = [ch for ch in token if ch.isalpha()]
    upper = sum(ch.isupper() for ch in letters)
    lower = sum(ch.islower() for ch in letters)
    if not letters:
        case = "none"
    elif upper == 0 and lower == 0:
        case = "uncased"  # e.g. CJK letters
    elif upper == 0:
        case = "lower"
    elif lower == 0:
        case = "upper"
    elif letters[0].isupper() and upper == 1:
        case = "title"
    else:
        case = "mixed"
    digits = sum(ch.isdigit() for ch in token)
    other = sum(not ch.isalnum() for ch in token)
    size = len(token)
    length = next(
        (name for name, limit in zip(SHAPE_LENGTHS, _LENGTH_LIMITS, strict=False) if size <= limit),
        SHAPE_LENGTHS[-1],
    )
    return WordShape(case, _amount(digits, size), _amount(other, size), length)


@functools.lru_cache(maxsize=1 << 16)
def shape_id(token: str) -> int:
    """The feature id of a token's shape (cached: text repeats its tokens)."""
    return word_shape(token).id


# ---------------------------------------------------------------------------------------------
# The feature slots of one model


@dataclass
class ColumnFeature:
    """An extra input column read as a feature: its position and the values training saw."""

    column: int  # 0-based position in the column file's lines
    values: Vocab  # with specials: 0 padding, 1 unknown


class FeatureSpec:
    """What a model reads besides words and characters, and how a sentence becomes its ids."""

    def __init__(
        self, columns: Sequence[ColumnFeature], lexicons: Sequence[Lexicon], shape: bool
    ) -> None:
        self.columns = list(columns)
        self.lexicons = list(lexicons)
        self.shape = shape

    @property
    def needs_columns(self) -> bool:
        return bool(self.columns)

    @property
    def column_numbers(self) -> list[int]:
        return [c.column for c in self.columns]

    @property
    def slot_kinds(self) -> list[str]:
        """The kind of each slot, in slot order: "column", "lexicon" or "shape"."""
        kinds = ["column"] * len(self.columns)
        kinds += ["lexicon"] * sum(len(lex.types) for lex in self.lexicons)
        return kinds + (["shape"] if self.shape else [])

    @property
    def slot_names(self) -> list[str]:
        names = [f"column {c.column}" for c in self.columns]
        names += [category for lex in self.lexicons for category in lex.categories]
        return names + (["shape"] if self.shape else [])

    def slot_sizes(self, config: ModelConfig) -> list[tuple[int, int]]:
        """(ids, embedding size) of each slot, the sizes taken from the model config."""
        sizes = [(len(c.values), config.feature_dim) for c in self.columns]
        sizes += [(TAG_IDS, config.lexicon_dim)] * sum(len(lex.types) for lex in self.lexicons)
        return sizes + ([(SHAPE_IDS, config.shape_dim)] if self.shape else [])

    def missing_columns(self, row: Sequence[str]) -> str | None:
        """Why a column-file line cannot give this model its features, or None if it can."""
        if not self.columns:
            return None
        wanted = max(self.column_numbers)
        if wanted < len(row):
            return None
        return (
            f"the model reads column {wanted} as a feature, but the line has {len(row)} "
            f"column{'s' if len(row) != 1 else ''} (feature columns: {_listed(self.column_numbers)})"
        )

    def refusal(self, what: str) -> FeatureInputError:
        """The error for input without columns given to a model that reads columns."""
        columns = self.column_numbers
        return FeatureInputError(
            f"{what}: the model reads input column{'s' if len(columns) > 1 else ''} "
            f"{_listed(columns)} as features (model.feature_columns), which plain text and JSON "
            "Lines do not have; tag a column file holding them (--input-format columns)"
        )

    def encode(
        self, tokens: Sequence[str], rows: Sequence[Sequence[str]] | None = None
    ) -> list[list[int]]:
        """Feature ids of one sentence, slot-major: one list of len(tokens) ids per slot.

        `rows` are the sentence's column-file lines (every column, as read); models with column
        features need them and raise FeatureInputError without them.
        """
        slots: list[list[int]] = []
        if self.columns:
            if rows is None:
                columns = self.column_numbers
                raise FeatureInputError(
                    f"the model reads input column{'s' if len(columns) > 1 else ''} "
                    f"{_listed(columns)} as features (model.feature_columns), but the sentences "
                    "came without their columns (the rows of their column file)"
                )
            if rows and self.missing_columns(rows[0]):
                raise DataError(str(self.missing_columns(rows[0])))
            for feature in self.columns:
                stoi, c = feature.values.stoi, feature.column
                slots.append([stoi.get(row[c], UNKNOWN) for row in rows])
        for lexicon in self.lexicons:
            slots.extend(lexicon.tags(tokens))
        if self.shape:
            slots.append([shape_id(t) for t in tokens])
        return slots

    def to_dict(self) -> dict[str, Any]:
        return {
            "columns": [{"column": c.column, "values": c.values.to_dict()} for c in self.columns],
            "lexicons": [lex.to_dict() for lex in self.lexicons],
            "shape": self.shape,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> FeatureSpec:
        columns = [
            ColumnFeature(c["column"], Vocab.from_dict(c["values"])) for c in data["columns"]
        ]
        lexicons = [Lexicon.from_dict(lex) for lex in data["lexicons"]]
        return cls(columns, lexicons, data["shape"])


def _listed(numbers: Sequence[int]) -> str:
    return ", ".join(str(n) for n in numbers)


def build_features(
    config: ModelConfig,
    sentences: Sequence[Sentence],
    source: str,
    settings: TokenizerSettings = TokenizerSettings(),
) -> tuple[FeatureSpec | None, list[Counter[str]]]:
    """The feature slots a config asks for, with column vocabularies from the training sentences.

    Returns (None, []) for a config without features; otherwise the spec and, per feature
    column, how often training saw each value (for unknown-value replacement while training).
    Lexicon files are read here; they travel inside the model file afterwards.
    """
    if not (config.feature_columns or config.lexicons or config.word_shape):
        return None, []
    counts: list[Counter[str]] = [Counter() for _ in config.feature_columns]
    if config.feature_columns and sentences:
        first = sentences[0]
        taken = {first.token_column: "token", first.label_column: "label"}
        for column in config.feature_columns:
            if column in taken:
                raise ConfigError(
                    f"model.feature_columns holds {column}, which is the {taken[column]} column"
                )
        probe = FeatureSpec(
            [ColumnFeature(c, Vocab([])) for c in config.feature_columns], [], False
        )
        check_columns(probe, sentences, source)
        for sentence in sentences:
            for counter, column in zip(counts, config.feature_columns, strict=True):
                counter.update(row[column] for row in sentence.rows)
    columns = [
        ColumnFeature(
            column, Vocab(v for v, _ in sorted(c.items(), key=lambda kv: (-kv[1], kv[0])))
        )
        for column, c in zip(config.feature_columns, counts, strict=True)
    ]
    lexicons: list[Lexicon] = []
    names: set[str] = set()
    for path in config.lexicons:
        name = stem = Path(path).stem or "lexicon"
        number = 1
        while name in names:  # two files with the same stem: keep the categories apart
            number += 1
            name = f"{stem}-{number}"
        names.add(name)
        lexicons.append(read_lexicon(path, config.lexicon_case, settings, name=name))
    return FeatureSpec(columns, lexicons, config.word_shape), counts


def check_columns(spec: FeatureSpec, sentences: Sequence[Sentence], source: str) -> None:
    """Raise DataError (file and line) if the sentences lack a column the spec reads, or hold
    their tokens or labels in it (a dev file laid out unlike train).

    A column file has the same columns on every line, so the first sentence decides.
    """
    for sentence in sentences[:1]:
        if not sentence.rows:
            continue
        problem = spec.missing_columns(sentence.rows[0])
        if problem:
            raise DataError(problem, source, sentence.first_line)
        taken = {sentence.token_column: "token", sentence.label_column: "label"}
        for column in spec.column_numbers:
            if column in taken:
                raise DataError(
                    f"the model reads column {column} as a feature, but it is this file's "
                    f"{taken[column]} column (its lines have {len(sentence.rows[0])} columns)",
                    source,
                    sentence.first_line,
                )
