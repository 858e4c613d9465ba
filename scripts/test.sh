#!/usr/bin/env bash
# Set up .venv, run the linter and the format check, then the whole test suite.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup_env.sh
.venv/bin/ruff check tagger tests scripts
.venv/bin/ruff format --check tagger tests scripts
.venv/bin/python -m pytest "$@"
