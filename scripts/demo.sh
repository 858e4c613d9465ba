#!/usr/bin/env bash
# The main job on the bundled demo data: check the files, train, evaluate on the test split,
# then tag new reports (raw text) into JSON Lines and a span table.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup_env.sh
T=.venv/bin/tagger
$T check data/demo/train.txt data/demo/dev.txt data/demo/test.txt
$T train --config configs/default.toml --train data/demo/train.txt --dev data/demo/dev.txt --out runs/demo --overwrite  # the demo replaces its own run
$T evaluate runs/demo/model.tagger data/demo/test.txt --predictions runs/demo/test.predicted.txt
$T tag runs/demo/model.tagger data/demo/new_reports.jsonl --out runs/demo/new_reports.tagged.jsonl
$T tag runs/demo/model.tagger data/demo/new_reports.jsonl --output-format table
