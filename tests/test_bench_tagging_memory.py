"""The tagging benchmark's memory figure (scripts/bench_tagging.py) is the command's own."""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import pytest

MIB = 1024 * 1024


@pytest.fixture(scope="module")
def bench_tagging(load_script):
    return load_script("bench_tagging")


@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="needs Linux /proc")
def test_peak_memory_is_the_childs_not_the_parents(bench_tagging) -> None:
    # Linux carries the parent's peak into a child's ru_maxrss across exec, so a large benchmark
    # process made a small command look large; VmHWM belongs to the command alone.
    parent_ballast = bytearray(400 * MIB)
    parent_ballast[::4096] = b"\1" * len(parent_ballast[::4096])
    script = "import time; b = bytearray(100 * 2**20); b[::4096] = b'\\1' * len(b[::4096]); time.sleep(1)"
    child = subprocess.Popen([sys.executable, "-c", script])
    peak = 0
    while child.poll() is None:
        peak = max(peak, bench_tagging.high_water_kib(child.pid))
        time.sleep(0.02)
    assert child.returncode == 0
    assert 100 * 1024 <= peak < 250 * 1024  # the child's 100 MiB and its interpreter, not 400+
    assert bench_tagging.high_water_kib(child.pid) == 0  # an ended process counts nothing
    del parent_ballast
