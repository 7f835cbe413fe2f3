#!/usr/bin/env bash
# Runs every benchmark in this folder; each prints its figure and its ratio
# against a bare baseline measured in the same run.
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${PY:-.venv/bin/python}
# Byte-compile the package once, as an installed package is: with
# PYTHONDONTWRITEBYTECODE set (as on these machines) every subprocess bench would
# otherwise compile probeflow's sources again at each start.
"$PY" -m compileall -q probeflow
for script in bench/bench_*.py; do
  echo "== $script"
  "$PY" "$script" "$@"
done
