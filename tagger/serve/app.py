"""The routes and their JSON answers (starlette).

    GET  /health   {"alive": true, "waiting_requests": 0, "tagging_texts": 0, ...counts}
    GET  /model    the model's description (`tagger.serve.records.model_description`)
    POST /tag      {"texts": [...], "min_score"?, "review_below"?} ->
                   {"documents": [{"mentions": [...], "needs_review": false}, ...]}, in order

Every refusal is JSON of one shape, {"problem": "one line", "field": "texts[2]" or null}:

    400  the body is not UTF-8 JSON, not an object, a field missing, unknown or of a wrong type
    404  no such route; 405 a route asked with another method (Allow says which)
    408  the body did not arrive within the request timeout
    413  the body, the number of texts or a text's length is over its limit
    422  a text holds a sentence longer than the model's max_sentence_tokens
    503  the queue of waiting requests is full, or the texts were not tagged within the request
         timeout (Retry-After says when to try again)
    500  tagging failed unexpectedly (the service keeps running)
"""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import AsyncIterator, Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from starlette.applications import Starlette
from starlette.exceptions import HTTPException
from starlette.requests import Request
from starlette.responses import JSONResponse, Response
from starlette.routing import Route

from tagger.apply.documents import Skipped
from tagger.apply.tagger import PREDICT_BATCH
from tagger.serve.access_log import AccessLog
from tagger.serve.batching import MicroBatcher, Overloaded
from tagger.serve.records import Tagged, document_record, model_description, text_tagger
from tagger.serve.requests import RequestRefused, read_tag_request
from tagger.serve.settings import ServiceSettings

if TYPE_CHECKING:
    from tagger.apply.tagger import Tagger

ROUTES = "GET /health, GET /model, POST /tag"
RETRY_AFTER = "1"  # seconds; a batch takes milliseconds, so the queue drains well within it


def problem(
    status: int, message: str, field: str | None = None, headers: dict[str, str] | None = None
) -> JSONResponse:
    """A refusal: its status and the one JSON shape every refusal has."""
    return JSONResponse({"problem": message, "field": field}, status, headers)


async def read_body(request: Request, limit: int) -> bytes:
    """The request's body, refused (413) as soon as it is known to exceed `limit` bytes: from its
    Content-Length before reading anything, or while reading a body sent in chunks."""
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > limit:
        raise RequestRefused(
            413,
            f"the body of {int(declared):,} bytes is more than this service's limit of {limit:,}",
        )
    parts, size = [], 0
    async for part in request.stream():
        size += len(part)
        if size > limit:
            raise RequestRefused(
                413, f"the body is more than this service's limit of {limit:,} bytes"
            )
        parts.append(part)
    return b"".join(parts)


class Service:
    """One model served: its tagging behind a micro-batcher, and the ASGI app answering."""

    def __init__(
        self,
        tagger: Tagger,
        model_path: str | Path,
        settings: ServiceSettings,
        tag_texts: Callable[[list[str]], list[Tagged]] | None = None,
        access_log: Callable[[str], None] | None = None,
    ) -> None:
        """``tag_texts`` replaces the model's own text tagging (`text_tagger`), e.g. to wrap it;
        ``access_log`` gets one Common Log Format line per request."""
        self.settings = settings
        self.description = model_description(tagger, model_path, settings)
        self.batcher: MicroBatcher[Tagged] = MicroBatcher(
            tag_texts or text_tagger(tagger, PREDICT_BATCH),
            settings.batch_texts,
            settings.batch_wait_seconds,
            settings.queue_requests,
        )
        app = Starlette(
            # Tried in order: the route nearly every request takes comes first.
            routes=[
                Route("/tag", self.tag, methods=["POST"]),
                Route("/health", self.health, methods=["GET"]),
                Route("/model", self.model, methods=["GET"]),
            ],
            exception_handlers={HTTPException: self.no_route},
            lifespan=self.lifespan,
        )
        self.app: Any = app if access_log is None else AccessLog(app, access_log)

    @contextlib.asynccontextmanager
    async def lifespan(self, app: Starlette) -> AsyncIterator[None]:
        await self.batcher.start()
        try:
            yield
        finally:
            await self.batcher.stop()

    async def health(self, request: Request) -> Response:
        counts = self.batcher.counts
        return JSONResponse(
            {
                "alive": True,
                "waiting_requests": self.batcher.waiting,
                "tagging_texts": counts.tagging,
                "requests_tagged": counts.requests,
                "texts_tagged": counts.texts,
                "batches": counts.batches,
                "largest_batch": counts.largest,
                "refused_busy": counts.refused,
            }
        )

    async def model(self, request: Request) -> Response:
        return JSONResponse(self.description)

    async def tag(self, request: Request) -> Response:
        settings = self.settings
        read = False
        try:
            async with asyncio.timeout(settings.timeout_seconds):
                body = await read_body(request, settings.max_body_bytes)
                read = True
                wanted = read_tag_request(body, settings)
                tagged = await self.batcher.tag(wanted.texts)
        except RequestRefused as refused:
            return problem(refused.status, refused.message, refused.field)
        except Overloaded as busy:
            return problem(
                503,
                f"the service is busy: {busy}; try again shortly",
                headers={"Retry-After": RETRY_AFTER},
            )
        except TimeoutError:
            seconds = f"{settings.timeout_seconds:g} s"
            if not read:
                return problem(
                    408, f"the body did not arrive within the request timeout of {seconds}"
                )
            return problem(
                503,
                f"the texts were not tagged within the request timeout of {seconds}; the service "
                "is busy, try again shortly or send fewer texts",
                headers={"Retry-After": RETRY_AFTER},
            )
        except Exception as error:  # a bug, not the request's fault: say so, keep serving
            return problem(500, f"tagging failed: {type(error).__name__}: {error}")
        documents = []
        for i, entry in enumerate(tagged):
            if isinstance(entry, Skipped):
                return problem(422, f"texts[{i}]: {entry.message}", f"texts[{i}]")
            documents.append(document_record(entry, wanted.min_score, wanted.review_below))
        return JSONResponse({"documents": documents})

    async def no_route(self, request: Request, error: Exception) -> Response:
        assert isinstance(error, HTTPException)
        where = f"{request.method} {request.url.path}"
        if error.status_code == 405:
            return problem(
                405,
                f"{where}: this route takes another method; the routes are {ROUTES}",
                headers=dict(error.headers or {}),
            )
        if error.status_code == 404:
            return problem(404, f"{where}: no such route; the routes are {ROUTES}")
        return problem(error.status_code, f"{where}: {error.detail}")
