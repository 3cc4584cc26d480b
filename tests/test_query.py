"""Queries of a finished grid: selections, the three questions, output formats, bad selections, speed.

Checks against the outside: the selections against pandas filtering of cases.csv (an independent
reader of an independent file); the state at progress 1 against Cantera's equilibrate (summary's
equilibrium temperature); shares against the case files' full-resolution integrals.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from conftest import run_cli
from sigmagrid import config as config_mod, progress, query, runner, store
from sigmagrid.errors import InputError

GRID = {"study": "query test", "mechanism": "h2o2.yaml", "reactors": ["isolated", "constant-pressure"],
        "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [0.5, 1.0, 2.0]},
        "temperature": [1100.0], "pressure": [101325.0, 1013250.0], "stop": {"max_time": 0.5}}


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    results = tmp_path_factory.mktemp("query")
    config = config_mod.validate(GRID)
    runner.run_grid(config, results, report=lambda s: None)
    progress.write(sorted((results / "cases").glob("*.nc")), results / "progress.nc")
    return results


def _summary(results) -> xr.Dataset:
    return query.open_dataset(results / "summary.nc")


def test_selection_matches_pandas_on_cases_csv(finished):
    table = pd.read_csv(finished / "cases.csv")
    s = _summary(finished)
    chosen = query.select(s, {"reactor": "isolated", "equivalence_ratio": (0.5, 1.0), "initial_pressure": 1013250})
    expected = table[(table["reactor"] == "isolated") & table["equivalence_ratio [1]"].between(0.5, 1.0)
                     & (table["initial_pressure [Pa]"] == 1013250.0)]["case_id"]
    assert sorted(chosen["case"].values) == sorted(expected) and len(expected) == 2
    several = query.select(s, {"equivalence_ratio": [0.5, 2.0]})
    assert several.sizes["case"] == len(table[table["equivalence_ratio [1]"].isin([0.5, 2.0])]) == 8
    open_end = query.select(s, query.parse_selection(["equivalence_ratio=1.01..", "status=relaxed"]))
    assert set(open_end["equivalence_ratio"].values) == {2.0}


def test_parse_selection_forms():
    got = query.parse_selection(["reactor=isolated", "equivalence_ratio=0.8..1.2", "initial_pressure=101325,1013250",
                                 "initial_temperature=..1100"])
    assert got == {"reactor": "isolated", "equivalence_ratio": (0.8, 1.2),
                   "initial_pressure": [101325.0, 1013250.0], "initial_temperature": (None, 1100.0)}
    with pytest.raises(InputError):
        query.parse_selection(["reactor"])
    with pytest.raises(InputError):
        query.parse_selection(["equivalence_ratio=low..high"])


def test_unknown_coordinate_is_named_with_the_allowed_ones(finished):
    with pytest.raises(InputError) as err:
        query.select(_summary(finished), {"colour": "red"})
    assert "colour" in err.value.message and "initial_pressure" in err.value.message
    done = run_cli("query", "top", "--summary", str(finished / "summary.nc"), "--select", "colour=red")
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr.count("\n") == 1 and "reactor" in done.stderr and "Traceback" not in done.stderr


def test_empty_selection_says_so_and_fails(finished):
    done = run_cli("query", "cases", "--summary", str(finished / "summary.nc"), "--select", "initial_temperature=1500")
    assert done.returncode != 0 and "no case matches" in done.stderr and done.stdout == ""
    done = run_cli("query", "top", "--summary", str(finished / "missing.nc"))
    assert done.returncode == 2 and "does not exist" in done.stderr


def test_top_reactions_against_the_case_files(finished):
    s = _summary(finished)
    sel = {"reactor": "constant-pressure", "initial_pressure": 1013250}
    top = query.top_reactions(s, sel, n=s.sizes["reaction"])
    chosen = query.select(s, sel)
    shares = []
    for cid in chosen["case"].values:
        produced = store.open_case(finished / "cases" / f"{cid}.nc")["entropy_produced"].values
        shares.append(produced / produced.sum())
    mean = np.mean(shares, axis=0)
    got = top.set_index("reaction")["share_mean [1]"]
    assert np.allclose(got.loc[np.arange(mean.size)], mean, rtol=1e-12, atol=1e-15)
    assert got.sum() == pytest.approx(1.0, abs=1e-9)  # the shares of each case sum to 1
    assert list(top["rank [1]"]) == list(range(1, len(top) + 1))
    assert top["share_mean [1]"].is_monotonic_decreasing


def test_state_at_full_progress_is_cantera_equilibrium(finished):
    # the last level is the end of the relaxation; the summary's equilibrium temperature is
    # Cantera's equilibrate with the reactor's pair held fixed (reference library)
    p = query.open_dataset(finished / "progress.nc")
    s = _summary(finished)
    at_end = query.at_progress(p, 1.0, species=["H2O", "OH"]).set_index("case_id")
    t_eq = pd.Series(s["equilibrium_temperature"].values, index=s["case"].values)
    # within 0.5 K: the reactor holds its U (or H) only as well as the NASA polynomials join at
    # their midpoint temperature, so its end sits a fraction of a kelvin off the equilibrium
    assert np.allclose(at_end["temperature [K]"], t_eq.loc[at_end.index], atol=0.5)
    t_end = pd.Series(s["final_temperature"].values, index=s["case"].values)
    assert np.allclose(at_end["temperature [K]"], t_end.loc[at_end.index], rtol=1e-12)
    assert (at_end["X_H2O [1]"] > 0).all() and "dominant_reaction" in at_end
    half = query.top_reactions_at(p, 0.5, {"equivalence_ratio": (1.01, None), "initial_pressure": 1013250}, n=3)
    assert len(half) == 3 and half["share_mean [1]"].is_monotonic_decreasing
    with pytest.raises(InputError):
        query.at_progress(p, 1.5)


def test_case_table_and_sea_columns_when_present(finished, tmp_path):
    s = _summary(finished)
    table = query.case_table(s, {"status": "relaxed"}, finished / "cases")
    assert len(table) == 12
    for column in ("ignition_delay [s]", "time_to_90pct [s]", "entropy_produced [J K-1]", "balance_residual [1]"):
        assert column in table
    first = table.iloc[0]
    ds = store.open_case(finished / "cases" / f"{first['case_id']}.nc")
    assert first["ignition_delay [s]"] == pytest.approx(float(ds["ignition_delay"]), rel=1e-12)
    # case files without the SEA comparison: no SEA columns
    cases = tmp_path / "cases"
    cases.mkdir()
    for path in (finished / "cases").glob("*.nc"):
        plain = store.open_case(path)
        store.write_atomic(plain.drop_dims([d for d in ("metric", "sea_progress") if d in plain.dims]), cases / path.name)
    table = query.case_table(s, None, cases)
    assert not any(c.startswith(("fit_quality", "largest_path_angle")) for c in table.columns)
    # one file that carries it: its agreement shows up as columns, the others are missing there
    plain = store.open_case(cases / f"{first['case_id']}.nc")
    sea = plain.assign(fit_quality=("metric", np.array([1.0, 0.8])),
                       path_angle=(("metric", "sea_progress"), np.array([[0.0, 0.01], [0.02, 0.05]]))
                       ).assign_coords(metric=["log-mean", "onsager"])
    store.write_atomic(sea, cases / f"{first['case_id']}.nc")
    table = query.case_table(s, None, cases).set_index("case_id")
    assert table.loc[first["case_id"], "fit_quality_onsager [1]"] == pytest.approx(0.8)
    assert table.loc[first["case_id"], "largest_path_angle_onsager [rad]"] == pytest.approx(0.05)
    others = table.drop(index=first["case_id"])
    assert others["fit_quality_onsager [1]"].isna().all()


def test_output_formats(finished):
    base = ["query", "top", "--summary", str(finished / "summary.nc"), "--top", "4", "--select", "reactor=isolated"]
    csv = run_cli(*base, "--format", "csv")
    assert csv.returncode == 0, csv.stderr
    frame = pd.read_csv(io.StringIO(csv.stdout))
    assert list(frame.columns)[:4] == ["rank [1]", "reaction", "equation", "share_mean [1]"] and len(frame) == 4
    js = run_cli(*base, "--format", "json")
    records = json.loads(js.stdout)
    assert [r["reaction"] for r in records] == list(frame["reaction"])
    text = run_cli(*base)
    lines = text.stdout.splitlines()
    assert lines[0].startswith("#") and "share_mean [1]" in lines[1] and len(lines) == 6
    header = lines[1]
    col = header.index("share_max [1]") + len("share_max [1]")
    assert all(line[col - 1] != " " for line in lines[2:])  # numbers right-aligned under their header
    at = run_cli("query", "at", "0.5", "--progress", str(finished / "progress.nc"), "--species", "OH",
                 "--format", "csv", "--select", "equivalence_ratio=1")
    frame = pd.read_csv(io.StringIO(at.stdout))
    assert len(frame) == 4 and "X_OH [1]" in frame and "time [s]" in frame


def test_query_benchmark_reports_each_query():
    """``sigmagrid query bench`` prints the timings (a benchmark is a command, not a timed test):
    here only that each query ran on the synthetic 1,000-case summary and was timed."""
    timings = dict(query.benchmark(1000, 325))
    in_process = {k: v for k, v in timings.items() if "new process" not in k}
    assert len(in_process) == 3 and all(v > 0 for v in timings.values()), timings
