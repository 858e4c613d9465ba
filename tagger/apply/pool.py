"""The worker-process pool: chunks tagged by several processes, results in input order.

Each worker builds its chunk job once, in the pool's initializer (loading the model once per
process), and then runs it on every chunk it is given. Only a few chunks per worker are in flight
at a time, so memory stays flat however long the input is.
"""

from __future__ import annotations

import multiprocessing
import signal
import threading
from collections import deque
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

from tagger.apply.documents import Item
from tagger.apply.outputs import ChunkResult
from tagger.errors import TaggerError

ChunkJob = Callable[[list[Item]], ChunkResult]
# Builds a worker's job from picklable arguments; a module-level function, so that it pickles.
JobFactory = Callable[..., ChunkJob]

# In each worker process: its job, or why it could not be built.
_JOB: ChunkJob | None = None
_JOB_FAILURE: BaseException | None = None


def _start_worker(factory: JobFactory, args: tuple[Any, ...]) -> None:
    global _JOB, _JOB_FAILURE
    # Ctrl-C reaches every process of the terminal's group: the parent stops the run (and the
    # pool with it); a worker that raised KeyboardInterrupt too would print its own traceback.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        _JOB = factory(*args)
    except BaseException as error:  # a failing initializer would be restarted forever
        _JOB_FAILURE = error


def _run_in_worker(items: list[Item]) -> ChunkResult:
    if _JOB is None:
        raise TaggerError(f"the tagging worker could not start: {_JOB_FAILURE}")
    return _JOB(items)


def pooled(
    workers: int, factory: JobFactory, args: tuple[Any, ...], chunks: Iterator[list[Item]]
) -> Iterator[ChunkResult]:
    """Chunk results in input order from `workers` processes, each running `factory(*args)`.

    Pool.imap would read the whole input ahead into its task queue; a bounded window of
    submitted chunks keeps memory flat and still keeps every worker busy.
    """
    # spawn, not fork: a forked child of a process that has used OpenMP threads can hang.
    context = multiprocessing.get_context("spawn")
    window = 2 * workers
    with _sigint_ignored():  # inherited by the workers from their first instruction
        pool = context.Pool(workers, _start_worker, (factory, args))
    with pool:
        pending: deque[Any] = deque()
        for chunk in chunks:
            pending.append(pool.apply_async(_run_in_worker, (chunk,)))
            if len(pending) >= window:
                yield pending.popleft().get()
        while pending:
            yield pending.popleft().get()


@contextmanager
def _sigint_ignored() -> Iterator[None]:
    """SIGINT ignored while the block runs, in the main thread (only it may set handlers).

    A process started meanwhile inherits the ignored SIGINT, and Python keeps it ignored, so a
    Ctrl-C while a worker is still importing cannot print a traceback either."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
