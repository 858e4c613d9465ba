"""The service's micro-batcher (tagger/serve/batching.py) on its own: no HTTP, no model; its
tagging function upper-cases texts and can be held at a gate, so which requests share a batch is
reached by the order of events, never by how fast anything runs."""

from __future__ import annotations

import asyncio
import threading

from tagger.serve.batching import MicroBatcher

WAIT = 60.0  # seconds any wait may take before the test fails: generous, never a measurement


class Gate:
    """Upper-cases each batch of texts once `open` is set, and keeps the batches it was given."""

    def __init__(self) -> None:
        self.open = threading.Event()
        self.batches: list[list[str]] = []

    def __call__(self, texts: list[str]) -> list[str]:
        assert self.open.wait(WAIT)
        self.batches.append(list(texts))
        return [text.upper() for text in texts]


async def until(condition) -> None:
    async with asyncio.timeout(WAIT):
        while not condition():
            await asyncio.sleep(0.001)


def test_requests_queued_behind_a_batch_still_wait_for_company() -> None:
    # Two clients that each keep one request in flight: the second's request waits while the
    # first's batch is tagged, longer than the batch wait. When that batch ends, the first client
    # is answered and sends its next request; it joins the second's instead of the two taking
    # turns in batches of one.
    gate = Gate()
    batch_wait = 0.5

    async def clients() -> list:
        batcher = MicroBatcher(gate, batch_texts=2, batch_wait=batch_wait, queue_requests=8)
        await batcher.start()
        try:
            first = asyncio.ensure_future(batcher.tag(["a", "b"]))  # a full batch: tagged at once
            await until(lambda: batcher.counts.tagging == 2)
            second = asyncio.ensure_future(batcher.tag(["c"]))
            await until(lambda: batcher.waiting == 1)
            await asyncio.sleep(2 * batch_wait)  # its wait, counted from its arrival, is over
            gate.open.set()
            answered = [await first]
            third = asyncio.ensure_future(batcher.tag(["d"]))  # the first client, answered
            async with asyncio.timeout(WAIT):
                answered += await asyncio.gather(second, third)
            return answered
        finally:
            await batcher.stop()

    assert asyncio.run(clients()) == [["A", "B"], ["C"], ["D"]]
    assert gate.batches == [["a", "b"], ["c", "d"]]


def test_a_lone_request_is_tagged_after_its_wait_and_a_full_batch_at_once() -> None:
    gate = Gate()
    gate.open.set()

    async def clients() -> tuple[list[str], list[str], int]:
        batcher = MicroBatcher(gate, batch_texts=3, batch_wait=0.01, queue_requests=8)
        await batcher.start()
        try:
            async with asyncio.timeout(WAIT):
                alone = await batcher.tag(["x"])  # nobody comes: tagged once its wait ends
                larger = await batcher.tag(["p", "q", "r", "s"])  # more than a batch: alone
            return alone, larger, batcher.counts.batches
        finally:
            await batcher.stop()

    assert asyncio.run(clients()) == (["X"], ["P", "Q", "R", "S"], 2)
    assert gate.batches == [["x"], ["p", "q", "r", "s"]]
