"""Small models for tests: the config of a tiny network that trains in seconds, a tiny untrained
tagger, and ways to write its file with edited metadata (keeping the old digest, with a fresh one,
or in the format of files written before the digest covered the metadata)."""

from __future__ import annotations

import copy
import hashlib
import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import torch
from safetensors.torch import load as load_safetensors
from safetensors.torch import save as save_safetensors

from tagger.apply.tagger import Tagger
from tagger.config import Config, config_from_dict
from tagger.data.schemes import labels_for_types
from tagger.network.modelfile import save_model_file
from tagger.network.net import build_net
from tagger.text.features import ColumnFeature, FeatureSpec
from tagger.text.lexicon import Lexicon
from tagger.text.vocab import Vocab, build_vocabularies

SENTENCE = ["Anna", "met", "Bob", "in", "Oslo", "."]


def tiny_training_config(
    train_path: Path, dev_path: Path, model: dict[str, Any] | None = None, **train: Any
) -> Config:
    """A network of 16 units in one layer, no dropout, one thread, a constant rate and no
    unknown-word draws, trained on `train_path` with dev `dev_path`; `train` sets the rest of
    [train] (epochs, batch_size, ...), `model` adds to [model]."""
    return config_from_dict(
        {
            "data": {"train": str(train_path), "dev": str(dev_path)},
            "model": {"hidden_size": 16, "layers": 1, "word_dim": 16, "char_dim": 8,
                      "char_features": 12, "dropout": 0.0, **(model or {})},
            "train": {"threads": 1, "lr_schedule": "constant", "unknown_replace": 0.0, **train},
        }
    )  # fmt: skip


def tiny_tagger(
    model: dict[str, Any] | None = None,
    lexicon: bool = False,
    column: bool = False,
    seed: int = 0,
) -> Tagger:
    """An untrained tagger small enough to save and load in milliseconds (types LOC and PER).

    ``lexicon`` adds a lexicon and word shapes, ``column`` a feature column (column 1)."""
    settings: dict[str, Any] = {
        "hidden_size": 4,
        "word_dim": 5,
        "char_dim": 3,
        "char_features": 4,
        "layers": 1,
        **(model or {}),
    }
    if lexicon:
        settings.update(lexicons=["names.txt"], word_shape=True)
    if column:
        settings.update(feature_columns=[1])
    config = config_from_dict({"model": settings})
    labels = labels_for_types(["LOC", "PER"], config.model.scheme)
    vocabs, _ = build_vocabularies(
        [SENTENCE], labels, config.model.lowercase, config.model.digits_to_zero
    )
    spec = None
    if lexicon or column:
        spec = FeatureSpec(
            [ColumnFeature(1, Vocab(["NNP", "VBD"]))] if column else [],
            [Lexicon("names", [(["Bob"], "PER"), (["Oslo"], "LOC"), (["Anna"], "")])]
            if lexicon
            else [],
            lexicon,
        )
    torch.manual_seed(seed)
    net = build_net(config, vocabs, spec)
    net.eval()
    return Tagger(net, vocabs, config, "IOB2", {"epoch": 3}, spec)


def read_parts(path: Path) -> tuple[dict[str, torch.Tensor], dict[str, Any]]:
    """The tensors and our metadata of a model file, read without any of the loader's checks."""
    blob = path.read_bytes()
    header = json.loads(blob[8 : 8 + int.from_bytes(blob[:8], "little")])
    return load_safetensors(blob), json.loads(header["__metadata__"]["tagger"])


def write_parts(path: Path, tensors: dict[str, torch.Tensor], meta: dict[str, Any]) -> None:
    """Our metadata written as given, digest and version included (nothing recomputed)."""
    path.write_bytes(save_safetensors(tensors, metadata={"tagger": json.dumps(meta)}))


def old_weights_digest(tensors: dict[str, torch.Tensor]) -> str:
    """The digest of format 1 as the loader of that version computed it (weights only)."""
    digest = hashlib.sha256()
    for name in sorted(tensors):
        tensor = tensors[name].detach().contiguous().cpu()
        digest.update(name.encode())
        digest.update(str(tuple(tensor.shape)).encode())
        digest.update(
            tensor.reshape(-1).view(torch.uint8).numpy().tobytes() if tensor.numel() else b""
        )
    return digest.hexdigest()


def write_old_format(path: Path, tensors: dict[str, torch.Tensor], meta: dict[str, Any]) -> None:
    """A model file as the previous version wrote it: format 1, digest over the weights only."""
    body = {k: v for k, v in meta.items() if k not in ("format", "version", "digest")}
    header = {
        "format": "tagger-model",
        "version": 1,
        "digest": old_weights_digest(tensors),
        **body,
    }
    blob = save_safetensors(
        {k: t.contiguous() for k, t in tensors.items()},
        metadata={"tagger": json.dumps(header, ensure_ascii=False)},
    )
    path.write_bytes(blob)


Edit = Callable[[dict[str, Any]], None]


def rewrite(path: Path, target: Path, edit: Edit, how: str) -> Path:
    """Copy the model file at `path` to `target` with its metadata edited in place by `edit`.

    how: "keep" keeps the old digest (a damaged file), "fresh" writes a valid current-format
    file, "old" writes format 1 (whose digest does not cover the metadata)."""
    tensors, meta = read_parts(path)
    meta = copy.deepcopy(meta)
    edit(meta)
    if how == "keep":
        write_parts(target, tensors, meta)
    elif how == "fresh":
        save_model_file(target, tensors, meta)
    elif how == "old":
        write_old_format(target, tensors, meta)
    else:
        raise ValueError(how)
    return target
