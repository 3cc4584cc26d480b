"""A case whose integration fails is stored as failed with the solver's message; its batch goes on.

The failure is real, not simulated: a reaction whose rate constant overflows to infinity above
about 2900 K (k = A T^b with b = 89, A = 1e-300: exp(b ln T) exceeds the largest double) makes
CVODES stop on a non-finite right-hand side. Below that temperature the reaction is negligible
(k < 1e-2 cm3/(mol s) at 2300 K), so the cooler cases of the same batch relax normally and must
match Cantera's equilibrium (reference library).
"""

from __future__ import annotations

import math

import cantera as ct
import numpy as np
import pandas as pd
import pytest
import xarray as xr
import yaml

from conftest import count_tried, run_cli, without_sea
from sigmagrid import config as config_mod, diagnostics, grid as grid_mod, mechanism, runner, store

CONFIG = without_sea({
    "study": "afterburner hot-spot screening (failure test)",
    "mechanism": "pathological.yaml",
    "reactors": ["isolated", "constant-pressure"],
    "compositions": [{"name": "lean", "composition": "H2:1, O2:1, N2:3.76"}],
    "temperature": [900.0, 3000.0],
    "pressure": [101325.0],
    "stop": {"max_time": 0.5},
    "batch": {"cases_per_job": 4},
})


def _pathological(folder):
    with open(mechanism.resolve("h2o2.yaml")) as handle:
        data = yaml.safe_load(handle)
    data["reactions"].append({"equation": "H2 + O2 <=> 2 OH", "rate-constant": {"A": 1e-300, "b": 89.03, "Ea": 0.0}})
    (folder / "pathological.yaml").write_text(yaml.safe_dump(data, sort_keys=False))


@pytest.fixture(scope="module")
def workflow_run(tmp_path_factory):
    """The two commands the workflow's rules run (workflow/rules/cases.smk, summary.smk)."""
    folder = tmp_path_factory.mktemp("failing")
    _pathological(folder)
    (folder / "config.yaml").write_text(yaml.safe_dump(CONFIG, sort_keys=False))
    batch = run_cli("batch", "config.yaml", "--index", "0", "--out-dir", "results/cases", cwd=folder)
    files = sorted(str(p) for p in (folder / "results" / "cases").glob("*.nc"))
    summary = run_cli("summarize", *files, "--summary", "results/summary.nc", "--table", "results/cases.csv",
                      cwd=folder)
    return folder, batch, summary


def test_the_batch_completes_and_the_summary_names_the_failures(workflow_run):
    folder, batch, summary = workflow_run
    assert batch.returncode == 0, batch.stderr[-3000:]  # a failed case is a result, not a crash
    assert summary.returncode == 0, summary.stderr[-3000:]
    assert batch.stderr.count(": failed in ") == 2 and batch.stderr.count(": relaxed in ") == 2  # progress: stderr
    table = pd.read_csv(folder / "results" / "cases.csv", keep_default_na=False)
    assert len(table) == 4
    failed = table[table["status"] == "failed"]
    assert sorted(failed["initial_temperature [K]"].astype(float)) == [3000.0, 3000.0]
    for reason in failed["reason"]:
        assert reason.startswith("reactor integration at t = 0 s: ")
        assert "CVodes error" in reason and "non-finite" in reason  # the solver's own words
    assert set(table[table["status"] != "failed"]["status"]) == {"relaxed"}
    count_tried("failure isolation: cases in a batch with forced solver failures", len(table))


def test_the_other_cases_of_the_batch_are_stored_and_right(workflow_run):
    folder, _, _ = workflow_run
    gas = ct.Solution(str(folder / "pathological.yaml"))
    files = sorted((folder / "results" / "cases").glob("*.nc"))
    assert len(files) == 4
    for path in files:
        with xr.open_dataset(path) as ds:
            if ds.attrs["status"] == "failed":
                assert ds["entropy_production"].attrs["comment"].startswith("missing: ")
                assert math.isnan(float(ds["balance_residual"]))
                assert "case failed (reactor integration" in ds["balance_residual"].attrs["comment"]
                continue
            held = {"isolated": "UV", "constant-pressure": "HP"}[ds.attrs["reactor"]]
            gas.TPX = ds.attrs["initial_temperature"], ds.attrs["initial_pressure"], ds.attrs["composition"]
            gas.equilibrate(held)  # reference library
            assert float(ds["final_temperature"]) == pytest.approx(gas.T, abs=1.0)
            assert float(ds["balance_residual"]) < 1e-3


def test_an_internal_error_in_one_case_does_not_stop_the_batch(tmp_path, monkeypatch):
    # A bug of ours (here: the diagnostics raise for one case) becomes a failed case file.
    config = config_mod.validate(without_sea({"mechanism": "h2o2.yaml", "reactors": ["isolated"],
                                              "feed": {"fuel": "H2:1", "oxidizer": "O2:1,N2:3.76",
                                                       "equivalence_ratio": [0.5, 1.0, 2.0]},
                                              "temperature": [1100.0], "pressure": [101325.0],
                                              "stop": {"max_time": 0.2}}))
    cases = sorted(grid_mod.expand(config).cases, key=lambda c: c.case_id)
    victim = cases[1]
    real = diagnostics.evaluate

    def sometimes_broken(gas, temperature, density, mass_fractions):
        if len(np.atleast_1d(temperature)) > 1 and abs(gas.molecular_weights[0] - 2.016) < 0.01 \
                and sometimes_broken.case == victim.case_id:
            raise ZeroDivisionError("deliberate fault for the test")
        return real(gas, temperature, density, mass_fractions)

    monkeypatch.setattr(diagnostics, "evaluate", sometimes_broken)
    written = []
    for case in cases:
        sometimes_broken.case = case.case_id
        written += runner.run_cases(config, [case], tmp_path, report=lambda line: None)
    statuses = {p.stem: store.open_case(p).attrs for p in written}
    assert statuses[victim.case_id]["status"] == "failed"
    assert "internal error" in statuses[victim.case_id]["reason"]
    assert "ZeroDivisionError" in statuses[victim.case_id]["reason"]
    others = [a["status"] for cid, a in statuses.items() if cid != victim.case_id]
    assert others == ["relaxed", "relaxed"]
    count_tried("failure isolation: internal errors injected", 1)


def test_an_unreadable_case_file_is_listed_not_fatal(tmp_path):
    config = config_mod.validate(without_sea({"mechanism": "h2o2.yaml", "reactors": ["isolated", "constant-pressure"],
                                              "feed": {"fuel": "H2:1", "oxidizer": "O2:1,N2:3.76",
                                                       "equivalence_ratio": [1.0]},
                                              "temperature": [1100.0], "pressure": [101325.0],
                                              "stop": {"max_time": 0.2}}))
    files = runner.run_cases(config, list(grid_mod.expand(config).cases), tmp_path / "cases", report=lambda l: None)
    files[0].write_bytes(files[0].read_bytes()[:200])  # damaged outside sigmagrid (a disk, a copy)
    summary = runner.write_summary(files, tmp_path / "summary.nc", tmp_path / "cases.csv")
    status = dict(zip(summary["case"].values, summary["status"].values))
    reason = dict(zip(summary["case"].values, summary["reason"].values))
    assert status[files[0].stem] == "failed" and reason[files[0].stem].startswith("unreadable case file")
    assert status[files[1].stem] == "relaxed"


def test_run_and_case_exit_3_when_a_case_failed(tmp_path):
    """A script can tell from the exit status that cases failed (cli.EXIT_CASES_FAILED); `batch`
    exits 0 so that the workflow records the failure and goes on (test above)."""
    _pathological(tmp_path)
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(CONFIG, sort_keys=False))
    run = run_cli("run", "config.yaml", "--results", "results", cwd=tmp_path)
    assert run.returncode == 3, run.stderr[-3000:]
    assert "2 relaxed, 0 not-relaxed, 2 failed" in run.stdout
    case = run_cli("case", "--mechanism", "pathological.yaml", "--reactor", "isolated", "--temperature", "3000",
                   "--pressure", "101325", "--composition", "H2:1, O2:1, N2:3.76", "--out", "one.nc",
                   "--max-time", "0.5", cwd=tmp_path)
    assert case.returncode == 3, case.stderr[-3000:]
    with xr.open_dataset(tmp_path / "one.nc") as ds:
        assert ds.attrs["status"] == "failed"
