"""Starting a run safely: what is checked before any work, and the run folder's life.

* The files the config names (training and dev files, lexicons, word vectors) must be readable
  before anything is made or read at length (`check_named_files`).
* The run folder, and any folder missing on the way to it, is made, then held by this process
  alone (`exclusive_folder`, a lock file removed when the run ends).
* A folder that holds a run is not trained into again by accident: a finished run is replaced
  only with `overwrite`; an unfinished one is continued with `resume` or replaced with
  `overwrite`. The earlier run's files go only when the new run is about to write its first
  file (`RunFolder.begin`), so a start that fails keeps them.
* A start that fails leaves behind no folder it made and no lock file.
* A folder written by the release before this one holds the same files under earlier names
  (`tagger.training.records.EARLIER_NAMES`): it counts as a run all the same, `overwrite`
  removes those files too, and `resume` renames them to the new names once, before anything is
  read, so that the run reads and writes only the new names (`RunFolder.renamed` lists them).
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from tagger.config import Config
from tagger.data.atomic import exclusive_folder
from tagger.data.io import check_readable
from tagger.errors import ConfigError, OutputError
from tagger.training.records import (
    CHECKPOINT_NAME,
    EARLIER_NAMES,
    MODEL_NAME,
    OUTCOME_NAME,
    RECORD_NAMES,
)

# Every file a run writes, and so every file that replacing a run removes; nothing else in the
# folder (the user's own files, predictions written there) is touched.
RUN_FILES = (MODEL_NAME, CHECKPOINT_NAME, *RECORD_NAMES)


def check_named_files(config: Config, data_files: bool = True) -> None:
    """DataError naming the first file the config names that cannot be opened for reading.
    `data_files` False leaves out data.train and data.dev (training on sentences in memory)."""
    named: list[tuple[str, str]] = []
    if data_files:
        named += [(config.data.train, "training file"), (config.data.dev, "dev file")]
    named += [(path, "lexicon") for path in config.model.lexicons]
    named.append((config.model.pretrained_vectors, "word vectors file"))
    named.append((config.model.char_lm, "character language model file"))
    for path, what in named:
        if path:
            check_readable(path, what)


@dataclass(frozen=True)
class RunFolder:
    """A run folder held by this process, checked for an earlier run."""

    path: Path
    overwrite: bool
    renamed: tuple[str, ...] = ()  # files under earlier names that resuming renamed

    def begin(self) -> None:
        """Called just before the run writes its first file: with `overwrite`, the earlier
        run's files are removed, so that none of them is left beside the new run's."""
        if self.overwrite:
            for name in (*RUN_FILES, *EARLIER_NAMES):
                (self.path / name).unlink(missing_ok=True)

    def renamed_note(self) -> str:
        """One line saying which files of an earlier release's run folder were renamed."""
        return (
            f"{self.path} uses the earlier file names ({', '.join(self.renamed)}); they are "
            f"renamed once to the new names ({', '.join(EARLIER_NAMES[n] for n in self.renamed)})"
        )


@contextlib.contextmanager
def run_folder(path: Path, resume: bool = False, overwrite: bool = False) -> Iterator[RunFolder]:
    """Make and hold the run folder `path` while the block runs; see the module's rules.

    Raises OutputError when the folder cannot be made or written, or holds a run that neither
    `resume` nor `overwrite` allows for; FolderBusyError when another process trains in it."""
    if resume and overwrite:
        raise ConfigError(
            "resume continues the run in the folder and overwrite replaces it: choose one"
        )
    made = _make_folder(path)
    try:
        with exclusive_folder(path):
            _refuse_an_earlier_run(path, resume, overwrite)
            renamed = _rename_earlier_files(path) if resume else ()
            yield RunFolder(path, overwrite, renamed)
    except BaseException:
        _remove_if_empty(made)
        raise


def _make_folder(path: Path) -> list[Path]:
    """Make `path` and the folders missing on the way; returns those it made, outermost first."""
    missing: list[Path] = []
    current = path
    while not current.exists() and not current.is_symlink() and current != current.parent:
        missing.append(current)
        current = current.parent
    try:
        path.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise OutputError(f"{path}: cannot make the run folder: a file has that name") from None
    except OSError as error:
        raise OutputError(f"{path}: cannot make the run folder: {error.strerror}") from None
    if not os.access(path, os.W_OK | os.X_OK):
        raise OutputError(f"{path}: cannot write in the run folder: permission denied")
    return missing[::-1]


def _remove_if_empty(made: list[Path]) -> None:
    """Remove the folders this run made, innermost first, as long as they are empty."""
    for folder in reversed(made):
        try:
            folder.rmdir()
        except OSError:
            return


def _rename_earlier_files(path: Path) -> tuple[str, ...]:
    """Give the files of an earlier release's run their new names; the earlier names renamed.
    A file whose new name is taken already stays as it is (the new one is the later)."""
    renamed = []
    for earlier, now in EARLIER_NAMES.items():
        if (path / earlier).is_file() and not (path / now).exists():
            try:
                os.replace(path / earlier, path / now)
            except OSError as error:
                raise OutputError(
                    f"{path / earlier}: cannot rename it to {now}: {error.strerror}"
                ) from None
            renamed.append(earlier)
    return tuple(renamed)


def _held_names(path: Path, names: tuple[str, ...]) -> list[str]:
    """Those of `names` in the folder, under the new names or the earlier ones."""
    earlier = {now: old for old, now in EARLIER_NAMES.items()}
    held = []
    for name in names:
        if (path / name).exists():
            held.append(name)
        elif name in earlier and (path / earlier[name]).exists():
            held.append(earlier[name])
    return held


def _refuse_an_earlier_run(path: Path, resume: bool, overwrite: bool) -> None:
    if resume or overwrite:
        return
    held = _held_names(path, (MODEL_NAME, CHECKPOINT_NAME, OUTCOME_NAME))
    if not held:
        return
    files = ", ".join(held)
    finished = (OUTCOME_NAME, "metrics.json")
    unfinished = (CHECKPOINT_NAME, "checkpoint.tagger")
    if any(name in held for name in finished):
        raise OutputError(
            f"{path} holds a finished run ({files}): replace it with --overwrite, "
            "or train into another folder with --out"
        )
    if any(name in held for name in unfinished):
        raise OutputError(
            f"{path} holds an unfinished run ({files}): continue it with --resume, "
            "replace it with --overwrite, or train into another folder with --out"
        )
    raise OutputError(
        f"{path} holds a model ({files}): replace it with --overwrite, "
        "or train into another folder with --out"
    )
