"""Listening on a socket and stopping gracefully (uvicorn).

The socket is bound here, before the server starts, so that a port in use or an address the
machine does not have is one clear error, and port 0 (any free port) is known at once. Ctrl-C or
SIGTERM stops accepting connections, lets requests in flight finish (at most the request timeout
and a second more), then ends the tagging thread; uvicorn raises the signal again once it is
done, for the caller to see how the service was stopped.

HTTP is parsed by httptools and the event loop is uvloop's when both are installed (the `serve`
extra asks for them): C in place of h11's and asyncio's Python, about half the event loop's CPU
per request (benchmarks/serve.md). Without them uvicorn's pure-Python parts serve the same
answers; `speedups=False` asks for those even when the others are installed.
"""

from __future__ import annotations

import ipaddress
import socket
from collections.abc import Callable

import uvicorn

from tagger.errors import TaggerError
from tagger.serve.app import Service

LOOPBACK = "127.0.0.1"


class ListenError(TaggerError):
    """An address or port the service cannot listen on."""


def is_loopback(host: str) -> bool:
    """Does `host` accept connections from this machine only?"""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def url(host: str, port: int) -> str:
    return f"http://[{host}]:{port}" if ":" in host else f"http://{host}:{port}"


def bind(host: str, port: int) -> socket.socket:
    """A socket bound to (host, port); port 0 takes any free port."""
    try:
        family, kind, proto, _, address = socket.getaddrinfo(
            host, port, type=socket.SOCK_STREAM, flags=socket.AI_PASSIVE
        )[0]
    except (OSError, UnicodeError) as error:
        raise ListenError(
            f"cannot listen on {host!r}: not an address of this machine ({error})"
        ) from None
    sock = socket.socket(family, kind, proto)
    # The port can be taken again at once after a restart, while old connections linger.
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind(address)
    except OSError as error:
        sock.close()
        raise ListenError(
            f"cannot listen on {url(host, port)}: {error.strerror or error}"
        ) from None
    return sock


class _Server(uvicorn.Server):
    """uvicorn's server, saying where it listens once it accepts connections."""

    def __init__(self, config: uvicorn.Config, on_listening: Callable[[], None]) -> None:
        super().__init__(config)
        self.on_listening = on_listening

    async def startup(self, sockets: list[socket.socket] | None = None) -> None:
        await super().startup(sockets)
        if self.started:
            self.on_listening()


def server_for(
    service: Service,
    sock: socket.socket,
    on_listening: Callable[[str], None],
    speedups: bool = True,
) -> tuple[_Server, Callable[[], None]]:
    """The server of `service` on a bound socket, and the function that runs it until stopped;
    `on_listening` gets the URL once connections are accepted. With `speedups`, httptools and
    uvloop when they are installed ("auto": uvicorn falls back to h11 and asyncio without them)."""
    host, port = sock.getsockname()[:2]
    config = uvicorn.Config(
        service.app,
        http="auto" if speedups else "h11",
        loop="auto" if speedups else "asyncio",
        lifespan="on",
        log_config=None,  # uvicorn's own lines: warnings and errors only, on stderr
        log_level="warning",
        access_log=False,  # the service writes its own, in the Common Log Format
        server_header=False,  # answers do not advertise the server software
        timeout_graceful_shutdown=int(service.settings.timeout_seconds) + 1,
    )
    server = _Server(config, lambda: on_listening(url(host, port)))
    return server, lambda: server.run(sockets=[sock])
