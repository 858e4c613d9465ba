"""The single-file model format: safetensors weights with our JSON metadata in its header.

Nothing here unpickles: the file holds tensors and plain JSON, and the network is rebuilt from the
config stored in the metadata. A digest over every tensor's bytes catches corrupted weights;
safetensors' own header checks catch truncation.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

import torch
from safetensors import SafetensorError
from safetensors.torch import load as load_safetensors
from safetensors.torch import save as save_safetensors

from tagger.data.atomic import atomic_output
from tagger.errors import ModelFileError

FORMAT_NAME = "tagger-model"
FORMAT_VERSION = 1
_META_KEY = "tagger"


def _digest(tensors: dict[str, torch.Tensor]) -> str:
    digest = hashlib.sha256()
    for name in sorted(tensors):
        tensor = tensors[name].detach().contiguous().cpu()
        digest.update(name.encode())
        digest.update(str(tuple(tensor.shape)).encode())
        digest.update(
            tensor.reshape(-1).view(torch.uint8).numpy().tobytes() if tensor.numel() else b""
        )
    return digest.hexdigest()


def save_model_file(
    path: str | Path, tensors: dict[str, torch.Tensor], metadata: dict[str, Any]
) -> None:
    """Write weights and metadata through the one atomic writer (`tagger.data.atomic`): the old
    file or the complete new one, synced to disk, with the permissions any new output gets."""
    tensors = {name: t.detach().contiguous().cpu() for name, t in tensors.items()}
    header = {
        "format": FORMAT_NAME,
        "version": FORMAT_VERSION,
        "digest": _digest(tensors),
        **metadata,
    }
    blob = save_safetensors(tensors, metadata={_META_KEY: json.dumps(header, ensure_ascii=False)})
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    with atomic_output(path, "wb") as out:
        out.write(blob)


def _read_header(blob: bytes, path: Path) -> dict[str, Any]:
    """Our metadata, read from the safetensors JSON header without touching the tensors."""
    if len(blob) < 8:
        raise ModelFileError(f"{path}: not a tagger model file (only {len(blob)} bytes)")
    size = int.from_bytes(blob[:8], "little")
    if size > len(blob) - 8:
        raise ModelFileError(f"{path}: model file is truncated (header runs past the end)")
    try:
        header = json.loads(blob[8 : 8 + size])
        meta = json.loads(header["__metadata__"][_META_KEY])
    except (ValueError, KeyError, TypeError):
        raise ModelFileError(f"{path}: not a tagger model file (no tagger metadata)") from None
    if meta.get("format") != FORMAT_NAME:
        raise ModelFileError(f"{path}: not a tagger model file")
    if meta.get("version") != FORMAT_VERSION:
        raise ModelFileError(
            f"{path}: model file format version {meta.get('version')} is not supported by this "
            f"tagger (it reads version {FORMAT_VERSION}); retrain or use a matching tagger version"
        )
    return meta


def load_model_file(path: str | Path) -> tuple[dict[str, torch.Tensor], dict[str, Any]]:
    """Read and verify a model file; every failure is a ModelFileError naming the file."""
    path = Path(path)
    try:
        blob = path.read_bytes()
    except FileNotFoundError:
        raise ModelFileError(f"{path}: model file not found") from None
    except IsADirectoryError:
        raise ModelFileError(f"{path}: is a folder, not a model file") from None
    meta = _read_header(blob, path)
    try:
        tensors = load_safetensors(blob)
    except (SafetensorError, ValueError, RuntimeError) as error:
        raise ModelFileError(f"{path}: model file is truncated or corrupted ({error})") from None
    if _digest(tensors) != meta["digest"]:
        raise ModelFileError(f"{path}: model file is corrupted (weights do not match their digest)")
    return tensors, meta
