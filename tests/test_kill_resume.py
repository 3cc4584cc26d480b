"""Kill the workflow with SIGKILL while it writes case files, rerun it, lose nothing.

Reference: an uninterrupted run of the same config in another folder, by ``runner.run_grid`` (the
library without Snakemake: an independent path to the same files). The resumed results must be
numerically identical to it, case by case (every variable except ``wall_time``, every attribute
except the creation stamp ``history``), every file must open, and no temporary file may be left.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest
import xarray as xr
import yaml

from conftest import REPO, count_tried, without_sea
from sigmagrid import config as config_mod, runner

GRID = without_sea({
    "study": "steam-reformer afterburner, kill test",
    "mechanism": "h2o2.yaml",
    "reactors": ["isolated", "constant-pressure"],
    "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [0.5, 1.0, 2.0]},
    "temperature": [1100.0],
    "pressure": [101325.0, 1013250.0],
    "stop": {"max_time": 0.5},
    "batch": {"cases_per_job": 4},
})  # 12 cases in 3 batches
N_CASES = 12


def _project(folder):
    for name in ("Snakefile", "workflow", "config", "profiles"):
        src = REPO / name
        (shutil.copytree if src.is_dir() else shutil.copy)(src, folder / name)
    (folder / "config" / "config.yaml").write_text(yaml.safe_dump(GRID, sort_keys=False))
    return folder


def _snakemake(folder, *args, **kwargs):
    return subprocess.run([sys.executable, "-m", "snakemake", "--cores", "2", *args], cwd=folder,
                          capture_output=True, text=True, timeout=600, **kwargs)


def _temporaries(folder):
    return sorted((folder / "results" / "cases").glob(".*.tmp-nc"))


def _kill_while_writing(folder) -> dict:
    """Start Snakemake in its own process group; SIGKILL the group once case files are being written."""
    log = open(folder / "killed-run.log", "w")
    proc = subprocess.Popen([sys.executable, "-m", "snakemake", "--cores", "2"], cwd=folder, stdout=log,
                            stderr=subprocess.STDOUT, start_new_session=True)
    cases = folder / "results" / "cases"
    seen = {"finished_files": 0, "temporaries_at_kill": 0}
    deadline = time.monotonic() + 300
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            finished = list(cases.glob("*.nc")) if cases.is_dir() else []
            writing = _temporaries(folder) if cases.is_dir() else []
            # the moment a case file is half-written, after at least one has been finished
            if finished and writing:
                os.killpg(proc.pid, signal.SIGKILL)  # its group: Snakemake and its batch jobs, as a reboot does
                seen = {"finished_files": len(finished), "temporaries_at_kill": len(writing)}
                break
            time.sleep(0.002)
        else:
            pytest.fail("the workflow ended (or hung) before it could be killed mid-write: enlarge GRID")
    finally:
        proc.wait(timeout=60)
        log.close()
    assert proc.returncode == -signal.SIGKILL
    return seen


def _same_case(a: xr.Dataset, b: xr.Dataset, name: str) -> None:
    assert set(a.variables) == set(b.variables), name
    for var in a.variables:
        if var.endswith("wall_time"):  # measured, not computed
            continue
        x, y = a[var].values, b[var].values
        if x.dtype.kind in "fc":
            assert np.array_equal(x, y, equal_nan=True), (name, var)
        else:
            assert np.array_equal(x, y), (name, var)
        assert a[var].attrs.keys() == b[var].attrs.keys(), (name, var)
    assert {k: v for k, v in a.attrs.items() if k != "history"} == \
        {k: v for k, v in b.attrs.items() if k != "history"}, name


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    folder = tmp_path_factory.mktemp("uninterrupted")
    runner.run_grid(config_mod.validate(GRID), folder / "results", report=lambda line: None)
    return folder


def test_killed_mid_write_then_resumed_equals_an_uninterrupted_run(reference, tmp_path):
    folder = _project(tmp_path)
    seen = _kill_while_writing(folder)
    count_tried("kill-and-resume: SIGKILLs while a case file was half-written", 1)
    cases = folder / "results" / "cases"

    # Right after the kill: what is there under a final name is whole (atomic rename).
    for path in cases.glob("*.nc"):
        with xr.open_dataset(path) as ds:
            ds.load()
    assert seen["finished_files"] < N_CASES

    # Snakemake's lock survives a SIGKILL: a rerun says so and names --unlock.
    blocked = _snakemake(folder)
    seen["stale_lock"] = blocked.returncode != 0 and "--unlock" in blocked.stdout + blocked.stderr
    if blocked.returncode != 0:
        assert seen["stale_lock"], blocked.stderr[-2000:]
        unlocked = _snakemake(folder, "--unlock")
        assert unlocked.returncode == 0, unlocked.stderr[-2000:]
        resumed = _snakemake(folder)
    else:
        resumed = blocked
    assert resumed.returncode == 0, resumed.stderr[-3000:]
    text = resumed.stdout + resumed.stderr
    assert "incomplete" in text.lower() or "Nothing to be done" not in text

    ours = sorted(p.name for p in cases.glob("*.nc"))
    theirs = sorted(p.name for p in (reference / "results" / "cases").glob("*.nc"))
    assert ours == theirs and len(ours) == N_CASES
    assert _temporaries(folder) == [], "a temporary file was left behind"
    for name in ours:
        with xr.open_dataset(cases / name) as a, xr.open_dataset(reference / "results" / "cases" / name) as b:
            _same_case(a.load(), b.load(), name)
    with xr.open_dataset(folder / "results" / "summary.nc") as a, \
            xr.open_dataset(reference / "results" / "summary.nc") as b:
        _same_case(a.load(), b.load(), "summary.nc")
    ours_table = pd.read_csv(folder / "results" / "cases.csv").drop(columns=["wall_time [s]"])
    ref_table = pd.read_csv(reference / "results" / "cases.csv").drop(columns=["wall_time [s]"])
    pd.testing.assert_frame_equal(ours_table, ref_table)
    count_tried("kill-and-resume: cases compared with an uninterrupted run", len(ours))
    print(f"killed with {seen['finished_files']} case files finished and {seen['temporaries_at_kill']} "
          f"being written; stale lock: {seen['stale_lock']}; resumed to {N_CASES} identical cases")

    # And a third run has nothing left to do.
    again = _snakemake(folder, "-n")
    assert again.returncode == 0 and "Nothing to be done" in again.stdout + again.stderr


def test_a_temporary_left_by_a_dead_writer_is_removed_and_a_live_ones_kept(tmp_path):
    # What a SIGKILL during a write leaves (the pid in the name is of a process that is gone),
    # next to the temporary of a writer that is still alive (this test process).
    from sigmagrid import store

    target = tmp_path / "summary.nc"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    stale = tmp_path / f".summary.nc.{dead.stdout.strip()}.abc123.tmp-nc"
    live = tmp_path / f".summary.nc.{os.getpid()}.def456.tmp-nc"
    stale.write_bytes(b"CDF\x01 half a file")
    live.write_bytes(b"CDF\x01 being written")
    store.write_text_atomic("x", tmp_path / "other.txt")  # another target: leaves both alone
    assert stale.exists() and live.exists()
    store.write_atomic(xr.Dataset({"a": ("x", np.arange(3.0))}), target)
    assert not stale.exists() and live.exists() and xr.open_dataset(target).sizes["x"] == 3
    count_tried("kill-and-resume: stale temporaries cleaned", 1)
