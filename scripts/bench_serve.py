"""Service benchmark: `tagger serve` under 16 concurrent clients sending one-sentence requests,
beside the library's own tagging speed measured in the same run, in CPU seconds and wall time.

    .venv/bin/python scripts/bench_serve.py [MODEL] [--requests 60] [--clients 16] [--threads 1]
        [--rounds 3] [--service NAME=TREE ...] [--profile] [--export float|int8]

MODEL defaults to runs/demo/model.tagger; when it is absent, a model with configs/default.toml is
trained on the demo data for one epoch first (its speed is that of any model of its shape).
`--service NAME=TREE` serves from another source tree (e.g. an export of an earlier commit), so
two versions of the service are measured in the same run; the default is this tree alone.

Each round measures, in this order (rounds interleave the services, so a change in the machine's
load falls on all of them alike; the record gives every round and the medians):
  * the library: `Tagger.tag` on the very texts the clients send, all in one call, in this
    process with --threads torch threads (no start-up, no HTTP): tokens per second of wall time
    and tokens per CPU second (time.process_time around the call);
  * for each service, started as `tagger serve` in a child process (--threads torch threads, the
    access log on, written to /dev/null):
    - full load: CLIENTS connections each sending REQUESTS requests of one sentence back to back
      over a kept-alive connection: p50/p99 latency, requests/s, tokens/s of wall time, the
      service process's CPU seconds over the phase (user + system, from /proc/PID/stat) and its
      tokens per CPU second, the clients' own CPU seconds, and the batches the service formed
      (from GET /health);
    - half load: the same clients sending, on a fixed schedule, half the requests per second full
      load reached (the latency a client sees when the service is not saturated).
The clients are one asyncio event loop in this process writing prepared request bytes on raw
sockets and reading each answer by its Content-Length: as little client CPU as a client that
checks its answers can spend. Every request must be answered 200 with one document; a lost or
refused request fails the run. Bounded: each phase stops after CLIENTS x REQUESTS requests, and
after 300 s at most.

`--profile` instead runs each service once under full load with cProfile on its event loop's
thread and its tagging thread (scripts/serve_profiled.py) and records where each thread's CPU
goes, by area and by function: benchmarks/serve_profile.json and serve_profile.md.
`--export float|int8` serves the model exported (`tagger export`, with `--int8` for int8) on
the onnx backend and measures the library on that same export, so the shares compare like with
like; results go to benchmarks/serve_float.* or serve_int8.*.
Results go to benchmarks/serve.json and benchmarks/serve.md.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import math
import os
import pstats
import random
import re
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path
from statistics import median

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_tagging import DEFAULT_MODEL, demo_data, detokenise, ensure_model  # noqa: E402
from benchlib import machine, portable_path  # noqa: E402

RESULTS_DIR = ROOT / "benchmarks"
TARGETS = {"share_of_library": 0.8, "p99_ms_at_half_load": 100.0}
PHASE_LIMIT_SECONDS = 300.0
LISTENING = re.compile(r"at http://([\d.]+):(\d+);")


# --- figures -------------------------------------------------------------------------------


def percentile(values: list[float], share: float) -> float:
    """The nearest-rank percentile: the smallest value with at least `share` of them at or
    below it."""
    ordered = sorted(values)
    return ordered[max(0, math.ceil(share * len(ordered)) - 1)]


def latency_summary(seconds: list[float]) -> dict:
    return {
        "p50_ms": round(1000 * percentile(seconds, 0.5), 1),
        "p99_ms": round(1000 * percentile(seconds, 0.99), 1),
        "max_ms": round(1000 * max(seconds), 1),
    }


def medians(runs: Sequence[dict]) -> dict:
    """Per key, the median over the runs of every number (nested records key by key)."""
    out: dict = {}
    for key, value in runs[0].items():
        if isinstance(value, dict):
            out[key] = medians([run[key] for run in runs])
        elif isinstance(value, int | float) and not isinstance(value, bool):
            out[key] = median(run[key] for run in runs)
    return out


def stat_cpu_seconds(stat: str, ticks_per_second: int) -> float:
    """User + system CPU seconds of a process from the text of its /proc/PID/stat.

    The second field, the command name in parentheses, may itself hold spaces and parentheses,
    so the fields are counted from the last ')': utime and stime are fields 14 and 15."""
    after = stat[stat.rindex(")") + 2 :].split()  # fields 3 onwards
    return (int(after[11]) + int(after[12])) / ticks_per_second


def process_cpu_seconds(pid: int) -> tuple[float, float]:
    """CPU seconds of process `pid` so far: all its threads together, and its main thread alone
    (the service's event loop: HTTP, routing, JSON, batching; the tagging runs in another)."""
    ticks = os.sysconf("SC_CLK_TCK")
    found = []
    for path in (f"/proc/{pid}/stat", f"/proc/{pid}/task/{pid}/stat"):
        stat = Path(path).read_text(encoding="ascii", errors="replace")
        found.append(stat_cpu_seconds(stat, ticks))
    return found[0], found[1]


def texts_for(sentences: list[list[str]], count: int, seed: int = 1) -> list[str]:
    rng = random.Random(seed)
    return [detokenise(rng.choice(sentences)) for _ in range(count)]


def library_speed(tagger, texts: list[str], tokens: int, batch: int) -> dict:
    """Speed of `Tagger.tag` on `texts` in one call, the records encoded as the service does:
    per second of wall time and per CPU second of this process. Beside it, per CPU second, the
    service's own tagging function (no HTTP) called on consecutive batches of `batch` texts:
    what tagging alone costs in batches no larger than the clients can fill."""
    from tagger.apply.tagger import PREDICT_BATCH
    from tagger.serve.records import text_tagger

    tagger.tag(texts[:64])  # the first call builds kernels; not what is measured
    started, cpu = time.perf_counter(), time.process_time()
    found = tagger.tag(texts)
    json.dumps([[m.to_record() for m in mentions] for mentions in found])
    cpu = time.process_time() - cpu
    seconds = time.perf_counter() - started
    tag_texts = text_tagger(tagger, PREDICT_BATCH)
    batched = time.process_time()
    for first in range(0, len(texts), batch):
        tag_texts(texts[first : first + batch])
    batched = time.process_time() - batched
    return {
        "tokens": tokens,
        "seconds": round(seconds, 3),
        "cpu_seconds": round(cpu, 3),
        "tokens_per_second": round(tokens / seconds, 1),
        "tokens_per_cpu_second": round(tokens / cpu, 1),
        "batch_texts": batch,
        "tokens_per_cpu_second_in_batches": round(tokens / batched, 1),
    }


# --- the clients ---------------------------------------------------------------------------


def tag_request(text: str, host: str) -> bytes:
    """The bytes of one POST /tag of `text`, ready to write."""
    body = json.dumps({"texts": [text]}).encode()
    head = (
        f"POST /tag HTTP/1.1\r\nHost: {host}\r\nContent-Type: application/json\r\n"
        f"Content-Length: {len(body)}\r\n\r\n"
    )
    return head.encode("ascii") + body


async def read_answer(reader: asyncio.StreamReader) -> tuple[int, bytes]:
    """One HTTP answer from `reader`: its status and body (read by its Content-Length)."""
    head = await reader.readuntil(b"\r\n\r\n")
    lines = head.split(b"\r\n")
    status = int(lines[0].split(b" ", 2)[1])
    for line in lines[1:]:
        name, _, value = line.partition(b":")
        if name.strip().lower() == b"content-length":
            return status, await reader.readexactly(int(value))
    raise ValueError(f"an answer without Content-Length: {head!r}")


async def _client(
    host: str, port: int, requests: list[bytes], starts: list[float] | None, out: list
) -> None:
    """Send each request in turn over one connection; `starts` (perf_counter times) paces them,
    else each follows the answer to the one before."""
    reader, writer = await asyncio.open_connection(host, port)
    try:
        for i, request in enumerate(requests):
            if starts is not None:
                delay = starts[i] - time.perf_counter()
                if delay > 0:
                    await asyncio.sleep(delay)
            began = time.perf_counter()
            writer.write(request)
            status, body = await read_answer(reader)
            took = time.perf_counter() - began
            ok = status == 200 and len(json.loads(body)["documents"]) == 1
            out.append((took, ok, status))
    finally:
        writer.close()
        await writer.wait_closed()


async def _clients(host: str, port: int, per_client: list[list[bytes]], starts) -> list[list]:
    results: list[list] = [[] for _ in per_client]
    async with asyncio.timeout(PHASE_LIMIT_SECONDS):
        await asyncio.gather(
            *(
                _client(host, port, requests, None if starts is None else starts[c], results[c])
                for c, requests in enumerate(per_client)
            )
        )
    return results


def load_phase(
    host: str,
    port: int,
    per_client: list[list[str]],
    tokens: int,
    service_pid: int,
    rate: float | None = None,
) -> dict:
    """Every client's texts sent at once (rate None) or `rate` requests/s spread over them;
    `tokens` is the number of tokens in all the texts."""
    requests = [[tag_request(text, host) for text in texts] for texts in per_client]
    starts = None
    began = time.perf_counter() + (0.2 if rate is not None else 0.0)
    if rate is not None:  # client c sends at began + (k * clients + c) / rate
        clients = len(per_client)
        starts = [
            [began + (k * clients + c) / rate for k in range(len(texts))]
            for c, texts in enumerate(per_client)
        ]
    (service_cpu, loop_cpu), client_cpu = process_cpu_seconds(service_pid), time.process_time()
    began = min(began, time.perf_counter())
    results = asyncio.run(_clients(host, port, requests, starts))
    wall = time.perf_counter() - began
    client_cpu = time.process_time() - client_cpu
    service_after, loop_after = process_cpu_seconds(service_pid)
    service_cpu, loop_cpu = service_after - service_cpu, loop_after - loop_cpu
    flat = [r for rs in results for r in rs]
    sent = sum(len(texts) for texts in per_client)
    return {
        "requests": sent,
        "answered": sum(1 for _, ok, _ in flat if ok),
        "statuses": sorted({status for _, _, status in flat}),
        "seconds": round(wall, 3),
        "requests_per_second": round(sent / wall, 1),
        "tokens": tokens,
        "tokens_per_second": round(tokens / wall, 1),
        "service_cpu_seconds": round(service_cpu, 2),
        "tokens_per_service_cpu_second": round(tokens / max(service_cpu, 0.01), 1),
        "event_loop_cpu_seconds": round(loop_cpu, 2),
        "client_cpu_seconds": round(client_cpu, 2),
        **latency_summary([took for took, _, _ in flat]),
    }


def health(host: str, port: int) -> dict:
    async def ask() -> dict:
        reader, writer = await asyncio.open_connection(host, port)
        writer.write(f"GET /health HTTP/1.1\r\nHost: {host}\r\n\r\n".encode("ascii"))
        _, body = await read_answer(reader)
        writer.close()
        await writer.wait_closed()
        return json.loads(body)

    return asyncio.run(ask())


# --- the service ---------------------------------------------------------------------------


# What uvicorn's `standard` extra adds and uses when it finds it: httptools parses HTTP/1.1 in C
# instead of h11 in Python, uvloop runs the event loop instead of asyncio's own.
SPEEDUPS = ("httptools", "uvloop")


def hidden_speedups() -> Path:
    """A folder that, put first on PYTHONPATH, makes `import httptools` and `import uvloop` fail
    as on the plain install (uvicorn then takes h11 and asyncio's loop)."""
    folder = Path(tempfile.mkdtemp(prefix="tagger-plain-install-"))
    for name in SPEEDUPS:
        (folder / f"{name}.py").write_text(
            f'raise ImportError("{name} is hidden: the plain install is measured")\n',
            encoding="utf-8",
        )
    return folder


def server_parts(plain: bool) -> str:
    """The HTTP parser and event loop uvicorn picks, with or without the speedups."""
    import importlib.util

    found = not plain and all(importlib.util.find_spec(name) for name in SPEEDUPS)
    return "httptools, uvloop" if found else "h11, asyncio"


def start_service(
    model: Path,
    threads: int,
    tree: Path,
    profile_to: Path | None = None,
    hide: Path | None = None,
    backend: str = "torch",
) -> tuple[subprocess.Popen, str, int]:
    """`tagger serve` of source tree `tree` in a child process (or, with `profile_to`, the same
    service under cProfile: scripts/serve_profiled.py), and where it listens; `hide` is a
    folder of `hidden_speedups` to run it as on the plain install."""
    if profile_to is None:
        command = ["-m", "tagger", "serve", str(model), "--port", "0", "--threads", str(threads)]
        command += ["--queue-requests", "1024", "--backend", backend]
    else:
        command = [str(ROOT / "scripts" / "serve_profiled.py"), str(model), str(profile_to)]
        command += ["--threads", str(threads)]
    process = subprocess.Popen(
        [sys.executable, *command],
        cwd=tree,
        env={**os.environ, "PYTHONPATH": os.pathsep.join(map(str, filter(None, (hide, tree))))},
        stdout=subprocess.DEVNULL,  # the access log
        stderr=subprocess.PIPE,
        text=True,
    )
    line = process.stderr.readline()
    found = LISTENING.search(line)
    if found is None:
        process.kill()
        raise SystemExit(f"the service did not start: {line}{process.stderr.read()}")
    return process, found[1], int(found[2])


def stop_service(process: subprocess.Popen, how: int = signal.SIGTERM) -> None:
    process.send_signal(how)
    process.communicate(timeout=120)


def measure_service(
    model: Path,
    threads: int,
    tree: Path,
    hide: Path | None,
    full_texts,
    half_texts,
    counts: dict,
    backend: str = "torch",
) -> dict:
    """Full load, then half load at half full load's rate, on a freshly started service."""
    process, host, port = start_service(model, threads, tree, hide=hide, backend=backend)
    try:
        load_phase(host, port, [t[:3] for t in full_texts], 0, process.pid)  # kernels, sockets
        before = health(host, port)
        full = load_phase(host, port, full_texts, counts["full"], process.pid)
        after = health(host, port)
        half = load_phase(
            host, port, half_texts, counts["half"], process.pid, full["requests_per_second"] / 2
        )
    finally:
        stop_service(process)
    for phase in (full, half):
        if phase["answered"] != phase["requests"]:
            raise SystemExit(f"requests lost or refused: {phase}")
    batches = after["batches"] - before["batches"]
    texts = after["texts_tagged"] - before["texts_tagged"]
    return {
        "full_load": full,
        "half_load": half,
        "batches_at_full_load": {
            "batches": batches,
            "texts": texts,
            "texts_per_batch": round(texts / max(batches, 1), 2),
            "largest": after["largest_batch"],
            "wall_ms_per_batch": round(1000 * full["seconds"] / max(batches, 1), 1),
        },
    }


# --- the profile ---------------------------------------------------------------------------

# Where a function's time is counted, by the first pattern its file or name holds.
AREAS = (
    ("h11", "HTTP/1.1 parsing (h11)"),
    ("httptools", "HTTP/1.1 parsing (httptools)"),
    ("uvicorn", "uvicorn (protocol, server)"),
    ("starlette", "starlette (routing, request, response)"),
    ("anyio", "anyio"),
    ("tagger/serve/access_log", "access log"),
    ("tagger/serve/requests", "reading requests (tagger.serve.requests)"),
    ("tagger/serve/batching", "batching (tagger.serve.batching)"),
    ("tagger/serve", "tagger.serve (routes, records)"),
    ("/json/", "JSON (json module)"),
    ("_json", "JSON (json module)"),
    ("datetime", "access log"),
    ("socket", "sockets"),
    ("asyncio", "event loop (asyncio, selectors)"),
    ("selector", "event loop (asyncio, selectors)"),
    ("epoll", "event loop (asyncio, selectors)"),
    ("concurrent/futures", "event loop (asyncio, selectors)"),
    ("tagger/apply", "tagging (tagger.apply)"),
    ("tagger/text", "tokenising (tagger.text)"),
    ("tagger/network", "network (tagger.network)"),
    ("tagger/", "tagger (other)"),
    ("torch", "torch"),
    ("numpy", "numpy"),
)


def area_of(filename: str, name: str) -> str:
    where = f"{filename} {name}"
    for pattern, area in AREAS:
        if pattern in where:
            return area
    return "other"


def short_name(filename: str, line: int, name: str) -> str:
    """`package/module.py:LINE(name)` from a profile's full path; built-ins as they are."""
    if filename == "~":
        return name
    parts = Path(filename).parts
    for anchor in ("site-packages", "lib"):
        if anchor in parts:
            parts = parts[len(parts) - parts[::-1].index(anchor) :]
            break
    else:
        parts = parts[-2:]
    return f"{'/'.join(parts)}:{line}({name})"


def profile_summary(path: Path, requests: int, top: int = 12) -> dict:
    """A thread's profile: its CPU seconds, per request in ms, by area and the top functions
    (own time)."""
    stats = pstats.Stats(str(path)).stats  # type: ignore[attr-defined]
    total = sum(entry[2] for entry in stats.values())
    areas: dict[str, float] = {}
    for (filename, _, name), entry in stats.items():
        area = area_of(filename, name)
        if area == "other" and filename == "~" and entry[4]:
            # A built-in (len, isinstance, a str method) counts where it was called from.
            for (caller_file, _, caller_name), edge in entry[4].items():
                caller = area_of(caller_file, caller_name)
                areas[caller] = areas.get(caller, 0.0) + edge[2]
            continue
        areas[area] = areas.get(area, 0.0) + entry[2]
    functions = sorted(stats.items(), key=lambda item: -item[1][2])[:top]
    return {
        "cpu_seconds": round(total, 3),
        "ms_per_request": round(1000 * total / requests, 3),
        "areas": {
            area: round(seconds, 3)
            for area, seconds in sorted(areas.items(), key=lambda item: -item[1])
        },
        "functions": [
            {"function": short_name(*key), "calls": entry[1], "own_seconds": round(entry[2], 3)}
            for key, entry in functions
        ],
    }


def profile_service(
    model: Path, threads: int, tree: Path, hide: Path | None, texts, tokens: int
) -> dict:
    with tempfile.TemporaryDirectory(prefix="tagger-serve-profile-") as folder:
        out = Path(folder) / "service"
        process, host, port = start_service(model, threads, tree, profile_to=out, hide=hide)
        try:
            load_phase(host, port, [t[:3] for t in texts], 0, process.pid)
            phase = load_phase(host, port, texts, tokens, process.pid)
            found = health(host, port)
        finally:
            stop_service(process, signal.SIGINT)
        if phase["answered"] != phase["requests"]:
            raise SystemExit(f"requests lost or refused: {phase}")
        requests = phase["requests"] + 3 * len(texts)  # the warm-up's too: the profile has them
        return {
            "full_load": phase,
            "texts_per_batch": round(found["texts_tagged"] / max(found["batches"], 1), 2),
            "event_loop_thread": profile_summary(Path(f"{out}.loop.prof"), requests),
            "tagging_thread": profile_summary(Path(f"{out}.tagging.prof"), requests),
        }


# --- the records ---------------------------------------------------------------------------


def _verdict(met: bool) -> str:
    return "met" if met else "not met"


def render(entry: dict) -> str:
    m, lib = entry["machine"], entry["library"]["median"]
    services = entry["services"]
    target = TARGETS["share_of_library"]
    lines = [
        "# Service benchmark",
        "",
        f"- date: {m['date']}; commit {m['commit']}; command: `{m['command']}`",
        f"- machine: {m['cores']} cores, {m['cpu']}; torch {m['torch']}, python {m['python']}; "
        f"load average {m['load_before']} before the run, {entry['load_after']} after",
        f"- model: {entry['model']}; {entry.get('backend', 'torch')} backend, "
        f"{entry['threads']} thread(s) in the service and in the library run; the access log on "
        "(written to /dev/null)",
        f"- requests: {entry['clients']} clients, one sentence per request, "
        f"{entry['requests_per_phase']:,} at full load and {entry['requests_per_phase']:,} at half "
        f"load per round; {entry['rounds']} rounds, each measuring the library and then every "
        "service in turn (interleaved); every figure below is the median over the rounds",
        "- services: "
        + "; ".join(
            f"**{s['name']}**: {s['source']}, {s['http_and_loop']}"
            + (" (the plain install: httptools and uvloop hidden)" if s["plain_install"] else "")
            for s in services
        ),
        "- **not clean figures**: the machine was shared with other jobs while this ran (see the "
        "load average); the clients (one asyncio process) run on the same 2 cores as the service",
        "",
        "## Which figure the target is judged on",
        "",
        "The target compares the service with the library on the same machine. Wall-clock "
        "tokens/s charges the service with whatever else holds the 2 cores meanwhile: the "
        "clients' own CPU (reported below) and the other jobs of a shared machine. The service "
        "process's CPU seconds (user + system, all its threads, from /proc/PID/stat) count its "
        "own work only: HTTP, JSON, batching and tagging. So the target is judged on **tokens per "
        "service CPU second against the library's tokens per CPU second** (one thread in "
        "both); the wall-clock ratio is given beside it and is what a client on this busy "
        "machine sees.",
        "",
        f"## Full load: {entry['clients']} clients, one request each in flight",
        "",
        "| service | tokens per service CPU s | of the library's | tokens/s (wall) | of the "
        "library's | service CPU ms per request | of which the event loop's | client CPU s | "
        "texts per batch | ms per batch | p50 ms | p99 ms |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for s in services:
        full, batches, shares = (
            s["median"]["full_load"],
            s["median"]["batches_at_full_load"],
            s["median"]["shares"],
        )
        lines.append(
            f"| {s['name']} | {full['tokens_per_service_cpu_second']:,.0f} | "
            f"{shares['per_cpu_second']:.0%} | {full['tokens_per_second']:,.0f} | "
            f"{shares['wall']:.0%} | "
            f"{1000 * full['service_cpu_seconds'] / full['requests']:.2f} | "
            f"{1000 * full['event_loop_cpu_seconds'] / full['requests']:.2f} | "
            f"{full['client_cpu_seconds']:.2f} | {batches['texts_per_batch']:.1f} | "
            f"{batches['wall_ms_per_batch']:.0f} | {full['p50_ms']:.1f} | {full['p99_ms']:.1f} |"
        )
    lines += [
        "",
        f"Library (`Tagger.tag` on the same texts in one call, in-process): "
        f"{lib['tokens_per_cpu_second']:,.0f} tokens per CPU second, "
        f"{lib['tokens_per_second']:,.0f} tokens/s of wall time. The shares are medians of each "
        "round's service figure over the same round's library figure. The service's own tagging "
        f"function, no HTTP, on batches of {entry['clients']} texts (the most {entry['clients']} "
        "clients with one request each in flight can fill): "
        f"{lib['tokens_per_cpu_second_in_batches']:,.0f} tokens per CPU second, "
        f"{lib['tokens_per_cpu_second_in_batches'] / lib['tokens_per_cpu_second']:.0%} of the "
        "library's: the most the service can reach at this load however cheap its HTTP side.",
        "",
        "## Half load: half the requests per second of full load, on a fixed schedule",
        "",
        "| service | requests/s | tokens/s | tokens per service CPU s | p50 ms | p99 ms | max ms |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for s in services:
        half = s["median"]["half_load"]
        lines.append(
            f"| {s['name']} | {half['requests_per_second']:,.1f} | "
            f"{half['tokens_per_second']:,.0f} | {half['tokens_per_service_cpu_second']:,.0f} | "
            f"{half['p50_ms']:.1f} | {half['p99_ms']:.1f} | {half['max_ms']:.1f} |"
        )
    ceiling = lib["tokens_per_cpu_second_in_batches"] / lib["tokens_per_cpu_second"]
    lines += ["", "## Targets", ""]
    if ceiling < target:
        lines += [
            f"Tagging alone, in batches of {entry['clients']} texts, reaches {ceiling:.0%} of the "
            f"library's tokens per CPU second, below the target's {target:.0%}: at this load the "
            "target cannot be met by making the service's own work (HTTP, JSON, batching) "
            "cheaper; what is left is the cost per text of tagging small batches.",
            "",
        ]
    for s in services:
        shares, half = s["median"]["shares"], s["median"]["half_load"]
        lines.append(
            f"- {s['name']}: >= {target:.0%} of the library's tokens per CPU second under "
            f"{entry['clients']} clients: {_verdict(shares['per_cpu_second'] >= target)} "
            f"({shares['per_cpu_second']:.0%}); of its wall-clock tokens/s: "
            f"{_verdict(shares['wall'] >= target)} ({shares['wall']:.0%}); p99 <= "
            f"{TARGETS['p99_ms_at_half_load']:.0f} ms at half load: "
            f"{_verdict(half['p99_ms'] <= TARGETS['p99_ms_at_half_load'])} ({half['p99_ms']:.1f} ms)"
        )
    lines.append("")
    return "\n".join(lines)


def render_profile(entry: dict) -> str:
    m = entry["machine"]
    lines = [
        "# Where the service's CPU goes",
        "",
        f"- date: {m['date']}; commit {m['commit']}; command: `{m['command']}`",
        f"- machine: {m['cores']} cores, {m['cpu']}; load average {m['load_before']} before the "
        f"run, {entry['load_after']} after",
        f"- model: {entry['model']}; {entry['threads']} torch thread(s); {entry['clients']} "
        f"clients at full load, {entry['requests_per_phase']:,} requests after a warm-up; the "
        "access log on",
        "- cProfile on the event loop's thread and on the tagging thread, each timed in its own "
        "CPU seconds (time.thread_time): waiting is not counted, and the profiler's own cost "
        "inflates every figure (they are shares, not speeds)",
    ]
    for s in entry["services"]:
        lines += ["", f"## {s['name']} ({s['source']}; {s['http_and_loop']})", ""]
        loop, tagging = s["event_loop_thread"], s["tagging_thread"]
        lines += [
            f"Event loop thread: {loop['cpu_seconds']:.2f} CPU s, {loop['ms_per_request']:.3f} "
            f"ms per request; tagging thread: {tagging['cpu_seconds']:.2f} CPU s, "
            f"{tagging['ms_per_request']:.3f} ms per request; "
            f"{s['texts_per_batch']:.1f} texts per batch.",
            "",
            "| thread | area | CPU s | share of the thread |",
            "|---|---|---:|---:|",
        ]
        for thread, found in (("event loop", loop), ("tagging", tagging)):
            for area, seconds in list(found["areas"].items())[:8]:
                share = seconds / found["cpu_seconds"] if found["cpu_seconds"] else 0.0
                lines.append(f"| {thread} | {area} | {seconds:.3f} | {share:.0%} |")
        lines += ["", "Event loop thread, functions by own time:", ""]
        lines += ["| function | calls | own CPU s |", "|---|---:|---:|"]
        for f in loop["functions"]:
            lines.append(f"| `{f['function']}` | {f['calls']:,} | {f['own_seconds']:.3f} |")
    lines.append("")
    return "\n".join(lines)


# --- the run -------------------------------------------------------------------------------


def service_trees(given: list[str], plain: list[str]) -> list[tuple[str, Path, bool]]:
    """(name, tree, run as on the plain install) of each NAME=TREE; this tree when none."""
    if not given:
        given = ["this tree=."]
    trees = []
    for pair in given:
        name, sep, tree = pair.partition("=")
        if not sep or not name or not (Path(tree) / "tagger" / "serve").is_dir():
            raise SystemExit(f"--service {pair!r}: expected NAME=TREE, a tree holding tagger/serve")
        trees.append((name, Path(tree).resolve(), name in plain))
    unknown = set(plain) - {name for name, _, _ in trees}
    if unknown:
        raise SystemExit(f"--plain {sorted(unknown)[0]!r}: no --service of that name")
    return trees


def tree_source(tree: Path) -> str:
    """What a tree holds: its commit (and whether it has changes) or that it is an export."""
    found = subprocess.run(
        ["git", "-C", str(tree), "rev-parse", "--show-toplevel", "--short", "HEAD"],
        capture_output=True,
        text=True,
    )
    lines = found.stdout.split()
    if found.returncode != 0 or len(lines) != 2 or Path(lines[0]).resolve() != tree:
        return f"source tree {portable_path(tree)}"
    changed = subprocess.run(
        # benchmarks/ aside: the records a run rewrites are not changes to what is measured
        [
            "git",
            "-C",
            str(tree),
            "status",
            "--porcelain",
            "--untracked-files=no",
            "--",
            ".",
            ":!benchmarks",
        ],
        capture_output=True,
        text=True,
    ).stdout.strip()
    return f"commit {lines[1]}{' with uncommitted changes' if changed else ''}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("model", nargs="?", type=Path, default=DEFAULT_MODEL)
    parser.add_argument("--clients", type=int, default=16)
    parser.add_argument("--requests", type=int, default=60, help="per client and phase")
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument(
        "--service", action="append", default=[], help="NAME=TREE: a source tree to serve from"
    )
    parser.add_argument(
        "--plain",
        action="append",
        default=[],
        help="NAME: run that service as on the plain install (httptools and uvloop hidden)",
    )
    parser.add_argument("--profile", action="store_true", help="profile each service instead")
    parser.add_argument(
        "--export",
        choices=["float", "int8"],
        help="serve the model exported (tagger export, float32 or int8 weights) on the onnx "
        "backend, and measure the library on the same export; results go to serve_EXPORT.*",
    )
    args = parser.parse_args()
    if args.profile and args.export:
        parser.error("--profile measures services on the torch backend only")
    trees = service_trees(args.service, args.plain)
    hide = hidden_speedups() if args.plain else None

    def described(name: str, tree: Path, plain: bool) -> dict:
        return {
            "name": name,
            "source": tree_source(tree),
            "plain_install": plain,
            "http_and_loop": server_parts(plain),
        }

    from tagger.apply.tagging import load_tagger
    from tagger.data.corpus import read_sentences

    data = demo_data(None)
    model = ensure_model(args.model, data, epochs=1).resolve()
    backend, record = "torch", "serve"
    if args.export is not None:
        from tagger.apply.exporting import export_model

        backend, record = "onnx", f"serve_{args.export}"
        exported = Path(tempfile.mkdtemp(prefix="tagger-serve-export-")) / "model.tagexport"
        export_model(model, exported, int8=args.export == "int8")
        common_model = f"{portable_path(model)}, exported ({args.export} weights)"
        model = exported
    else:
        common_model = portable_path(model)
    about = machine()
    sentences = [s.tokens for s in read_sentences(data / "test.txt")]
    total = args.clients * args.requests
    texts, half_texts = texts_for(sentences, total), texts_for(sentences, total, seed=2)
    tagger = load_tagger(model, backend, args.threads)

    def tokens_in(some: list[str]) -> int:
        return sum(len(s.tokens) for text in some for s in tagger.tokenize(text))

    counts = {"full": tokens_in(texts), "half": tokens_in(half_texts)}
    per_client = [texts[c :: args.clients] for c in range(args.clients)]
    half_per_client = [half_texts[c :: args.clients] for c in range(args.clients)]
    common = {
        "model": common_model,
        "backend": backend,
        "threads": args.threads,
        "clients": args.clients,
        "requests_per_phase": total,
    }
    RESULTS_DIR.mkdir(exist_ok=True)

    if args.profile:
        profiled = []
        for name, tree, plain in trees:
            found = profile_service(
                model, args.threads, tree, hide if plain else None, per_client, counts["full"]
            )
            profiled.append({**described(name, tree, plain), **found})
            print(f"{name}: {found['event_loop_thread']['areas']}", flush=True)
        entry = {
            "machine": about,
            "load_after": round(os.getloadavg()[0], 2),
            **common,
            "services": profiled,
        }
        (RESULTS_DIR / "serve_profile.json").write_text(
            json.dumps(entry, indent=2) + "\n", encoding="utf-8"
        )
        (RESULTS_DIR / "serve_profile.md").write_text(render_profile(entry), encoding="utf-8")
        print(render_profile(entry))
        return

    library_runs: list[dict] = []
    service_runs: dict[str, list[dict]] = {name: [] for name, _, _ in trees}
    for round_number in range(args.rounds):
        library = library_speed(tagger, texts, counts["full"], args.clients)
        library_runs.append(library)
        print(f"round {round_number + 1}: library {library}", flush=True)
        for name, tree, plain in trees:
            found = measure_service(
                model,
                args.threads,
                tree,
                hide if plain else None,
                per_client,
                half_per_client,
                counts,
                backend,
            )
            full = found["full_load"]
            found["shares"] = {
                "per_cpu_second": full["tokens_per_service_cpu_second"]
                / library["tokens_per_cpu_second"],
                "wall": full["tokens_per_second"] / library["tokens_per_second"],
            }
            service_runs[name].append(found)
            print(f"round {round_number + 1}: {name} {found}", flush=True)
    entry = {
        "machine": about,
        "load_after": round(os.getloadavg()[0], 2),
        **common,
        "rounds": args.rounds,
        "library": {"median": medians(library_runs), "runs": library_runs},
        "services": [
            {
                **described(name, tree, plain),
                "median": medians(service_runs[name]),
                "runs": service_runs[name],
            }
            for name, tree, plain in trees
        ],
        "figures_clean": False,
    }
    (RESULTS_DIR / f"{record}.json").write_text(
        json.dumps(entry, indent=2) + "\n", encoding="utf-8"
    )
    (RESULTS_DIR / f"{record}.md").write_text(render(entry), encoding="utf-8")
    print(render(entry))


if __name__ == "__main__":
    main()
