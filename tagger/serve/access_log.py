"""One access log line per request in the Common Log Format, an open convention that log tools
read:

    127.0.0.1 - - [06/Mar/2025:14:02:17 +0100] "POST /tag HTTP/1.1" 200 412

(client address, two unused fields, local time, request line, status, bytes of the response
body). A plain ASGI middleware: it watches what the app sends and writes the line when the
request ends; one that ends without a response (the client went away first) has "-" for its
status. Nothing here needs the web framework.
"""

from __future__ import annotations

import datetime
import time
from collections.abc import Awaitable, Callable, MutableMapping
from typing import Any

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
App = Callable[[Scope, Receive, Send], Awaitable[None]]

# English month names whatever the locale, as the format wants them.
MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")


def log_time(moment: datetime.datetime) -> str:
    """`[10/Oct/2000:13:55:36 -0700]` for an aware datetime."""
    offset = moment.strftime("%z") or "+0000"
    return (
        f"[{moment.day:02d}/{MONTHS[moment.month - 1]}/{moment.year:04d}:"
        f"{moment:%H:%M:%S} {offset}]"
    )


class ArrivalClock:
    """The local time now as `log_time` writes it. The format counts whole seconds, and a busy
    service logs many requests in each, so the text is made once a second: reading the local
    time zone and formatting it for every request was a visible share of the event loop's CPU
    per request (benchmarks/serve_profile.md)."""

    def __init__(self, now: Callable[[], float] = time.time) -> None:
        self.now = now
        self._second: int | None = None
        self._text = ""

    def __call__(self) -> str:
        second = int(self.now())
        if second != self._second:
            moment = datetime.datetime.fromtimestamp(second).astimezone()
            self._second, self._text = second, log_time(moment)
        return self._text


def log_line(scope: Scope, status: int | None, size: int, when: str) -> str:
    """One request's line (without its line break); `when` as `log_time` writes it."""
    client = scope.get("client")
    host = client[0] if client else "-"
    target = scope.get("raw_path") or scope.get("path", "").encode()
    if isinstance(target, bytes):
        target = target.decode("latin-1")
    query = scope.get("query_string", b"")
    if query:
        target += "?" + query.decode("latin-1")
    # A request line is quoted: escape what would end the quotes or the line.
    request = f"{scope.get('method', '-')} {target} HTTP/{scope.get('http_version', '1.1')}"
    request = request.replace("\\", "\\\\").replace('"', '\\"')
    return f'{host} - - {when} "{request}" {status or "-"} {size or "-"}'


class AccessLog:
    """Wraps an ASGI app; `write` gets each HTTP request's line."""

    def __init__(self, app: App, write: Callable[[str], None]) -> None:
        self.app = app
        self.write = write
        self.clock = ArrivalClock()

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        when = self.clock()  # the time the request arrived
        status: int | None = None
        size = 0

        async def watching(message: Message) -> None:
            nonlocal status, size
            if message["type"] == "http.response.start":
                status = message["status"]
            elif message["type"] == "http.response.body":
                size += len(message.get("body", b""))
            await send(message)

        try:
            await self.app(scope, receive, watching)
        finally:
            self.write(log_line(scope, status, size, when))
