"""End to end: the Snakemake workflow on a tiny grid, the summary, and the CF checks of a case file."""

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from conftest import copy_workflow, snakemake
from sigmagrid import config as config_mod, grid as grid_mod

TINY = {
    "study": "tiny test grid",
    "mechanism": "h2o2.yaml",
    "reactors": ["isolated", "constant-pressure"],
    "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [0.7, 1.4]},
    "temperature": [1150.0],
    "pressure": [101325.0, 506625.0],
    "stop": {"max_time": 0.5},
    "batch": {"cases_per_job": 3},
}


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    workdir = copy_workflow(tmp_path_factory.mktemp("flow"), TINY)
    done = snakemake(workdir)
    assert done.returncode == 0, done.stderr[-3000:]
    return workdir


def test_every_case_has_a_file_and_a_row(finished):
    grid = grid_mod.expand(config_mod.validate(TINY))
    files = sorted((finished / "results" / "cases").glob("*.nc"))
    assert {f.stem for f in files} == {c.case_id for c in grid.cases}
    table = pd.read_csv(finished / "results" / "cases.csv")
    assert len(table) == len(grid.cases) == 8
    assert set(table["status"]) == {"relaxed"}
    assert "ignition_delay [s]" in table.columns and "balance_residual [1]" in table.columns
    assert (table["balance_residual [1]"] <= 1e-3).all()
    logs = list((finished / "results" / "logs").glob("batch_*.log"))
    assert len(logs) == 3


def test_summary_has_case_coordinates_and_shares(finished):
    with xr.open_dataset(finished / "results" / "summary.nc") as s:
        assert s.sizes["case"] == 8
        for coord in ("reactor", "equivalence_ratio", "initial_temperature", "initial_pressure", "status"):
            assert coord in s.coords
        assert np.allclose(s["integrated_share"].sum("reaction"), 1.0, atol=1e-9)
        rich = s.where((s.equivalence_ratio > 1) & (s.reactor == "isolated"), drop=True)
        assert rich.sizes["case"] == 2
        assert s["entropy_produced"].attrs["units"] == "J K-1"


def test_rerun_does_nothing(finished):
    done = snakemake(finished, "-n")
    assert done.returncode == 0
    assert "Nothing to be done" in done.stdout + done.stderr


def test_case_file_passes_cf_checks(finished, tmp_path):
    # CF 1.10 conventions via the IOOS compliance-checker (reference implementation of the CF checks).
    # One rule is knowingly not met: §4.4 wants a reference date on the time axis ("s since ...");
    # elapsed time in plain seconds is kept so readers do not turn it into ns-resolution dates.
    path = sorted((finished / "results" / "cases").glob("*.nc"))[0]
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    CheckSuite.load_all_available_checkers()
    report = tmp_path / "cf.json"
    ComplianceChecker.run_checker(str(path), ["cf:1.10"], verbose=0, criteria="normal",
                                  output_filename=str(report), output_format="json")
    result = json.loads(report.read_text())["cf:1.10"]
    failures = [item for item in result["high_priorities"] if item["value"][0] < item["value"][1]]
    names = {item["name"] for item in failures}
    assert names <= {"§3.1 Units", "§4.4 Time Coordinate"}, failures
    for item in failures:
        assert all("time" in msg for msg in item["msgs"]), item


def test_summary_read_in_worker_processes_equals_the_serial_read(finished, tmp_path, monkeypatch):
    """A large grid's summary reads its case files in forked workers (store._summary_parts); the
    result must be the serial read's, value for value and in case order, also with a damaged file
    among them (its row: status failed, with the reason)."""
    from sigmagrid import store

    files = sorted((finished / "results" / "cases").glob("*.nc"))
    damaged = tmp_path / "0000000000000000.nc"
    damaged.write_bytes(b"not a netCDF file")
    paths = [*files, damaged]
    monkeypatch.setattr(store, "PARALLEL_READ_FROM", 10**9)
    serial, serial_table = store.summarize(paths)
    monkeypatch.setattr(store, "PARALLEL_READ_FROM", 1)
    monkeypatch.setattr(store.os, "sched_getaffinity", lambda pid: {0, 1}, raising=False)
    parallel, parallel_table = store.summarize(paths)
    # history carries the time of writing (CF), which may differ by a second between the reads
    assert serial.attrs.pop("history") and parallel.attrs.pop("history")
    xr.testing.assert_identical(serial, parallel)
    pd.testing.assert_frame_equal(serial_table, parallel_table)
    row = parallel_table.set_index("case_id").loc[damaged.stem]
    assert row["status"] == "failed" and "unreadable case file" in row["reason"]
    assert (parallel_table["status"] == "relaxed").sum() == len(files)
