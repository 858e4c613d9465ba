"""The HTTP service, called as a client would: a real server on a free loopback port, requests over
HTTP with urllib.

Most tests run the server in a thread of the test process (uvicorn's own `Server`, as the command
runs it), so that the tagging can be held at a gate: with the worker thread held, the queue,
batching, timeouts and a graceful stop are reached deterministically, by polling the health
route, never by timing. One test runs the `serve` command itself in a process, stops it with
SIGTERM and compares its answers with those of the `tag` command.
"""

from __future__ import annotations

import datetime
import importlib.util
import json
import os
import re
import signal
import socket
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from model_files import tiny_tagger
from typer.testing import CliRunner

from tagger.apply.exported import ExportedTagger
from tagger.apply.exporting import export_model
from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.errors import ConfigError
from tagger.serve.access_log import ArrivalClock, log_time
from tagger.serve.app import Service
from tagger.serve.records import Tagged, text_tagger
from tagger.serve.server import ListenError, bind, server_for
from tagger.serve.settings import ServiceSettings

ROOT = Path(__file__).resolve().parent.parent
WAIT = 60.0  # seconds any poll may take before the test fails: generous, never a measurement
CLF = re.compile(
    r"^127\.0\.0\.1 - - \[\d{2}/[A-Z][a-z]{2}/\d{4}:\d{2}:\d{2}:\d{2} [+-]\d{4}\] "
    r'"(?P<request>[^"]*)" (?P<status>\d{3}) (?P<size>\d+|-)$'
)
TEXTS = [
    "Anna met Bob in Oslo. Then they flew to Bergen with Carl.",
    "Bob went home.",
    "",
    "  \n  ",
    "Zoë and Åsa visited São Paulo 🙂 on Monday; Dr. Li stayed.\nA second line follows here.",
    "x",
]


@pytest.fixture(scope="module")
def model(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("serve") / "model.tagger"
    stored = {
        "training_data": {
            "fingerprint": "9f2c0d",
            "train": "train.txt",
            "dev": None,
            "sentences": 7,
        },
        "dev_metrics": {"micro": {"precision": 0.5, "recall": 0.25, "f1": 0.333333}},
    }
    tiny_tagger(seed=3).save(path, stored)
    return path


@pytest.fixture(scope="module")
def library(model: Path) -> Tagger:
    return Tagger.load(model)


# --- a client -------------------------------------------------------------------------------


@dataclass
class Answer:
    status: int
    headers: dict[str, str]  # names in lower case
    body: bytes

    @property
    def json(self) -> Any:
        return json.loads(self.body)


def _lower(headers: Any) -> dict[str, str]:
    return {name.lower(): value for name, value in headers.items()}


def call(url: str, body: bytes | str | dict | None = None, method: str | None = None) -> Answer:
    """One request; a dict body is sent as JSON, None means GET."""
    data = json.dumps(body).encode() if isinstance(body, dict) else body
    if isinstance(data, str):
        data = data.encode()
    request = urllib.request.Request(url, data=data, method=method)
    try:
        with urllib.request.urlopen(request, timeout=WAIT) as response:
            return Answer(response.status, _lower(response.headers), response.read())
    except urllib.error.HTTPError as error:
        return Answer(error.code, _lower(error.headers), error.read())


def wait_until(condition: Callable[[], bool]) -> None:
    deadline = time.monotonic() + WAIT
    while not condition():
        assert time.monotonic() < deadline, "the condition did not come true"
        time.sleep(0.01)


def records(tagger: Tagger, texts: list[str], min_score: float = 0.0) -> list[list[dict]]:
    """The library's mentions of each text, as records."""
    return [[m.to_record() for m in found] for found in tagger.tag(texts, min_score)]


class Gate:
    """The model's own text tagging, held until `open` is set."""

    def __init__(self, tagger: Tagger) -> None:
        self.tag_texts = text_tagger(tagger, 64)
        self.open = threading.Event()
        self.batches: list[list[str]] = []

    def __call__(self, texts: list[str]) -> list[Tagged]:
        assert self.open.wait(WAIT)
        self.batches.append(texts)
        return self.tag_texts(texts)


@dataclass
class Running:
    url: str
    service: Service
    server: Any
    thread: threading.Thread

    def health(self) -> dict[str, Any]:
        return call(self.url + "/health").json


@contextmanager
def served(
    model: Path,
    settings: ServiceSettings | None = None,
    gate: Gate | None = None,
    log: list[str] | None = None,
    tagger: Tagger | None = None,
    speedups: bool = True,
) -> Iterator[Running]:
    """The service on a free loopback port, run by uvicorn in a thread; stopped on leaving.
    ``tagger`` (default: the model file loaded) is the one it runs."""
    service = Service(
        tagger or Tagger.load(model),
        model,
        settings or ServiceSettings(),
        tag_texts=gate,
        access_log=None if log is None else log.append,
    )
    urls: list[str] = []
    listening = threading.Event()

    def on_listening(url: str) -> None:
        urls.append(url)
        listening.set()

    server, run = server_for(service, bind("127.0.0.1", 0), on_listening, speedups)
    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    assert listening.wait(WAIT)
    try:
        yield Running(urls[0], service, server, thread)
    finally:
        if gate is not None:
            gate.open.set()
        server.should_exit = True
        thread.join(WAIT)
        assert not thread.is_alive()


# --- what the service answers ---------------------------------------------------------------


def test_health_and_the_models_description(model: Path) -> None:
    with served(model, ServiceSettings(max_texts=7)) as running:
        health = call(running.url + "/health")
        described = call(running.url + "/model")
    assert health.status == 200 and health.json["alive"] is True
    assert health.json["waiting_requests"] == 0 and health.json["tagging_texts"] == 0
    assert described.status == 200
    assert described.headers["content-type"] == "application/json"
    description = described.json
    assert description["model"] == "model.tagger"
    assert description["types"] == ["LOC", "PER"]
    assert description["scheme"] == {"predicted": "BIOES", "training_files": "IOB2"}
    # as the model file stores them
    assert description["training_data"]["fingerprint"] == "9f2c0d"
    assert description["dev_metrics"] == {
        "micro": {"precision": 0.5, "recall": 0.25, "f1": 0.333333}
    }
    assert description["limits"]["max_texts"] == 7
    assert description["tokenizer"]["max_sentence_tokens"] == 300


def test_tagging_many_texts_and_one_equals_the_library(model: Path, library: Tagger) -> None:
    with served(model) as running:
        many = call(running.url + "/tag", {"texts": TEXTS})
        one = call(running.url + "/tag", {"texts": [TEXTS[0]]})
        kept = call(running.url + "/tag", {"texts": TEXTS, "min_score": 0.3, "review_below": 0.2})
    assert many.status == 200 and one.status == 200 and kept.status == 200
    documents = many.json["documents"]
    assert [d["mentions"] for d in documents] == records(library, TEXTS)
    assert one.json["documents"][0]["mentions"] == records(library, TEXTS[:1])[0]
    assert any(d["mentions"] for d in documents)  # the comparison is not of empty lists
    for document, text in zip(documents, TEXTS, strict=True):
        for mention in document["mentions"]:
            start, end = mention["at"]
            assert text[start:end] == mention["quote"]
    filtered = kept.json["documents"]
    assert [d["mentions"] for d in filtered] == records(library, TEXTS, min_score=0.3)
    assert sum(map(len, records(library, TEXTS, 0.3))) < sum(map(len, records(library, TEXTS)))
    # An untrained model is unsure everywhere: flagged at 0.8, not at 0.2 (empty texts never).
    assert [d["needs_review"] for d in documents] == [bool(t.strip()) for t in TEXTS]
    assert not any(d["needs_review"] for d in filtered)


def test_uvicorns_pure_python_parts_answer_alike(model: Path, library: Tagger) -> None:
    # The plain install's HTTP parser and event loop (h11, asyncio), chosen even where httptools
    # and uvloop are installed; and those two where they are.
    with served(model, speedups=False) as running:
        answer = call(running.url + "/tag", {"texts": TEXTS})
        refused = call(running.url + "/tag", {"texts": []})
        parts = running.server.config
    assert (parts.http_protocol_class.__name__, parts.loop) == ("H11Protocol", "asyncio")
    assert answer.status == 200
    assert [d["mentions"] for d in answer.json["documents"]] == records(library, TEXTS)
    assert refused.status == 400 and refused.json["field"] == "texts"
    if importlib.util.find_spec("httptools") is not None:
        with served(model) as running:
            parts = running.server.config
        assert (parts.http_protocol_class.__name__, parts.loop) == ("HttpToolsProtocol", "auto")


def test_an_exported_model_answers_as_the_model_file(
    model: Path, library: Tagger, tmp_path: Path
) -> None:
    exported = tmp_path / "model.tagexport"
    export_model(model, exported)
    with served(exported, tagger=ExportedTagger.load(exported)) as running:
        answer = call(running.url + "/tag", {"texts": TEXTS})
        description = call(running.url + "/model").json
    assert answer.status == 200
    expected = records(library, TEXTS)
    got = [d["mentions"] for d in answer.json["documents"]]
    assert [[(m["type"], m["at"]) for m in doc] for doc in got] == [
        [(m["type"], m["at"]) for m in doc] for doc in expected
    ]
    pairs = [(a, b) for x, y in zip(expected, got, strict=True) for a, b in zip(x, y, strict=True)]
    assert pairs and all(abs(a["confidence"] - b["confidence"]) <= 1.0001e-4 for a, b in pairs)
    assert description["training_data"]["fingerprint"] == "9f2c0d"


def test_requests_queued_together_are_tagged_in_one_batch(model: Path, library: Tagger) -> None:
    gate = Gate(library)
    with (
        served(model, ServiceSettings(batch_texts=8), gate) as running,
        ThreadPoolExecutor(8) as pool,
    ):
        first = pool.submit(call, running.url + "/tag", {"texts": ["Anna left."]})
        wait_until(lambda: running.health()["tagging_texts"] == 1)
        singles = [pool.submit(call, running.url + "/tag", {"texts": [t]}) for t in TEXTS]
        wait_until(lambda: running.health()["waiting_requests"] == len(TEXTS))
        gate.open.set()
        answers = [single.result(WAIT) for single in singles]
        assert first.result(WAIT).status == 200
        health = running.health()
    assert [a.json["documents"][0]["mentions"] for a in answers] == records(library, TEXTS)
    assert sorted(gate.batches[1]) == sorted(TEXTS)  # every waiting request in one batch
    assert len(gate.batches) == 2
    assert (health["batches"], health["largest_batch"], health["texts_tagged"]) == (2, 6, 7)


def test_a_full_queue_answers_503_with_retry_after(model: Path, library: Tagger) -> None:
    gate = Gate(library)
    settings = ServiceSettings(queue_requests=1)
    with served(model, settings, gate) as running, ThreadPoolExecutor(2) as pool:
        tagging = pool.submit(call, running.url + "/tag", {"texts": [TEXTS[0]]})
        wait_until(lambda: running.health()["tagging_texts"] == 1)
        waiting = pool.submit(call, running.url + "/tag", {"texts": [TEXTS[1]]})
        wait_until(lambda: running.health()["waiting_requests"] == 1)
        busy = call(running.url + "/tag", {"texts": [TEXTS[4]]})
        gate.open.set()
        answered = [tagging.result(WAIT), waiting.result(WAIT)]
        health = running.health()
    assert busy.status == 503
    assert busy.headers["retry-after"] == "1"
    assert busy.json == {
        "problem": "the service is busy: 1 requests are already waiting to be tagged; "
        "try again shortly",
        "field": None,
    }
    # Nothing queued is lost: both are answered, with their own results.
    assert [a.json["documents"][0]["mentions"] for a in answered] == records(library, TEXTS[:2])
    assert health["refused_busy"] == 1 and health["requests_tagged"] == 2


def test_a_request_not_tagged_in_time_is_refused_and_dropped(model: Path, library: Tagger) -> None:
    gate = Gate(library)
    settings = ServiceSettings(timeout_seconds=0.2)
    with served(model, settings, gate) as running, ThreadPoolExecutor(1) as pool:
        held = pool.submit(call, running.url + "/tag", {"texts": ["held"]})
        wait_until(lambda: running.health()["tagging_texts"] == 1)
        late = call(running.url + "/tag", {"texts": ["dropped before tagging"]})
        assert held.result(WAIT).status == 503  # its own timeout passed while the gate held it
        gate.open.set()
        after = call(running.url + "/tag", {"texts": [TEXTS[1]]})
    assert late.status == 503 and late.headers["retry-after"] == "1"
    assert "not tagged within the request timeout of 0.2 s" in late.json["problem"]
    assert after.status == 200
    assert after.json["documents"][0]["mentions"] == records(library, TEXTS[1:2])[0]
    assert ["dropped before tagging"] not in gate.batches  # its client had gone


def test_a_body_that_never_arrives_times_out_with_408(model: Path) -> None:
    with served(model, ServiceSettings(timeout_seconds=0.2)) as running:
        host, port = running.url.removeprefix("http://").split(":")
        with socket.create_connection((host, int(port)), timeout=WAIT) as client:
            client.sendall(
                b"POST /tag HTTP/1.1\r\nHost: x\r\nConnection: close\r\n"
                b'Content-Length: 100\r\n\r\n{"te'
            )
            answer = client.makefile("rb").read()
    head, _, body = answer.partition(b"\r\n\r\n")
    assert head.startswith(b"HTTP/1.1 408 ")
    assert json.loads(body) == {
        "problem": "the body did not arrive within the request timeout of 0.2 s",
        "field": None,
    }


LIMITS = ServiceSettings(max_texts=3, max_text_chars=5000, max_body_bytes=20_000)

# (body sent to POST /tag, status, field, a piece of the problem)
BAD_REQUESTS: list[tuple[bytes | str | dict, int, str | None, str]] = [
    ('{"texts": ', 400, None, "the body is not JSON: Expecting value at line 1 column 11"),
    (b'{"texts": ["\xff"]}', 400, None, "not UTF-8 text (byte 12 cannot be decoded)"),
    ('{"texts": [NaN]}', 400, None, "NaN is not a JSON value"),
    ('["Anna"]', 400, None, "must be a JSON object with a 'texts' array, not an array"),
    ({}, 400, "texts", "texts: missing"),
    ({"texts": "Anna met Bob."}, 400, "texts", "expected an array of strings, got a string"),
    ({"texts": []}, 400, "texts", "the array is empty"),
    ({"texts": ["a", 7]}, 400, "texts[1]", "texts[1]: expected a string, got a number"),
    ({"texts": ["a", None]}, 400, "texts[1]", "got null"),
    ({"texts": ["a"], "min_score": "high"}, 400, "min_score", "from 0 to 1, got a string"),
    ({"texts": ["a"], "min_score": True}, 400, "min_score", "got true"),
    ({"texts": ["a"], "review_below": 1.5}, 400, "review_below", "from 0 to 1, got 1.5"),
    ({"texts": ["a"], "minscore": 0.5}, 400, "minscore", "'minscore' is not a field"),
    ('{"texts": ["\\ud800 alone"]}', 400, "texts[0]", "character 0 is a lone surrogate"),
    (
        {"texts": ["a", "b", "c", "d"]},
        413,
        "texts",
        "4 texts is more than this service's limit of 3",
    ),
    ({"texts": ["a", "w" * 5001]}, 413, "texts[1]", "5,001 characters is more than"),
    ({"texts": ["a" * 4000] * 3 * 2}, 413, None, "is more than this service's limit of 20,000"),
    (
        {"texts": ["fine.", " ".join(["w"] * 400)]},
        422,
        "texts[1]",
        "texts[1]: a sentence longer than max_sentence_tokens=300 tokens starts at character 0",
    ),
]


@pytest.fixture(scope="module")
def limited(model: Path) -> Iterator[Running]:
    with served(model, LIMITS) as running:
        yield running


@pytest.mark.parametrize(("body", "status", "field", "fragment"), BAD_REQUESTS)
def test_bad_requests_get_their_code_and_name_the_field(
    limited: Running, body: bytes | str | dict, status: int, field: str | None, fragment: str
) -> None:
    answer = call(limited.url + "/tag", body)
    assert answer.status == status
    assert answer.headers["content-type"] == "application/json"
    assert set(answer.json) == {"problem", "field"}
    assert answer.json["field"] == field
    assert fragment in answer.json["problem"]
    # ... and the service goes on answering
    assert call(limited.url + "/tag", {"texts": ["Bob."]}).status == 200


def test_unknown_routes_and_methods(limited: Running) -> None:
    missing = call(limited.url + "/tags", {"texts": ["a"]})
    wrong = call(limited.url + "/tag")
    assert missing.status == 404
    assert missing.json["problem"] == (
        "POST /tags: no such route; the routes are GET /health, GET /model, POST /tag"
    )
    assert wrong.status == 405 and wrong.headers["allow"] == "POST"
    assert wrong.json["problem"].startswith("GET /tag: this route takes another method")


def test_access_log_lines_are_common_log_format(model: Path) -> None:
    log: list[str] = []
    with served(model, log=log) as running:
        answer = call(running.url + "/tag?from=test", {"texts": ["Bob."]})
        call(running.url + "/nowhere")
        wait_until(lambda: len(log) == 2)
    found = [CLF.match(line) for line in log]
    assert all(found), log
    assert [(m["request"], m["status"]) for m in found] == [  # type: ignore[index]
        ("POST /tag?from=test HTTP/1.1", "200"),
        ("GET /nowhere HTTP/1.1", "404"),
    ]
    assert found[0]["size"] == str(len(answer.body))  # type: ignore[index]


def test_log_time_is_the_formats_own() -> None:
    # The Common Log Format's time, as the format's own example writes it.
    moment = datetime.datetime(
        2000, 10, 10, 13, 55, 36, tzinfo=datetime.timezone(datetime.timedelta(hours=-7))
    )
    assert log_time(moment) == "[10/Oct/2000:13:55:36 -0700]"


def test_the_arrival_time_is_made_once_a_second() -> None:
    readings = iter([1_000_000_000.25, 1_000_000_000.99, 1_000_000_001.5])
    clock = ArrivalClock(lambda: next(readings))

    def local(second: int) -> str:
        return log_time(datetime.datetime.fromtimestamp(second).astimezone())

    first, same_second, next_second = clock(), clock(), clock()
    assert first == same_second == local(1_000_000_000)
    assert next_second == local(1_000_000_001) != first


# --- stopping --------------------------------------------------------------------------------


def test_stopping_finishes_the_requests_in_flight(model: Path, library: Tagger) -> None:
    gate = Gate(library)
    with served(model, gate=gate) as running, ThreadPoolExecutor(1) as pool:
        in_flight = pool.submit(call, running.url + "/tag", {"texts": TEXTS[:2]})
        wait_until(lambda: running.health()["tagging_texts"] == 2)
        host, port = running.url.removeprefix("http://").split(":")
        running.server.handle_exit(signal.SIGTERM, None)  # what uvicorn does on SIGTERM

        def refused() -> bool:
            try:
                socket.create_connection((host, int(port)), timeout=WAIT).close()
            except ConnectionRefusedError:
                return True
            return False

        wait_until(refused)  # no new connections while the request in flight still waits
        assert not in_flight.done()
        gate.open.set()
        answer = in_flight.result(WAIT)
        running.thread.join(WAIT)
        assert not running.thread.is_alive()
    assert answer.status == 200
    assert [d["mentions"] for d in answer.json["documents"]] == records(library, TEXTS[:2])


def _serve_process(model: Path, *options: str) -> tuple[subprocess.Popen[str], str]:
    """`tagger serve` in a process of its own, and the URL its first line names."""
    process = subprocess.Popen(
        [sys.executable, "-m", "tagger", "serve", str(model), "--port", "0", *options],
        cwd=ROOT,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert process.stderr is not None
    line = process.stderr.readline()
    found = re.search(r"at (http://127\.0\.0\.1:\d+); only this machine can connect", line)
    if found is None:
        process.kill()
        pytest.fail(f"no listening line: {line!r}")
    return process, found[1]


def test_the_command_answers_as_the_tag_command_and_stops_on_sigterm(
    model: Path, tmp_path: Path
) -> None:
    inputs = tmp_path / "texts.jsonl"
    inputs.write_text("".join(json.dumps({"text": t}) + "\n" for t in TEXTS), encoding="utf-8")
    out = tmp_path / "tagged.jsonl"
    tagged = CliRunner().invoke(
        app, ["tag", str(model), str(inputs), "-o", str(out), "--min-score", "0.2"]
    )
    assert tagged.exit_code == 0, tagged.stderr
    expected = [json.loads(line) for line in out.read_text(encoding="utf-8").splitlines()]

    process, url = _serve_process(model)
    try:
        answer = call(url + "/tag", {"texts": TEXTS, "min_score": 0.2})
    finally:
        process.send_signal(signal.SIGTERM)
        stdout, stderr = process.communicate(timeout=WAIT)
    assert answer.status == 200
    assert answer.json["documents"] == [
        {"mentions": r["mentions"], "needs_review": r["needs_review"]} for r in expected
    ]
    assert process.returncode == 0
    assert stderr.splitlines() == [
        "tagger serve: terminated (SIGTERM); tagged 6 texts of 1 request in 1 batch, "
        "0 requests refused as busy"
    ]
    (line,) = stdout.splitlines()  # the access log, on standard output
    assert CLF.match(line) and '"POST /tag HTTP/1.1" 200' in line


def test_a_port_in_use_is_one_error(model: Path) -> None:
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        with pytest.raises(ListenError, match=f"cannot listen on http://127.0.0.1:{port}: "):
            bind("127.0.0.1", port)
        result = CliRunner().invoke(app, ["serve", str(model), "--port", str(port)])
    assert result.exit_code == 1
    (line,) = result.stderr.splitlines()
    assert line.startswith(f"tagger: error: cannot listen on http://127.0.0.1:{port}: ")


@pytest.mark.parametrize(
    ("option", "setting", "value", "message"),
    [
        ("--batch-texts", "batch_texts", 0, "--batch-texts must be at least 1; got 0"),
        ("--timeout", "timeout_seconds", 0, "--timeout must be above 0 seconds"),
        ("--batch-wait-ms", "batch_wait_ms", -1, "--batch-wait-ms must lie in [0, 1000]"),
    ],
)
def test_bad_settings_are_usage_errors(
    model: Path, option: str, setting: str, value: int, message: str
) -> None:
    with pytest.raises(ConfigError, match=re.escape(message)):
        ServiceSettings(**{setting: value})
    result = CliRunner().invoke(app, ["serve", str(model), "--port", "0", option, str(value)])
    assert result.exit_code == 2
    assert message in result.stderr


def test_a_missing_extra_says_what_to_install(monkeypatch: pytest.MonkeyPatch) -> None:
    from tagger.serve import extra

    monkeypatch.setattr(extra, "PACKAGES", ("starlette", "tagger_serve_absent_package"))
    with pytest.raises(ConfigError) as refused:
        extra.require_serve_extra()
    assert str(refused.value) == (
        "serving a model needs tagger_serve_absent_package: pip install 'tagger[serve]'"
    )
