"""The single-file model format: safetensors weights with our JSON metadata in its header.

Nothing here unpickles: the file holds tensors and plain JSON, and the network is rebuilt from the
config stored in the metadata. Reading trusts nothing in the file. Before any tensor is made, the
file must be a regular file laid out as safetensors (8-byte header length, a UTF-8 JSON header,
then the tensor bytes), its JSON bounded in size and nesting, every tensor entry of a known type
whose byte range fits the file exactly; then a digest is checked. Every refusal is a one-line
ModelFileError naming the file.

Format versions (the metadata's "version"):

    1   the digest covers the weights only (files written before the metadata digest; still
        read, with a note saying so)
    2   the digest covers the weights and the canonical JSON of every metadata key but
        "digest" itself, so edited metadata (swapped label names, say) reads as corrupted

What the metadata must hold for a tagger model is checked by `tagger.network.metadata`.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import stat
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import torch
from safetensors import SafetensorError
from safetensors.torch import load as load_safetensors
from safetensors.torch import save as save_safetensors

from tagger.data.atomic import atomic_output
from tagger.errors import ModelFileError

FORMAT_NAME = "tagger-model"
FORMAT_VERSION = 2
WEIGHTS_ONLY_DIGEST = 1  # the format version whose digest leaves the metadata out
_META_KEY = "tagger"
RESERVED_KEYS = ("format", "version", "digest")  # written by save_model_file, never by callers

MAX_HEADER_BYTES = 256 * 2**20  # far above any real vocabulary or lexicon, far below a memory hog
MAX_NESTING = 32  # our metadata nests 7 deep (features > lexicons > entries > tokens)
MAX_TENSOR_DIMS = 8  # ours have at most 3

# safetensors element types the loader accepts, with their size in bytes.
_ELEMENT_BYTES = {
    "F64": 8,
    "F32": 4,
    "F16": 2,
    "BF16": 2,
    "I64": 8,
    "I32": 4,
    "I16": 2,
    "I8": 1,
    "U8": 1,
    "BOOL": 1,
}
_HEX_DIGEST = re.compile(r"[0-9a-f]{64}")
# How an export file starts (tagger.apply.export_file.MAGIC, which this stage cannot import).
_EXPORT_FILE = b"tagger-export"
# How torch.save files start: a zip archive, or a bare pickle stream (protocol 2 and later).
_ARCHIVE_OR_PICKLE = (b"PK\x03\x04", b"\x80")


# --- canonical metadata and digests ------------------------------------------------------------


def canonical_json(metadata: Mapping[str, Any]) -> bytes:
    """Every metadata key but "digest", as one canonical JSON text: keys sorted, no spaces,
    ASCII only (so any string, even a lone surrogate from an edited file, has one spelling)."""
    body = {key: value for key, value in metadata.items() if key != "digest"}
    return json.dumps(body, sort_keys=True, ensure_ascii=True, separators=(",", ":")).encode()


def _feed(digest: Any, data: bytes | memoryview) -> None:
    """Length first, so that no two sequences of fields hash alike."""
    digest.update(len(data).to_bytes(8, "little"))
    digest.update(data)


def _tensor_bytes(tensor: torch.Tensor) -> memoryview:
    flat = tensor.detach().contiguous().cpu().reshape(-1)
    return memoryview(flat.view(torch.uint8).numpy()) if flat.numel() else memoryview(b"")


def _digest(tensors: Mapping[str, torch.Tensor], metadata: Mapping[str, Any]) -> str:
    """Format 2: every tensor's name, element type, shape and bytes, then the metadata."""
    digest = hashlib.sha256(b"tagger-model digest, format 2\n")
    for name in sorted(tensors):
        tensor = tensors[name]
        _feed(digest, name.encode())
        _feed(digest, str(tensor.dtype).encode())
        _feed(digest, repr(tuple(tensor.shape)).encode())
        _feed(digest, _tensor_bytes(tensor))
    _feed(digest, canonical_json(metadata))
    return digest.hexdigest()


def _weights_digest(tensors: Mapping[str, torch.Tensor]) -> str:
    """Format 1, exactly as it was written: names, shapes and bytes of the tensors only."""
    digest = hashlib.sha256()
    for name in sorted(tensors):
        tensor = tensors[name]
        digest.update(name.encode())
        digest.update(str(tuple(tensor.shape)).encode())
        digest.update(_tensor_bytes(tensor))
    return digest.hexdigest()


def nesting_depth(value: Any, limit: int = MAX_NESTING) -> int:
    """How deeply lists and tables nest in a JSON value (a scalar is 0), counted without
    recursion and given up on past `limit` (limit + 1 is returned then)."""
    deepest = 0
    stack = [(value, 1)] if isinstance(value, dict | list) else []
    while stack:
        item, depth = stack.pop()
        deepest = max(deepest, depth)
        if deepest > limit:
            return deepest
        children = item.values() if isinstance(item, dict) else item
        stack.extend((child, depth + 1) for child in children if isinstance(child, dict | list))
    return deepest


# --- writing -----------------------------------------------------------------------------------


def save_model_file(
    path: str | Path, tensors: dict[str, torch.Tensor], metadata: dict[str, Any]
) -> None:
    """Write weights and metadata through the one atomic writer (`tagger.data.atomic`): the old
    file or the complete new one, synced to disk, with the permissions any new output gets.

    The metadata is stored as JSON; its "format", "version" and "digest" keys (say, those of a
    file read earlier) are replaced by this writer's own."""
    tensors = {name: t.detach().contiguous().cpu() for name, t in tensors.items()}
    # The digest is taken over the metadata as it will be read back (tuples as lists, ...).
    plain = json.loads(json.dumps(metadata, ensure_ascii=False))
    header = {"format": FORMAT_NAME, "version": FORMAT_VERSION}
    header.update((k, v) for k, v in plain.items() if k not in RESERVED_KEYS)
    if nesting_depth(header) > MAX_NESTING:
        raise ModelFileError(f"{path}: metadata nested deeper than {MAX_NESTING} levels")
    header["digest"] = _digest(tensors, header)
    blob = save_safetensors(tensors, metadata={_META_KEY: json.dumps(header, ensure_ascii=False)})
    if int.from_bytes(blob[:8], "little") > MAX_HEADER_BYTES:
        raise ModelFileError(f"{path}: metadata larger than {MAX_HEADER_BYTES:,} bytes")
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    with atomic_output(path, "wb") as out:
        out.write(blob)


# --- reading -----------------------------------------------------------------------------------


def _read_file(path: Path) -> bytes:
    """The whole file, if it is a regular file (a FIFO or device could block or never end)."""
    try:
        if not stat.S_ISREG(os.stat(path).st_mode):
            if path.is_dir():
                raise ModelFileError(f"{path}: is a folder, not a model file")
            raise ModelFileError(f"{path}: not a tagger model file (not a regular file)")
        with open(path, "rb") as handle:
            return handle.read()
    except FileNotFoundError:
        raise ModelFileError(f"{path}: model file not found") from None
    except PermissionError:
        raise ModelFileError(f"{path}: model file cannot be read (permission denied)") from None
    except OSError as error:
        raise ModelFileError(f"{path}: model file cannot be read ({error.strerror})") from None


def _parse_json(text: bytes | str, path: Path, what: str) -> Any:
    """JSON with its nesting bounded; anything unreadable is "not a tagger model file"."""
    try:
        value = json.loads(text.decode("utf-8") if isinstance(text, bytes) else text)
    except RecursionError:
        raise ModelFileError(
            f"{path}: not a tagger model file ({what} nested too deeply)"
        ) from None
    except (ValueError, UnicodeDecodeError):
        raise ModelFileError(f"{path}: not a tagger model file ({what} is not JSON)") from None
    if nesting_depth(value) > MAX_NESTING:
        raise ModelFileError(
            f"{path}: not a tagger model file ({what} nested deeper than {MAX_NESTING} levels)"
        )
    return value


def _read_header(blob: bytes, path: Path) -> tuple[dict[str, Any], int]:
    """The safetensors JSON header and where the tensor bytes start."""
    if len(blob) < 8:
        raise ModelFileError(f"{path}: not a tagger model file (only {len(blob)} bytes)")
    size = int.from_bytes(blob[:8], "little")
    if blob[8:9] not in (b"{", b""):  # a safetensors header is a JSON table
        if blob.startswith(_EXPORT_FILE):
            raise ModelFileError(
                f"{path}: an export file (from tagger export), not a model file; "
                "only tag --backend onnx reads it"
            )
        if blob.startswith(_ARCHIVE_OR_PICKLE):
            raise ModelFileError(
                f"{path}: not a tagger model file (it looks like a pickle or zip archive, "
                "which tagger never loads)"
            )
        raise ModelFileError(f"{path}: not a tagger model file")
    if size > len(blob) - 8:
        raise ModelFileError(f"{path}: model file is truncated (header runs past the end)")
    if size > MAX_HEADER_BYTES:
        raise ModelFileError(
            f"{path}: not a tagger model file (a header of {size:,} bytes; "
            f"at most {MAX_HEADER_BYTES:,} are read)"
        )
    header = _parse_json(blob[8 : 8 + size], path, "the header")  # a table: it starts with {
    return header, 8 + size


def _read_metadata(header: dict[str, Any], path: Path) -> tuple[dict[str, Any], int]:
    """Our metadata and its format version; refuses other files and other versions."""
    stored = header.get("__metadata__")
    text = stored.get(_META_KEY) if isinstance(stored, dict) else None
    if not isinstance(text, str):
        raise ModelFileError(f"{path}: not a tagger model file (no tagger metadata)")
    meta = _parse_json(text, path, "the tagger metadata")
    if not isinstance(meta, dict) or meta.get("format") != FORMAT_NAME:
        raise ModelFileError(f"{path}: not a tagger model file")
    version = meta.get("version")
    if type(version) is not int or version not in (WEIGHTS_ONLY_DIGEST, FORMAT_VERSION):
        shown = version if type(version) is int else repr(version)[:40]
        raise ModelFileError(
            f"{path}: model file format version {shown} is not supported by this tagger (it "
            f"reads versions {WEIGHTS_ONLY_DIGEST} to {FORMAT_VERSION}); retrain or use a "
            "matching tagger version"
        )
    if not isinstance(meta.get("digest"), str) or not _HEX_DIGEST.fullmatch(meta["digest"]):
        raise ModelFileError(f"{path}: model file is corrupted (its digest is missing or garbled)")
    return meta, version


def _check_tensor_entries(header: dict[str, Any], data_bytes: int, path: Path) -> None:
    """Every tensor entry of the header is of a known type and its bytes tile the data exactly,
    so reading the tensors allocates no more than the file holds."""
    ranges: list[tuple[int, int, str]] = []
    for name, entry in header.items():
        if name == "__metadata__":
            continue
        where = f"{path}: model file is corrupted (tensor {name[:60]!r}"
        if not isinstance(entry, dict) or set(entry) != {"dtype", "shape", "data_offsets"}:
            raise ModelFileError(f"{where} is not described by dtype, shape and data_offsets)")
        dtype, shape, offsets = entry["dtype"], entry["shape"], entry["data_offsets"]
        if not isinstance(dtype, str) or dtype not in _ELEMENT_BYTES:
            raise ModelFileError(f"{where} has an unknown element type {str(dtype)[:20]!r})")
        if (
            not isinstance(shape, list)
            or len(shape) > MAX_TENSOR_DIMS
            or not all(type(n) is int and 0 <= n <= max(data_bytes, 1 << 16) for n in shape)
        ):
            raise ModelFileError(f"{where} has an impossible shape)")
        if (
            not isinstance(offsets, list)
            or len(offsets) != 2
            or not all(type(n) is int for n in offsets)
            or not 0 <= offsets[0] <= offsets[1] <= data_bytes
            or offsets[1] - offsets[0] != math.prod(shape) * _ELEMENT_BYTES[dtype]
        ):
            raise ModelFileError(f"{where} does not fit its bytes in the file)")
        ranges.append((offsets[0], offsets[1], name))
    end = 0
    for start, stop, name in sorted(ranges):
        if start != end:
            raise ModelFileError(
                f"{path}: model file is corrupted (the bytes of tensor {name[:60]!r} "
                "overlap another's or leave a gap)"
            )
        end = stop
    if end != data_bytes:
        raise ModelFileError(
            f"{path}: model file is corrupted ({data_bytes - end:,} bytes after the last tensor)"
        )


def load_model_file(
    path: str | Path, notes: list[str] | None = None
) -> tuple[dict[str, torch.Tensor], dict[str, Any]]:
    """Read and verify a model file; every failure is a one-line ModelFileError naming the file.

    A file of format 1 (written before the digest covered the metadata) is read with a note
    appended to `notes` (when given) saying that its metadata is unchecked.
    """
    path = Path(path)
    blob = _read_file(path)
    header, data_start = _read_header(blob, path)
    meta, version = _read_metadata(header, path)
    _check_tensor_entries(header, len(blob) - data_start, path)
    try:
        tensors = load_safetensors(blob)
    except (SafetensorError, ValueError, RuntimeError, TypeError, KeyError) as error:
        detail = " ".join(str(error).split())[:120]
        raise ModelFileError(f"{path}: model file is truncated or corrupted ({detail})") from None
    if version == WEIGHTS_ONLY_DIGEST:
        if _weights_digest(tensors) != meta["digest"]:
            raise ModelFileError(
                f"{path}: model file is corrupted (weights do not match their digest)"
            )
        if notes is not None:
            notes.append(
                f"{path}: the model file predates the metadata digest (format version "
                f"{WEIGHTS_ONLY_DIGEST}): its weights are verified, its metadata only checked; "
                "saving the model again adds the digest"
            )
    elif _digest(tensors, meta) != meta["digest"]:
        raise ModelFileError(
            f"{path}: model file is corrupted (weights or metadata do not match their digest)"
        )
    return tensors, meta
