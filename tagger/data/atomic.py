"""File output: a regular file is replaced only by a complete new version, anything else (standard
output, a device, a FIFO) is written straight through; one writer at a time in a run folder.

This module owns where output goes and how writing it fails:

* A regular file (or a symbolic link to one: the link is followed and its target replaced) is
  written aside and renamed over the target when complete, so readers see the old file or the
  whole new one, never half of one.
* Standard output ("-"), a device (`/dev/null`), a FIFO, or a link into a process's open files
  (`/dev/stdout`) cannot be replaced by renaming: renaming would put a regular file in place of
  the device, so they are opened and written in place.
* Every failure to write (a missing or read-only folder, a full disk) is an OutputError naming the
  path the user gave, and `check_output` finds what can be found before any work starts.
"""

from __future__ import annotations

import contextlib
import errno
import os
import stat
import sys
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import IO, Any, cast

from tagger.errors import FolderBusyError, OutputError

STDOUT_NAME = "<stdout>"
LOCK_NAME = ".lock"
# How many symbolic links one output path may go through; Linux gives up after 40 (from memory).
LINK_LIMIT = 40


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
    A symbolic link is followed: its target is replaced and the link stays.
    `path` "-" means standard output, and a path that is not a regular file (a device, a FIFO,
    `/dev/stdout`) is written in place (neither can be made atomic).
    `mode` is "w" (text) or "wb" (bytes; `encoding` and `newline` are then ignored).
    Raises OutputError, naming `path`, when the output cannot be written.
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"mode must be 'w' or 'wb', not {mode!r}")
    binary = mode == "wb"
    if str(path) == "-":
        # Whatever the caller printed before must come out before our bytes.
        sys.stdout.flush()
        stream: IO[Any] = sys.stdout.buffer if binary else sys.stdout
        yield _named_output(stream, STDOUT_NAME)
        with _write_errors(STDOUT_NAME):
            stream.flush()
        return
    destination = _destination(path)
    text = {} if binary else {"encoding": encoding, "newline": newline}
    if isinstance(destination, Path):
        with _replaced(destination, str(path), mode, text) as handle:
            yield handle
    else:
        with _written_in_place(path, destination, binary, text) as handle:
            yield handle


@contextlib.contextmanager
def _written_in_place(
    path: str | Path, descriptor: int | None, binary: bool, text: dict[str, Any]
) -> Iterator[IO[Any]]:
    """A device, FIFO or descriptor written directly. One of this process's own descriptors
    (`/dev/stdout`) is written through a copy of it, which shares its place in the file: opening
    the path again would start a second, separate place. Anything else is opened for appending,
    not truncating: a device ignores either, and a file behind a descriptor keeps what it held."""
    name = str(path)
    with _write_errors(name):
        if descriptor is None:
            stream = open(path, "ab" if binary else "a", **text)  # noqa: SIM115 - closed below
        else:
            sys.stdout.flush()  # what was printed before comes out first
            stream = os.fdopen(os.dup(descriptor), "wb" if binary else "w", **text)
    try:
        yield _named_output(stream, name)
        with _write_errors(name):
            stream.close()
    finally:
        with contextlib.suppress(OSError):  # after a failure its own errors would hide it
            stream.close()


@contextlib.contextmanager
def _replaced(final: Path, name: str, mode: str, text: dict[str, Any]) -> Iterator[IO[Any]]:
    """Written aside in `final`'s folder, then renamed over `final` (see `atomic_output`)."""
    try:
        fd, temp_name = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".tmp", dir=final.parent)
    except OSError as error:
        raise _cannot_write(name, _folder_problem(final.parent, error)) from error
    try:
        handle: IO[Any] = os.fdopen(fd, mode, **text)
    except BaseException:
        os.close(fd)
        os.unlink(temp_name)
        raise
    try:
        yield _named_output(handle, name)
        with _write_errors(name):
            handle.flush()
            os.fsync(handle.fileno())
            handle.close()
            # mkstemp creates the file readable by its owner only; give it the permissions the
            # target had, or those a newly created file would get.
            os.chmod(temp_name, _permissions_for(final))
            os.replace(temp_name, final)
    except BaseException:
        with contextlib.suppress(OSError):  # closing flushes again: its error would hide this one
            handle.close()
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temp_name)
        raise
    _sync_folder(final.parent)


def writes_in_place(path: str | Path) -> bool:
    """Is `path` written in place by `atomic_output` (standard output, a device, a FIFO, a
    process's descriptor), rather than replaced by a complete new file?"""
    return str(path) == "-" or not isinstance(_destination(path), Path)


def check_output(path: str | Path) -> None:
    """Refuse, before any work starts, an output file that could not be written: a folder, a
    file in a folder that does not exist or that this process may not write in. Raises
    OutputError naming `path`; a full disk can only show while writing."""
    if str(path) == "-":
        return
    final = _destination(path)
    if not isinstance(final, Path):
        return  # written in place; opening it tells
    # The folder as the user wrote it, unless a link leads elsewhere.
    folder = final.parent if Path(path).is_symlink() else Path(path).parent
    if not final.parent.is_dir():
        raise _cannot_write(str(path), f"the folder {folder} does not exist")
    if not os.access(final.parent, os.W_OK | os.X_OK):
        raise _cannot_write(str(path), f"no permission to write in the folder {folder}")


def refuse_input_as_output(output: str | Path, inputs: Iterable[str | Path]) -> None:
    """Raise OutputError when the regular file `output` is one of `inputs` (the same file by
    device and inode: under another name, through a link, or as standard input), which writing
    the output would replace. Devices and FIFOs are not replaced, so they are let through."""
    if str(output) == "-":
        return
    try:
        written = os.stat(output)
    except OSError:
        return  # not there yet: no input can be it
    if not stat.S_ISREG(written.st_mode):
        return
    for source in inputs:
        read = _stat_input(source)
        if read is not None and (read.st_dev, read.st_ino) == (written.st_dev, written.st_ino):
            shown = "standard input" if str(source) == "-" else f"the input {source}"
            raise _cannot_write(
                str(output),
                f"it is {shown}, which writing the output would replace; "
                "choose another output file",
            )


def _stat_input(source: str | Path) -> os.stat_result | None:
    try:
        if str(source) == "-":
            return os.fstat(sys.stdin.fileno())
        return os.stat(source)
    except (OSError, ValueError, AttributeError):  # stdin replaced or closed: no file to compare
        return None


def _destination(path: str | Path) -> Path | int | None:
    """Where writing `path` goes: the regular file to replace (a Path, there or not yet), one of
    this process's descriptors it leads to (/dev/stdout, /dev/fd/1), or None for anything else
    written in place by name (a device, a FIFO, another process's descriptor)."""
    final = _final_path(path)
    if isinstance(final, int):
        return final
    if final.parts[1:2] == ("proc",) or _is_special(final, path):
        return None
    return final


def _final_path(path: str | Path) -> Path | int:
    """The file `path` names, its folders and symbolic links resolved, or the number of the
    descriptor of this process it leads to. Links into /proc stop the resolving: a descriptor's
    link there names the file behind the descriptor, and writing that file by name would not
    write through the descriptor."""
    current = Path(path)
    for _ in range(LINK_LIMIT):
        current = Path(os.path.realpath(current.parent)) / current.name
        parts = current.parts
        if parts[1:2] == ("proc",):
            own = parts[2:4] == (str(os.getpid()), "fd") and len(parts) == 5
            return int(parts[4]) if own and parts[4].isdigit() else current
        if not current.is_symlink():
            return current
        current = current.parent / os.readlink(current)
    raise _cannot_write(str(path), "too many levels of symbolic links")


def _is_special(final: Path, path: str | Path) -> bool:
    """Is `final` there and not a regular file (a device, a FIFO, a socket)? A folder is refused."""
    try:
        mode = os.stat(final).st_mode
    except OSError:
        return False  # a new file (or an unreadable folder, which creating the file reports)
    if stat.S_ISDIR(mode):
        raise _cannot_write(str(path), "it is a folder")
    return not stat.S_ISREG(mode)


class _NamedOutput:
    """A file object whose failures to write (a full disk, a lost device) are OutputErrors naming
    the user's path; everything else is the file object's own."""

    def __init__(self, stream: IO[Any], name: str) -> None:
        self._stream = stream
        self._name = name

    def write(self, data: Any) -> int:
        with _write_errors(self._name):
            return self._stream.write(data)

    def writelines(self, lines: Iterable[Any]) -> None:
        for line in lines:
            self.write(line)

    def flush(self) -> None:
        with _write_errors(self._name):
            self._stream.flush()

    def __getattr__(self, attribute: str) -> Any:
        return getattr(self._stream, attribute)


def _named_output(stream: IO[Any], name: str) -> IO[Any]:
    return cast(IO[Any], _NamedOutput(stream, name))


@contextlib.contextmanager
def _write_errors(name: str) -> Iterator[None]:
    """OSErrors of writing `name` as OutputError. A closed pipe stays BrokenPipeError: the reader
    went away on purpose (`| head`), which the command line treats apart."""
    try:
        yield
    except BrokenPipeError:
        raise
    except OSError as error:
        raise _cannot_write(name, error) from error


def _cannot_write(name: str, reason: str | OSError) -> OutputError:
    if isinstance(reason, OSError):
        reason = reason.strerror or str(reason)
    return OutputError(f"{name}: cannot write the file: {reason}")


def _folder_problem(folder: Path, error: OSError) -> str:
    """Why no file can be created in `folder`, in the folder's terms."""
    if error.errno == errno.ENOENT:
        return f"the folder {folder} does not exist"
    if error.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        return f"no permission to write in the folder {folder} ({error.strerror})"
    return error.strerror or str(error)


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
    (`flock` on FOLDER/.lock): it ends with the process, however the process ends, so a lock file
    left by a killed run holds nothing. The lock file is removed when the block ends, so a finished
    run leaves none. Where there is no `flock` (not POSIX) the folder is not locked.
    """
    try:
        import fcntl
    except ImportError:
        yield
        return
    lock = Path(folder) / LOCK_NAME
    handle = _locked(lock, folder, fcntl)
    try:
        handle.seek(0)
        handle.truncate()
        handle.write(str(os.getpid()))
        handle.flush()
        yield
    finally:
        # Removed while still held: whoever opens the path next makes a new file and is not
        # left holding the lock of a removed one (see `_locked`).
        with contextlib.suppress(OSError):
            os.unlink(lock)
        fcntl.flock(handle, fcntl.LOCK_UN)
        handle.close()


def _locked(lock: Path, folder: str | Path, fcntl: Any) -> IO[str]:
    """`lock` opened and locked by this process, or FolderBusyError naming its holder."""
    while True:
        handle = open(lock, "a+", encoding="utf-8")  # noqa: SIM115 - returned to the caller
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            handle.seek(0)
            holder = handle.read().strip() or "unknown"
            handle.close()
            raise FolderBusyError(
                f"{folder}: another process (id {holder}) is training in this folder; wait for "
                "it to finish or choose another folder"
            ) from None
        except BaseException:
            handle.close()
            raise
        # The previous holder may have removed the file between our open and our lock: a lock
        # on a file no longer in the folder holds nothing, so open the path again.
        if _same_file(lock, handle):
            return handle
        handle.close()


def _same_file(path: Path, handle: IO[str]) -> bool:
    try:
        named = os.stat(path)
    except FileNotFoundError:
        return False
    held = os.fstat(handle.fileno())
    return (named.st_dev, named.st_ino) == (held.st_dev, held.st_ino)
