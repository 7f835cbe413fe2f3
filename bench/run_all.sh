#!/usr/bin/env bash
# Runs every benchmark in this folder; each prints its figure and its ratio
# against a bare baseline measured in the same run.
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${PY:-.venv/bin/python}
for script in bench/bench_*.py; do
  echo "== $script"
  "$PY" "$script" "$@"
done
