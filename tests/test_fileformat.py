"""Format 1.0 as a data contract.

Checked against: the CF 1.10 conventions through the IOOS compliance-checker (the reference
implementation of the CF checks), Cantera's own reaction list (index and equation of every
reaction of GRI-Mech 3.0, duplicates included), the generated specification docs/file-format.md,
and the README's xarray examples run as written against a fresh default run.
"""

from __future__ import annotations

import json
import re
import shutil

import cantera as ct
import numpy as np
import pytest
import xarray as xr

from conftest import REPO, run_cli
from sigmagrid import config as config_mod, fileformat, grid as grid_mod, mechanism, query, rank, runner, store
from sigmagrid.errors import InputError

FILES = {"case": None, "summary": "summary.nc", "progress": "progress.nc", "ranking": "ranking.nc",
         "reduction": "reduction.nc"}


@pytest.fixture(scope="module")
def default_run(tmp_path_factory):
    """The default config (config/config.yaml, with the SEA comparison) run as a user runs it
    without Snakemake: `sigmagrid run` then `sigmagrid reduce`, in a fresh folder."""
    folder = tmp_path_factory.mktemp("default")
    shutil.copytree(REPO / "config", folder / "config")
    for args in (("run", "config/config.yaml"), ("reduce", "config/config.yaml")):
        done = run_cli(*args, "--results", "results", cwd=folder)
        assert done.returncode == 0, done.stderr[-3000:]
    return folder


def _paths(folder):
    results = folder / "results"
    out = {kind: results / name for kind, name in FILES.items() if name}
    out["case"] = sorted((results / "cases").glob("*.nc"))[0]
    out["validation"] = sorted((results / "reduced").glob("*/validation.nc"))[-1]
    return out


def test_the_spec_is_generated_from_the_writers_tables():
    # docs/file-format.md is the tables of sigmagrid.fileformat, which the writers apply: a
    # variable added to a table without its description changes it, and this test says so
    spec = (REPO / "docs" / "file-format.md").read_text()
    assert spec == fileformat.markdown(), "regenerate: python -m sigmagrid.fileformat > docs/file-format.md"


def test_every_variable_dimension_and_attribute_is_described(default_run):
    for kind, path in _paths(default_run).items():
        with xr.open_dataset(path) as ds:
            assert fileformat.undescribed(ds, kind) == [], (kind, path)
            assert ds.attrs[fileformat.VERSION_ATTRIBUTE] == fileformat.FORMAT_VERSION
            assert re.match(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ: sigmagrid ", ds.attrs["history"]), ds.attrs["history"]
            assert "DESIGN" not in ds.attrs["references"] and "institution" not in ds.attrs
            present = set(map(str, ds.variables))
            always = {n for n, v in fileformat.VARIABLES[kind].items() if not v.only}
            assert always <= present, (kind, always - present)
            if kind == "case":  # the default config compares with steepest entropy ascent
                assert set(fileformat.VARIABLES[kind]) <= present
            for name, var in ds.variables.items():
                if var.dtype.kind in "OUS":
                    assert "units" not in var.attrs, (kind, name)  # CF: text carries no units
                else:
                    assert "units" in var.attrs, (kind, name)
                assert var.attrs.get("standard_name") in (None, "time"), (kind, name)  # nothing atmospheric
                if var.dtype.kind in "iu" and name not in ds.dims and "flag_values" not in var.attrs:
                    # integers are counts or indices, never an undeclared code
                    assert name in ("duplicate_group", "n_species", "n_reactions", "failed_cases", "negative_cases",
                                        "judged_at_end_cases"), \
                        (kind, name)


@pytest.mark.parametrize("kind", list(FILES) + ["validation"])
def test_files_pass_the_cf_checks(default_run, tmp_path, kind):
    # CF 1.10 via compliance-checker. The one rule knowingly not met is section 4.4 for the case
    # file's elapsed-time axis (plain seconds, no reference date: see docs/file-format.md).
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    path = _paths(default_run)[kind]
    CheckSuite.load_all_available_checkers()
    report = tmp_path / "cf.json"
    ComplianceChecker.run_checker(str(path), ["cf:1.10"], verbose=0, criteria="normal",
                                  output_filename=str(report), output_format="json")
    result = json.loads(report.read_text())["cf:1.10"]
    # the required checks (high priority); the two recommendations not followed are documented
    failures = [item for item in result["high_priorities"] if item["value"][0] < item["value"][1]]
    allowed = {"§3.1 Units", "§4.4 Time Coordinate"} if kind == "case" else set()
    assert {item["name"] for item in failures} <= allowed, failures
    for item in failures:
        assert all("time" in msg for msg in item["msgs"]), item


def test_readme_xarray_examples_run_as_written(default_run, monkeypatch, capsys):
    text = (REPO / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert len(blocks) >= 2
    monkeypatch.chdir(default_run)
    for block in blocks:
        exec(compile(block, "README.md", "exec"), {})  # noqa: S102 - the README's own examples
    assert capsys.readouterr().out.strip()


def test_another_major_version_is_refused(default_run, tmp_path):
    summary = _paths(default_run)["summary"]
    with xr.open_dataset(summary) as ds:
        future = ds.load().assign_attrs({fileformat.VERSION_ATTRIBUTE: "2.0"})
        older = ds.load()
    del older.attrs[fileformat.VERSION_ATTRIBUTE]
    for name, ds, words in (("future", future, "format 2.0"), ("older", older, "before sigmagrid format")):
        path = tmp_path / f"{name}.nc"
        ds.to_netcdf(path)
        done = run_cli("query", "top", "--summary", str(path))
        assert done.returncode == 2 and "Traceback" not in done.stderr
        assert words in done.stderr and "recompute" in done.stderr and len(done.stderr.strip().splitlines()) == 1
    # a minor version is read
    minor = tmp_path / "minor.nc"
    future.assign_attrs({fileformat.VERSION_ATTRIBUTE: "1.7"}).to_netcdf(minor)
    assert run_cli("query", "top", "--summary", str(minor)).returncode == 0
    case = tmp_path / "case.nc"
    with xr.open_dataset(_paths(default_run)["case"]) as ds:
        ds.load().assign_attrs({fileformat.VERSION_ATTRIBUTE: "0.9"}).to_netcdf(case)
    with pytest.raises(fileformat.FormatError, match="recompute"):
        store.open_case(case)
    # a rerun recomputes a case file of another format instead of keeping it
    assert not runner._reusable(case, xr.open_dataset(case).attrs["settings_sha256"])


def test_query_by_index_or_equation(default_run):
    s = query.open_dataset(_paths(default_run)["summary"])
    by_index = query.reaction_cases(s, 10)
    equation = str(s["equation"].sel(reaction=10).values)
    by_equation = query.reaction_cases(s, equation.replace(" ", "  "))
    assert by_index.equals(by_equation) and by_index.attrs["equation"] == equation
    produced = s["entropy_produced"].sel(reaction=10).values
    assert np.allclose(np.sort(by_index["entropy_produced [J K-1]"]), np.sort(produced), equal_nan=True)
    done = run_cli("query", "reaction", "99", "--summary", str(_paths(default_run)["summary"]))
    assert done.returncode == 2 and "reaction: no reaction with index 99" in done.stderr


@pytest.mark.slow
def test_gri30_reactions_by_index_and_a_cut_keeps_the_full_indices(tmp_path):
    # Reference: Cantera's reaction list of gri30.yaml (325 reactions, declared duplicates among them).
    raw = {"mechanism": "gri30.yaml", "reactors": ["isolated"], "temperature": [1600.0], "pressure": [101325.0],
           "compositions": [{"name": "lean", "composition": "CH4:0.5, O2:2, N2:7.52"}],
           "stop": {"max_time": 0.02}, "sea": {"enabled": False}}
    config = config_mod.validate(raw)
    case = grid_mod.expand(config).cases[0]
    (path,) = runner.run_cases(config, [case], tmp_path / "full", report=lambda line: None)
    ds = store.open_case(path)
    gas = ct.Solution("gri30.yaml")
    assert ds.sizes["reaction"] == gas.n_reactions == 325
    for j in range(gas.n_reactions):
        row = ds.sel(reaction=j)
        assert str(row["equation"].values) == gas.reaction(j).equation  # equations round-trip
        assert int(row["reversible"]) == int(gas.reaction(j).reversible)
    duplicated = [e for e in set(gas.reaction_equations()) if gas.reaction_equations().count(e) > 1]
    assert duplicated  # gri30 has repeated equations: the index tells them apart
    for equation in duplicated:
        members = [j for j, e in enumerate(gas.reaction_equations()) if e == equation]
        assert set(ds["duplicate_group"].sel(reaction=members).values) == {members[0]}
        with pytest.raises(InputError, match=", ".join(map(str, members))):
            query.find_reaction(ds, equation)
    assert query.find_reaction(ds, gas.reaction(0).equation) == 0 and query.find_reaction(ds, "37") == 37
    # a cut: every reaction without carbon; its reactions keep the full mechanism's indices
    carbon = np.array([any("C" in s for s in (*r.reactants, *r.products)) for r in gas.reactions()])
    keep = ~carbon
    kept_species = rank.species_to_keep(gas, keep, config)  # with named colliders such as CO2
    cut = rank.reduced_solution(mechanism.resolve("gri30.yaml"), keep, kept_species, name="no-carbon")
    target = rank.write_yaml_atomic(cut, tmp_path / "no-carbon.yaml", "test cut")
    info = mechanism.describe(mechanism.load(target))
    np.testing.assert_array_equal(info.reaction_index, np.flatnonzero(keep))
    assert list(info.equations) == [gas.reaction(int(j)).equation for j in np.flatnonzero(keep)]
    h2 = config_mod.validate({**raw, "mechanism": str(target), "compositions": [{"name": "h2",
                              "composition": "H2:2, O2:1, N2:3.76"}], "temperature": [1100.0]})
    (cut_file,) = runner.run_cases(h2, grid_mod.expand(h2).cases, tmp_path / "cut", report=lambda line: None)
    cut_ds = store.open_case(cut_file)
    np.testing.assert_array_equal(cut_ds["reaction"].values, np.flatnonzero(keep))
    for j in cut_ds["reaction"].values[:20]:
        assert str(cut_ds["equation"].sel(reaction=j).values) == gas.reaction(int(j)).equation


def test_the_cut_report_as_json_is_the_table(default_run, tmp_path):
    """`cut-report --json`: stdout is one JSON document (messages on stderr) holding the rows of
    reduction.csv, the tolerances with their units and the smallest cut within them."""
    import json

    import pandas as pd

    done = run_cli("cut-report", "config/config.yaml", "--table", str(tmp_path / "r.csv"), "--out",
                   str(tmp_path / "r.nc"), "--json", cwd=default_run)
    assert done.returncode == 0, done.stderr[-2000:]
    report = json.loads(done.stdout)
    table = pd.read_csv(tmp_path / "r.csv")
    assert [row["cut"] for row in report["cuts"]] == list(table["cut"])
    assert set(report["tolerances"]) == {"ignition_delay_error [1]", "equilibrium_temperature_error [K]",
                                         "entropy_produced_error [1]"}
    with xr.open_dataset(tmp_path / "r.nc") as ds:
        assert report["smallest_within_tolerances"] == (ds.attrs["smallest_within_tolerances"] or None)
    assert "wrote" in done.stderr
