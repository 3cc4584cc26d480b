"""Shared fixtures: a few relaxations computed once per test session."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from sigmagrid import config as config_mod, grid as grid_mod, mechanism, runner, store

REPO = Path(__file__).resolve().parents[1]
AIR = "O2:1, N2:3.76"


def run_cli(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    """The sigmagrid command in a subprocess, as a user runs it."""
    return subprocess.run([sys.executable, "-m", "sigmagrid", *args], capture_output=True, text=True,
                          cwd=cwd, timeout=600)


@pytest.fixture(scope="session")
def h2o2():
    path = mechanism.resolve("h2o2.yaml")
    gas = mechanism.load(path)
    return gas, mechanism.describe(gas)


def _config(**overrides) -> dict:
    raw = {"mechanism": "h2o2.yaml", "reactors": ["isolated", "constant-pressure"],
           "feed": {"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [1.0]},
           "temperature": [1100.0], "pressure": [101325.0], "stop": {"max_time": 1.0}}
    raw.update(overrides)
    return config_mod.validate(raw)


@pytest.fixture(scope="session")
def tiny_config():
    return _config


@pytest.fixture(scope="session")
def case_files(tmp_path_factory):
    """Case files of stoichiometric and rich H2-air in the three reactor types (h2o2.yaml)."""
    out = tmp_path_factory.mktemp("cases")
    config = _config(reactors=["isolated", "constant-pressure", "isothermal"],
                     feed={"fuel": "H2:1", "oxidizer": AIR, "equivalence_ratio": [1.0, 2.0]},
                     temperature=[1100.0], pressure=[101325.0, 1013250.0], stop={"max_time": 5.0})
    grid = grid_mod.expand(config)
    files = runner.run_cases(config, list(grid.cases), out, report=lambda s: None)
    return {c.label: store.open_case(f) for c, f in zip(grid.cases, files)}


def copy_workflow(folder: Path, config: dict | None = None) -> Path:
    """A copy of the workflow (Snakefile, workflow/, config/, profiles) in ``folder``; ``config``
    replaces the default config."""
    import yaml

    for name in ("Snakefile", "workflow", "config", "profiles"):
        src = REPO / name
        if src.is_dir():
            shutil.copytree(src, folder / name, symlinks=True)
        else:
            shutil.copy(src, folder / name)
    if config is not None:
        (folder / "config" / "config.yaml").write_text(yaml.safe_dump(config))
    return folder


def snakemake(workdir: Path, *args: str) -> subprocess.CompletedProcess:
    """Snakemake on 2 cores in ``workdir``, as a user runs it."""
    return subprocess.run([sys.executable, "-m", "snakemake", "--cores", "2", *args], cwd=workdir,
                          capture_output=True, text=True, timeout=900)


@pytest.fixture()
def workdir(tmp_path):
    """A copy of the workflow (Snakefile, workflow/, config/) in a fresh folder."""
    return copy_workflow(tmp_path)


# How many configs, mechanisms and conditions the reliability tests tried: CI prints the counts.
TRIED: dict[str, int] = {}


def count_tried(kind: str, n: int = 1) -> None:
    TRIED[kind] = TRIED.get(kind, 0) + n


def pytest_terminal_summary(terminalreporter):
    if TRIED:
        terminalreporter.section("reliability: inputs tried")
        for kind, n in sorted(TRIED.items()):
            terminalreporter.write_line(f"{n:7d}  {kind}")


def without_sea(raw: dict) -> dict:
    """The config with the SEA comparison off, where the schema has that switch: the reliability
    tests exercise the pipeline around the cases and must fit CI's time budget."""
    if "sea" in config_mod.schema().get("properties", {}):
        return {**raw, "sea": {"enabled": False}}
    return raw
