from __future__ import annotations

import json
import os
import re
import stat
from pathlib import Path

import pytest
import torch

from tagger.errors import ModelFileError, OutputError
from tagger.network.modelfile import FORMAT_VERSION, load_model_file, save_model_file


def _save(path: Path) -> dict[str, torch.Tensor]:
    tensors = {
        "w": torch.randn(4, 3, generator=torch.Generator().manual_seed(0)),
        "ids": torch.arange(7),
    }
    save_model_file(path, tensors, {"config": {"model": {"cell": "gru"}}, "labels": ["O", "B-X"]})
    return tensors


def test_round_trip_keeps_tensors_and_metadata(tmp_path: Path) -> None:
    tensors = _save(tmp_path / "m.tagger")
    loaded, meta = load_model_file(tmp_path / "m.tagger")
    assert meta["labels"] == ["O", "B-X"] and meta["config"]["model"]["cell"] == "gru"
    for name, tensor in tensors.items():
        assert torch.equal(loaded[name], tensor)


def test_file_is_plain_safetensors_without_pickle(tmp_path: Path) -> None:
    _save(tmp_path / "m.tagger")
    blob = (tmp_path / "m.tagger").read_bytes()
    header = json.loads(blob[8 : 8 + int.from_bytes(blob[:8], "little")])
    assert set(header) == {"__metadata__", "w", "ids"}
    assert b"\x80\x04" not in blob[:2]  # a pickle stream starts with its protocol opcode


@pytest.mark.parametrize("keep", [0, 5, 40, -3])
def test_truncated_file_is_a_clear_error(tmp_path: Path, keep: int) -> None:
    _save(tmp_path / "m.tagger")
    blob = (tmp_path / "m.tagger").read_bytes()
    (tmp_path / "m.tagger").write_bytes(blob[:keep])
    with pytest.raises(ModelFileError, match="m.tagger"):
        load_model_file(tmp_path / "m.tagger")


def test_flipped_weight_byte_is_detected(tmp_path: Path) -> None:
    _save(tmp_path / "m.tagger")
    blob = bytearray((tmp_path / "m.tagger").read_bytes())
    blob[-20] ^= 0x55
    (tmp_path / "m.tagger").write_bytes(bytes(blob))
    with pytest.raises(ModelFileError, match="corrupted"):
        load_model_file(tmp_path / "m.tagger")


def test_other_version_is_refused(tmp_path: Path) -> None:
    _save(tmp_path / "m.tagger")
    blob = (tmp_path / "m.tagger").read_bytes()
    old = f'\\"version\\": {FORMAT_VERSION}'.encode()
    assert old in blob
    (tmp_path / "m.tagger").write_bytes(blob.replace(old, b'\\"version\\": 9'))
    with pytest.raises(ModelFileError, match="version 9 is not supported"):
        load_model_file(tmp_path / "m.tagger")


def test_not_a_model_file(tmp_path: Path) -> None:
    (tmp_path / "notes.txt").write_text("hello world, this is not a model")
    with pytest.raises(ModelFileError, match="not a tagger model file|truncated"):
        load_model_file(tmp_path / "notes.txt")
    with pytest.raises(ModelFileError, match="not found"):
        load_model_file(tmp_path / "absent.tagger")


# --- written through the atomic writer ----------------------------------------------------------


@pytest.mark.parametrize("umask", [0o022, 0o077, 0o027], ids=["022", "077", "027"])
def test_a_new_model_file_gets_the_permissions_of_any_new_file(tmp_path: Path, umask: int) -> None:
    previous = os.umask(umask)
    try:
        _save(tmp_path / "m.tagger")
        (tmp_path / "plain.txt").write_text("x")  # what open() gives under the same umask
    finally:
        os.umask(previous)
    mode = (tmp_path / "m.tagger").stat().st_mode & 0o777
    assert mode == 0o666 & ~umask
    assert mode == (tmp_path / "plain.txt").stat().st_mode & 0o777


def test_saving_over_a_model_file_keeps_its_permissions(tmp_path: Path) -> None:
    _save(tmp_path / "m.tagger")
    (tmp_path / "m.tagger").chmod(0o640)
    _save(tmp_path / "m.tagger")
    assert (tmp_path / "m.tagger").stat().st_mode & 0o777 == 0o640
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.tagger"]  # no temporary left


def test_the_model_is_synced_before_it_replaces_the_old_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    target = tmp_path / "m.tagger"
    target.write_bytes(b"old")
    synced: list[tuple[str, bytes]] = []
    real_fsync = os.fsync

    def recording_fsync(fd: int) -> None:
        kind = "folder" if stat.S_ISDIR(os.fstat(fd).st_mode) else "file"
        synced.append((kind, target.read_bytes()))
        real_fsync(fd)

    monkeypatch.setattr(os, "fsync", recording_fsync)
    _save(target)
    # The new bytes are synced while the target still holds the old ones; then the folder,
    # once the rename has happened.
    assert [(kind, content == b"old") for kind, content in synced] == [
        ("file", True),
        ("folder", False),
    ]
    assert synced[-1][1] == target.read_bytes()
    assert load_model_file(target)[1]["labels"] == ["O", "B-X"]


def test_a_failed_save_leaves_the_old_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    target = tmp_path / "m.tagger"
    _save(target)
    before = target.read_bytes()

    def failing_fsync(fd: int) -> None:
        raise OSError(5, "Input/output error")

    monkeypatch.setattr(os, "fsync", failing_fsync)
    with pytest.raises(OutputError) as failed:  # an OSError named by the file it concerns
        save_model_file(target, {"w": torch.zeros(2)}, {"labels": ["O"]})
    assert str(failed.value) == f"{target}: cannot write the file: Input/output error"
    assert target.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.tagger"]


# --- a reader that trusts nothing in the file ----------------------------------------------------


def _header_of(blob: bytes) -> dict:
    return json.loads(blob[8 : 8 + int.from_bytes(blob[:8], "little")])


def _with_header(blob: bytes, header: dict | bytes) -> bytes:
    """The file with its safetensors header replaced (tensor bytes unchanged)."""
    old_end = 8 + int.from_bytes(blob[:8], "little")
    text = header if isinstance(header, bytes) else json.dumps(header).encode()
    return len(text).to_bytes(8, "little") + text + blob[old_end:]


def _with_metadata(blob: bytes, meta: dict | str) -> bytes:
    header = _header_of(blob)
    header["__metadata__"]["tagger"] = meta if isinstance(meta, str) else json.dumps(meta)
    return _with_header(blob, header)


def _meta_of(blob: bytes) -> dict:
    return json.loads(_header_of(blob)["__metadata__"]["tagger"])


@pytest.fixture
def blob(tmp_path: Path) -> bytes:
    _save(tmp_path / "m.tagger")
    return (tmp_path / "m.tagger").read_bytes()


def _refused(path: Path, content: bytes, pattern: str) -> None:
    path.write_bytes(content)
    with pytest.raises(ModelFileError) as caught:
        load_model_file(path)
    message = str(caught.value)
    assert message.startswith(f"{path}: ") and "\n" not in message and len(message) < 400
    assert re.search(pattern, message), message


@pytest.mark.parametrize("legacy", [False, True], ids=["zip", "bare-pickle"])
def test_a_torch_save_file_is_not_a_model_file(tmp_path: Path, legacy: bool) -> None:
    path = tmp_path / "weights.tagger"
    torch.save({"w": torch.zeros(3)}, path, _use_new_zipfile_serialization=not legacy)
    with pytest.raises(ModelFileError, match="not a tagger model file .*pickle") as caught:
        load_model_file(path)
    assert "truncated" not in str(caught.value)


def test_only_regular_files_are_read(tmp_path: Path) -> None:
    fifo = tmp_path / "pipe.tagger"
    os.mkfifo(fifo)  # opening it would block until a writer came
    with pytest.raises(ModelFileError, match="not a regular file"):
        load_model_file(fifo)
    (tmp_path / "link.tagger").symlink_to(fifo)
    with pytest.raises(ModelFileError, match="not a regular file"):
        load_model_file(tmp_path / "link.tagger")
    with pytest.raises(ModelFileError, match="is a folder"):
        load_model_file(tmp_path)
    if Path("/dev/null").exists():  # a device: read as it stands it would be "0 bytes"
        with pytest.raises(ModelFileError, match="not a regular file"):
            load_model_file("/dev/null")


@pytest.mark.parametrize(
    "depth, pattern", [(40, "nested deeper than 32 levels"), (100_000, "nested too deeply")]
)
def test_deeply_nested_metadata_is_refused(
    tmp_path: Path, blob: bytes, depth: int, pattern: str
) -> None:
    meta = _meta_of(blob)
    text = json.dumps(meta)[:-1] + ', "deep": ' + "[" * depth + "]" * depth + "}"
    _refused(tmp_path / "m.tagger", _with_metadata(blob, text), pattern)


def test_a_deeply_nested_header_is_refused(tmp_path: Path, blob: bytes) -> None:
    header = json.dumps(_header_of(blob))
    deep = header[:-1] + ', "deep": ' + "[" * 100_000 + "]" * 100_000 + "}"
    _refused(tmp_path / "m.tagger", _with_header(blob, deep.encode()), "nested too deeply")


def test_saving_refuses_metadata_it_could_not_read_back(tmp_path: Path) -> None:
    nested: list = []
    for _ in range(40):
        nested = [nested]
    with pytest.raises(ModelFileError, match="nested deeper than 32"):
        save_model_file(tmp_path / "m.tagger", {"w": torch.zeros(2)}, {"deep": nested})
    assert not (tmp_path / "m.tagger").exists()


HEADER_CASES = [
    (lambda h: h["w"].update(dtype="F7"), r"tensor 'w' has an unknown element type"),
    (lambda h: h["w"].update(shape=[4, 3000]), r"tensor 'w' does not fit its bytes"),
    (lambda h: h["w"].update(shape=[0, 3000000]), r"tensor 'w' has an impossible shape"),
    (lambda h: h["w"].update(shape=[4, -3]), r"tensor 'w' has an impossible shape"),
    (lambda h: h["w"].update(shape=[4, 3.0]), r"tensor 'w' has an impossible shape"),
    (lambda h: h["w"].update(shape=[12, True]), r"tensor 'w' has an impossible shape"),
    (lambda h: h["w"].update(shape=[1] * 9 + [12]), r"tensor 'w' has an impossible shape"),
    (lambda h: h["w"].update(data_offsets=[0, 2**70]), r"tensor 'w' does not fit its bytes"),
    (lambda h: h["w"].pop("dtype"), r"tensor 'w' is not described"),
    (lambda h: h.update(extra=[1, 2]), r"tensor 'extra' is not described"),
    (lambda h: h["w"].update(data_offsets=[8, 56]), r"overlap another's or leave a gap"),
    (lambda h: h.update(__metadata__={"other": "x"}), r"not a tagger model file \(no tagger metadata\)"),
    (lambda h: h.update(__metadata__=[1]), r"not a tagger model file \(no tagger metadata\)"),
]  # fmt: skip


@pytest.mark.parametrize("edit, pattern", HEADER_CASES)
def test_tensor_entries_must_tile_the_file(
    tmp_path: Path, blob: bytes, edit: object, pattern: str
) -> None:
    header = _header_of(blob)
    edit(header)
    _refused(tmp_path / "m.tagger", _with_header(blob, header), pattern)


def test_bytes_after_the_last_tensor_are_refused(tmp_path: Path, blob: bytes) -> None:
    _refused(tmp_path / "m.tagger", blob + b"\0" * 16, "16 bytes after the last tensor")


@pytest.mark.parametrize(
    "content, pattern",
    [
        (b"\xff" * 8 + b"{}", "truncated"),
        ((3).to_bytes(8, "little") + b"{\xff}", r"header is not JSON"),
        ((2).to_bytes(8, "little") + b"[]", r"not a tagger model file$"),
        ((2).to_bytes(8, "little") + b"{}", r"no tagger metadata"),
    ],
)
def test_headers_that_are_not_ours(tmp_path: Path, content: bytes, pattern: str) -> None:
    _refused(tmp_path / "m.tagger", content, pattern)


@pytest.mark.parametrize(
    "change, pattern",
    [
        ({"version": "2"}, r"format version '2' is not supported"),
        ({"version": True}, r"format version True is not supported"),
        ({"version": 3}, r"format version 3 is not supported"),
        ({"format": "other"}, r"not a tagger model file$"),
        ({"digest": "abc"}, r"corrupted \(its digest is missing or garbled\)"),
        ({"digest": None}, r"corrupted \(its digest is missing or garbled\)"),
    ],
)
def test_format_version_and_digest_fields(
    tmp_path: Path, blob: bytes, change: dict, pattern: str
) -> None:
    _refused(tmp_path / "m.tagger", _with_metadata(blob, {**_meta_of(blob), **change}), pattern)
    _refused(tmp_path / "m.tagger", _with_metadata(blob, "[1, 2]"), r"not a tagger model file$")
    _refused(tmp_path / "m.tagger", _with_metadata(blob, "{nope"), r"metadata is not JSON")


def test_the_digest_covers_the_metadata(tmp_path: Path, blob: bytes) -> None:
    meta = _meta_of(blob)
    assert meta["version"] == 2
    meta["labels"] = ["B-X", "O"]  # swapped, the digest kept
    _refused(tmp_path / "m.tagger", _with_metadata(blob, meta), "corrupted .*metadata")


def test_the_digest_reads_the_metadata_in_canonical_form(tmp_path: Path, blob: bytes) -> None:
    # Other key order and spacing spell the same metadata: the digest still matches.
    meta = _meta_of(blob)
    respelled = json.dumps(dict(reversed(list(meta.items()))), indent=3)
    (tmp_path / "m.tagger").write_bytes(_with_metadata(blob, respelled))
    assert load_model_file(tmp_path / "m.tagger")[1] == meta


def test_the_writer_owns_format_version_and_digest(tmp_path: Path) -> None:
    save_model_file(
        tmp_path / "m.tagger",
        {"w": torch.ones(2)},
        {"format": "x", "version": 7, "digest": "0" * 64, "limit": float("inf"), "n": 1},
    )
    meta = load_model_file(tmp_path / "m.tagger")[1]
    assert (meta["format"], meta["version"], meta["limit"], meta["n"]) == (
        "tagger-model",
        FORMAT_VERSION,
        float("inf"),
        1,
    )


def test_a_file_of_format_1_loads_with_a_note(tmp_path: Path) -> None:
    from model_files import write_old_format

    tensors = {"w": torch.arange(6.0).reshape(2, 3)}
    write_old_format(tmp_path / "old.tagger", tensors, {"labels": ["O", "B-X"]})
    notes: list[str] = []
    loaded, meta = load_model_file(tmp_path / "old.tagger", notes)
    assert torch.equal(loaded["w"], tensors["w"]) and meta["labels"] == ["O", "B-X"]
    assert notes == [
        f"{tmp_path / 'old.tagger'}: the model file predates the metadata digest (format "
        "version 1): its weights are verified, its metadata only checked; saving the model "
        "again adds the digest"
    ]
    # Its digest still guards the weights.
    blob = bytearray((tmp_path / "old.tagger").read_bytes())
    blob[-1] ^= 0x40
    _refused(tmp_path / "old.tagger", bytes(blob), "weights do not match their digest")
