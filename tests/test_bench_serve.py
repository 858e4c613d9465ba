"""The service benchmark (scripts/bench_serve.py): its percentiles, the CPU seconds it reads, its
clients' reading of answers, and its record."""

from __future__ import annotations

import asyncio


def test_percentiles_are_nearest_rank(load_script) -> None:
    bench = load_script("bench_serve")
    values = [float(v) for v in range(1, 101)]  # 1..100: the p-th percentile is p itself
    assert bench.percentile(values, 0.5) == 50.0
    assert bench.percentile(values, 0.99) == 99.0
    assert bench.percentile([3.0], 0.99) == 3.0
    assert bench.latency_summary([0.010, 0.020, 0.030]) == {
        "p50_ms": 20.0,
        "p99_ms": 30.0,
        "max_ms": 30.0,
    }


def test_cpu_seconds_are_read_after_the_command_name(load_script) -> None:
    bench = load_script("bench_serve")
    # proc(5)'s layout: pid (comm) state ppid pgrp session tty tpgid flags minflt cminflt majflt
    # cmajflt utime stime ...; a command name may hold spaces and parentheses itself.
    fields = "S 1 2 3 4 5 6 7 8 9 10 250 75 11 12 20 0 3"
    assert bench.stat_cpu_seconds(f"4242 (python) {fields}", 100) == 3.25
    assert bench.stat_cpu_seconds(f"4242 (a (b) c) {fields}", 100) == 3.25
    assert bench.stat_cpu_seconds(f"4242 (x) {fields}", 250) == 1.3


def test_the_clients_read_each_answer_by_its_length(load_script) -> None:
    bench = load_script("bench_serve")
    first = b'{"documents":[{"mentions":[],"needs_review":false}]}'

    async def read() -> list[tuple[int, bytes]]:
        reader = asyncio.StreamReader()
        reader.feed_data(
            b"HTTP/1.1 200 OK\r\ncontent-type: application/json\r\n"
            + f"content-length: {len(first)}\r\n\r\n".encode()
            + first
            + b"HTTP/1.1 503 Service Unavailable\r\nRetry-After: 1\r\nContent-Length: 2\r\n\r\n{}"
        )
        reader.feed_eof()
        return [await bench.read_answer(reader), await bench.read_answer(reader)]

    assert asyncio.run(read()) == [(200, first), (503, b"{}")]
    request = bench.tag_request("Zoë met Bob.", "127.0.0.1")
    head, _, body = request.partition(b"\r\n\r\n")
    assert head.startswith(b"POST /tag HTTP/1.1\r\nHost: 127.0.0.1\r\n")
    assert f"Content-Length: {len(body)}".encode() in head
    assert body == b'{"texts": ["Zo\\u00eb met Bob."]}'


def test_medians_go_key_by_key(load_script) -> None:
    bench = load_script("bench_serve")
    runs = [
        {"a": 1.0, "nested": {"b": 10}, "statuses": [200], "name": "x"},
        {"a": 5.0, "nested": {"b": 30}, "statuses": [200], "name": "x"},
        {"a": 2.0, "nested": {"b": 20}, "statuses": [200], "name": "x"},
    ]
    assert bench.medians(runs) == {"a": 2.0, "nested": {"b": 20}}


def test_built_ins_count_where_they_were_called(load_script) -> None:
    bench = load_script("bench_serve")
    assert bench.area_of("/x/site-packages/h11/_connection.py", "next_event") == (
        "HTTP/1.1 parsing (h11)"
    )
    assert bench.area_of("/w/tagger/serve/access_log.py", "__call__") == "access log"
    assert bench.area_of("~", "<method 'send' of '_socket.socket' objects>") == "sockets"
    assert bench.area_of("~", "<built-in method builtins.len>") == "other"


def _entry() -> dict:
    machine = dict.fromkeys(("date", "commit", "command", "cores", "cpu", "torch", "python"), "x")
    phase = {"requests": 100, "answered": 100, "requests_per_second": 5.0, "seconds": 2.0}
    full = {
        **phase,
        "tokens_per_second": 900.0,
        "tokens_per_service_cpu_second": 850.0,
        "service_cpu_seconds": 0.2,
        "event_loop_cpu_seconds": 0.05,
        "client_cpu_seconds": 0.03,
        "p50_ms": 5,
        "p99_ms": 9,
        "max_ms": 9,
    }
    half = {**full, "tokens_per_second": 450.0, "p99_ms": 120, "max_ms": 130}
    return {
        "machine": {**machine, "load_before": 1.0},
        "load_after": 1.0,
        "model": "m.tagger",
        "threads": 1,
        "clients": 16,
        "requests_per_phase": 100,
        "rounds": 3,
        "library": {
            "median": {
                "tokens_per_second": 1000.0,
                "tokens_per_cpu_second": 1000.0,
                "tokens_per_cpu_second_in_batches": 500.0,
            }
        },
        "services": [
            {
                "name": "after",
                "source": "commit abc",
                "plain_install": False,
                "http_and_loop": "httptools, uvloop",
                "median": {
                    "full_load": full,
                    "half_load": half,
                    "batches_at_full_load": {"texts_per_batch": 5.0, "wall_ms_per_batch": 30},
                    "shares": {"per_cpu_second": 0.85, "wall": 0.75},
                },
            }
        ],
    }


def test_the_record_says_whether_each_target_is_met(load_script) -> None:
    bench = load_script("bench_serve")
    text = bench.render(_entry())
    assert (
        "- after: >= 80% of the library's tokens per CPU second under 16 clients: met (85%); "
        "of its wall-clock tokens/s: not met (75%); p99 <= 100 ms at half load: not met "
        "(120.0 ms)"
    ) in text
    # tokens per service CPU s, its share, wall tokens/s, its share, CPU ms per request (total and
    # the event loop's), client CPU s, texts per batch, ms per batch, p50, p99
    assert "| after | 850 | 85% | 900 | 75% | 2.00 | 0.50 | 0.03 | 5.0 | 30 | 5.0 | 9.0 |" in text
    assert "on batches of 16 texts" in text and "500 tokens per CPU second, 50% of" in text
    assert "**after**: commit abc, httptools, uvloop" in text
    assert "Tagging alone, in batches of 16 texts, reaches 50% of the library's" in text
    entry = _entry()
    entry["library"]["median"]["tokens_per_cpu_second_in_batches"] = 900.0
    assert "Tagging alone" not in bench.render(entry)  # said only when it rules the target out
