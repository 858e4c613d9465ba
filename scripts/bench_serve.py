"""Service benchmark: `tagger serve` under 16 concurrent clients sending one-sentence requests,
beside the library's own tagging speed measured in the same run.

    .venv/bin/python scripts/bench_serve.py [MODEL] [--requests 60] [--clients 16] [--threads 1]

MODEL defaults to runs/demo/model.tagger; when it is absent, a model with configs/default.toml is
trained on the demo data for one epoch first (its speed is that of any model of its shape).

Measured, in this order:
  * the library: `Tagger.tag` on the very texts the clients send, all in one call, in this
    process with --threads torch threads (no start-up, no HTTP): tokens/s;
  * full load: the service in a child process (--threads torch threads), CLIENTS threads here each
    sending REQUESTS requests of one sentence back to back over a kept-alive connection: p50/p99
    latency, requests/s, tokens/s and its ratio to the library's, and the batches the service
    formed (from GET /health);
  * half load: the same clients sending, on a fixed schedule, half the requests per second full
    load reached (the latency a client sees when the service is not saturated).
Every request must be answered 200 with one document; a lost or refused request fails the run.
Bounded: it stops after CLIENTS x REQUESTS requests per phase. The clients share the machine with
the service, so its throughput here is a lower bound of what the service gives remote clients.
Results go to benchmarks/serve.json and benchmarks/serve.md.
"""

from __future__ import annotations

import argparse
import http.client
import json
import math
import os
import random
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_tagging import DEFAULT_MODEL, demo_data, detokenise, ensure_model  # noqa: E402
from benchlib import machine, portable_path  # noqa: E402

RESULTS_DIR = ROOT / "benchmarks"
TARGETS = {"share_of_library": 0.8, "p99_ms_at_half_load": 100.0}


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


def texts_for(sentences: list[list[str]], count: int, seed: int = 1) -> list[str]:
    rng = random.Random(seed)
    return [detokenise(rng.choice(sentences)) for _ in range(count)]


def library_speed(model: Path, texts: list[str], threads: int) -> dict:
    """Tokens/s of `Tagger.tag` on `texts` in one call, the records built as the service does."""
    from tagger.apply.tagger import Tagger

    tagger = Tagger.load(model, threads=threads)
    tokens = sum(len(s.tokens) for text in texts for s in tagger.tokenize(text))
    tagger.tag(texts[:64])  # the first call builds kernels; not what is measured
    started = time.perf_counter()
    found = tagger.tag(texts)
    json.dumps([[m.to_record() for m in mentions] for mentions in found])
    seconds = time.perf_counter() - started
    return {"tokens": tokens, "seconds": round(seconds, 3), "tokens_per_second": tokens / seconds}


def start_service(model: Path, threads: int) -> tuple[subprocess.Popen, str, int]:
    process = subprocess.Popen(
        [sys.executable, "-m", "tagger", "serve", str(model), "--port", "0"]
        + ["--threads", str(threads), "--no-access-log", "--queue-requests", "1024"],
        cwd=ROOT,
        stderr=subprocess.PIPE,
        text=True,
    )
    line = process.stderr.readline()
    found = re.search(r"at http://([\d.]+):(\d+);", line)
    if found is None:
        process.kill()
        raise SystemExit(f"the service did not start: {line}{process.stderr.read()}")
    return process, found[1], int(found[2])


def _client(host: str, port: int, texts: list[str], starts: list[float] | None, out: list) -> None:
    """Send each text as one request; `starts` (perf_counter times) paces them, else back to back."""
    connection = http.client.HTTPConnection(host, port, timeout=120)
    for i, text in enumerate(texts):
        if starts is not None:
            time.sleep(max(0.0, starts[i] - time.perf_counter()))
        body = json.dumps({"texts": [text]})
        began = time.perf_counter()
        connection.request("POST", "/tag", body, {"Content-Type": "application/json"})
        response = connection.getresponse()
        answer = response.read()
        took = time.perf_counter() - began
        ok = response.status == 200 and len(json.loads(answer)["documents"]) == 1
        out.append((took, ok, response.status))
    connection.close()


def load_phase(
    host: str, port: int, per_client: list[list[str]], rate: float | None = None
) -> dict:
    """Every client's texts sent at once (rate None) or `rate` requests/s spread over them."""
    results: list[list] = [[] for _ in per_client]
    began = time.perf_counter() + 0.2
    threads = []
    for c, texts in enumerate(per_client):
        starts = None
        if rate is not None:  # client c sends at began + (k * clients + c) / rate
            clients = len(per_client)
            starts = [began + (k * clients + c) / rate for k in range(len(texts))]
        thread = threading.Thread(target=_client, args=(host, port, texts, starts, results[c]))
        threads.append(thread)
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    wall = time.perf_counter() - began
    flat = [r for rs in results for r in rs]
    sent = sum(len(texts) for texts in per_client)
    answered = sum(1 for _, ok, _ in flat if ok)
    return {
        "requests": sent,
        "answered": answered,
        "statuses": sorted({status for _, _, status in flat}),
        "seconds": round(wall, 3),
        "requests_per_second": round(sent / wall, 1),
        **latency_summary([took for took, _, _ in flat]),
    }


def health(host: str, port: int) -> dict:
    connection = http.client.HTTPConnection(host, port, timeout=30)
    connection.request("GET", "/health")
    found = json.loads(connection.getresponse().read())
    connection.close()
    return found


def render(entry: dict) -> str:
    m, lib, full, half = entry["machine"], entry["library"], entry["full_load"], entry["half_load"]
    share = full["tokens_per_second"] / lib["tokens_per_second"]
    lines = [
        "# Service benchmark",
        "",
        f"- date: {m['date']}; commit {m['commit']}; command: `{m['command']}`",
        f"- machine: {m['cores']} cores, {m['cpu']}; torch {m['torch']}, python {m['python']}; "
        f"load average {m['load_before']} before the run, {entry['load_after']} after",
        f"- model: {entry['model']}; {entry['threads']} torch thread(s) in the service and in the "
        "library run",
        f"- requests: {entry['clients']} clients, one sentence per request, "
        f"{full['requests']:,} at full load, {half['requests']:,} at half load",
        "- **not clean figures**: the machine was shared with other long jobs while this ran "
        "(see the load average), and the clients run on the same 2 cores as the service",
        "",
        "| phase | requests | answered | requests/s | tokens/s | p50 ms | p99 ms | max ms |",
        "|---|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for name, phase in (("full load", full), ("half load", half)):
        lines.append(
            f"| {name} | {phase['requests']:,} | {phase['answered']:,} | "
            f"{phase['requests_per_second']:,.1f} | {phase['tokens_per_second']:,.0f} | "
            f"{phase['p50_ms']} | {phase['p99_ms']} | {phase['max_ms']} |"
        )
    batches = entry["batches_at_full_load"]
    lines += [
        "",
        f"Library (`Tagger.tag` on the same texts in one call, in-process): "
        f"{lib['tokens_per_second']:,.0f} tokens/s. The service at full load: "
        f"{share:.0%} of it.",
        "",
        f"Batches at full load: {batches['batches']:,} for {batches['texts']:,} texts, "
        f"{batches['texts'] / max(batches['batches'], 1):.1f} texts per batch on average, "
        f"at most {batches['largest']} (the library tags 64 sentences per batch); "
        f"{1000 * full['seconds'] / max(batches['batches'], 1):.0f} ms of wall time per batch. "
        "Full-load clients keep at most one request each in flight, so batches stay small.",
        "",
        "## Targets",
        "",
        f"- >= {TARGETS['share_of_library']:.0%} of the library's tokens/s under "
        f"{entry['clients']} clients: {'met' if share >= TARGETS['share_of_library'] else 'not met'} "
        f"({share:.0%})",
        f"- p99 <= {TARGETS['p99_ms_at_half_load']:.0f} ms at half load: "
        f"{'met' if half['p99_ms'] <= TARGETS['p99_ms_at_half_load'] else 'not met'} "
        f"({half['p99_ms']} ms)",
        "",
    ]
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("model", nargs="?", type=Path, default=DEFAULT_MODEL)
    parser.add_argument("--clients", type=int, default=16)
    parser.add_argument("--requests", type=int, default=60, help="per client and phase")
    parser.add_argument("--threads", type=int, default=1)
    args = parser.parse_args()

    from tagger.data.corpus import read_sentences

    data = demo_data(None)
    model = ensure_model(args.model, data, epochs=1)
    about = machine()
    sentences = [s.tokens for s in read_sentences(data / "test.txt")]
    total = args.clients * args.requests
    texts = texts_for(sentences, total)
    per_client = [texts[c :: args.clients] for c in range(args.clients)]
    library = library_speed(model, texts, args.threads)
    tokens_per_text = library["tokens"] / total
    print(f"library: {library['tokens_per_second']:,.0f} tokens/s", flush=True)

    process, host, port = start_service(model, args.threads)
    try:
        load_phase(host, port, [t[:3] for t in per_client])  # warm-up: kernels, connections
        before = health(host, port)
        full = load_phase(host, port, per_client)
        after = health(host, port)
        full["tokens_per_second"] = round(full["requests_per_second"] * tokens_per_text, 1)
        print(f"full load: {full}", flush=True)
        half_texts = texts_for(sentences, total, seed=2)
        half = load_phase(
            host,
            port,
            [half_texts[c :: args.clients] for c in range(args.clients)],
            rate=full["requests_per_second"] / 2,
        )
        half["tokens_per_second"] = round(half["requests_per_second"] * tokens_per_text, 1)
        print(f"half load: {half}", flush=True)
    finally:
        process.send_signal(signal.SIGTERM)
        process.communicate(timeout=120)
    for phase in (full, half):
        if phase["answered"] != phase["requests"]:
            raise SystemExit(f"requests lost or refused: {phase}")
    entry = {
        "machine": about,
        "load_after": round(os.getloadavg()[0], 2),
        "model": portable_path(model),
        "threads": args.threads,
        "clients": args.clients,
        "library": library,
        "full_load": full,
        "half_load": half,
        "batches_at_full_load": {
            "batches": after["batches"] - before["batches"],
            "texts": after["texts_tagged"] - before["texts_tagged"],
            "largest": after["largest_batch"],
        },
        "figures_clean": False,
    }
    RESULTS_DIR.mkdir(exist_ok=True)
    (RESULTS_DIR / "serve.json").write_text(json.dumps(entry, indent=2) + "\n", encoding="utf-8")
    (RESULTS_DIR / "serve.md").write_text(render(entry), encoding="utf-8")
    print(render(entry))


if __name__ == "__main__":
    main()
