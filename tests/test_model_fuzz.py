"""The loader under fuzzing: edited header bytes and edited metadata fields, in files of both
formats. Every outcome is a loaded tagger that works or a one-line ModelFileError naming the
file; never another exception, never a network larger than the file, never a large allocation.

Bounded and derandomised (a fixed sequence of examples), so it runs the same in CI every time.
"""

from __future__ import annotations

import copy
import json
import math
import re
import tracemalloc
from collections.abc import Iterator
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import Any

import pytest
import torch
from hypothesis import event, given, settings
from hypothesis import strategies as st
from model_files import SENTENCE, read_parts, tiny_tagger, write_old_format, write_parts

from tagger.apply.tagger import Tagger
from tagger.errors import ModelFileError, TaggerError
from tagger.network.modelfile import save_model_file

FUZZ = settings(max_examples=150, deadline=None, derandomize=True, database=None)
PYTHON_PEAK_LIMIT = 32 * 2**20  # bytes; the files are ~20 KB, a real load of one takes ~1 MB


class Bases(dict[str, bytes]):
    """Model files by name (shown by name only in reports)."""

    def __repr__(self) -> str:
        return f"Bases({', '.join(self)})"


@pytest.fixture(scope="module", autouse=True)
def one_thread() -> Iterator[None]:
    """Tiny networks run fastest on one thread; the process's setting is restored afterwards."""
    before = torch.get_num_threads()
    torch.set_num_threads(1)
    yield
    torch.set_num_threads(before)


@pytest.fixture(scope="module")
def bases(tmp_path_factory: pytest.TempPathFactory) -> Bases:
    """Model files to start from: with a lexicon and word shapes, and a character-RNN softmax
    model; each in the current format and in format 1 (digest over the weights only)."""
    folder = tmp_path_factory.mktemp("bases")
    found = Bases()
    for name, tagger in [
        ("lexicon", tiny_tagger({"fast_kernels": False}, lexicon=True)),
        ("softmax", tiny_tagger({"output": "softmax", "char_encoder": "rnn", "cell": "gru"})),
    ]:
        tagger.save(folder / f"{name}.tagger")
        found[name] = (folder / f"{name}.tagger").read_bytes()
        write_old_format(folder / f"{name}-old.tagger", *read_parts(folder / f"{name}.tagger"))
        found[f"{name}-old"] = (folder / f"{name}-old.tagger").read_bytes()
        # Imports and first-use allocations happen here, untraced.
        Tagger.load(folder / f"{name}-old.tagger").tag(["Anna met Bob."])
    return found


@pytest.fixture(scope="module")
def workdir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


@contextmanager
def _bounded_tensors(limit_bytes: int) -> Iterator[None]:
    """Every tensor made by torch's factories (which build every weight of the network) must
    hold no more bytes than the file it comes from; checked before it is allocated."""

    def bounded(factory: Any) -> Any:
        def make(*size: Any, **options: Any) -> Any:
            dims = size[0] if len(size) == 1 and not isinstance(size[0], int) else size
            dtype = options.get("dtype") or torch.get_default_dtype()
            wanted = math.prod(int(n) for n in dims) * dtype.itemsize
            assert wanted <= limit_bytes, (
                f"a tensor of {wanted:,} bytes from a file of {limit_bytes:,}"
            )
            return factory(*size, **options)

        return make

    with pytest.MonkeyPatch.context() as patch:
        for name in ("empty", "zeros", "ones"):
            patch.setattr(torch, name, bounded(getattr(torch, name)))
        yield


def _outcome(path: Path) -> str:
    """Load `path` as tagging does; "loaded" or "refused", anything else fails the test."""
    tracemalloc.start()
    try:
        with _bounded_tensors(path.stat().st_size):
            try:
                tagger = Tagger.load(path)
            except ModelFileError as error:
                message = str(error)
                assert message.startswith(f"{path}: ") and message.count(str(path)) == 1, message
                assert "\n" not in message and len(message) < len(str(path)) + 400, message
                event(f"refused: {message[len(str(path)) + 2 :][:36]}")
                return "refused"
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < PYTHON_PEAK_LIMIT, (
        f"{peak:,} bytes allocated to load a {path.stat().st_size:,}-byte file"
    )
    event("loaded")
    # A tagger that loads works: it predicts, and tagging fails, if at all, as a tagger error.
    (labels,) = tagger.predict_labels([SENTENCE])
    assert len(labels) == len(SENTENCE)
    with suppress(TaggerError):
        tagger.tag(["Anna met Bob in Oslo. He stayed."])
    return "loaded"


# --- header bytes ------------------------------------------------------------------------------

NUMBERS = [b"0", b"1", b"3", b"-1", b"1000000", b"10000000", b"18446744073709551616", b"1e400",
           b"2.5", b"true", b"null", b'"4"', b"[]", b"{}"]  # fmt: skip
TOKENS = [b"F32", b"BOOL", b"I64", b"B-LOC", b"B-PER", b"O", b"lstm", b"gru", b"crf", b"softmax",
          b"BIOES", b"IOB2", b"cnn", b"none", b"true", b"false", b"items", b"weight"]  # fmt: skip
DEEP = [b"[" * 5000, b'{"a":' * 3000, b"[" * 40 + b"]" * 40, b'\\"' * 10]


def _header_end(data: bytes | bytearray) -> int:
    return min(8 + int.from_bytes(data[:8], "little"), len(data))


def _fix_length(data: bytearray, old_end: int, grown: int) -> None:
    """After the header grew by `grown` bytes, its length field says so (a file cut shorter than
    its length field has no header left to measure: its length becomes 0)."""
    data[:8] = max(0, old_end - 8 + grown).to_bytes(8, "little")


@st.composite
def edited_files(draw: st.DrawFn, bases: Bases) -> bytes:
    data = bytearray(bases[draw(st.sampled_from(sorted(bases)))])
    for _ in range(draw(st.integers(1, 3))):
        end = _header_end(data)
        kind = draw(st.sampled_from(["byte", "number", "token", "length", "cut", "insert"]))
        if kind == "byte" and len(data) > 8:
            data[draw(st.integers(0, min(end + 16, len(data) - 1)))] = draw(
                st.sampled_from(b'{}[]",:\\0 ') | st.integers(0, 255)
            )
        elif kind in ("number", "token"):
            pattern = rb"-?\d+" if kind == "number" else b"|".join(re.escape(t) for t in TOKENS)
            found = list(re.finditer(pattern, bytes(data[8:end])))
            if not found:
                continue
            match = draw(st.sampled_from(found))
            new = draw(st.sampled_from(NUMBERS if kind == "number" else TOKENS))
            data[8 + match.start() : 8 + match.end()] = new
            if draw(st.booleans()):  # mostly keep the header readable
                _fix_length(data, end, len(new) - len(match.group()))
        elif kind == "length":
            data[:8] = draw(st.integers(0, 2**64 - 1) | st.integers(0, len(data))).to_bytes(
                8, "little"
            )
        elif kind == "cut":
            del data[draw(st.integers(0, len(data))) :]
        else:
            at = draw(st.integers(min(8, end), end))
            new = draw(st.binary(max_size=8) | st.sampled_from(DEEP))
            data[at:at] = new
            if draw(st.booleans()):
                _fix_length(data, end, len(new))
    return bytes(data)


@FUZZ
@given(data=st.data())
def test_edited_header_bytes_load_or_are_refused_in_one_line(
    bases: Bases, workdir: Path, data: st.DataObject
) -> None:
    path = workdir / "edited.tagger"
    path.write_bytes(data.draw(edited_files(bases)))
    _outcome(path)


# --- metadata fields ---------------------------------------------------------------------------

TEXT = 'aB0-_. <>"\\/éΩ\u200b\u2028\U0001f600\n'  # a few of each kind of character
WORDS = ["O", "B-", "X-FOO", "B-PER", "S-LOC", "I-ZZZ", "yes", "gru", "softmax", "none", "rnn",
         "IOB2", "BILOU", "<pad>", "<unk>", ""]  # fmt: skip
SIZES = [0, -1, 1, 2, 3, 7, 10**6, 10**7, 2**31, 2**63, 10**30]
SCALARS = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(),
    st.sampled_from(SIZES),
    st.floats(),
    st.text(TEXT, max_size=8),
    st.sampled_from(WORDS),
)
VALUES = st.recursive(
    SCALARS,
    lambda inner: (
        st.lists(inner, max_size=3) | st.dictionaries(st.text(TEXT, max_size=6), inner, max_size=3)
    ),
    max_leaves=6,
)


def _places(value: Any, path: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    """Every place in the metadata (the path to it), each list's first few items only."""
    found = [path] if path else []
    if isinstance(value, dict):
        for key, item in value.items():
            found += _places(item, (*path, key))
    elif isinstance(value, list):
        for index, item in enumerate(value[:4]):
            found += _places(item, (*path, index))
    return found


def _like(original: Any) -> st.SearchStrategy[Any]:
    """Values to put in the place of `original`: mostly of its own kind, any JSON otherwise."""
    if type(original) is int:
        return st.sampled_from(SIZES) | st.integers(-3, 40) | VALUES
    if isinstance(original, str):
        return st.sampled_from(WORDS) | st.text(TEXT, max_size=8) | VALUES
    return VALUES


@st.composite
def edited_metadata(draw: st.DrawFn, meta: dict[str, Any]) -> dict[str, Any]:
    """The metadata with one value replaced, removed, added to or nested deeper."""
    meta = copy.deepcopy(meta)
    *to_parent, key = draw(st.sampled_from(_places(meta)))
    parent: Any = meta
    for step in to_parent:
        parent = parent[step]
    action = draw(st.sampled_from(["replace", "replace", "replace", "remove", "add", "deepen"]))
    if action == "replace":
        parent[key] = draw(_like(parent[key]))
    elif action == "remove":
        del parent[key]
    elif action == "add" and isinstance(parent[key], dict):
        parent[key][draw(st.text(TEXT, max_size=6))] = draw(VALUES)
    elif action == "add" and isinstance(parent[key], list):
        parent[key].insert(
            draw(st.integers(0, len(parent[key]))),
            draw(_like(parent[key][0] if parent[key] else None)),
        )
    elif action == "deepen":
        for _ in range(draw(st.sampled_from([2, 31, 40]))):
            parent[key] = [parent[key]]
    return meta


@FUZZ
@given(data=st.data())
def test_edited_metadata_loads_or_is_refused_in_one_line(
    bases: Bases, workdir: Path, data: st.DataObject
) -> None:
    base = workdir / "base.tagger"
    base.write_bytes(bases[data.draw(st.sampled_from(["lexicon", "softmax"]))])
    tensors, meta = read_parts(base)
    edited = data.draw(edited_metadata(meta))
    path = workdir / "edited.tagger"
    how = data.draw(st.sampled_from(["fresh digest", "old format", "digest kept"]))
    if how == "fresh digest":
        try:
            save_model_file(path, tensors, edited)
        except ModelFileError as error:  # the writer refuses what the reader would
            assert "nested deeper than 32" in str(error)
            return
    elif how == "old format":
        write_old_format(path, tensors, edited)
    else:
        write_parts(path, tensors, edited)
    outcome = _outcome(path)
    if how == "digest kept" and json.dumps(edited, sort_keys=True) != json.dumps(
        meta, sort_keys=True
    ):
        assert outcome == "refused"  # any change to the metadata breaks its digest
