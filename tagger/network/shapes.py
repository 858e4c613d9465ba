"""The tensors `build_net` makes, by name, shape and element type, worked out from sizes alone.

Loading a model compares this table with the tensors its file holds before any network is built,
so every size in the metadata (embedding widths, hidden size, layers, vocabulary and label
counts) is bounded by weights the file really contains: a file cannot make the loader allocate
more than it holds. No torch here; the tests check the table against `build_net`'s own
state_dict for every cell, character encoder, output layer, direction and feature slot.
"""

from __future__ import annotations

from collections.abc import Sequence

from tagger.config import ModelConfig

# Gate blocks per cell kind, as `tagger.network.cells` lays out its weights.
GATES = {"rnn": 1, "minimal": 2, "gru": 3, "lstm": 4}

Shape = tuple[int, ...]
TensorSpec = tuple[Shape, str]  # (shape, element type as torch names it: "float32", "bool")

_FLOAT = "float32"
_CELL_TENSORS = 4  # weight_ih, weight_hh, bias_ih, bias_hh
_CRF_TENSORS = 6  # transitions, start, end and their three allowed-masks


def _char_tensor_count(model: ModelConfig) -> int:
    if model.char_encoder == "cnn":
        return 3  # embed, conv weight and bias
    if model.char_encoder == "rnn":
        return 1 + 2 + 2 * _CELL_TENSORS  # embed, projection, one layer each way
    return 0


def tensor_count(model: ModelConfig, feature_slots: int) -> int:
    """How many tensors the network of `model` has: compared first, so that a huge layer count
    is refused by arithmetic rather than by listing its tensors."""
    directions = 2 if model.bidirectional else 1
    encoder = 2 + directions * model.layers * _CELL_TENSORS
    crf = _CRF_TENSORS if model.output == "crf" else 0
    return 1 + _char_tensor_count(model) + encoder + 2 + crf + feature_slots


def _encoder(
    prefix: str, input_size: int, hidden: int, layers: int, cell: str, bidirectional: bool
) -> dict[str, TensorSpec]:
    width = GATES[cell] * hidden
    found = {
        f"{prefix}.projection.weight": ((hidden, input_size), _FLOAT),
        f"{prefix}.projection.bias": ((hidden,), _FLOAT),
    }
    for stack in ("left_to_right", "right_to_left") if bidirectional else ("left_to_right",):
        for layer in range(layers):
            cell_prefix = f"{prefix}.{stack}.cells.{layer}"
            found[f"{cell_prefix}.weight_ih"] = ((width, hidden), _FLOAT)
            found[f"{cell_prefix}.weight_hh"] = ((width, hidden), _FLOAT)
            found[f"{cell_prefix}.bias_ih"] = ((width,), _FLOAT)
            found[f"{cell_prefix}.bias_hh"] = ((width,), _FLOAT)
    return found


def expected_tensors(
    model: ModelConfig,
    n_words: int,
    n_chars: int,
    n_labels: int,
    feature_slots: Sequence[tuple[int, int]] = (),
    fixed_vectors: tuple[int, int] | None = None,
    char_lm: tuple[int, int, int, int, str] | None = None,
) -> dict[str, TensorSpec]:
    """Name -> (shape, element type) of every tensor in the state_dict of
    ``build_net`` for these sizes; ``feature_slots`` as `FeatureSpec.slot_sizes` gives them;
    ``fixed_vectors`` the (rows, dim) of a frozen pretrained table, or None; ``char_lm`` the
    (characters, char_dim, hidden, layers, cell) of a frozen character language model, or None."""
    found: dict[str, TensorSpec] = {"words.weight": ((n_words, model.word_dim), _FLOAT)}
    char_size = 0
    if model.char_encoder != "none":
        found["chars.embed.weight"] = ((n_chars, model.char_dim), _FLOAT)
    if model.char_encoder == "cnn":
        found["chars.conv.weight"] = (
            (model.char_features, model.char_dim, model.char_kernel),
            _FLOAT,
        )
        found["chars.conv.bias"] = ((model.char_features,), _FLOAT)
        char_size = model.char_features
    elif model.char_encoder == "rnn":
        found.update(
            _encoder("chars.encoder", model.char_dim, model.char_features, 1, model.cell, True)
        )
        char_size = 2 * model.char_features
    input_size = model.word_dim + char_size + sum(dim for _, dim in feature_slots)
    if fixed_vectors is not None:
        input_size += fixed_vectors[1]
    if char_lm is not None:
        input_size += 2 * char_lm[2]
    found.update(
        _encoder(
            "encoder", input_size, model.hidden_size, model.layers, model.cell, model.bidirectional
        )
    )
    output_size = (2 if model.bidirectional else 1) * model.hidden_size
    found["output.weight"] = ((n_labels, output_size), _FLOAT)
    found["output.bias"] = ((n_labels,), _FLOAT)
    if model.output == "crf":
        found["crf.transitions"] = ((n_labels, n_labels), _FLOAT)
        found["crf.start"] = ((n_labels,), _FLOAT)
        found["crf.end"] = ((n_labels,), _FLOAT)
        found["crf.start_ok"] = ((n_labels,), "bool")
        found["crf.trans_ok"] = ((n_labels, n_labels), "bool")
        found["crf.end_ok"] = ((n_labels,), "bool")
    for k, (ids, dim) in enumerate(feature_slots):
        found[f"features.{k}.weight"] = ((ids, dim), _FLOAT)
    if fixed_vectors is not None:
        found["fixed_vectors.table"] = (fixed_vectors, _FLOAT)
    if char_lm is not None:
        found.update(char_lm_tensors("char_lm.model", *char_lm))
    return found


def char_lm_tensor_count(layers: int) -> int:
    """Tensors of a `CharLanguageModel` with `layers` layers: counted before they are listed."""
    return 1 + 2 + 2 * layers * _CELL_TENSORS + 4  # embedding, projection, cells, two outputs


def char_lm_tensors(
    prefix: str, n_chars: int, char_dim: int, hidden: int, layers: int, cell: str
) -> dict[str, TensorSpec]:
    """The tensors of a `CharLanguageModel` (tagger.network.char_lm) of these sizes."""
    found: dict[str, TensorSpec] = {f"{prefix}.embed.weight": ((n_chars, char_dim), _FLOAT)}
    found.update(_encoder(f"{prefix}.encoder", char_dim, hidden, layers, cell, True))
    for name in ("next_char", "previous_char"):
        found[f"{prefix}.{name}.weight"] = ((n_chars, hidden), _FLOAT)
        found[f"{prefix}.{name}.bias"] = ((n_chars,), _FLOAT)
    return found
