"""Same config, same ids, same numbers; every file says how it was made; reruns redo only what changed.

Outside checks: the mechanism hash is recomputed here with hashlib from the file's bytes (FIPS
180-4 sha256), the versions against the installed packages themselves.
"""

from __future__ import annotations

import hashlib
import json
import re
import sys

import cantera as ct
import numpy as np
import pandas as pd
import pytest
import xarray as xr
import yaml

import sigmagrid
from conftest import count_tried, run_cli, without_sea
from sigmagrid import config as config_mod, grid as grid_mod, mechanism, runner, store
from sigmagrid.errors import InputError

RAW = {
    "study": "reformer outlet polishing (reproducibility test)",
    "mechanism": "h2o2.yaml",
    "reactors": ["isolated", "constant-pressure", "isothermal"],
    "feed": {"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [0.8]},
    "temperature": [1150.0],
    "pressure": [101325.0],
    "stop": {"max_time": 0.3},
    "storage": {"max_samples": 120},
}


def _run(folder, raw=RAW):
    path = folder / "config.yaml"
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    done = run_cli("run", str(path), "--results", str(folder / "results"))
    assert done.returncode == 0, done.stderr[-2000:]
    return done


def _identical(a: xr.Dataset, b: xr.Dataset, what: str) -> None:
    assert set(a.variables) == set(b.variables)
    for var in a.variables:
        if var.endswith("wall_time"):  # measured, not computed
            continue
        x, y = a[var].values, b[var].values
        same = np.array_equal(x, y, equal_nan=True) if x.dtype.kind in "fc" else np.array_equal(x, y)
        assert same, (what, var)
    assert {k: v for k, v in a.attrs.items() if k != "history"} == {k: v for k, v in b.attrs.items() if k != "history"}


def test_ids_are_the_same_in_every_process():
    ids = sorted(c.case_id for c in grid_mod.expand(config_mod.validate(RAW)).cases)
    assert ids == sorted(c.case_id for c in grid_mod.expand(config_mod.validate(json.loads(json.dumps(RAW)))).cases)
    # another interpreter (another hash seed): the ids must not depend on it
    code = ("import json,sys; from sigmagrid import config, grid; "
            "print(json.dumps(sorted(c.case_id for c in grid.expand(config.validate(json.loads(sys.argv[1]))).cases)))")
    import subprocess

    done = subprocess.run([sys.executable, "-c", code, json.dumps(RAW)], capture_output=True, text=True,
                          env={"PYTHONHASHSEED": "12345", "PATH": ""}, timeout=120)
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout) == ids
    count_tried("reproducibility: configs expanded in two processes", 1)


def test_two_runs_give_identical_files_with_full_provenance(tmp_path):
    first, second = tmp_path / "first", tmp_path / "second"
    first.mkdir(), second.mkdir()
    _run(first), _run(second)
    names = sorted(p.name for p in (first / "results" / "cases").glob("*.nc"))
    assert names == sorted(p.name for p in (second / "results" / "cases").glob("*.nc")) and len(names) == 3
    for name in names:
        a, b = (store.open_case(f / "results" / "cases" / name) for f in (first, second))
        _identical(a, b, name)
    _identical(store.open_case(first / "results" / "summary.nc"), store.open_case(second / "results" / "summary.nc"),
               "summary.nc")
    ta, tb = (pd.read_csv(f / "results" / "cases.csv").drop(columns=["wall_time [s]"]) for f in (first, second))
    pd.testing.assert_frame_equal(ta, tb)
    count_tried("reproducibility: cases run twice and compared", len(names))

    # provenance in every file, checked against the world
    config = config_mod.validate(RAW)
    mech_sha = hashlib.sha256(mechanism.resolve("h2o2.yaml").read_bytes()).hexdigest()
    expected = {"mechanism_sha256": mech_sha, "config_sha256": config_mod.config_hash(config),
                "settings_sha256": config_mod.settings_hash(config), "cantera_version": ct.__version__,
                "sigmagrid_version": sigmagrid.__version__, "python_version": sys.version.split()[0],
                "numpy_version": np.__version__}
    for name in names:
        attrs = store.open_case(first / "results" / "cases" / name).attrs
        for key, value in expected.items():
            assert attrs[key] == value, (name, key)
    summary = store.open_case(first / "results" / "summary.nc").attrs
    for key in ("mechanism_sha256", "config_sha256", "cantera_version", "sigmagrid_version"):
        assert summary[key] == expected[key]
    table = pd.read_csv(first / "results" / "cases.csv")
    assert set(table["mechanism_sha256"]) == {mech_sha}
    assert set(table["config_sha256"]) == {expected["config_sha256"]}

    shown = run_cli("show", str(first / "results" / "cases" / names[0]))
    assert shown.returncode == 0
    for text in (f"sha256 {mech_sha}", f"config sha256 {expected['config_sha256']}",
                 f"Cantera {ct.__version__}", f"sigmagrid {sigmagrid.__version__}",
                 f"Python {expected['python_version']}", f"numpy {np.__version__}"):
        assert text in shown.stdout, text


def _computed(done) -> int:
    """Cases the run computed (it prints one '[k/n] label: status ...' line for each, on stderr)."""
    return len(re.findall(r"^\[\d+/\d+\] ", done.stderr, flags=re.M))


def test_a_rerun_redoes_only_cases_whose_settings_changed(tmp_path):
    raw = without_sea(RAW)
    assert _computed(_run(tmp_path, raw)) == 3
    cases = tmp_path / "results" / "cases"
    before = {p.name: p.stat().st_mtime_ns for p in cases.glob("*.nc")}
    assert _computed(_run(tmp_path, raw)) == 0  # nothing changed: nothing recomputed
    assert {p.name: p.stat().st_mtime_ns for p in cases.glob("*.nc")} == before
    bigger = dict(raw, temperature=[1150.0, 1250.0])  # the grid extended: only the new cases run
    assert _computed(_run(tmp_path, bigger)) == 3
    assert {p.name: p.stat().st_mtime_ns for p in cases.glob("*.nc") if p.name in before} == before
    changed = dict(bigger, stop={"max_time": 0.2})  # a case setting changed: every case recomputed
    assert _computed(_run(tmp_path, changed)) == 6
    settings = config_mod.settings_hash(config_mod.validate(changed))
    assert {store.open_case(p).attrs["settings_sha256"] for p in cases.glob("*.nc")} == {settings}
    with_sea = dict(changed, sea={"metrics": ["log-mean"]})  # the SEA comparison is in the case file too
    assert _computed(_run(tmp_path, with_sea)) == 6
    count_tried("reproducibility: reruns checked for what they recompute", 5)


def test_every_codec_stores_the_same_bit_rounded_values(tmp_path):
    """The three ``storage.compression`` codecs pack the same numbers.

    Outside check: BitRound keeps b mantissa bits, so each stored value lies within a relative
    2^-(b+1) of the input (Kloewer et al. 2021, Nature Computational Science 1, 713); the netCDF-C
    library applies it, and it must apply with every codec, ``none`` included.
    """
    rng = np.random.default_rng(7)
    # rates of progress span many decades; a 1-sample array checks the tiny-array fallback
    samples = (10.0 ** rng.uniform(-30, 5, (400, 60))).astype(np.float32)
    ds = xr.Dataset({"forward_rate": (("time", "reaction"), samples),
                     "net_rate": (("time", "reaction"), -samples),
                     "affinity": (("one", "reaction"), samples[:1]),
                     "temperature": ("time", np.linspace(1000.0, 2500.0, 400))})
    stored = {}
    for codec in store.COMPRESSIONS:
        path = store.write_atomic(ds, tmp_path / f"{codec}.nc", codec)
        stored[codec] = xr.load_dataset(path)
        bits = store.SIGNIFICANT_BITS["forward_rate"]
        error = np.abs(stored[codec]["forward_rate"].values.astype(float) / samples - 1.0)
        assert error.max() <= 2.0 ** -(bits + 1), codec
        assert error.max() > 0, codec  # quantized, not stored verbatim
    for codec in ("blosc-zstd", "none"):
        xr.testing.assert_identical(stored["zlib"], stored[codec])
    sizes = {codec: (tmp_path / f"{codec}.nc").stat().st_size for codec in store.COMPRESSIONS}
    assert sizes["zlib"] < sizes["none"] and sizes["blosc-zstd"] < sizes["none"]
    with pytest.raises(ValueError, match="storage.compression must be one of zlib, blosc-zstd, none"):
        store.write_atomic(ds, tmp_path / "x.nc", "lz4")
    assert not (tmp_path / "x.nc").exists()


def test_the_codec_is_a_validated_setting_that_does_not_force_a_rerun():
    raw = dict(RAW, storage={"max_samples": 120, "compression": "blosc-zstd"})
    assert config_mod.settings_hash(config_mod.validate(raw)) == config_mod.settings_hash(config_mod.validate(RAW))
    assert runner.RunSettings.from_config(config_mod.validate(raw)).compression == "blosc-zstd"
    with pytest.raises(InputError) as err:
        config_mod.validate(dict(RAW, storage={"compression": "lz4"}))
    assert err.value.field == "storage.compression"
    assert "allowed values: zlib, blosc-zstd, none" in err.value.message


def test_the_define_first_writer_writes_what_xarray_writes(case_files, tmp_path, monkeypatch):
    """``store.write_atomic`` defines every variable before it writes any array (xarray interleaves
    the two); the files must read back exactly as those of xarray's own ``Dataset.to_netcdf`` with
    the same encoding (reference: xarray), for a case file with its SEA comparison and summaries."""
    from sigmagrid import query

    paths = [ds.encoding["source"] for ds in case_files.values()]
    summary, _ = store.summarize(paths, workers=1)
    datasets = {"case": case_files[next(iter(case_files))], "summary": summary,
                "synthetic summary": query.synthetic_summary(40, 12)}
    written = {}
    for name, ds in datasets.items():
        with monkeypatch.context() as m:  # xarray's writer, as write_atomic used it before
            m.setattr(store, "_to_netcdf4", lambda d, p, enc: d.to_netcdf(p, engine="netcdf4", format="NETCDF4",
                                                                          encoding=enc))
            store.write_atomic(ds, tmp_path / f"{name}-xarray.nc")
        with monkeypatch.context() as m:  # ours, with the fallback to to_netcdf made impossible
            m.setattr(xr.Dataset, "to_netcdf", lambda *a, **k: pytest.fail("the define-first writer fell back"))
            store.write_atomic(ds, tmp_path / f"{name}-ours.nc")
        ref, ours = (xr.load_dataset(tmp_path / f"{name}-{w}.nc") for w in ("xarray", "ours"))
        xr.testing.assert_identical(ref, ours)
        for var in ref.variables:  # chunks, filters, quantization, fill values, dtypes
            a = {k: v for k, v in ref[var].encoding.items() if k != "source"}
            b = {k: v for k, v in ours[var].encoding.items() if k != "source"}
            assert repr(a) == repr(b), (name, var)
        written[name] = ours
    assert "sea_status" in written["case"] and "sea_progress" in written["case"].dims  # the SEA part was written
