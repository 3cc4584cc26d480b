"""Mechanisms in the keyword text format (mechanism file, thermo file beside it) are converted
with Cantera's own converter and then run like YAML.

Reference: the keyword files are written by Cantera's ``yaml2ck`` from ``h2o2.yaml``, so the
round trip must give back Cantera's own answers for ``h2o2.yaml``: the equilibrium of the held
(U, V) from ``equilibrate("UV")``, and the same relaxation.
"""

import hashlib

import cantera as ct
import pytest
import xarray as xr
import yaml
from cantera import yaml2ck

from conftest import run_cli

CASE = ["--reactor", "isolated", "--temperature", "1100", "--pressure", "101325",
        "--composition", "H2:2,O2:1,N2:3.76", "--no-sea", "--max-time", "1"]


@pytest.fixture()
def keyword_files(tmp_path):
    yaml2ck.convert(ct.Solution("h2o2.yaml"), mechanism_path=tmp_path / "h2.inp",
                    thermo_path=tmp_path / "h2-thermo.dat")
    return tmp_path


def test_keyword_mechanism_with_thermo_beside_it_runs_like_the_yaml(keyword_files):
    folder = keyword_files
    done = run_cli("case", "--mechanism", "h2.inp", "--thermo", "h2-thermo.dat", *CASE, "--out", "out/kw.nc",
                   cwd=folder)
    assert done.returncode == 0, done.stderr
    same = run_cli("case", "--mechanism", "h2o2.yaml", *CASE, "--out", "out/yaml.nc", cwd=folder)
    assert same.returncode == 0, same.stderr
    converted = list((folder / "out" / "mechanisms").glob("h2-*.yaml"))
    assert len(converted) == 1
    gas = ct.Solution("h2o2.yaml")
    gas.TPX = 1100.0, 101325.0, "H2:2,O2:1,N2:3.76"
    gas.equilibrate("UV")
    with xr.open_dataset(folder / "out" / "kw.nc") as kw, xr.open_dataset(folder / "out" / "yaml.nc") as ref:
        assert kw.attrs["status"] == "relaxed"
        # hashed like any YAML mechanism: the converted file's bytes
        assert kw.attrs["mechanism_sha256"] == hashlib.sha256(converted[0].read_bytes()).hexdigest()
        # measured 2.5e-13 relative (the thermo round-trips exactly); 1e-10 leaves 400x
        assert float(kw["equilibrium_temperature"]) == pytest.approx(gas.T, rel=1e-10)
        # the rate parameters come back through printed digits: measured 4e-7 relative, 10x margin
        assert float(kw["entropy_produced"].sum()) == pytest.approx(float(ref["entropy_produced"].sum()), rel=4e-6)


def test_keyword_mechanism_without_its_thermo_is_one_line(keyword_files):
    done = run_cli("case", "--mechanism", "h2.inp", *CASE, "--out", "out/kw.nc", cwd=keyword_files)
    assert done.returncode == 2 and "Traceback" not in done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "No thermo data found for species 'H2'" in lines[0] and "'thermo'" in lines[0]
    assert not (keyword_files / "out" / "kw.nc").exists()


def test_thermo_with_a_yaml_mechanism_is_refused(keyword_files):
    done = run_cli("case", "--mechanism", "h2o2.yaml", "--thermo", "h2-thermo.dat", *CASE, "--out", "x.nc",
                   cwd=keyword_files)
    assert done.returncode == 2
    assert done.stderr.startswith("sigmagrid: error: --thermo: applies only to a mechanism in the keyword text format")


def test_a_grid_converts_once_into_its_results(keyword_files):
    folder = keyword_files
    config = {"mechanism": "h2.inp", "thermo": "h2-thermo.dat", "reactors": ["isolated"],
              "temperature": [1000.0, 1100.0], "pressure": [101325.0],
              "compositions": [{"name": "a", "composition": "H2:2,O2:1,N2:3.76"}],
              "stop": {"max_time": 0.5}, "sea": {"enabled": False}}
    (folder / "grid.yaml").write_text(yaml.safe_dump(config))
    checked = run_cli("check", "grid.yaml", cwd=folder)
    assert checked.returncode == 0 and "10 species, 29 reactions" in checked.stdout, checked.stderr
    done = run_cli("run", "grid.yaml", "--results", "res", cwd=folder)
    assert done.returncode == 0, done.stderr
    assert len(list((folder / "res" / "mechanisms").glob("*.yaml"))) == 1
    assert "2 relaxed" in done.stdout
