#!/usr/bin/env bash
# First contact, as a new user would make it: the README's install (`pip install .`, not
# editable) into a fresh virtual environment in a copy of the project, then the README's
# commands: --version, init, check, one case, the default workflow with its report, bench --quick.
# Prints the wall time of the first default run (numba compiles the SEA kernels in it).
set -euo pipefail
src="$(cd "$(dirname "$0")/.." && pwd)"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
tar -C "$src" --exclude=./.git --exclude='./.venv*' --exclude=./results --exclude='*/__pycache__' -cf - . \
    | tar -C "$work" -xf -
cd "$work"
python3 -m venv .venv && .venv/bin/pip install -q .
step() { echo "newcomer: $*" >&2; }
step "--version";  .venv/bin/sigmagrid --version
step "init, check"; .venv/bin/sigmagrid init my-grid.yaml && .venv/bin/sigmagrid check my-grid.yaml
step "one case";   .venv/bin/sigmagrid case --mechanism gri30.yaml --reactor isolated --temperature 1200 \
    --pressure 101325 --composition "CH4:1,O2:2,N2:7.52" --out methane.nc
.venv/bin/sigmagrid show methane.nc > /dev/null
step "the default workflow"
started=$(date +%s.%N)
.venv/bin/snakemake --cores 2 -q
echo "newcomer: first default run $(python3 -c "print(f'{$(date +%s.%N) - $started:.0f}')") s (kernels compiled in it)" >&2
test -s results/summary.nc && test -s results/reduction.nc
step "report";     .venv/bin/snakemake --report results/report.html > report.log 2>&1 || { cat report.log; exit 1; }
test -s results/report.html
step "bench --quick"; .venv/bin/sigmagrid bench --quick > bench.txt
grep -q "sea_comparison_ratio" bench.txt && grep -q "grid_efficiency" bench.txt
step "done"
