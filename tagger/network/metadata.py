"""What a tagger model file's metadata must hold, checked before anything is built from it.

The metadata is read as untrusted JSON (`tagger.network.modelfile` has already bounded its size
and nesting). Here every field the tagger uses is checked: the config by the config loader
itself (types, choices, ranges), the vocabularies and the normalisation flags for their types and
their agreement with the config, the labels for their form (exactly the labels the model's scheme
writes for their types, in the order training stores them), the feature slots and tokenizer
settings through their own readers. `check_weights` then holds the file's tensors against the
network those sizes describe (`tagger.network.shapes`), so that no size in the metadata is larger
than the weights the file holds, and the CRF's stored transition rules against the labels.

Every refusal is a one-line ModelFileError naming the model file; values from the file are quoted
cut short. No torch here: tensors are only asked for their shape, type and values.
"""

from __future__ import annotations

import math
import reprlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, NoReturn

from tagger.config import Config, config_from_dict
from tagger.data.corpus import DELIMITERS
from tagger.data.schemes import (
    OUTSIDE,
    SCHEMES,
    allowed_transitions,
    labels_for_types,
    normalise_scheme_name,
    split_tag,
)
from tagger.errors import ModelFileError, TaggerError
from tagger.network.shapes import GATES, char_lm_tensor_count, expected_tensors, tensor_count
from tagger.text.char_context import CharLMSpec
from tagger.text.features import ColumnFeature, FeatureSpec
from tagger.text.lexicon import CASE_MODES, Lexicon
from tagger.text.subword import SubwordIndex, SubwordSettings
from tagger.text.tokenizer import TokenizerSettings
from tagger.text.vocab import PAD, UNK, Vocab, Vocabularies

if TYPE_CHECKING:
    import torch

MAX_NGRAM = 32  # longest character n-gram a stored vector table may use
_MESSAGE_LIMIT = 300  # characters of a refusal, the model file's name aside

_quoting = reprlib.Repr()
_quoting.maxstring = 60
_quoting.maxother = 60
_quoting.maxlist = _quoting.maxdict = 4
_quoting.maxlevel = 2


def quoted(value: Any) -> str:
    """A value from the file as a message shows it: its repr, cut short."""
    return _quoting.repr(value)


@dataclass(frozen=True)
class StoredModel:
    """What a model file's metadata says the tagger is, every field checked."""

    config: Config
    vocabs: Vocabularies
    input_scheme: str  # the scheme of the training files, as stored
    features: FeatureSpec | None
    tokenizer: TokenizerSettings

    @property
    def feature_slots(self) -> list[tuple[int, int]]:
        return self.features.slot_sizes(self.config.model) if self.features is not None else []


class _Reader:
    """Checks on the values of one model file's metadata; each refusal names the file."""

    def __init__(self, where: str) -> None:
        self.where = where

    def refuse(self, message: str) -> NoReturn:
        flat = " ".join(message.split())
        if len(flat) > _MESSAGE_LIMIT:
            flat = flat[: _MESSAGE_LIMIT - 3] + "..."
        raise ModelFileError(f"{self.where}: {flat}")

    def table(self, value: Any, key: str, known: Sequence[str] | None = None) -> dict[str, Any]:
        if not isinstance(value, dict):
            self.refuse(f"the stored {key} is not a table (found {quoted(value)})")
        if known is not None:
            extra = sorted(set(value) - set(known))
            missing = [k for k in known if k not in value]
            if extra:
                self.refuse(f"the stored {key} holds an unknown key {quoted(extra[0])}")
            if missing:
                self.refuse(f"the stored {key} lacks {quoted(missing[0])}")
        return value

    def required(self, table: Mapping[str, Any], key: str) -> Any:
        if key not in table:
            self.refuse(f"the model metadata lacks {quoted(key)}")
        return table[key]

    def flag(self, value: Any, key: str) -> bool:
        if not isinstance(value, bool):
            self.refuse(f"the stored {key} must be true or false, not {quoted(value)}")
        return value

    def count(self, value: Any, key: str) -> int:
        if type(value) is not int or value < 0:
            self.refuse(
                f"the stored {key} must be a whole number of 0 or more, not {quoted(value)}"
            )
        return value

    def strings(self, value: Any, key: str, unique: bool = True) -> list[str]:
        if not isinstance(value, list):
            self.refuse(f"the stored {key} is not a list (found {quoted(value)})")
        for i, item in enumerate(value):
            if not isinstance(item, str):
                self.refuse(f"the stored {key}[{i}] is not a string (found {quoted(item)})")
        if unique and len(set(value)) != len(value):
            seen: set[str] = set()
            for item in value:
                if item in seen:
                    self.refuse(f"the stored {key} lists {quoted(item)} twice")
                seen.add(item)
        return value

    def vocab(self, value: Any, key: str, specials: bool) -> Vocab:
        table = self.table(value, key, ("items", "specials"))
        if self.flag(table["specials"], f"{key}.specials") != specials:
            self.refuse(f"the stored {key}.specials must be {str(specials).lower()}")
        items = self.strings(table["items"], f"{key}.items")
        if specials and (PAD in items or UNK in items):
            self.refuse(f"the stored {key}.items repeat the reserved {PAD} or {UNK}")
        return Vocab(items, specials=specials)

    # --- the parts of a model -------------------------------------------------------------------

    def config(self, value: Any) -> Config:
        table = self.table(value, "config")
        try:
            return config_from_dict(table)
        except TaggerError as error:
            self.refuse(f"the stored config is invalid: {error}")

    def scheme(self, value: Any, key: str) -> str:
        if not isinstance(value, str):
            self.refuse(f"the stored {key} must be a scheme name, not {quoted(value)}")
        try:
            normalise_scheme_name(value)
        except TaggerError:
            self.refuse(f"the stored {key} {quoted(value)} is not a tagging scheme")
        return value

    def vocabularies(self, value: Any, config: Config) -> Vocabularies:
        key = "vocabularies"
        known = ("words", "chars", "labels", "lowercase", "digits_to_zero")
        optional = tuple(
            k for k in ("subwords", "char_lm") if isinstance(value, dict) and k in value
        )
        table = self.table(value, key, (*known, *optional))
        vocabs = Vocabularies(
            words=self.vocab(table["words"], f"{key}.words", specials=True),
            chars=self.vocab(table["chars"], f"{key}.chars", specials=True),
            labels=self.vocab(table["labels"], f"{key}.labels", specials=False),
            lowercase=self.flag(table["lowercase"], f"{key}.lowercase"),
            digits_to_zero=self.flag(table["digits_to_zero"], f"{key}.digits_to_zero"),
            subwords=self.subwords(table["subwords"]) if "subwords" in table else None,
            char_lm=self.char_lm(table["char_lm"]) if "char_lm" in table else None,
        )
        model = config.model
        for name in ("lowercase", "digits_to_zero"):
            if getattr(vocabs, name) != getattr(model, name):
                self.refuse(f"the stored {key}.{name} disagrees with the config's model.{name}")
        return vocabs

    def subwords(self, value: Any) -> SubwordIndex:
        key = "vocabularies.subwords"
        names = ("words", "dim", "min_n", "max_n", "buckets", "lowercase", "digits_to_zero")
        table = self.table(value, key, names)
        words = self.strings(table["words"], f"{key}.words")
        numbers = {name: self.count(table[name], f"{key}.{name}") for name in names[1:5]}
        if not 1 <= numbers["min_n"] <= numbers["max_n"] <= MAX_NGRAM:
            self.refuse(f"the stored {key} n-gram sizes must lie within 1..{MAX_NGRAM}")
        if numbers["dim"] == 0:
            self.refuse(f"the stored {key}.dim must be above 0")
        settings = SubwordSettings(
            min_n=numbers["min_n"],
            max_n=numbers["max_n"],
            buckets=numbers["buckets"],
            lowercase=self.flag(table["lowercase"], f"{key}.lowercase"),
            digits_to_zero=self.flag(table["digits_to_zero"], f"{key}.digits_to_zero"),
        )
        return SubwordIndex(words, settings, numbers["dim"])

    def char_lm(self, value: Any) -> CharLMSpec:
        key = "vocabularies.char_lm"
        names = ("chars", "char_dim", "hidden_size", "layers", "cell")
        table = self.table(value, key, names)
        chars = self.strings(table["chars"], f"{key}.chars")
        if any(len(ch) != 1 for ch in chars):
            self.refuse(f"the stored {key}.chars must be single characters")
        sizes = [self.count(table[name], f"{key}.{name}") for name in names[1:4]]
        if min(sizes) < 1:
            self.refuse(f"the stored {key} sizes must be 1 or more")
        if table["cell"] not in GATES:
            self.refuse(f"the stored {key}.cell {quoted(table['cell'])} is not a cell kind")
        return CharLMSpec(chars, *sizes, table["cell"])

    def labels(self, labels: list[str], scheme: str) -> None:
        """The labels must be those training stores: O, then every label the scheme writes for
        each type, sorted. Swapped or renamed labels break that order or that set."""
        key = "vocabularies.labels.items"
        if not labels or labels[0] != OUTSIDE:
            self.refuse(f"the stored {key} must start with {OUTSIDE}")
        prefixes = SCHEMES[scheme].prefixes
        types = set()
        for label in labels[1:]:
            try:
                prefix, type_ = split_tag(label)
            except TaggerError:
                self.refuse(f"the stored label {quoted(label)} is neither O nor PREFIX-TYPE")
            if prefix not in prefixes:
                self.refuse(
                    f"the stored label {quoted(label)} is not a label of the model's scheme "
                    f"{scheme} (prefixes {', '.join(prefixes)})"
                )
            types.add(type_)
        if labels != labels_for_types(types, scheme):
            self.refuse(
                f"the stored {key} are out of order or incomplete: training stores O, then "
                f"every {scheme} label of each type, sorted"
            )

    def lexicon(self, value: Any, key: str) -> Lexicon:
        table = self.table(value, key, ("name", "case", "types", "entries"))
        name, case = table["name"], table["case"]
        if not isinstance(name, str) or not name:
            self.refuse(f"the stored {key}.name must be a non-empty string")
        if case not in CASE_MODES:
            self.refuse(f"the stored {key}.case must be one of {', '.join(CASE_MODES)}")
        types = self.strings(table["types"], f"{key}.types")
        entries = table["entries"]
        if not isinstance(entries, list) or not entries:
            self.refuse(f"the stored {key}.entries must be a non-empty list")
        read: list[tuple[list[str], str]] = []
        for i, entry in enumerate(entries):
            where = f"{key}.entries[{i}]"
            if not isinstance(entry, list) or len(entry) != 2:
                self.refuse(f"the stored {where} must be [tokens, type number]")
            tokens = self.strings(entry[0], f"{where}[0]", unique=False)
            type_id = entry[1]
            if not tokens or type(type_id) is not int or not 0 <= type_id < len(types):
                self.refuse(
                    f"the stored {where} must be [tokens, type number], not {quoted(entry)}"
                )
            read.append((tokens, types[type_id]))
        lexicon = Lexicon(name, read, case)
        if list(lexicon.types) != types:
            self.refuse(f"the stored {key}.types must be the sorted types its entries use")
        return lexicon

    def features(self, value: Any, config: Config) -> FeatureSpec:
        key = "features"
        table = self.table(value, key, ("columns", "lexicons", "shape"))
        columns_value, lexicons_value = table["columns"], table["lexicons"]
        if not isinstance(columns_value, list) or not isinstance(lexicons_value, list):
            self.refuse(f"the stored {key}.columns and {key}.lexicons must be lists")
        columns = []
        for i, item in enumerate(columns_value):
            column = self.table(item, f"{key}.columns[{i}]", ("column", "values"))
            columns.append(
                ColumnFeature(
                    self.count(column["column"], f"{key}.columns[{i}].column"),
                    self.vocab(column["values"], f"{key}.columns[{i}].values", specials=True),
                )
            )
        lexicons = [
            self.lexicon(item, f"{key}.lexicons[{i}]") for i, item in enumerate(lexicons_value)
        ]
        spec = FeatureSpec(columns, lexicons, self.flag(table["shape"], f"{key}.shape"))
        model = config.model
        if spec.column_numbers != list(model.feature_columns):
            self.refuse(
                f"the stored {key}.columns disagree with the config's model.feature_columns"
            )
        if len(spec.lexicons) != len(model.lexicons):
            self.refuse(f"the stored {key}.lexicons disagree with the config's model.lexicons")
        if spec.shape != model.word_shape:
            self.refuse(f"the stored {key}.shape disagrees with the config's model.word_shape")
        return spec

    def column_layout(self, value: Any) -> None:
        key = "column_layout"
        table = self.table(value, key, ("token_column", "label_column", "delimiter"))
        for name in ("token_column", "label_column"):
            if type(table[name]) is not int:
                self.refuse(
                    f"the stored {key}.{name} must be a whole number, not {quoted(table[name])}"
                )
        if table["delimiter"] not in ("auto", *DELIMITERS):
            self.refuse(
                f"the stored {key}.delimiter must be one of auto, {', '.join(DELIMITERS)}, "
                f"not {quoted(table['delimiter'])}"
            )

    def calibration(self, value: Any) -> None:
        key = "calibration"
        table = self.table(value, key, ("temperature", "tokens", "loss_before", "loss_after"))
        temperature = table["temperature"]
        if (
            type(temperature) not in (int, float)
            or not math.isfinite(temperature)
            or temperature <= 0
        ):
            self.refuse(
                f"the stored {key}.temperature must be a finite number above 0, "
                f"not {quoted(temperature)}"
            )

    def tokenizer(self, value: Any) -> TokenizerSettings:
        table = self.table(value, "tokenizer")
        try:
            return TokenizerSettings.from_dict(table)
        except TaggerError as error:
            self.refuse(f"the stored tokenizer settings are invalid: {error}")


def read_stored_model(meta: Any, where: str | Path) -> StoredModel:
    """The tagger a model file's metadata describes, every field checked (ModelFileError)."""
    reader = _Reader(str(where))
    table = reader.table(meta, "metadata")
    if table.get("kind") == "word-vectors":
        reader.refuse("this is a word vectors file (from tagger learn-vectors), not a model")
    config = reader.config(reader.required(table, "config"))
    model = config.model
    if model.char_encoder != "none" and (model.char_dim < 1 or model.char_features < 1):
        reader.refuse(
            "the stored config's model.char_dim and model.char_features must be 1 or more"
        )
    vocabs = reader.vocabularies(reader.required(table, "vocabularies"), config)
    scheme = normalise_scheme_name(model.scheme)
    reader.labels(vocabs.labels.itos, scheme)
    input_scheme = reader.scheme(reader.required(table, "input_scheme"), "input_scheme")
    features = None
    asks_for_features = bool(model.feature_columns or model.lexicons or model.word_shape)
    if asks_for_features != ("features" in table):
        reader.refuse(
            "the stored config asks for features the metadata does not hold"
            if asks_for_features
            else "the metadata holds features the stored config does not ask for"
        )
    if asks_for_features:
        features = reader.features(table["features"], config)
    tokenizer = reader.tokenizer(table.get("tokenizer", {}))
    if table.get("column_layout") is not None:
        reader.column_layout(table["column_layout"])
    if table.get("calibration") is not None:
        reader.calibration(table["calibration"])
    return StoredModel(config, vocabs, input_scheme, features, tokenizer)


def check_weights(
    tensors: Mapping[str, torch.Tensor], stored: StoredModel, where: str | Path
) -> None:
    """The file's tensors are exactly those of the network `stored` describes (names, shapes,
    element types), finite, and a CRF's stored transition rules are those of its labels."""
    reader = _Reader(str(where))
    model = stored.config.model
    slots = stored.feature_slots
    fixed = stored.vocabs.subwords
    fixed_shape = (fixed.size, fixed.dim) if fixed is not None else None
    lm = stored.vocabs.char_lm
    lm_sizes = (
        (lm.vocab_size, lm.char_dim, lm.hidden_size, lm.layers, lm.cell) if lm is not None else None
    )
    lm_count = char_lm_tensor_count(lm.layers) if lm is not None else 0
    needed = tensor_count(model, len(slots)) + (fixed is not None) + lm_count
    if len(tensors) != needed:
        reader.refuse(
            f"the weights do not fit the stored config: the file holds {len(tensors)} tensors, "
            f"the config describes a network of {needed}"
        )
    vocabs = stored.vocabs
    expected = expected_tensors(
        model,
        len(vocabs.words),
        len(vocabs.chars),
        len(vocabs.labels),
        slots,
        fixed_shape,
        lm_sizes,
    )
    for name, (shape, dtype) in expected.items():
        tensor = tensors.get(name)
        if tensor is None:
            reader.refuse(f"the weights do not fit the stored config: no tensor {quoted(name)}")
        if tuple(tensor.shape) != shape:
            reader.refuse(
                f"the weights do not fit the stored config: tensor {name} has shape "
                f"{tuple(tensor.shape)} in the file, the stored config and vocabularies "
                f"make it {shape}"
            )
        if str(tensor.dtype) != f"torch.{dtype}":
            reader.refuse(f"tensor {name} holds {str(tensor.dtype)[6:]} values, not {dtype}")
        if tensor.is_floating_point() and not bool(tensor.isfinite().all()):
            reader.refuse(f"tensor {name} holds values that are not finite numbers")
    if model.output == "crf":
        rules = allowed_transitions(vocabs.labels.itos, normalise_scheme_name(model.scheme))
        stored_rules = [tensors[f"crf.{part}_ok"].tolist() for part in ("start", "trans", "end")]
        if stored_rules != list(rules):
            reader.refuse(
                "the stored labels do not match the weights: the CRF's transition rules were "
                "made for other labels"
            )
