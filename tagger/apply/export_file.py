"""The export file: a model's network as ONNX graphs, with everything tagging needs beside them,
in one file that reads without torch (`tagger export` writes it, `tag --backend onnx` reads it).

Layout, in this order:

    magic      the 15 bytes b"tagger-export\\r\\n" (a CR LF, so a text-mode copy that rewrote
               line ends is caught at once)
    length     8 bytes, little-endian: the size n of the header
    header     n bytes of UTF-8 JSON, a table:
                 "format": "tagger-export", "version": 1,
                 "model": the model file's metadata as saved (config, vocabularies, features,
                          tokenizer settings, calibration, input scheme, ...), read back with
                          the same checks as a model file's,
                 "decoding": null (softmax output) or the CRF's learnt "start" (L), "end" (L) and
                          "transitions" (L x L, from row label to column label) scores and its
                          "start_ok", "end_ok", "transitions_ok" flags (False: forbidden),
                 "weights": "float32" or "int8" (dynamic int8 quantisation of the graphs),
                 "graphs": [{"name": ..., "bytes": size}, ...] in the order their bytes follow,
                 "digest": hex SHA-256 (below)
    graphs     the ONNX bytes of each graph named in the header, back to back; nothing after

The graphs are "characters" (character ids (tokens, chars) -> character features (tokens, F);
models with a character encoder only), "vectors" (each token's rows of the frozen vector table
(tokens, rows) -> its vector (tokens, dim); models with a frozen table only), "char_lm" (a batch
as the character language model reads it -> each token's states (batch, time, 2*hidden); models
reading one only) and "words" (word ids (batch, time), lengths (batch,), and of models that have
them the character features, feature ids (batch, time, slots), vectors and language model states
of each position -> emissions (batch, time, labels)); `tagger.apply.export_graphs` names their
inputs.

The digest covers the canonical JSON of the header without "digest" (keys sorted, ASCII, no
spaces) and each graph's bytes, each part preceded by its length, so an edited label name or a
flipped byte of a graph reads as corrupted. Every refusal is a one-line ModelFileError naming
the file; nothing here imports torch or onnxruntime.
"""

from __future__ import annotations

import hashlib
import json
import os
import stat
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from tagger.data.atomic import atomic_output
from tagger.errors import ModelFileError

MAGIC = b"tagger-export\r\n"
FORMAT_NAME = "tagger-export"
FORMAT_VERSION = 1
MAX_HEADER_BYTES = 256 * 2**20  # as for model files: far above any vocabulary
WEIGHT_KINDS = ("float32", "int8")
# How a model file starts: 8 header bytes, then the safetensors JSON table.
_MODEL_FILE_TABLE = b'{"'


def _canonical(header: Mapping[str, Any]) -> bytes:
    body = {key: value for key, value in header.items() if key != "digest"}
    return json.dumps(body, sort_keys=True, ensure_ascii=True, separators=(",", ":")).encode()


def _digest(header: Mapping[str, Any], graphs: list[bytes]) -> str:
    digest = hashlib.sha256(b"tagger-export digest, format 1\n")
    for part in (_canonical(header), *graphs):
        digest.update(len(part).to_bytes(8, "little"))
        digest.update(part)
    return digest.hexdigest()


def write_export_file(path: str | Path, header: dict[str, Any], graphs: dict[str, bytes]) -> None:
    """Write ``header`` (without format, version, graphs and digest: those are added here) and
    the named graphs, through the one atomic writer."""
    plain = json.loads(json.dumps(header, ensure_ascii=False))
    table = {"format": FORMAT_NAME, "version": FORMAT_VERSION, **plain}
    table["graphs"] = [{"name": name, "bytes": len(data)} for name, data in graphs.items()]
    table["digest"] = _digest(table, list(graphs.values()))
    text = json.dumps(table, ensure_ascii=False).encode()
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    with atomic_output(path, "wb") as out:
        out.write(MAGIC)
        out.write(len(text).to_bytes(8, "little"))
        out.write(text)
        for data in graphs.values():
            out.write(data)


def _read_file(path: Path) -> bytes:
    try:
        if not stat.S_ISREG(os.stat(path).st_mode):
            raise ModelFileError(f"{path}: not a tagger export file (not a regular file)")
        with open(path, "rb") as handle:
            return handle.read()
    except FileNotFoundError:
        raise ModelFileError(f"{path}: export file not found") from None
    except OSError as error:
        raise ModelFileError(f"{path}: export file cannot be read ({error.strerror})") from None


def read_export_file(path: str | Path) -> tuple[dict[str, Any], dict[str, bytes]]:
    """The header and the graphs (name -> ONNX bytes) of an export file, verified."""
    path = Path(path)
    blob = _read_file(path)
    if not blob.startswith(MAGIC):
        if blob[8:10] == _MODEL_FILE_TABLE:
            raise ModelFileError(
                f"{path}: a tagger model file, not an export file; write one with "
                f"tagger export {path} OUT"
            )
        raise ModelFileError(f"{path}: not a tagger export file")
    start = len(MAGIC) + 8
    if len(blob) < start:
        raise ModelFileError(f"{path}: export file is truncated (it ends inside its header)")
    size = int.from_bytes(blob[len(MAGIC) : start], "little")
    if size > MAX_HEADER_BYTES or start + size > len(blob):
        raise ModelFileError(f"{path}: export file is truncated (its header runs past the end)")
    try:
        header = json.loads(blob[start : start + size].decode("utf-8"))
    except (ValueError, UnicodeDecodeError, RecursionError):
        raise ModelFileError(f"{path}: export file is corrupted (its header is not JSON)") from None
    if not isinstance(header, dict) or header.get("format") != FORMAT_NAME:
        raise ModelFileError(f"{path}: not a tagger export file")
    if header.get("version") != FORMAT_VERSION:
        raise ModelFileError(
            f"{path}: export file format version {str(header.get('version'))[:20]} is not "
            f"supported (this tagger reads version {FORMAT_VERSION}); export the model again"
        )
    listed = header.get("graphs")
    if not isinstance(listed, list) or not all(
        isinstance(entry, dict)
        and isinstance(entry.get("name"), str)
        and type(entry.get("bytes")) is int
        and entry["bytes"] >= 0
        for entry in listed
    ):
        raise ModelFileError(f"{path}: export file is corrupted (its list of graphs is garbled)")
    graphs: dict[str, bytes] = {}
    position = start + size
    for entry in listed:
        end = position + entry["bytes"]
        if end > len(blob):
            raise ModelFileError(
                f"{path}: export file is truncated (graph {entry['name'][:40]!r} runs past the end)"
            )
        graphs[entry["name"]] = blob[position:end]
        position = end
    if position != len(blob):
        raise ModelFileError(
            f"{path}: export file is corrupted ({len(blob) - position:,} bytes after the last graph)"
        )
    if header.get("digest") != _digest(header, list(graphs.values())):
        raise ModelFileError(
            f"{path}: export file is corrupted (header or graphs do not match their digest)"
        )
    if header.get("weights") not in WEIGHT_KINDS or not isinstance(header.get("model"), dict):
        raise ModelFileError(f"{path}: export file is corrupted (weights or model missing)")
    return header, graphs
