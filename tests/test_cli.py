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
                 "top 8 reactions", "steepest-entropy-ascent comparison (from progress 0.01; fits weighted by entropy",
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
    ({"--reactor": "adiabatic-ish"}, "--reactor", "allowed values: isolated, constant-pressure, isothermal"),
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
