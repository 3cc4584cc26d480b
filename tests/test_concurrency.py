"""Two runs on one results folder: the second is refused with a clear message, the first is unharmed.

The workflow relies on Snakemake's directory lock; ``sigmagrid run`` holds a kernel ``flock`` on
``results/.sigmagrid-run.lock``, which the kernel releases however the holder ends (a SIGKILL
leaves no stale lock: checked here too).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import pandas as pd
import pytest
import xarray as xr
import yaml

from conftest import count_tried, run_cli, without_sea

GRID = without_sea({
    "study": "burner preheat, concurrency test",
    "mechanism": "h2o2.yaml",
    "reactors": ["isolated", "constant-pressure"],
    "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [0.7, 1.3]},
    "temperature": [1100.0],
    "pressure": [101325.0, 506625.0],
    "stop": {"max_time": 0.3},
    "batch": {"cases_per_job": 8},
})  # 8 cases, one batch
# The first workflow must still hold its lock when the second starts (a couple of seconds):
# with the SEA comparison on, its 4 cases take several seconds of computing.
SLOW_GRID = {**{k: v for k, v in GRID.items() if k != "sea"},
             "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [1.0]}}


def _wait_for(condition, proc, what: str, limit: float = 300.0) -> None:
    deadline = time.monotonic() + limit
    while not condition():
        if proc.poll() is not None:
            pytest.fail(f"the first run ended before {what}")
        if time.monotonic() > deadline:
            pytest.fail(f"timed out waiting for {what}")
        time.sleep(0.01)


def _all_open(folder) -> int:
    files = sorted((folder / "results" / "cases").glob("*.nc"))
    for path in files:
        with xr.open_dataset(path) as ds:
            ds.load()
    return len(files)


def test_a_second_workflow_on_the_same_folder_is_refused(workdir):
    (workdir / "config" / "config.yaml").write_text(yaml.safe_dump(SLOW_GRID, sort_keys=False))
    first = subprocess.Popen([sys.executable, "-m", "snakemake", "--cores", "1"], cwd=workdir,
                             stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, start_new_session=True)
    locks = workdir / ".snakemake" / "locks"
    _wait_for(lambda: locks.is_dir() and any(locks.iterdir()), first, "Snakemake took its lock")
    second = subprocess.run([sys.executable, "-m", "snakemake", "--cores", "1"], cwd=workdir,
                            capture_output=True, text=True, timeout=300)
    out, _ = first.communicate(timeout=600)
    assert second.returncode != 0
    assert "Directory cannot be locked" in second.stdout + second.stderr
    assert "Traceback" not in second.stdout + second.stderr
    assert first.returncode == 0, out[-3000:]
    assert _all_open(workdir) == 4
    assert len(pd.read_csv(workdir / "results" / "cases.csv")) == 4
    count_tried("concurrent use: second workflows refused", 1)


def _write_config(folder):
    path = folder / "config.yaml"
    path.write_text(yaml.safe_dump(GRID, sort_keys=False))
    return path


def _lock_taken(folder):
    lock = folder / "results" / ".sigmagrid-run.lock"
    return lock.is_file() and lock.read_text().startswith("pid ")


# A process that holds the results folder exactly as `sigmagrid run` does, for as long as the test
# wants (a real run may finish before the second one has started on a fast machine).
HOLDER = ("import sys, time; from pathlib import Path; from sigmagrid import runner\n"
          "with runner.folder_lock(Path(sys.argv[1])):\n    time.sleep(600)\n")


def _holder(results):
    return subprocess.Popen([sys.executable, "-c", HOLDER, str(results)], start_new_session=True)


def test_a_second_command_run_on_the_same_folder_is_refused(tmp_path):
    config = _write_config(tmp_path)
    results = tmp_path / "results"
    first = _holder(results)
    try:
        _wait_for(lambda: _lock_taken(tmp_path), first, "the first run took its lock")
        second = run_cli("run", str(config), "--results", str(results))
    finally:
        os.kill(first.pid, signal.SIGTERM)
        first.wait(timeout=60)
    assert second.returncode == 2 and "Traceback" not in second.stderr
    assert second.stderr.startswith(f"sigmagrid: error: --results: '{results}' is in use by another sigmagrid "
                                    f"run (pid {first.pid})"), second.stderr
    assert not (results / "cases").exists()  # the refused run wrote nothing
    count_tried("concurrent use: second command runs refused", 1)


def test_a_killed_command_run_leaves_no_stale_lock(tmp_path):
    config = _write_config(tmp_path)
    results = tmp_path / "results"
    first = _holder(results)
    _wait_for(lambda: _lock_taken(tmp_path), first, "the first run took its lock")
    os.kill(first.pid, signal.SIGKILL)
    first.wait(timeout=60)
    again = run_cli("run", str(config), "--results", str(results))
    assert again.returncode == 0, again.stderr[-2000:]
    assert _all_open(tmp_path) == 8
    assert list((results / "cases").glob(".*.tmp-nc")) == []
