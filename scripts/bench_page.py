"""The evaluation page's weight and the time a browser takes to open it.

    .venv/bin/python scripts/bench_page.py [MODEL] [--rounds 7]

Writes the page `tagger evaluate MODEL data/demo/test.txt --html` makes (MODEL defaults to
runs/demo/model.tagger, made by `bash scripts/demo.sh`; its run folder beside it adds the training
curve), records its size, and opens it in headless Chromium (Debian's `chromium`) in `--rounds`
rounds, each also opening a blank page of a few bytes the same way, in turns. A browser's start
costs far more than a small page, so the page's own time is the difference of the two medians:
what a reader waits beyond the browser's start. Each opening renders the page into a screenshot
(layout and paint, not just parsing), network requests sent to a closed local port.

The target (issue 12): under 2 seconds and under 1 MB for the demo's test split. Writes
benchmarks/page.{json,md}. Needs a quiet machine for the time; the size holds anywhere.
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "scripts"))

from benchlib import machine, portable_path, write_record  # noqa: E402

DEMO = ROOT / "data" / "demo"
TARGET_SECONDS, TARGET_BYTES = 2.0, 1_000_000
BLANK = "<!doctype html><title>blank</title><p>.</p>\n"
WIDTH, HEIGHT = 1100, 3000  # the page's full length on a desktop screen


def write_page(model: Path, out: Path) -> float:
    """`tagger evaluate --html` on the demo's test split; returns its seconds end to end."""
    command = [sys.executable, "-m", "tagger", "evaluate", str(model), str(DEMO / "test.txt"),
               "--html", str(out)]  # fmt: skip
    started = time.perf_counter()
    subprocess.run(command, check=True, cwd=ROOT, capture_output=True)
    return time.perf_counter() - started


def open_in_browser(browser: str, page: Path, work: Path) -> float:
    """Seconds for headless Chromium to start, lay out and paint `page` into a screenshot."""
    command = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
               "--proxy-server=127.0.0.1:9", f"--user-data-dir={work / 'profile'}",
               f"--window-size={WIDTH},{HEIGHT}", f"--screenshot={work / 'shot.png'}",
               page.resolve().as_uri()]  # fmt: skip
    started = time.perf_counter()
    subprocess.run(command, check=True, capture_output=True, timeout=120)
    seconds = time.perf_counter() - started
    if not (work / "shot.png").stat().st_size:
        raise RuntimeError(f"Chromium wrote no screenshot of {page}")
    return seconds


def measure(model: Path, rounds: int, browser: str) -> dict:
    work = Path(tempfile.mkdtemp(prefix="tagger-bench-page-"))
    try:
        page, blank = work / "test.html", work / "blank.html"
        writing = write_page(model, page)
        blank.write_text(BLANK, encoding="utf-8")
        open_in_browser(browser, blank, work)  # the first start fills the profile and caches
        pages = {"page": page, "blank": blank}
        times: dict[str, list[float]] = {name: [] for name in pages}
        for round_number in range(rounds):
            order = ("page", "blank") if round_number % 2 == 0 else ("blank", "page")
            for name in order:
                times[name].append(round(open_in_browser(browser, pages[name], work), 3))
        size = page.stat().st_size
    finally:
        shutil.rmtree(work, ignore_errors=True)
    own = statistics.median(times["page"]) - statistics.median(times["blank"])
    return {
        "model": portable_path(model),
        "bytes": size,
        "writing_seconds": round(writing, 2),
        "browser_seconds": times,
        "page_seconds": round(own, 3),
        "rounds": rounds,
        "browser": subprocess.run(
            [browser, "--version"], capture_output=True, text=True
        ).stdout.strip(),
    }


def render(result: dict) -> str:
    m = result["machine"]
    times = result["browser_seconds"]
    met = result["page_seconds"] < TARGET_SECONDS and result["bytes"] < TARGET_BYTES
    return "\n".join(
        [
            "# The evaluation page: weight and opening time",
            "",
            f"`tagger evaluate {result['model']} data/demo/test.txt --html` (the demo's test "
            f"split, the run folder's training curve beside it), opened in headless "
            f"{result['browser']} at {WIDTH}x{HEIGHT} into a screenshot, {result['rounds']} rounds "
            "taking turns with a blank page; network requests go to a closed local port. Load "
            f"average before the run: {m['load_before']}.",
            "",
            "| | figure | target |",
            "|---|---:|---:|",
            f"| page size | {result['bytes'] / 1000:,.0f} kB | under 1,000 kB |",
            f"| opening the page (median) | {statistics.median(times['page']):.2f} s | |",
            f"| opening a blank page (median) | {statistics.median(times['blank']):.2f} s | |",
            f"| the page's own time (the difference) | {result['page_seconds']:.2f} s | under 2 s |",
            f"| writing the page (`evaluate --html`, end to end) | "
            f"{result['writing_seconds']:.1f} s | |",
            "",
            f"Both targets {'met' if met else 'not met'}. Opening includes the browser's own "
            "start, which no reader of an already open browser pays; the difference is what the "
            "page itself costs to parse, lay out and paint.",
            "",
            f"_{m['date']}, commit {m['commit']}, `{m['command']}`._",
            "",
        ]
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("model", nargs="?", type=Path, default=ROOT / "runs/demo/model.tagger")
    parser.add_argument("--rounds", type=int, default=7)
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "page")
    args = parser.parse_args()
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        sys.exit("no Chromium to open the page in: apt-get install -y chromium")
    if not args.model.exists():
        sys.exit(f"{args.model}: no model; make one with bash scripts/demo.sh")
    result = measure(args.model.resolve(), args.rounds, browser)
    result["machine"] = machine()
    write_record(args.out, result, render(result))


if __name__ == "__main__":
    main()
