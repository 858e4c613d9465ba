"""Tagging on a Dask cluster: chunks of documents tagged by the workers of a running scheduler,
results in input order.

This is the only module that imports dask (`distributed`, the optional `cluster` extra). It
stands in for the worker-process pool of `tagger.apply.pool` and nothing else: reading, chunking,
`on_error` and writing stay those of one machine (`tagger.apply.tagging`), so the output bytes
are the same.

    client (tag_files)                     scheduler              workers
    read -> chunk 0, 1, 2, ...  --submit-->  queue  --run-->   job(chunk) -> ChunkResult
    write chunk 0, 1, 2, ... in order  <----------- results -----------'

Each chunk is one task, a pure function of its arguments (the job factory and its arguments, the
model file's path and digest, the chunk): it writes nothing and gives the same result wherever
and however often it runs. So when a worker is lost, the scheduler runs that worker's chunks again
on the others (up to its `allowed-failures` setting) and the output is still whole and in order;
only the lost chunks are tagged twice.

The model is loaded once per worker process, into a cache keyed by the job factory, its arguments
and the model file's SHA-256 digest, and built on a worker the first time one of its tasks needs
it. A cache rather than a worker plugin (`Client.register_plugin`): a plugin is installed on the
cluster and outlives the run unless removed, and two runs with different models would have to
manage plugin names between them; the cache is local to the task's own process, a worker that
joins mid-run (a replacement for a lost one) builds its job the first time it gets a chunk, and
the digest makes a model file rewritten between runs at the same path load again. Every worker
must see the model file at the same path (a shared folder, or the file copied to every machine);
a worker that reads other bytes there refuses the chunk.

A Dask worker starts with MALLOC_TRIM_THRESHOLD_ set (its nanny's default), which makes glibc
hand every large block back to the system as soon as it is freed: each tensor a batch allocates
then costs fresh pages, and on a quiet 2-core machine the workers spent 35% more CPU a token than
one `tag` process. The first chunk a worker process tags sets glibc's thresholds back to the
largest its own adaptive rule reaches (`_keep_freed_memory`), which removed that cost.

At most `WINDOW_PER_THREAD` chunks per worker thread are in flight, so memory on the client stays
flat however long the input; each submitted chunk is released as soon as it is written.
"""

from __future__ import annotations

import ctypes
import hashlib
import importlib.util
import itertools
import os
import pickle
import threading
import uuid
from collections import OrderedDict, deque
from collections.abc import Callable, Hashable, Iterator
from pathlib import Path
from typing import Any

from tagger.apply.documents import Item
from tagger.apply.outputs import ChunkResult
from tagger.errors import ConfigError, TaggerError

ChunkJob = Callable[[list[Item]], ChunkResult]
JobFactory = Callable[..., ChunkJob]  # module level, so that it pickles by reference

PACKAGE = "distributed"
CONNECT_SECONDS = 10.0  # how long to wait for the scheduler to answer before giving up
WINDOW_PER_THREAD = 2  # chunks in flight per worker thread: one running, one queued behind it
CACHED_JOBS = 2  # jobs (loaded models) a worker process keeps, for runs with different models
_READ_BYTES = 1 << 20
# glibc's mallopt parameters (malloc.h) and the largest values its adaptive rule gives them on
# 64-bit systems (32 MB blocks mapped on their own, freed memory kept up to twice that).
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_MMAP_THRESHOLD_MAX = 32 << 20


class ClusterError(TaggerError):
    """The scheduler cannot be reached, or the cluster lost a chunk for good."""


def require_cluster_extra() -> None:
    """ConfigError naming what to install when dask's distributed scheduler is missing."""
    if importlib.util.find_spec(PACKAGE) is None:
        raise ConfigError(
            "tagging on a cluster needs dask's distributed: pip install 'tagger[cluster]'"
        )


def file_digest(path: str | Path) -> str:
    """The SHA-256 of a file's bytes, in hex."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(_READ_BYTES):
            digest.update(block)
    return digest.hexdigest()


# In each worker process: the jobs built so far, newest last.
_JOBS: OrderedDict[Hashable, ChunkJob] = OrderedDict()
_JOBS_LOCK = threading.Lock()  # a worker with several threads runs tasks side by side


def _keep_freed_memory() -> None:
    """Let glibc keep freed memory for the next batch in a worker that was started with
    MALLOC_TRIM_THRESHOLD_ (see the module's docstring); nothing elsewhere (no glibc, or no
    such setting)."""
    if "MALLOC_TRIM_THRESHOLD_" not in os.environ:
        return
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return
    mallopt(_M_MMAP_THRESHOLD, _MMAP_THRESHOLD_MAX)
    mallopt(_M_TRIM_THRESHOLD, 2 * _MMAP_THRESHOLD_MAX)


def _worker_job(model: str, digest: str, factory: JobFactory, args: tuple[Any, ...]) -> ChunkJob:
    """This process's job for (factory, args, digest), built the first time it is asked for."""
    key = (factory, args, digest)
    with _JOBS_LOCK:
        job = _JOBS.get(key)
        if job is not None:
            _JOBS.move_to_end(key)
            return job
        try:
            found = file_digest(model)
        except OSError as error:
            raise ClusterError(
                f"a worker cannot read the model file {model} ({error.strerror or error}): "
                "every worker must see it at the same path"
            ) from None
        if found != digest:
            raise ClusterError(
                f"a worker reads other bytes at {model} than the file given to tag: every "
                "worker must see the same model file at the same path"
            )
        job = factory(*args)
        _keep_freed_memory()
        _JOBS[key] = job
        while len(_JOBS) > CACHED_JOBS:
            _JOBS.popitem(last=False)
        return job


def tag_chunk(
    model: str, digest: str, factory: JobFactory, args: tuple[Any, ...], items: bytes
) -> bytes:
    """The task run on a worker for one chunk: pure, so running it again gives the same result.

    The chunk comes and goes pickled: handed a list of thousands of documents, Dask walks every
    one of them looking for other tasks' results, and a 200,000-character chunk took 0.2 s to go
    to a worker and back; as bytes it passes through untouched in 0.03 s (benchmarks/cluster.md,
    a quiet 2-core machine)."""
    job = _worker_job(model, digest, factory, args)
    return pickle.dumps(job(pickle.loads(items)), protocol=pickle.HIGHEST_PROTOCOL)


class ClusterResults:
    """Chunk results in input order from the workers of the scheduler at `address`.

    Connects when made (so a wrong address fails before any input is read); iterate once, then
    `close` (also when the run stops early: chunks still in flight are cancelled)."""

    def __init__(
        self,
        address: str,
        model: str | Path,
        factory: JobFactory,
        args: tuple[Any, ...],
        chunks: Iterator[list[Item]],
        connect_seconds: float = CONNECT_SECONDS,
    ) -> None:
        require_cluster_extra()
        from distributed import Client

        self.address = address
        self.model = str(Path(model).resolve())
        self.digest = file_digest(self.model)
        self.factory = factory
        self.args = args
        self.chunks = chunks
        self._run = uuid.uuid4().hex[:12]  # task keys of this run, apart from any other's
        try:
            self.client = Client(address, timeout=connect_seconds, set_as_default=False)
        except (OSError, ValueError, TypeError) as error:
            raise ClusterError(
                f"cannot reach a Dask scheduler at {address!r} within {connect_seconds:g} s "
                f"({_first_line(error)})"
            ) from None
        self._pending: deque[Any] = deque()

    def workers(self) -> int:
        """Threads of the cluster's workers now (they may come and go during a run)."""
        return sum(self.client.nthreads().values())

    def __iter__(self) -> Iterator[ChunkResult]:
        for index, chunk in zip(itertools.count(), self.chunks, strict=False):
            self._pending.append(
                self.client.submit(
                    tag_chunk,
                    self.model,
                    self.digest,
                    self.factory,
                    self.args,
                    pickle.dumps(chunk, protocol=pickle.HIGHEST_PROTOCOL),
                    key=f"tagger-chunk-{self._run}-{index}",
                    pure=False,
                )
            )
            if len(self._pending) >= WINDOW_PER_THREAD * max(1, self.workers()):
                yield self._result()
        while self._pending:
            yield self._result()

    def _result(self) -> ChunkResult:
        from distributed import KilledWorker

        future = self._pending.popleft()
        try:
            return pickle.loads(future.result())
        except KilledWorker:
            raise ClusterError(
                "a chunk was lost with every worker that ran it (the scheduler's "
                "allowed-failures): look in the workers' logs for what stopped them"
            ) from None
        except (OSError, TimeoutError) as error:
            raise ClusterError(
                f"lost the Dask scheduler at {self.address!r} ({_first_line(error)})"
            ) from None
        finally:
            del future

    def close(self) -> None:
        pending, self._pending = list(self._pending), deque()
        if pending:
            self.client.cancel(pending)
        self.client.close()


def _first_line(error: BaseException) -> str:
    text = str(error).strip()
    return text.splitlines()[0] if text else type(error).__name__
