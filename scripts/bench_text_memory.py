"""Peak memory of `tagger tag` on long plain-text files, which are read in pieces, never whole.

    .venv/bin/python scripts/bench_text_memory.py [MODEL]            # 5 and 50 MB
    .venv/bin/python scripts/bench_text_memory.py [MODEL] --big      # and 500 MB, time-limited

MODEL defaults to runs/demo/model.tagger (made by `bash scripts/demo.sh`); when it is absent, a
model of configs/default.toml is trained for one epoch on the demo data into a temporary folder
(memory depends on the network's shape and the piece size, not on how well it was trained).

Each input is one plain-text file of demo test sentences, detokenised: "paragraphs" text has
paragraphs of one to six sentences between blank lines, some broken over lines; "long lines"
text has a paragraph per line and no blank line at all, so every piece is cut at a sentence
start found by the tokenizer. The command runs in a child process at the lowest priority
(nice 19); its peak resident memory is VmHWM of the command and its workers, sampled while it
runs (`bench_tagging.high_water_kib`). The 500 MB run, when still going after `--time-limit`
minutes, is stopped and recorded as unfinished, with its peak so far and how much of the input
it had read (the offset of its open input file).

The machine is shared, so no speed is recorded. Results go to benchmarks/text_memory.json and .md.
"""

from __future__ import annotations

import argparse
import json
import random
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_tagging import (  # noqa: E402
    DEFAULT_MODEL,
    demo_data,
    detokenise,
    ensure_model,
    high_water_kib,
)
from benchlib import machine  # noqa: E402

from tagger.data.corpus import read_sentences  # noqa: E402

RESULTS_DIR = ROOT / "benchmarks"
STYLES = ("paragraphs", "long lines")


def write_text(sentences: list[str], path: Path, target_bytes: int, style: str, seed: int) -> int:
    """A plain-text file of about `target_bytes` bytes in `style`; returns its paragraphs."""
    rng = random.Random(seed)
    written = paragraphs = 0
    with open(path, "w", encoding="utf-8", newline="") as out:
        while written < target_bytes:
            chosen = [rng.choice(sentences) for _ in range(rng.randint(1, 6))]
            if style == "paragraphs":
                joiner = "\n" if rng.random() < 0.3 else " "
                text = joiner.join(chosen) + "\n\n"
            else:
                text = " ".join(chosen) + "\n"
            out.write(text)
            written += len(text.encode("utf-8"))
            paragraphs += 1
    return paragraphs


def input_read(pid: int, source: Path) -> int:
    """How many bytes of `source` process `pid` has read: the offset of its open file."""
    try:
        for fd in Path(f"/proc/{pid}/fd").iterdir():
            if fd.resolve() == source.resolve():
                fdinfo = Path(f"/proc/{pid}/fdinfo/{fd.name}").read_text()
                return int(fdinfo.split("pos:", 1)[1].split()[0])
    except (OSError, IndexError, ValueError):
        pass
    return 0


def run_tag(model: Path, source: Path, limit_seconds: float, options: list[str]) -> dict:
    """`tagger tag` on `source` at nice 19: peak memory, whether it finished, and how much of
    the input it had read (a document's output is held until its end, so that shows progress)."""
    out = source.with_suffix(".tagged.jsonl")
    command = ["nice", "-n", "19", sys.executable, "-m", "tagger", "tag", str(model),
               str(source), "--out", str(out), *options]  # fmt: skip
    started = time.monotonic()
    with tempfile.TemporaryFile() as stderr:
        child = subprocess.Popen(command, stderr=stderr, cwd=ROOT)
        peak_kib = 0
        while child.poll() is None and time.monotonic() - started < limit_seconds:
            peak_kib = max(peak_kib, high_water_kib(child.pid))
            time.sleep(0.2)
        finished = child.poll() is not None
        read = source.stat().st_size
        if not finished:
            read = input_read(child.pid, source)
            child.terminate()
            child.wait()
        stderr.seek(0)
        summary = stderr.read().decode(errors="replace").strip().splitlines()
    if finished and child.returncode != 0:
        raise RuntimeError(f"tagger tag failed ({child.returncode}): {summary}")
    written = out.stat().st_size if out.exists() else 0
    out.unlink(missing_ok=True)
    return {
        "finished": finished,
        "peak_rss_mb": round(peak_kib / 1024, 1),
        "input_read_mb": round(read / 1e6, 1),
        "output_mb": round(written / 1e6, 1),
        "summary": summary[-1].split(" in ")[0] if finished and summary else "",
    }


def render(entry: dict) -> str:
    m = entry["machine"]
    lines = [
        "# Peak memory of tagging long plain text",
        "",
        f"- date: {m['date']}; commit {m['commit']}; command: `{entry['command']}`",
        f"- machine: {m['cores']} cores, {m['cpu']}; torch {m['torch']}, python {m['python']};"
        f" load average before the run {m['load_before']:.2f} (shared machine: memory only)",
        f"- model: {entry['model']}; tag options: `{entry['options']}`, at nice 19",
        "- input: demo test sentences as one plain-text file; *paragraphs*: blank lines between "
        "paragraphs of 1-6 sentences; *long lines*: a paragraph per line, no blank line",
        "",
        "| input | style | paragraphs | finished | input read MB | peak MB | output MB | summary |",
        "|---|---|---:|---|---:|---:|---:|---|",
    ]
    for run in entry["runs"]:
        finished = "yes" if run["finished"] else f"no, stopped at {entry['time_limit_minutes']} min"
        lines.append(
            f"| {run['megabytes']} MB | {run['style']} | {run['paragraphs']:,} | {finished} | "
            f"{run['input_read_mb']} | {run['peak_rss_mb']} | {run['output_mb']} | "
            f"{run['summary']} |"
        )
    lines += ["", entry["verdict"], ""]
    return "\n".join(lines)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("model", nargs="?", type=Path, default=DEFAULT_MODEL)
    parser.add_argument("--data", type=Path, default=None, help="demo corpus folder")
    parser.add_argument("--sizes-mb", type=float, nargs="+", default=[5.0, 50.0])
    parser.add_argument("--big", action="store_true", help="add a 500 MB input")
    parser.add_argument("--long-lines-mb", type=float, default=5.0, help="0: no such run")
    parser.add_argument("--time-limit", type=float, default=15.0, help="minutes, 500 MB run")
    parser.add_argument("--threads", default="2")
    parser.add_argument("--out", type=Path, default=RESULTS_DIR)
    args = parser.parse_args()

    info = machine()
    data = demo_data(args.data)
    model, described = args.model, str(args.model)
    if not model.exists():
        model = Path(tempfile.mkdtemp(prefix="tagger-text-memory-")) / "run" / "model.tagger"
        described = "configs/default.toml trained for 1 epoch on the demo data"
    model = ensure_model(model, data, epochs=1)
    sentences = [detokenise(s.tokens) for s in read_sentences(data / "test.txt")]
    options = ["--threads", args.threads]

    # (megabytes, style, time limit in seconds): only the big run is cut short.
    plan = [(size, "paragraphs", float("inf")) for size in args.sizes_mb]
    if args.long_lines_mb:
        plan.append((args.long_lines_mb, "long lines", float("inf")))
    if args.big:
        plan.append((500.0, "paragraphs", args.time_limit * 60))
    folder = Path(tempfile.mkdtemp(prefix="tagger-text-memory-"))
    runs = []
    for seed, (size, style, limit) in enumerate(plan, start=1):
        source = folder / f"text-{int(size)}.txt"
        paragraphs = write_text(sentences, source, int(size * 1e6), style, seed)
        run = run_tag(model, source, limit, options)
        run.update(
            megabytes=round(source.stat().st_size / 1e6, 1), style=style, paragraphs=paragraphs
        )
        source.unlink()
        runs.append(run)
        print(json.dumps(run), flush=True)
    shutil.rmtree(folder)  # a stopped run leaves its unfinished output behind

    finished = [r for r in runs if r["finished"] and r["style"] == "paragraphs"]
    small, large = finished[0], finished[-1]
    growth = large["peak_rss_mb"] / small["peak_rss_mb"]
    entry = {
        "machine": info,
        "command": " ".join([Path(sys.executable).name, *sys.argv]),
        "model": described,
        "options": " ".join(options),
        "time_limit_minutes": args.time_limit,
        "runs": runs,
        "verdict": (
            f"Peak memory on {large['megabytes']} MB of text is {growth:.2f}x that on "
            f"{small['megabytes']} MB: "
            + ("flat (under 1.1x)." if growth < 1.1 else "it grows with the input.")
        ),
    }
    args.out.mkdir(parents=True, exist_ok=True)
    (args.out / "text_memory.json").write_text(json.dumps(entry, indent=2) + "\n")
    (args.out / "text_memory.md").write_text(render(entry))
    print(render(entry))
    return 0


if __name__ == "__main__":
    sys.exit(main())
