"""All-or-nothing file output: a target file is replaced only by a complete new version; one
writer at a time in a run folder."""

from __future__ import annotations

import contextlib
import os
import sys
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

from tagger.errors import FolderBusyError


@contextlib.contextmanager
def atomic_output(
    path: str | Path,
    mode: str = "w",
    encoding: str | None = "utf-8",
    newline: str | None = "",
) -> Iterator[IO[Any]]:
    """Open `path` for writing so that readers only ever see the old or the complete new file.

    The block writes to a temporary file in the target's directory (so the final rename stays on
    one file system); the temporary file replaces the target only when the block exits normally.
    On an exception the temporary file is deleted and the target is left untouched.
    The data reach the disk (fsync) before the rename, and the rename itself after it (fsync of
    the folder, where the system allows it), so a crash leaves the old file or the whole new one.
    A new file gets the permissions the umask gives; a replaced one keeps its own.
    `path` "-" means standard output, written directly (it cannot be made atomic).
    `mode` is "w" (text) or "wb" (bytes; `encoding` and `newline` are then ignored).
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"mode must be 'w' or 'wb', not {mode!r}")
    binary = mode == "wb"
    if str(path) == "-":
        # Whatever the caller printed before must come out before our bytes.
        sys.stdout.flush()
        stream: IO[Any] = sys.stdout.buffer if binary else sys.stdout
        yield stream
        stream.flush()
        return

    target = Path(path)
    fd, temp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        if binary:
            handle: IO[Any] = os.fdopen(fd, "wb")
        else:
            handle = os.fdopen(fd, "w", encoding=encoding, newline=newline)
    except BaseException:
        os.close(fd)
        os.unlink(temp_name)
        raise
    try:
        with handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        # mkstemp creates the file readable by its owner only; give it the permissions the
        # target had, or those a newly created file would get.
        os.chmod(temp_name, _permissions_for(target))
        os.replace(temp_name, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temp_name)
        raise
    _sync_folder(target.parent)


def _sync_folder(folder: Path) -> None:
    """Make a rename in `folder` durable; skipped where folders cannot be opened (Windows)."""
    try:
        handle = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(handle)
    except OSError:
        pass  # some file systems refuse fsync on a folder; the data itself is already synced
    finally:
        os.close(handle)


def _permissions_for(target: Path) -> int:
    try:
        return target.stat().st_mode & 0o7777
    except FileNotFoundError:
        # Reading the umask means setting it; put it straight back.
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


@contextlib.contextmanager
def exclusive_folder(folder: str | Path) -> Iterator[None]:
    """Hold `folder` for this process alone while the block runs.

    Two runs writing one folder would overwrite each other's model and checkpoint, so a second
    one is refused with the first one's process id. The lock is the operating system's
    (`flock` on FOLDER/.lock): it ends with the process, however the process ends. Where there is
    no `flock` (not POSIX) the folder is not locked.
    """
    try:
        import fcntl
    except ImportError:
        yield
        return
    lock = Path(folder) / ".lock"
    with open(lock, "a+", encoding="utf-8") as handle:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            handle.seek(0)
            holder = handle.read().strip() or "unknown"
            raise FolderBusyError(
                f"{folder}: another process (id {holder}) is training in this folder; wait for "
                "it to finish or choose another folder"
            ) from None
        handle.seek(0)
        handle.truncate()
        handle.write(str(os.getpid()))
        handle.flush()
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)
