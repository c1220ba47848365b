#!/usr/bin/env bash
# The test command: set up .venv if needed, then run the whole suite on the CPU.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/bootstrap.sh
CUDA_VISIBLE_DEVICES="" .venv/bin/python -m pytest "$@"
