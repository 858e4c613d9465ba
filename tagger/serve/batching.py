"""Micro-batching: requests arriving together are tagged in one batch, in one worker thread.

    request --submit--> bounded queue --gather--> batch of texts --worker thread--> results
                        (full: Overloaded)        (<= batch_texts; waits at most batch_wait
                                                   from when the batch could start)

The event loop only queues and answers; the tagging itself runs in a single worker thread, so the
loop stays free to read and answer other requests while a batch is tagged, and batches never run
two at a time (one batch uses every torch thread). While a batch is tagged, new requests gather in
the queue and form the next batch. A batch starts as soon as it is full; otherwise it waits for
company at most `batch_wait`, counted from when it could start: the arrival of its first request,
or the end of the batch before it if that is later. So a lone request waits at most `batch_wait`,
and requests queued behind a batch still wait that long for others: the clients just answered by
that batch send their next requests within it, and a tagging batch costs much less per text when
it is larger (clients that each keep one request in flight otherwise split into two halves that
take turns, each batch half as large as it could be).

A request is never split across batches; one larger than `batch_texts` is tagged alone. A request
whose client gave up (its future cancelled, e.g. on a timeout) is dropped from the queue before
it is tagged. Nothing here knows about HTTP or models: it tags lists of texts with the function it
is given.
"""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Generic, TypeVar

from tagger.errors import TaggerError

Result = TypeVar("Result")


class Overloaded(TaggerError):
    """The queue of waiting requests is full."""


@dataclass
class _Waiting(Generic[Result]):
    texts: Sequence[str]
    future: asyncio.Future[list[Result]]


@dataclass
class BatchCounts:
    """What the batcher has done so far (the health route shows it)."""

    batches: int = 0
    texts: int = 0
    requests: int = 0
    largest: int = 0  # texts in the largest batch
    refused: int = 0  # requests refused with the queue full
    tagging: int = field(default=0)  # texts of the batch being tagged now (0: idle)


class MicroBatcher(Generic[Result]):
    """Gathers the texts of requests into batches for `tag_texts` (texts -> one result each).

    `start` and `stop` run in the event loop that calls `tag`."""

    def __init__(
        self,
        tag_texts: Callable[[list[str]], list[Result]],
        batch_texts: int,
        batch_wait: float,
        queue_requests: int,
    ) -> None:
        self.tag_texts = tag_texts
        self.batch_texts = batch_texts
        self.batch_wait = batch_wait
        self.queue: asyncio.Queue[_Waiting[Result]] = asyncio.Queue(queue_requests)
        self.counts = BatchCounts()
        self._held: _Waiting[Result] | None = None  # taken from the queue, for the next batch
        self._executor: ThreadPoolExecutor | None = None
        self._task: asyncio.Task[None] | None = None

    @property
    def waiting(self) -> int:
        """Requests queued and not yet being tagged."""
        return self.queue.qsize() + (self._held is not None)

    async def start(self) -> None:
        self._executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="tagging")
        self._task = asyncio.get_running_loop().create_task(self._run())

    async def stop(self) -> None:
        """Stop gathering (requests still queued are cancelled) and end the worker thread."""
        if self._task is not None:
            self._task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._task
        for waiting in self._drain():
            waiting.future.cancel()
        if self._executor is not None:
            self._executor.shutdown(wait=True)

    async def tag(self, texts: Sequence[str]) -> list[Result]:
        """One result per text, in order; Overloaded when the queue is full. Cancelling the
        caller (a timeout) drops the request if it has not reached the worker thread yet."""
        loop = asyncio.get_running_loop()
        waiting = _Waiting(texts, loop.create_future())
        try:
            self.queue.put_nowait(waiting)
        except asyncio.QueueFull:
            self.counts.refused += 1
            raise Overloaded(
                f"{self.queue.maxsize} requests are already waiting to be tagged"
            ) from None
        return await waiting.future

    def _drain(self) -> list[_Waiting[Result]]:
        found = [self._held] if self._held is not None else []
        self._held = None
        while not self.queue.empty():
            found.append(self.queue.get_nowait())
        return found

    async def _next(self) -> _Waiting[Result]:
        if self._held is not None:
            held, self._held = self._held, None
            return held
        return await self.queue.get()

    async def _gather(self) -> list[_Waiting[Result]]:
        """The requests of the next batch: the first to arrive, and those that come before its
        wait ends (`batch_wait` from now), while their texts fit in one batch."""
        loop = asyncio.get_running_loop()
        first = await self._next()
        while first.future.done():  # its client gave up while it waited
            first = await self._next()
        batch, size = [first], len(first.texts)
        # Now is the first request's arrival (it was awaited) or the end of the batch before.
        deadline = loop.time() + self.batch_wait
        while size < self.batch_texts:
            if self.queue.empty():
                try:
                    async with asyncio.timeout_at(deadline):
                        following = await self.queue.get()
                except TimeoutError:
                    break
            else:
                following = self.queue.get_nowait()
            if following.future.done():
                continue
            if size + len(following.texts) > self.batch_texts:
                self._held = following
                break
            batch.append(following)
            size += len(following.texts)
        return batch

    async def _run(self) -> None:
        loop = asyncio.get_running_loop()
        while True:
            batch = await self._gather()
            texts = [text for waiting in batch for text in waiting.texts]
            self.counts.tagging = len(texts)
            try:
                results = await loop.run_in_executor(self._executor, self.tag_texts, texts)
            except Exception as error:  # answered to each request of the batch, not raised here
                for waiting in batch:
                    if not waiting.future.done():
                        waiting.future.set_exception(error)
                continue
            finally:
                self.counts.tagging = 0
            self.counts.batches += 1
            self.counts.texts += len(texts)
            self.counts.requests += len(batch)
            self.counts.largest = max(self.counts.largest, len(texts))
            start = 0
            for waiting in batch:
                end = start + len(waiting.texts)
                if not waiting.future.done():
                    waiting.future.set_result(results[start:end])
                start = end
