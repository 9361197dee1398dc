#!/usr/bin/env bash
# The project's one test command: the README and .ci/run both call this script,
# so what a user runs and what CI runs cannot drift apart.
set -euo pipefail
cd "$(dirname "$0")/.."
export MPLBACKEND=Agg
python -m pytest "$@"
