"""The character language model file `tagger learn-char-lm` writes and a config names
(model.char_lm), and its resume state.

Both use the model file's container (safetensors + our JSON metadata, verified by a digest,
never unpickled): the weights of `CharLanguageModel` as tensors, and in the metadata

    kind        "char-language-model" (or "char-language-model-resume-state")
    spec        the characters and sizes (`CharLMSpec`)
    tokenizer   the tokenizer settings the raw text was cut with (training refuses a mismatch)
    learnt      what it was learnt from: sentences, characters, seconds, held-out perplexity ...
    position    (resume state only) epoch, batch, settings, and the random generator's state
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import torch

from tagger.errors import DataError
from tagger.network.cells import CELL_KINDS
from tagger.network.char_lm import CharLanguageModel
from tagger.network.modelfile import save_model_file
from tagger.text.char_context import CharLMSpec
from tagger.unannotated.container import read_container

KIND = "char-language-model"
RESUME_KIND = "char-language-model-resume-state"
MAX_SIZE = 4096  # widths beyond this are not a character model of ours


def save_char_lm(
    path: str | Path,
    model: CharLanguageModel,
    tokenizer: dict[str, Any],
    learnt: dict[str, Any],
    position: dict[str, Any] | None = None,
    rng_state: torch.Tensor | None = None,
) -> None:
    tensors = dict(model.state_dict())
    if rng_state is not None:
        tensors["rng_state"] = rng_state
    meta: dict[str, Any] = {
        "kind": KIND if position is None else RESUME_KIND,
        "spec": model.spec.to_dict(),
        "tokenizer": tokenizer,
        "learnt": learnt,
    }
    if position is not None:
        meta["position"] = position
    save_model_file(path, tensors, meta)


def load_char_lm(
    path: str | Path, resume_state: bool = False
) -> tuple[CharLanguageModel, dict[str, Any], dict[str, torch.Tensor]]:
    """The model, the file's metadata, and tensors beyond the model's (the resume state's
    random generator state). Every problem is a one-line DataError naming the file."""
    name = str(path)
    tensors, meta = read_container(path, "character language model file")
    wanted = RESUME_KIND if resume_state else KIND
    if meta.get("kind") != wanted:
        what = "resume state" if resume_state else "character language model file"
        raise DataError(f"not a {what} (from tagger learn-char-lm)", name)
    spec = _spec(meta.get("spec"), name)
    if not isinstance(meta.get("tokenizer"), dict):
        raise DataError("character language model file is damaged: no tokenizer settings", name)
    model = CharLanguageModel(spec)
    own = model.state_dict()
    extra = {k: t for k, t in tensors.items() if k not in own}
    if set(own) - set(tensors) or set(extra) - {"rng_state"}:
        raise DataError("character language model file is damaged: its tensors do not fit", name)
    for key, tensor in own.items():
        if tensors[key].shape != tensor.shape or tensors[key].dtype != tensor.dtype:
            raise DataError(
                f"character language model file is damaged: {key} has the wrong shape", name
            )
    model.load_state_dict({k: tensors[k] for k in own})
    return model, meta, extra


def _spec(value: Any, name: str) -> CharLMSpec:
    def damaged(what: str) -> DataError:
        return DataError(f"character language model file is damaged: {what}", name)

    if not isinstance(value, dict):
        raise damaged("no model sizes")
    chars = value.get("chars")
    if not isinstance(chars, list) or not all(isinstance(c, str) and len(c) == 1 for c in chars):
        raise damaged("its characters are not a list of single characters")
    if len(set(chars)) != len(chars):
        raise damaged("its characters repeat")
    sizes = [value.get(k) for k in ("char_dim", "hidden_size", "layers")]
    if not all(type(s) is int and 1 <= s <= MAX_SIZE for s in sizes):
        raise damaged("a size is not a whole number from 1 to 4096")
    if value.get("cell") not in CELL_KINDS:
        raise damaged(f"the cell must be one of {', '.join(CELL_KINDS)}")
    if set(value) != {"chars", "char_dim", "hidden_size", "layers", "cell"}:
        raise damaged("its sizes hold an unknown key")
    return CharLMSpec.from_dict(value)
