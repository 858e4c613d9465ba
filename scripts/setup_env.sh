#!/usr/bin/env bash
# Create .venv (if missing) and install the CPU build of torch first, then the project with its test tools.
# torch is pinned here because an open range would pull a multi-GB GPU build on a fresh machine.
set -euo pipefail
cd "$(dirname "$0")/.."
PYTHON="${PYTHON:-python3}"
[ -x .venv/bin/python ] || "$PYTHON" -m venv .venv
.venv/bin/python -m pip install --quiet --upgrade pip
.venv/bin/python -m pip install --quiet torch==2.13.0
.venv/bin/python -m pip install --quiet -e ".[test]"
