#!/usr/bin/env bash
# Compares vqforge with scikit-learn and faiss on the same data in one run
# and prints a table of time and distortion ratios (see README, Performance).
#
#   benches/compare/run.sh            # everything (a few minutes)
#   benches/compare/run.sh --readme   # also rewrites the README's table
#
# Sets up its own Python environment (VQFORGE_COMPARE_VENV, default
# target/compare-venv) from PyPI; downloads nothing else.
set -euo pipefail
cd "$(dirname "$0")/../.."
venv="${VQFORGE_COMPARE_VENV:-target/compare-venv}"
if [ ! -x "$venv/bin/python" ]; then
    python3 -m venv "$venv"
fi
"$venv/bin/pip" install --quiet --disable-pip-version-check -r benches/compare/requirements.txt
cargo build --release --locked --bin vqforge --example compare_harness
exec "$venv/bin/python" benches/compare/compare.py \
    --vqforge target/release/vqforge \
    --harness target/release/examples/compare_harness "$@"
