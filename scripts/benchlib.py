"""What every benchmark script records: the machine it ran on, the matrix-product ceiling, and
paths written so that they mean the same on any machine (relative to the project folder, or
`../shared/...` for the corpora kept beside it)."""

from __future__ import annotations

import datetime as dt
import json
import os
import platform
import subprocess
import sys
import time
from collections.abc import Iterable
from pathlib import Path
from statistics import median

ROOT = Path(__file__).resolve().parents[1]


def portable_path(path: str | Path) -> str:
    """`path` as records name it: relative to the project folder when inside it, `../NAME/...`
    when beside it (the shared corpora), else unchanged (a temporary folder says nothing about
    this machine's layout). Relative paths are taken as relative to the project folder."""
    absolute = (ROOT / path).resolve() if not Path(path).is_absolute() else Path(path).resolve()
    for base, prefix in ((ROOT, ""), (ROOT.parent, "../")):
        if absolute.is_relative_to(base) and base != Path(base.anchor):
            return prefix + absolute.relative_to(base).as_posix()
    return str(path)


def portable_command(words: Iterable[str]) -> str:
    """A command line for the records: every absolute path in it made portable."""
    return " ".join(portable_path(w) if Path(w).is_absolute() else w for w in words)


def machine() -> dict:
    """Date, cores, CPU model, versions, threads, commit, load and the command that ran."""
    import torch  # here, so that scripts needing only the paths above do not load torch

    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    commit = subprocess.run(
        ["git", "rev-parse", "--short", "HEAD"], capture_output=True, text=True, cwd=ROOT
    ).stdout.strip()
    return {
        "date": dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "cores": os.cpu_count(),
        "cpu": cpu,
        "torch": torch.__version__,
        "python": platform.python_version(),
        "default_threads": torch.get_num_threads(),
        "commit": commit,
        "load_before": round(os.getloadavg()[0], 2),
        "command": portable_command([f"scripts/{Path(sys.argv[0]).name}", *sys.argv[1:]]),
    }


def write_record(out: Path, result: dict, page: str) -> None:
    """`out`.json (the result) and `out`.md (its page), and the page on the terminal."""
    out.parent.mkdir(parents=True, exist_ok=True)
    out.with_suffix(".json").write_text(json.dumps(result, indent=1) + "\n")
    out.with_suffix(".md").write_text(page)
    print(page)


def matmul_gflops(threads: int, size: int = 1024, repeats: int = 7) -> float:
    """GFLOP/s of a size^3 float32 matrix product (median after a warm-up): the ceiling."""
    import torch

    previous = torch.get_num_threads()
    torch.set_num_threads(threads)
    a, b = torch.randn(size, size), torch.randn(size, size)
    for _ in range(2):
        a @ b
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        a @ b
        times.append(time.perf_counter() - started)
    torch.set_num_threads(previous)
    return 2 * size**3 / median(times) / 1e9
