"""Extreme and degenerate conditions: a correct status, and finite numbers or a missing value with a reason.

Outside references: Cantera's ``equilibrate`` (reference library) for the end states; the second
law for the sign of the entropy produced (it is >= 0 with reversible kinetics). The rule "never NaN
passed off as data" is checked in the case files (a CF ``comment`` on every NaN) and in cases.csv
(every empty cell is explained in the ``missing`` column).
"""

from __future__ import annotations

import math

import cantera as ct
import numpy as np
import pandas as pd
import pytest

from conftest import count_tried, run_cli, without_sea
from sigmagrid import config as config_mod, grid as grid_mod, runner, store

AIR = "O2:1, N2:3.76"
HELD = {"isolated": "UV", "constant-pressure": "HP", "isothermal": "TP"}


def _equilibrium_mixture() -> str:
    gas = ct.Solution("h2o2.yaml")
    gas.TPX = 2500.0, ct.one_atm, "H2:2, O2:1, N2:3.76"
    gas.equilibrate("TP")
    return ",".join(f"{n}:{x:.15g}" for n, x in zip(gas.species_names, gas.X) if x > 0), gas.T


EQ_MIX, EQ_T = _equilibrium_mixture()

#: name -> (config overrides, expected status or None for "either", text the reason must hold)
CONDITIONS = {
    "already at equilibrium": ({"compositions": [{"name": "eq", "composition": EQ_MIX}], "temperature": [EQ_T],
                                "reactors": ["isothermal"]}, "relaxed", "already at equilibrium"),
    "inert N2/AR": ({"compositions": [{"name": "inert", "composition": "N2:0.79, AR:0.21"}],
                     "temperature": [1500.0]}, "relaxed", "already at equilibrium"),
    "pure fuel": ({"compositions": [{"name": "fuel", "composition": "H2:1"}], "temperature": [1100.0]},
                  None, ""),
    "phi 0.05": ({"feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [0.05]},
                  "temperature": [1100.0]}, "relaxed", ""),
    # very rich: the last 1e-8 of progress (slow H recombination) may outlast 1 s at constant pressure
    "phi 20": ({"feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [20.0]},
                "temperature": [1100.0]}, None, ""),
    "3000 K": ({"temperature": [3000.0]}, "relaxed", ""),
    "100 atm": ({"pressure": [100 * ct.one_atm]}, "relaxed", ""),
    "very short maximum time": ({"stop": {"max_time": 1e-7}}, "not-relaxed", "maximum time"),
    "never ignites": ({"temperature": [650.0], "stop": {"max_time": 0.2}}, "not-relaxed", "maximum time"),
    "tiny step budget": ({"solver": {"max_steps": 10}}, "not-relaxed", "step budget of 10"),
}


def _config(overrides: dict) -> dict:
    raw = {"mechanism": "h2o2.yaml", "reactors": ["isolated", "constant-pressure"],
           "feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [1.0]},
           "temperature": [1100.0], "pressure": [ct.one_atm], "stop": {"max_time": 1.0},
           "storage": {"max_samples": 150}}
    raw.update(overrides)
    if "compositions" in overrides:
        raw.pop("feed")
    return config_mod.validate(without_sea(raw))


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Every condition run to case files, plus the summary and cases.csv over all of them."""
    out = tmp_path_factory.mktemp("extreme")
    files, by_condition = [], {}
    for name, (overrides, _, _) in CONDITIONS.items():
        config = _config(overrides)
        cases = list(grid_mod.expand(config).cases)
        written = runner.run_cases(config, cases, out / "cases", report=lambda line: None)
        by_condition[name] = [store.open_case(f) for f in written]
        files += written
        count_tried("extreme conditions: cases run", len(written))
    count_tried("extreme conditions: conditions", len(CONDITIONS))
    runner.write_summary(files, out / "summary.nc", out / "cases.csv")
    return by_condition, out


def _assert_honest(ds) -> None:
    """No NaN without a reason: scalars, times to progress, and every stored series."""
    assert ds.attrs["status"] in ("relaxed", "not-relaxed", "failed")
    if ds.attrs["status"] != "relaxed":
        assert ds.attrs["reason"]
    explained = ds.attrs["missing_values"]
    for name in store.SCALARS:
        value = float(ds[name])
        if not math.isfinite(value):
            assert ds[name].attrs.get("comment", "").startswith("missing: "), name
            assert f"{name}: " in explained, name
    for name, var in ds.data_vars.items():
        if var.dtype.kind == "f" and not np.isfinite(var.values).all():
            assert var.attrs.get("comment", "").startswith("missing: "), name


@pytest.mark.parametrize("name", list(CONDITIONS))
def test_each_condition_has_the_right_status_and_no_unexplained_nan(runs, name):
    by_condition, _ = runs
    _, status, reason = CONDITIONS[name]
    for ds in by_condition[name]:
        if status is not None:
            assert ds.attrs["status"] == status, (name, ds.attrs["reason"])
        assert reason in ds.attrs["reason"], (name, ds.attrs["reason"])
        _assert_honest(ds)
        produced = float(ds["entropy_produced_total"])
        assert math.isfinite(produced) and produced >= -1e-12 * max(1.0, abs(float(ds["entropy"][0])))  # 2nd law


def test_relaxed_extremes_end_at_cantera_equilibrium(runs):
    by_condition, _ = runs
    gas = ct.Solution("h2o2.yaml")
    checked = 0
    for name in ("phi 0.05", "phi 20", "3000 K", "100 atm"):
        for ds in by_condition[name]:
            assert float(ds["path_progress"][-1]) >= 1 - 1e-6, name
            gas.TPX = ds.attrs["initial_temperature"], ds.attrs["initial_pressure"], ds.attrs["composition"]
            gas.equilibrate(HELD[ds.attrs["reactor"]])  # reference library
            assert float(ds["final_temperature"]) == pytest.approx(gas.T, abs=1.0), name
            assert float(ds["balance_residual"]) < 1e-3, name
            checked += 1
    assert checked == 8


def test_at_equilibrium_progress_is_missing_with_a_reason_not_divided_by_zero(runs):
    by_condition, _ = runs
    for name in ("already at equilibrium", "inert N2/AR"):
        for ds in by_condition[name]:
            assert np.isnan(ds["path_progress"].values).all()
            assert "initial state is at equilibrium" in ds["path_progress"].attrs["comment"]
            assert np.isnan(ds["time_to_progress"].values).all()
            assert "already at equilibrium" in ds["time_to_progress"].attrs["comment"]
            assert np.isnan(float(ds["balance_residual"]))
            assert float(ds["entropy_produced_total"]) == pytest.approx(0.0, abs=1e-12)


def test_no_ignition_is_a_missing_value_with_its_reason(runs):
    by_condition, _ = runs
    for ds in by_condition["never ignites"]:
        assert np.isnan(float(ds["ignition_delay"]))
        assert "no ignition: temperature rose by" in ds["ignition_delay"].attrs["comment"]
        assert "stop.ignition_rise = 50 K" in ds.attrs["missing_values"]
    for ds in by_condition["already at equilibrium"]:  # isothermal
        assert "not applicable" in ds["ignition_delay"].attrs["comment"]
        assert "not applicable" in ds["energy_drift"].attrs["comment"]


def test_cases_csv_explains_every_empty_cell(runs):
    _, out = runs
    table = pd.read_csv(out / "cases.csv", keep_default_na=False)
    numeric = [c for c in table.columns if c.endswith("]") and c.split(" [")[0] not in
               ("initial_temperature", "initial_pressure")]
    empty_cells = 0
    for _, row in table.iterrows():
        for column in numeric:
            if row[column] == "" or str(row[column]).lower() == "nan":
                name = column.split(" [")[0]
                if name == "equivalence_ratio":
                    assert row["composition_name"] in ("eq", "inert", "fuel")  # no fuel and oxidizer pair
                    continue
                assert f"{name}: " in row["missing"], (row["label"], name, row["missing"])
                empty_cells += 1
    assert empty_cells > 0
    assert (table["status"] != "").all()
    count_tried("extreme conditions: empty cells of cases.csv checked for a reason", empty_cells)


def test_show_prints_the_missing_values(runs):
    _, out = runs
    path = next(p for p in sorted((out / "cases").glob("*.nc")) if "never" not in p.name)
    never = [p for p in sorted((out / "cases").glob("*.nc"))
             if store.open_case(p).attrs["composition"] and np.isnan(float(store.open_case(p)["ignition_delay"]))]
    shown = run_cli("show", str(never[0] if never else path))
    assert shown.returncode == 0
    assert "missing values (stored as NaN):" in shown.stdout and "ignition_delay: " in shown.stdout
