#!/usr/bin/env bash
# Create .venv (if missing) and install torch's CPU-only build first, then the project with its test
# tools. torch is pinned and installed first because on a machine whose pip knows only the default
# package index, an open range would pull the multi-GB GPU build there; torch's own CPU wheel index
# serves the CPU build, so it is used whenever it answers. The probe is a plain HTTP request to that
# index (never pip's view of it), so a wheel that pip finds locally is not taken for the index.
#
# Sourcing this file (`source scripts/setup_env.sh`) defines the functions without installing
# anything; tests use that to check the probe.
#   TAGGER_TORCH_INDEX       torch's CPU wheel index (default https://download.pytorch.org/whl/cpu)
#   TAGGER_INDEX_WAIT        seconds the probe waits for it, once, no retries (default 3)
#   PYTHON                   interpreter that creates .venv and runs the probe (default python3)

TORCH_PIN="torch==2.13.0"
TORCH_CPU_INDEX="${TAGGER_TORCH_INDEX:-https://download.pytorch.org/whl/cpu}"
INDEX_WAIT="${TAGGER_INDEX_WAIT:-3}"
PYTHON="${PYTHON:-python3}"

# index_answers URL SECONDS: succeeds when URL answers one GET with a 2xx status within SECONDS.
# The wait is bounded by a thread join as well as the socket timeout, because name resolution
# ignores the socket timeout and can hang for much longer on a machine without DNS.
index_answers() {
    "$PYTHON" - "$1" "$2" <<'PROBE'
import os
import sys
import threading
import urllib.request

url, seconds = sys.argv[1], float(sys.argv[2])
answered = []


def ask() -> None:
    try:
        with urllib.request.urlopen(url, timeout=seconds) as response:
            answered.append(200 <= response.status < 300)
    except Exception:
        answered.append(False)


asker = threading.Thread(target=ask, daemon=True)
asker.start()
asker.join(seconds)
sys.stdout.flush()
os._exit(0 if answered and answered[0] else 1)
PROBE
}

# choose_torch_index: prints the one line saying where torch comes from and sets TORCH_INDEX_ARGS
# (the pip options that select it; empty for pip's default index).
choose_torch_index() {
    if index_answers "$TORCH_CPU_INDEX" "$INDEX_WAIT"; then
        TORCH_INDEX_ARGS=(--index-url "$TORCH_CPU_INDEX")
        echo "setup: installing $TORCH_PIN from torch's CPU wheel index $TORCH_CPU_INDEX"
    else
        TORCH_INDEX_ARGS=()
        echo "setup: torch's CPU wheel index $TORCH_CPU_INDEX did not answer within ${INDEX_WAIT}s;" \
            "installing $TORCH_PIN from pip's default index"
    fi
}

# warn_if_gpu_build: the default index may have given a build with GPU libraries; say so.
warn_if_gpu_build() {
    .venv/bin/python -c 'import sys, torch; sys.exit(1 if torch.version.cuda or torch.version.hip else 0)' ||
        echo "setup: warning: the installed torch is a GPU build (large, and unused by tagger)"
}

main() {
    set -euo pipefail
    cd "$(dirname "${BASH_SOURCE[0]}")/.."
    [ -x .venv/bin/python ] || "$PYTHON" -m venv .venv
    .venv/bin/python -m pip install --quiet --upgrade pip
    choose_torch_index
    .venv/bin/python -m pip install --quiet "${TORCH_INDEX_ARGS[@]}" "$TORCH_PIN"
    warn_if_gpu_build
    .venv/bin/python -m pip install --quiet -e ".[test]"
}

if [[ "${BASH_SOURCE[0]}" == "$0" ]]; then
    main "$@"
fi
