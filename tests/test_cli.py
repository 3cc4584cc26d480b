"""The command line: one case, show, listing, and bad input that never leaves a file or a traceback."""

import pytest
import xarray as xr

from conftest import REPO, run_cli

GOOD = ["--mechanism", "h2o2.yaml", "--reactor", "isolated", "--temperature", "1100",
        "--pressure", "101325", "--composition", "H2:2,O2:1,N2:3.76"]


def test_case_then_show(tmp_path):
    out = tmp_path / "one.nc"
    done = run_cli("case", *GOOD, "--out", str(out), "--max-time", "1")
    assert done.returncode == 0, done.stderr
    with xr.open_dataset(out) as ds:
        assert ds.attrs["status"] == "relaxed"
        for name in ("temperature", "pressure", "volume", "mole_fraction", "entropy", "affinity", "forward_rate",
                     "reverse_rate", "net_rate", "entropy_production", "entropy_production_total",
                     "entropy_produced", "reversible", "equation", "balance_residual", "ignition_delay",
                     "equilibrium_temperature"):
            assert name in ds.variables, name
        for name, var in ds.variables.items():
            assert "long_name" in var.attrs, name
            if var.dtype.kind not in "OUS":  # names and labels carry no units
                assert "units" in var.attrs, name
        for key in ("mechanism", "mechanism_sha256", "sigmagrid_version", "cantera_version", "config_sha256",
                    "reactor", "status"):
            assert ds.attrs[key], key
        # the SEA settings travel with the file (the merge of the comparison keeps them)
        assert ds.attrs["sea_weight"] == "entropy" and ds.attrs["sea_irreversible"] == "reversible"
    shown = run_cli("show", str(out))
    assert shown.returncode == 0
    for text in ("relaxed", "balance residual", "closed-vessel pressure ratio", "caution", "sha256",
                 "top 10 reactions", "steepest-entropy-ascent comparison (from progress 0.01; fits weighted by entropy",
                 "onsager           ok", "fitted-arrhenius", "slowest relaxation rates at equilibrium"):
        assert text in shown.stdout, text


def test_cases_listing_of_the_default_config():
    done = run_cli("cases", str(REPO / "config" / "config.yaml"))
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith("# 24 cases")
    assert len(done.stdout.strip().splitlines()) == 2 + 24


BAD_CASES = [
    ({"--composition": "H2:2,XX:1"}, "--composition", "unknown species XX"),
    ({"--composition": "H2=2"}, "--composition", "SPECIES:AMOUNT"),
    ({"--composition": "H2:-1,O2:1"}, "--composition", ">= 0"),
    ({"--mechanism": "no-such-file.yaml"}, "--mechanism", "no mechanism file"),
    ({"--temperature": "0"}, "--temperature", "> 0"),
    ({"--temperature": "-5"}, "--temperature", "> 0"),
    ({"--pressure": "0"}, "--pressure", "> 0"),
    ({"--reactor": "adiabatic-ish"}, "--reactor", "(choose from 'isolated', 'constant-pressure', 'isothermal')"),
    ({"--max-time": "0"}, "--max-time", "> 0"),
    ({"--temperature": "nan"}, "--temperature", "finite"),
]


@pytest.mark.parametrize("change,field,message", BAD_CASES)
def test_bad_case_input(tmp_path, change, field, message):
    args = list(GOOD)
    extra = []
    for key, value in change.items():
        if key in args:
            args[args.index(key) + 1] = value
        else:
            extra += [key, value]
    out = tmp_path / "bad.nc"
    done = run_cli("case", *args, *extra, "--out", str(out))
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    assert field in done.stderr and message in done.stderr, done.stderr
    assert list(tmp_path.iterdir()) == []


def test_mechanism_that_does_not_parse(tmp_path):
    broken = tmp_path / "broken.yaml"
    broken.write_text("phases:\n- name: gas\n  thermo: ideal-gas\n  species: [H2, O2\n")
    out = tmp_path / "bad.nc"
    done = run_cli("case", *GOOD[:0], "--mechanism", str(broken), *GOOD[2:], "--out", str(out))
    assert done.returncode == 2 and "Traceback" not in done.stderr
    assert "--mechanism" in done.stderr and "does not load in Cantera" in done.stderr
    assert not out.exists()


BAD_CONFIGS = [
    ("temperature: [-5]", "temperature[0]", "> 0"),
    ("pressure: [0]", "pressure[0]", "> 0"),
    ("temperature: []", "temperature", "at least 1"),
    ("reactors: [isolated, piston]", "reactors[1]", "allowed values"),
    ("feed: {fuel: 'H2:1', oxidizer: 'O2:1,N2:3.76', equivalence_ratio: [0]}", "feed.equivalence_ratio[0]", "> 0"),
    ("feed: {fuel: 'H2:1', oxidizer: 'O2:1,N2:3.76', equivalence_ratio: [1, 1]}", "feed.equivalence_ratio", "twice"),
    ("feed: {fuel: 'H2:1', oxidizer: 'O2:1,N2:3.76', equivalence_ratio: [1], colour: red}", "feed.colour", "unknown key"),
    ("stop: {max_time: 0}", "stop.max_time", "> 0"),
    ("stop: {max_time: .nan}", "stop.max_time", "finite"),
    ("temperatures: [1000]", "temperatures", "unknown key"),
    ("feed: {fuel: 'CH4:1', oxidizer: 'O2:1,N2:3.76', equivalence_ratio: [1]}", "feed.fuel", "unknown species CH4"),
    ("mechanism: nowhere.yaml", "mechanism", "no mechanism file"),
]


@pytest.mark.parametrize("line,field,message", BAD_CONFIGS)
def test_bad_config_is_refused_by_the_workflow(workdir, line, field, message):
    # Each bad line overrides one key of the default config; Snakemake must stop before any rule runs.
    import subprocess
    import sys

    import yaml

    config = yaml.safe_load((workdir / "config" / "config.yaml").read_text())
    config.update(yaml.safe_load(line))
    (workdir / "config" / "config.yaml").write_text(yaml.safe_dump(config))
    done = subprocess.run([sys.executable, "-m", "snakemake", "--cores", "1", "-n"], cwd=workdir,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode != 0
    text = done.stdout + done.stderr
    assert f"sigmagrid: error: {field}: " in text and message in text, text[-2000:]
    assert "Traceback" not in text
    assert not (workdir / "results").exists() or not any((workdir / "results").rglob("*.nc"))


def test_version_names_the_installed_cantera():
    import cantera as ct

    done = run_cli("--version")
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith("sigmagrid ") and f"Cantera {ct.__version__}" in done.stdout


def test_show_refuses_a_missing_file_and_a_summary_in_one_line(tmp_path):
    missing = run_cli("show", str(tmp_path / "none.nc"))
    assert missing.returncode == 2 and "Traceback" not in missing.stderr
    assert missing.stderr.strip().splitlines() == [f"sigmagrid: error: file: '{tmp_path / 'none.nc'}' does not exist"]
    summary = tmp_path / "summary.nc"
    from sigmagrid import fileformat

    # a current-format file that is not a case file (as a summary is)
    xr.Dataset(attrs={fileformat.VERSION_ATTRIBUTE: fileformat.FORMAT_VERSION}).to_netcdf(summary)
    refused = run_cli("show", str(summary))
    assert refused.returncode == 2 and len(refused.stderr.strip().splitlines()) == 1
    assert "is not a case file" in refused.stderr


def test_case_into_a_missing_folder_is_one_line_and_exit_74(tmp_path):
    out = tmp_path / "gone" / "one.nc"
    done = run_cli("case", *GOOD, "--out", str(out), "--max-time", "1")
    assert done.returncode == 74, done.stderr  # EX_IOERR of sysexits.h
    assert "Traceback" not in done.stderr and len(done.stderr.strip().splitlines()) == 1
    assert "the folder no longer exists" in done.stderr and not out.exists()


def test_init_writes_a_starter_that_check_summarizes(tmp_path):
    import cantera as ct

    target = tmp_path / "vent.yaml"
    assert run_cli("init", str(target)).returncode == 0
    again = run_cli("init", str(target))
    assert again.returncode == 2 and "never overwrites" in again.stderr  # the first file is kept
    checked = run_cli("check", str(target))
    assert checked.returncode == 0, checked.stderr
    # the grid is the product of its axes (1 reactor x 2 temperatures x 1 pressure x 3 ratios),
    # the mechanism's size is Cantera's own count
    gas = ct.Solution("h2o2.yaml")
    assert "6 cases = 1 reactors x 2 temperatures x 1 pressures x 3 mixtures" in checked.stdout
    assert f"{gas.n_species} species, {gas.n_reactions} reactions" in checked.stdout
    listed = run_cli("cases", str(target))
    assert listed.returncode == 0 and listed.stdout.startswith("# 6 cases")


def test_check_reports_every_problem_at_once(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("mechanism: h2o2.yaml\nreactors: [isolated, warm]\ntemperature: [-5.0, 900.0]\n"
                   "pressure: [101325.0]\nfeed: {fuel: 'H2:1', oxidizer: 'O2:1', equivalence_ratio: [1.0]}\n"
                   "stop: {max_tim: 1.0}\n")
    checked = run_cli("check", str(bad))
    assert checked.returncode == 2
    lines = checked.stderr.strip().splitlines()
    assert lines[-1] == f"{bad}: 3 problems"
    assert sorted(line.split(": ")[2] for line in lines[:-1]) == ["reactors[1]", "stop.max_tim", "temperature[0]"]
    # the run refuses the same file with the first of them
    listed = run_cli("cases", str(bad))
    assert listed.returncode == 2 and listed.stderr.strip() == lines[0]


def test_case_feed_form_no_sea_and_a_grid_config(tmp_path):
    import cantera as ct
    import numpy as np
    import yaml

    out = tmp_path / "feed.nc"
    done = run_cli("case", "--mechanism", "h2o2.yaml", "--reactor", "isolated", "--temperature", "1100",
                   "--pressure", "101325", "--fuel", "H2:1", "--oxidizer", "O2:1,N2:3.76", "--phi", "0.5",
                   "--no-sea", "--out", str(out), "--max-time", "1")
    assert done.returncode == 0, done.stderr
    gas = ct.Solution("h2o2.yaml")  # reference: Cantera's own equivalence-ratio mixing
    gas.set_equivalence_ratio(0.5, "H2:1", "O2:1,N2:3.76")
    with xr.open_dataset(out) as ds:
        assert "metric" not in ds.dims  # no SEA comparison
        first = ds["mole_fraction"].isel(time=0).sel(species=gas.species_names).values
        # stored with 5 significant digits (store.SIGNIFICANT_DIGITS): rounding error <= 5e-5 relative
        np.testing.assert_allclose(first, gas.X, rtol=5e-5, atol=1e-12)
    grid = tmp_path / "grid.yaml"
    grid.write_text(yaml.safe_dump({"mechanism": "h2o2.yaml", "reactors": ["isolated"], "temperature": [900.0],
                                    "pressure": [101325.0], "compositions": [{"name": "a", "composition": "H2:1"}],
                                    "stop": {"max_time": 0.25}, "sea": {"metrics": ["fitted-scalar"]}}))
    out2 = tmp_path / "from-grid.nc"
    done = run_cli("case", "--config", str(grid), "--reactor", "constant-pressure", "--temperature", "1100",
                   "--pressure", "101325", "--composition", "H2:2,O2:1,N2:3.76", "--sea-metrics", "onsager",
                   "--out", str(out2))
    assert done.returncode == 0, done.stderr
    with xr.open_dataset(out2) as ds:
        assert list(ds["metric"].values) == ["onsager"]  # the command line over the config
        assert ds.attrs["reactor"] == "constant-pressure"
        assert float(ds["time"].max()) <= 0.25  # the config's stop.max_time, s


def test_run_shows_overall_progress_and_counts_resumed_cases(tmp_path):
    import yaml

    config = {"mechanism": "h2o2.yaml", "reactors": ["isolated"], "temperature": [1000.0, 1100.0],
              "pressure": [101325.0], "compositions": [{"name": "a", "composition": "H2:2,O2:1,N2:3.76"}],
              "stop": {"max_time": 0.5}, "sea": {"enabled": False}}
    (tmp_path / "grid.yaml").write_text(yaml.safe_dump(config))
    first = run_cli("run", "grid.yaml", "--results", "out", cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    lines = [line for line in first.stderr.splitlines() if line.startswith("[")]  # progress: stderr
    assert [line.split("]")[0] for line in lines] == ["[1/2", "[2/2"]
    assert all(" elapsed, about " in line and line.endswith(" left") for line in lines)
    second = run_cli("run", "grid.yaml", "--results", "out", cwd=tmp_path)
    assert second.returncode == 0 and "2 of 2 cases already finished with the same settings" in second.stderr


def test_json_outputs_parse_and_carry_units(tmp_path):
    import json

    listed = run_cli("cases", str(REPO / "config" / "config.yaml"), "--json")
    assert listed.returncode == 0, listed.stderr
    rows = json.loads(listed.stdout)
    assert len(rows) == 24 and {"initial_temperature_K", "initial_pressure_Pa", "equivalence_ratio"} <= set(rows[0])
    out = tmp_path / "one.nc"
    assert run_cli("case", *GOOD, "--out", str(out), "--max-time", "1", "--no-sea").returncode == 0
    shown = run_cli("show", str(out), "--json", "--top", "3")
    assert shown.returncode == 0, shown.stderr
    record = json.loads(shown.stdout)
    assert record["status"] == "relaxed" and record["equilibrium_temperature"]["units"] == "K"
    assert len(record["top_reactions"]) == 3
    with xr.open_dataset(out) as ds:  # the numbers are the file's
        assert record["equilibrium_temperature"]["value"] == float(ds["equilibrium_temperature"])
