#!/usr/bin/env bash
# First contact, as a new user would make it, in a fresh copy of the project: every command the
# README shows, as written and in its order (tests/run_readme.py): the install (`pip install .`,
# not editable) with the first default run, --version, init, check, one case, the report, the
# queries and the xarray examples; then bench --quick. Prints the wall time of each command,
# the first default run's included (numba compiles the SEA kernels in it).
set -euo pipefail
src="$(cd "$(dirname "$0")/.." && pwd)"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
tar -C "$src" --exclude=./.git --exclude='./.venv*' --exclude=./results --exclude='*/__pycache__' -cf - . \
    | tar -C "$work" -xf -
cd "$work"
python3 tests/run_readme.py
test -s results/summary.nc && test -s results/reduction.nc && test -s results/report.html
echo "newcomer: bench --quick" >&2
.venv/bin/sigmagrid bench --quick > bench.txt
grep -q "sea_comparison_ratio" bench.txt && grep -q "grid_efficiency" bench.txt
echo "newcomer: done" >&2
