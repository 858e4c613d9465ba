"""The serve command: one model answering tag requests over HTTP until stopped."""

from __future__ import annotations

import sys
from typing import Annotated

import typer

from tagger.apply.tagging import Backend
from tagger.cli.common import ModelFile, app, domain_errors, say, stopped_words
from tagger.cli.help import examples
from tagger.errors import TaggerError
from tagger.reports.layout import count


def _access_line(line: str) -> None:
    print(line, file=sys.stdout, flush=True)


@app.command(
    epilog=examples(
        "tagger serve runs/demo/model.tagger",
        "tagger serve runs/demo/model.tagger --port 8080 --threads 2 > access.log",
    )
)
def serve(
    model: ModelFile,
    host: Annotated[
        str,
        typer.Option(
            help="Address to listen on: 127.0.0.1 lets only this machine connect; 0.0.0.0 "
            "every machine that reaches this one (there is no authentication)."
        ),
    ] = "127.0.0.1",
    port: Annotated[int, typer.Option(min=0, max=65535, help="Port (0: any free one).")] = 8080,
    threads: Annotated[int, typer.Option(min=0, help="Threads tagging (0: all cores).")] = 0,
    backend: Annotated[
        Backend,
        typer.Option(
            help="torch serves a model file; onnx an export file (tagger export) with "
            "onnxruntime, without torch.",
            case_sensitive=False,
        ),
    ] = Backend.TORCH,
    max_texts: Annotated[int, typer.Option(help="Most texts in one request.")] = 64,
    max_text_chars: Annotated[int, typer.Option(help="Most characters in one text.")] = 20_000,
    max_body_bytes: Annotated[int, typer.Option(help="Largest request body.")] = 1_000_000,
    timeout: Annotated[
        float, typer.Option(help="Seconds from a request's arrival to its answer.")
    ] = 30.0,
    queue_requests: Annotated[
        int,
        typer.Option(help="Requests that may wait to be tagged; more are refused (503, busy)."),
    ] = 256,
    batch_texts: Annotated[int, typer.Option(help="Most texts tagged in one batch.")] = 64,
    batch_wait_ms: Annotated[
        float,
        typer.Option(
            help="Milliseconds a batch that is not full waits for more requests, from when it "
            "could start."
        ),
    ] = 5.0,
    access_log: Annotated[
        bool,
        typer.Option(
            help="Write a line per request to standard output (Common Log Format).",
        ),
    ] = True,
) -> None:
    """Serve a model over HTTP until Ctrl-C or SIGTERM: POST /tag tags texts as tag does (the
    same mentions and needs_review flag), GET /model describes the model, GET /health answers
    while the service runs. Requests in flight are finished before it stops."""
    from tagger.serve.extra import require_serve_extra
    from tagger.serve.settings import ServiceSettings

    try:
        settings = ServiceSettings(
            max_body_bytes=max_body_bytes,
            max_texts=max_texts,
            max_text_chars=max_text_chars,
            timeout_seconds=timeout,
            queue_requests=queue_requests,
            batch_texts=batch_texts,
            batch_wait_ms=batch_wait_ms,
        )
    except TaggerError as error:
        raise typer.BadParameter(str(error)) from None
    with domain_errors():
        require_serve_extra()
        from tagger.apply.tagging import load_tagger
        from tagger.serve.app import Service
        from tagger.serve.server import bind, is_loopback, server_for

        tagger = load_tagger(model, backend, threads or None)
        for note in tagger.notes:
            say(f"note: {note}")
        if tagger.features is not None and tagger.features.needs_columns:
            raise tagger.features.refusal(str(model))
        sock = bind(host, port)
        service = Service(tagger, model, settings, access_log=_access_line if access_log else None)

    def listening(url: str) -> None:
        reach = (
            "only this machine can connect (--host 0.0.0.0 lets others)"
            if is_loopback(host)
            else "other machines can connect, without authentication"
        )
        say(f"tagger serve: {model} at {url}; {reach}; routes: POST /tag, GET /model, GET /health")

    server, run = server_for(service, sock, listening)
    stop = "stopped"
    try:
        run()
    except KeyboardInterrupt as signal:  # raised again by the server once it has stopped
        stop = f"{stopped_words(signal)[0]}"
    counts = service.batcher.counts
    say(
        f"tagger serve: {stop}; tagged {count(counts.texts, 'text')} of "
        f"{count(counts.requests, 'request')} in {count(counts.batches, 'batch', 'batches')}, "
        f"{count(counts.refused, 'request')} refused as busy"
    )
    if not server.started:
        raise typer.Exit(1)
