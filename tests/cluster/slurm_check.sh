#!/usr/bin/env bash
# Runs a small grid through a real one-node SLURM cluster started on this machine and checks the
# results equal those of a local run, variable by variable, to the last digit.
#   bash tests/cluster/slurm_check.sh            (as root; installs slurm-wlm and munge from Debian)
# Uses the Python that runs it (default: .venv/bin/python, else python3) with sigmagrid installed.
set -euo pipefail
REPO="$(cd "$(dirname "$0")/../.." && pwd)"
PY="${PYTHON:-$REPO/.venv/bin/python}"
[ -x "$PY" ] || PY="$(command -v python3)"
PY="$(cd "$(dirname "$PY")" && pwd)/$(basename "$PY")"  # absolute: the runs below change folder
WORK="$(mktemp -d /tmp/sigmagrid-slurm.XXXXXX)"
echo "slurm check: work folder $WORK"

if ! command -v slurmctld >/dev/null || ! command -v munged >/dev/null; then
    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurm-wlm munge >/dev/null
fi
"$PY" -m pip install -q "snakemake-executor-plugin-slurm>=1.0" 2>&1 | grep -v -i warning || true

# munge: one key, one daemon
mkdir -p /etc/munge /var/run/munge /var/log/munge /var/lib/munge
[ -s /etc/munge/munge.key ] || dd if=/dev/urandom of=/etc/munge/munge.key bs=1024 count=1 status=none
chown -R munge: /etc/munge /var/run/munge /var/log/munge /var/lib/munge 2>/dev/null || true
chmod 400 /etc/munge/munge.key
pgrep -x munged >/dev/null || su -s /bin/sh munge -c /usr/sbin/munged 2>/dev/null || /usr/sbin/munged --force

# a single-node cluster, run as root, without accounting
HOST="$(hostname -s)"
CPUS="$(nproc)"
MEM="$(( $(awk '/MemTotal/ {print $2}' /proc/meminfo) / 1024 - 1024 ))"
mkdir -p /etc/slurm /var/spool/slurmctld /var/spool/slurmd /var/log/slurm
cat > /etc/slurm/slurm.conf <<CONF
ClusterName=sigmagrid-check
SlurmctldHost=$HOST
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
StateSaveLocation=/var/spool/slurmctld
SlurmdSpoolDir=/var/spool/slurmd
SlurmctldLogFile=/var/log/slurm/slurmctld.log
SlurmdLogFile=/var/log/slurm/slurmd.log
ReturnToService=2
NodeName=$HOST CPUs=$CPUS RealMemory=$MEM State=UNKNOWN
PartitionName=check Nodes=$HOST Default=YES MaxTime=INFINITE State=UP
CONF
pkill -x slurmctld 2>/dev/null || true
pkill -x slurmd 2>/dev/null || true
sleep 1
slurmctld -c
slurmd -c
for _ in $(seq 30); do sinfo -h -o %T 2>/dev/null | grep -q -E "idle|mixed" && break; sleep 1; done
sinfo

cleanup() { pkill -x slurmd 2>/dev/null || true; pkill -x slurmctld 2>/dev/null || true; }
trap cleanup EXIT

# the same tiny grid, once locally and once through SLURM
for where in local slurm; do
    mkdir -p "$WORK/$where/config"
    cp -r "$REPO/Snakefile" "$REPO/workflow" "$WORK/$where/"
    cat > "$WORK/$where/config/config.yaml" <<CFG
study: SLURM equality check (burner preheat demo)
mechanism: h2o2.yaml
reactors: [isolated, constant-pressure]
feed: {fuel: "H2:1", oxidizer: "O2:1, N2:3.76", equivalence_ratio: [0.8, 1.2]}
temperature: [1150.0]
pressure: [101325.0, 405300.0]
stop: {max_time: 0.5}
batch: {cases_per_job: 2}
CFG
done
(cd "$WORK/local" && "$PY" -m snakemake results/summary.nc --cores 2 -q)
# bounded: a job SLURM can never schedule (say, more CPUs than the node has) pends forever
if ! (cd "$WORK/slurm" && timeout 900 "$PY" -m snakemake results/summary.nc --profile workflow/profiles/slurm \
    --slurm-no-account --slurm-status-command squeue --slurm-init-seconds-before-status-checks 1 \
    --default-resources slurm_partition=check runtime=10 mem_mb=1000 -q); then
    echo "slurm check: the SLURM run failed or did not finish in 900 s; the queue:" >&2
    squeue >&2 || true
    exit 1
fi
"$PY" - "$WORK/local/results" "$WORK/slurm/results" <<'PYCHECK'
import sys
from pathlib import Path

import numpy as np
import xarray as xr

local, cluster = map(Path, sys.argv[1:])
# attributes and scalars that record when and how fast, not what
VARYING = {"history", "created", "wall_time"}
files = sorted((local / "cases").glob("*.nc"))
assert files and len(files) == len(list((cluster / "cases").glob("*.nc")))
for path in files:
    a, b = xr.open_dataset(path), xr.open_dataset(cluster / "cases" / path.name)
    for name in a.variables:
        if name in VARYING or name.endswith("wall_time"):
            continue
        x, y = a[name].values, b[name].values
        same = np.array_equal(x, y, equal_nan=True) if x.dtype.kind == "f" else np.array_equal(x, y)
        assert same, f"{path.name}: {name} differs between the local and the SLURM run"
    for key in set(a.attrs) - VARYING:
        assert a.attrs[key] == b.attrs.get(key) or key.endswith("path"), f"{path.name}: attribute {key} differs"
print(f"slurm check: {len(files)} case files identical to the local run")
PYCHECK
