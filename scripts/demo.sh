#!/usr/bin/env bash
# The main job on the shipped demo data: set up .venv if needed, then run the demo.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/bootstrap.sh
CUDA_VISIBLE_DEVICES="" .venv/bin/closure-nn demo "$@"
