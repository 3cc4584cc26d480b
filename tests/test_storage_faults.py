"""A results folder that refuses a file: one line, non-zero exit, no partial file, the rerun completes.

The full disk is simulated by making the netCDF writer fail with ENOSPC after it has put bytes in
its temporary file (what a real full disk does half-way through a write), and with EACCES as
netCDF-C reports a full disk ("Permission denied ... tmp-nc") while the disk shows no free space.
"""

from __future__ import annotations

import errno
import os
import shutil
from collections import namedtuple

import pytest
import yaml

from conftest import AIR, without_sea
from sigmagrid import cli, runner, store


def _config_file(tmp_path):
    raw = without_sea({"mechanism": "h2o2.yaml", "reactors": ["isolated", "constant-pressure"],
                       "feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [1.0, 2.0]},
                       "temperature": [1100.0], "pressure": [101325.0], "stop": {"max_time": 1.0}})
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(raw))
    return str(path)


def _failing_writer(monkeypatch, fail_at: int, error: OSError):
    real = store._to_netcdf4
    calls = []

    def writer(ds, path, encoding):
        calls.append(path)
        if len(calls) == fail_at:
            path.write_bytes(b"\x89HDF\r\n" + b"\0" * 4096)  # half a file, then the device is full
            raise error
        return real(ds, path, encoding)

    monkeypatch.setattr(store, "_to_netcdf4", writer)
    return calls


@pytest.mark.parametrize("error, low_space", [
    (OSError(errno.ENOSPC, "No space left on device"), False),
    (PermissionError(errno.EACCES, "Permission denied"), True),  # netCDF-C's wording for a full disk
])
def test_a_full_disk_stops_the_run_with_one_line_and_the_rerun_completes(tmp_path, monkeypatch, capsys,
                                                                         error, low_space):
    config = _config_file(tmp_path)
    results = tmp_path / "results"
    _failing_writer(monkeypatch, 3, error)
    if low_space:
        usage = namedtuple("usage", "total used free")
        monkeypatch.setattr(shutil, "disk_usage", lambda folder: usage(10 * 2**30, 10 * 2**30 - 4096, 4096))
    code = cli.main(["-q", "run", config, "--results", str(results)])  # -q: errors only on stderr
    err = capsys.readouterr().err
    assert code == cli.EXIT_STORAGE != 0
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    assert str(results / "cases") in lines[0] and "no space left on the device" in lines[0]
    assert "2 finished case files are kept" in lines[0] and "rerun the same command" in lines[0]
    cases = results / "cases"
    kept = sorted(cases.glob("*.nc"))
    assert len(kept) == 2
    assert not [p for p in cases.iterdir() if p.name.startswith(".")]  # no partial or temporary file
    for path in kept:  # what was kept is whole: it opens and says how it ended
        with store.open_case(path) as ds:
            assert ds.attrs["status"] == "relaxed"
    stamps = {p.name: p.stat().st_mtime_ns for p in kept}

    monkeypatch.undo()
    code = cli.main(["run", config, "--results", str(results)])
    out = capsys.readouterr().out
    assert code == 0 and "4 relaxed" in out
    assert len(list(cases.glob("*.nc"))) == 4 and (results / "summary.nc").is_file()
    assert {p.name: p.stat().st_mtime_ns for p in kept} == stamps  # resumed, not redone


def test_a_vanished_results_folder_is_named(tmp_path, monkeypatch, capsys):
    # The folder disappears under the run (an unmounted share): the next write fails with ENOENT.
    config = _config_file(tmp_path)
    results = tmp_path / "results"
    real = store._to_netcdf4

    def writer(ds, path, encoding):
        shutil.rmtree(results)
        raise FileNotFoundError(errno.ENOENT, "No such file or directory", str(path))

    monkeypatch.setattr(store, "_to_netcdf4", writer)
    code = cli.main(["-q", "run", config, "--results", str(results)])  # -q: errors only on stderr
    err = capsys.readouterr().err
    assert code == cli.EXIT_STORAGE and len(err.strip().splitlines()) == 1
    assert "the folder no longer exists" in err and str(results / "cases") in err
    monkeypatch.setattr(store, "_to_netcdf4", real)
    assert cli.main(["run", config, "--results", str(results)]) == 0


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_a_read_only_results_folder_is_named(tmp_path, capsys):
    config = _config_file(tmp_path)
    results = tmp_path / "results"
    results.mkdir()
    results.chmod(0o555)
    try:
        code = cli.main(["run", config, "--results", str(results)])
    finally:
        results.chmod(0o755)
    err = capsys.readouterr().err
    assert code == cli.EXIT_STORAGE and "read-only" in err and str(results) in err


def test_storage_error_words_each_cause(tmp_path):
    # the diagnosis alone, for the cause a test above cannot reach as root (a read-only folder)
    folder = tmp_path / "f"
    folder.mkdir()
    message = runner.storage_error(folder, OSError(errno.ENOSPC, "No space left on device"), "x.nc", "kept").message
    assert message.startswith(f"cannot write x.nc in '{folder}': no space left on the device")
    assert "Input/output error" in runner.storage_error(folder, OSError(errno.EIO, "Input/output error"), "x", "k").message
    assert "no longer exists" in runner.storage_error(tmp_path / "g", OSError(errno.ENOENT, "x"), "x", "k").message
