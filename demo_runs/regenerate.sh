#!/bin/sh
# Regenerate the demo runs bit for bit (the same arrays every time) from the scenario files.
# Usage, from the repository root:  sh demo_runs/regenerate.sh   [python interpreter]
set -e
PY="${1:-python}"
cd "$(dirname "$0")/.."
"$PY" -m compquant simulate demo_runs/scenario-day1.toml -o demo_runs/demo-day1.h5 --seed 1 --truth demo_runs/truth-day1.csv
"$PY" -m compquant simulate demo_runs/scenario-day2.toml -o demo_runs/demo-day2.h5 --seed 2 --truth demo_runs/truth-day2.csv
