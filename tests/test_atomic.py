"""Tests for tagger.data.atomic: what an output path turns out to be (a regular file replaced whole,
a link followed, a device, a FIFO or a descriptor written in place), the checks made before work
starts, a full disk, an output that is one of the inputs, and the run folder's lock."""

from __future__ import annotations

import errno
import io
import os
import stat
import sys
from pathlib import Path
from typing import Any

import pytest

from tagger.data.atomic import (
    LOCK_NAME,
    atomic_output,
    check_output,
    exclusive_folder,
    refuse_input_as_output,
    writes_in_place,
)
from tagger.errors import FolderBusyError, OutputError

needs_proc = pytest.mark.skipif(
    not Path("/proc/self/fd").is_dir(), reason="no /proc/self/fd on this system"
)


def _temporary_files(*folders: Path) -> list[str]:
    return [p.name for folder in folders for p in folder.iterdir() if p.name.endswith(".tmp")]


# --- what is written in place --------------------------------------------------------------------


def test_a_fifo_is_written_in_place_not_replaced(tmp_path: Path) -> None:
    pipe = tmp_path / "pipe"
    os.mkfifo(pipe)
    # A reading end opened first (without waiting for a writer) lets the writer open at once.
    reader = os.open(pipe, os.O_RDONLY | os.O_NONBLOCK)
    try:
        with atomic_output(pipe) as out:
            out.write("first line\n")
        with atomic_output(pipe, "wb") as out:
            out.write(b"second line\n")
        assert os.read(reader, 1000) == b"first line\nsecond line\n"
    finally:
        os.close(reader)
    assert stat.S_ISFIFO(os.lstat(pipe).st_mode)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["pipe"]


def test_a_symlink_is_followed_and_its_target_replaced(tmp_path: Path) -> None:
    (tmp_path / "data").mkdir()
    real = tmp_path / "data" / "real.txt"
    real.write_text("old\n")
    real.chmod(0o640)
    (tmp_path / "middle.txt").symlink_to(Path("data") / "real.txt")
    link = tmp_path / "out.txt"
    link.symlink_to("middle.txt")  # a link to a link
    with atomic_output(link) as out:
        out.write("new\n")
    assert link.is_symlink() and os.readlink(link) == "middle.txt"
    assert (tmp_path / "middle.txt").is_symlink()
    assert real.read_text() == "new\n"
    assert stat.S_IMODE(real.stat().st_mode) == 0o640  # the target keeps its permissions
    assert _temporary_files(tmp_path, tmp_path / "data") == []


def test_a_dangling_symlink_gets_its_target_made(tmp_path: Path) -> None:
    (tmp_path / "sub").mkdir()
    link = tmp_path / "out.txt"
    link.symlink_to(Path("sub") / "made.txt")
    with atomic_output(link) as out:
        out.write("made\n")
    assert link.is_symlink()
    assert (tmp_path / "sub" / "made.txt").read_text() == "made\n"


def test_a_device_node_is_written_in_place(tmp_path: Path) -> None:
    node = tmp_path / "null"
    try:
        # The character device of /dev/null: major 1, minor 3 on Linux (from memory).
        os.mknod(node, stat.S_IFCHR | 0o666, os.makedev(1, 3))
    except (PermissionError, AttributeError) as error:
        pytest.skip(f"cannot make a device node here ({error}); needs root and mknod")
    except OSError as error:
        pytest.skip(f"cannot make a device node here ({error})")
    before = os.lstat(node)
    with atomic_output(node) as out:
        out.write("discarded\n")
    after = os.lstat(node)
    assert stat.S_ISCHR(after.st_mode) and after.st_rdev == before.st_rdev
    assert after.st_ino == before.st_ino
    assert sorted(p.name for p in tmp_path.iterdir()) == ["null"]


def test_dev_null_is_known_as_written_in_place_without_writing_it() -> None:
    if not Path("/dev/null").exists():
        pytest.skip("no /dev/null on this system")
    # Read-only checks: nothing is written to the system's device.
    assert writes_in_place("/dev/null")
    check_output("/dev/null")  # no folder check: the device is opened, never replaced


def test_what_is_replaced_and_what_is_written_in_place(tmp_path: Path) -> None:
    regular = tmp_path / "a.txt"
    regular.write_text("x")
    os.mkfifo(tmp_path / "pipe")
    (tmp_path / "to_pipe").symlink_to("pipe")
    assert writes_in_place("-")
    assert writes_in_place(tmp_path / "pipe") and writes_in_place(tmp_path / "to_pipe")
    assert not writes_in_place(regular) and not writes_in_place(tmp_path / "new.txt")


@needs_proc
def test_a_descriptor_of_this_process_is_written_through_that_descriptor(tmp_path: Path) -> None:
    target = tmp_path / "log.txt"
    with open(target, "w", encoding="utf-8") as held:
        held.write("before\n")
        held.flush()
        name = f"/proc/self/fd/{held.fileno()}"
        assert writes_in_place(name)
        with atomic_output(name) as out:
            out.write("after\n")
        held.write("later\n")  # the descriptor's place moved on past what was written
    # Opening the path again would have written at offset 0, over "before".
    assert target.read_text() == "before\nafter\nlater\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["log.txt"]


@needs_proc
def test_dev_stdout_names_the_standard_output_descriptor() -> None:
    if not Path("/dev/stdout").is_symlink():
        pytest.skip("/dev/stdout is not a link into /proc here")
    assert writes_in_place("/dev/stdout")
    reading, writing = os.pipe()
    try:
        with atomic_output(f"/dev/fd/{writing}", "wb") as out:
            out.write(b"through the pipe\n")
        assert os.read(reading, 100) == b"through the pipe\n"
    finally:
        os.close(reading)
        os.close(writing)


def test_a_folder_is_not_an_output(tmp_path: Path) -> None:
    with pytest.raises(OutputError, match="it is a folder"), atomic_output(tmp_path):
        pass
    with pytest.raises(OutputError, match="it is a folder"):
        check_output(tmp_path)


# --- checked before work starts; failing while writing -------------------------------------------


def test_a_missing_folder_is_found_before_work_and_named(tmp_path: Path) -> None:
    missing = tmp_path / "nowhere" / "out.txt"
    with pytest.raises(OutputError) as found:
        check_output(missing)
    assert str(found.value) == (
        f"{missing}: cannot write the file: the folder {missing.parent} does not exist"
    )
    # Reaching the writer anyway gives the same path, not the temporary file's name.
    with pytest.raises(OutputError, match="does not exist") as written, atomic_output(missing):
        pass
    assert str(written.value).startswith(f"{missing}: cannot write the file")


def test_a_folder_this_process_may_not_write_in_is_refused(tmp_path: Path) -> None:
    if os.geteuid() == 0:
        pytest.skip("running as root, where folder permissions do not bind")
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        with pytest.raises(OutputError, match="no permission to write in the folder"):
            check_output(folder / "out.txt")
        with (
            pytest.raises(OutputError, match="no permission") as written,
            atomic_output(folder / "out.txt"),
        ):
            pass
        assert str(written.value).startswith(f"{folder / 'out.txt'}: cannot write the file")
    finally:
        folder.chmod(0o755)


def test_a_read_only_folder_simulated(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # The same check where permissions do not bind (root): the system says no write access.
    monkeypatch.setattr(os, "access", lambda path, mode: not mode & os.W_OK)
    with pytest.raises(OutputError) as found:
        check_output(tmp_path / "out.txt")
    assert str(found.value) == (
        f"{tmp_path / 'out.txt'}: cannot write the file: no permission to write in the folder "
        f"{tmp_path}"
    )


def _disk_full(*args: Any) -> None:
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


def test_a_full_disk_at_sync_is_one_error_naming_the_output(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    target = tmp_path / "out.txt"
    target.write_text("old\n")
    monkeypatch.setattr(os, "fsync", _disk_full)
    with pytest.raises(OutputError) as found, atomic_output(target) as out:
        out.write("new\n")
    assert str(found.value) == f"{target}: cannot write the file: {os.strerror(errno.ENOSPC)}"
    assert target.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


class _FullDisk(io.FileIO):
    """A file whose every write finds the disk full."""

    def write(self, data: Any) -> int:
        _disk_full()
        return 0


def test_a_full_disk_while_writing_is_one_error_naming_the_output(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def full_disk_file(fd: int, mode: str, **text: Any) -> Any:
        buffered = io.BufferedWriter(_FullDisk(fd, "w"))
        return buffered if "b" in mode else io.TextIOWrapper(buffered, **text)

    monkeypatch.setattr(os, "fdopen", full_disk_file)
    target = tmp_path / "big.bin"
    with pytest.raises(OutputError) as found, atomic_output(target, "wb") as out:
        out.write(b"x" * 100_000)  # more than the buffer holds: the write itself fails
    assert str(found.value) == f"{target}: cannot write the file: {os.strerror(errno.ENOSPC)}"
    with pytest.raises(OutputError, match="No space left|space"), atomic_output(target) as out:
        out.write("short")  # fails when flushed at the end
    assert list(tmp_path.iterdir()) == []


def test_errors_of_the_callers_own_are_not_taken_for_write_errors(tmp_path: Path) -> None:
    with pytest.raises(FileNotFoundError), atomic_output(tmp_path / "out.txt"):
        open(tmp_path / "absent.txt")  # noqa: SIM115 - the error is the point
    assert list(tmp_path.iterdir()) == []


# --- an output that is one of the inputs -----------------------------------------------------------


def test_an_output_that_is_an_input_is_refused_by_device_and_inode(tmp_path: Path) -> None:
    source = tmp_path / "gold.txt"
    source.write_text("a\tO\n\n")
    os.link(source, tmp_path / "hard.txt")
    (tmp_path / "soft.txt").symlink_to("gold.txt")
    for output in (
        source,
        tmp_path / "hard.txt",
        tmp_path / "soft.txt",
        tmp_path / "." / "gold.txt",
    ):
        with pytest.raises(OutputError) as found:
            refuse_input_as_output(output, [tmp_path / "other.txt", source])
        assert str(found.value).startswith(f"{output}: cannot write the file: it is the input ")
        assert "choose another output file" in str(found.value)
    same_text = tmp_path / "copy.txt"
    same_text.write_text("a\tO\n\n")
    refuse_input_as_output(same_text, [source])  # the same content is another file
    refuse_input_as_output(tmp_path / "new.txt", [source])
    refuse_input_as_output("-", [source, "-"])


def test_an_output_read_as_standard_input_is_refused(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    output = tmp_path / "in.jsonl"
    output.write_text("{}\n")
    with open(output, encoding="utf-8") as redirected:
        monkeypatch.setattr(sys, "stdin", redirected)
        with pytest.raises(OutputError, match="it is standard input"):
            refuse_input_as_output(output, ["-"])


def test_a_device_read_and_written_is_not_refused() -> None:
    if not Path("/dev/null").exists():
        pytest.skip("no /dev/null on this system")
    refuse_input_as_output("/dev/null", ["/dev/null"])  # nothing is replaced


# --- the run folder's lock ------------------------------------------------------------------------


def test_the_lock_file_is_there_while_held_and_gone_after(tmp_path: Path) -> None:
    lock = tmp_path / LOCK_NAME
    with exclusive_folder(tmp_path):
        assert lock.read_text() == str(os.getpid())
    assert not lock.exists()
    with pytest.raises(RuntimeError), exclusive_folder(tmp_path):
        raise RuntimeError("the run failed")
    assert not lock.exists()


def test_a_refused_second_holder_leaves_the_first_ones_lock(tmp_path: Path) -> None:
    lock = tmp_path / LOCK_NAME
    with exclusive_folder(tmp_path):
        with (
            pytest.raises(FolderBusyError, match=f"id {os.getpid()}"),
            exclusive_folder(tmp_path),
        ):
            pass
        assert lock.read_text() == str(os.getpid())
    assert not lock.exists()


def test_a_lock_file_left_by_a_killed_run_holds_nothing(tmp_path: Path) -> None:
    (tmp_path / LOCK_NAME).write_text("99999999")
    with exclusive_folder(tmp_path):
        assert (tmp_path / LOCK_NAME).read_text() == str(os.getpid())
    assert not (tmp_path / LOCK_NAME).exists()


def test_a_lock_file_removed_before_it_was_locked_is_opened_again(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import fcntl

    real_flock = fcntl.flock
    lock = tmp_path / LOCK_NAME
    calls = []

    def previous_holder_leaves(handle: Any, operation: int) -> None:
        # As if the run before ours removed its lock file between our open and our lock.
        if not calls:
            lock.unlink()
        calls.append(operation)
        real_flock(handle, operation)

    monkeypatch.setattr(fcntl, "flock", previous_holder_leaves)
    with exclusive_folder(tmp_path):
        # Holding the removed file would leave the folder open to a second run.
        assert lock.read_text() == str(os.getpid())
    assert not lock.exists()
