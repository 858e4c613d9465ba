from __future__ import annotations

import json
import os
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
