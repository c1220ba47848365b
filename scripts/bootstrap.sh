#!/usr/bin/env bash
# Create .venv (if missing) and install closure-nn with its test extras into it.
# torch is pinned to the CPU build first so that no GPU build is ever pulled.
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${PYTHON:-python3}
if [ ! -x .venv/bin/python ]; then
  "$PY" -m venv .venv
fi
stamp=.venv/.closure-nn-installed
if [ ! -f "$stamp" ] || [ pyproject.toml -nt "$stamp" ]; then
  .venv/bin/python -m pip install -q --upgrade pip >/dev/null 2>&1 || true
  .venv/bin/python -m pip install -q "torch==2.13.0"
  .venv/bin/python -m pip install -q -e ".[test,coolprop]"
  touch "$stamp"
fi
