"""What a grid will cost, from its config, before launching it.

A few cases spread over the grid (the lowest and highest initial temperature and pressure among
them, since ignition delay, and so solver work, varies most along those axes) are run in a
temporary folder; their time and file size are scaled to the whole grid. The estimate is only as
good as the sample: grids that cross an ignition limit mix cheap and expensive cases.
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

from . import config as config_mod, grid as grid_mod, mechanism, runner

#: Start-up of one Snakemake job (interpreter, imports, grid expansion), s; measured on the
#: 2-core development machine with gri30.yaml (see README, cost model).
JOB_START_SECONDS = 1.5


@dataclass(frozen=True)
class Estimate:
    n_cases: int
    n_species: int
    n_reactions: int
    sample_labels: tuple[str, ...]
    seconds_per_case: tuple[float, ...]
    bytes_per_case: float
    cores: int
    cases_per_job: int
    kernel_load_seconds: float = 0.0  # s per job: the compiled SEA kernels (numba), if SEA needs them
    sea_seconds_per_case: tuple[float, ...] = ()  # s, each sampled case's sea_comparison_wall_time

    @property
    def cpu_seconds(self) -> float:
        n_jobs = -(-self.n_cases // self.cases_per_job)
        return (statistics.mean(self.seconds_per_case) * self.n_cases
                + n_jobs * (JOB_START_SECONDS + self.kernel_load_seconds))

    @property
    def wall_seconds(self) -> float:
        return self.cpu_seconds / self.cores

    @property
    def disk_bytes(self) -> float:
        return self.bytes_per_case * self.n_cases


def sample_cases(cases: list[grid_mod.Case], n: int) -> list[grid_mod.Case]:
    """Up to ``n`` cases: the extremes of temperature and pressure first, then spread by id."""
    if n >= len(cases):
        return list(cases)
    chosen: list[grid_mod.Case] = []
    for key in (lambda c: c.temperature, lambda c: -c.temperature, lambda c: c.pressure, lambda c: -c.pressure):
        pick = min(cases, key=key)
        if pick not in chosen:
            chosen.append(pick)
    ordered = sorted(cases, key=lambda c: c.case_id)
    step = max(1, len(ordered) // max(1, n))
    for case in ordered[::step]:
        if len(chosen) >= n:
            break
        if case not in chosen:
            chosen.append(case)
    return chosen[:n]


def _kernel_load_seconds() -> float:
    """What a job pays to load the compiled SEA kernels, s: compiled here first (the first run
    after an install compiles them, about 20 s, and caches them on disk), then timed in a fresh
    process, as each job of a grid loads them (0.4-0.6 s from numba's cache)."""
    from .sea import compiled

    here = compiled.load_seconds()
    if compiled.kernel() is None:
        return 0.0  # no numba: the SEA paths run through Cantera, nothing to load
    code = "from sigmagrid.sea import compiled; print(compiled.load_seconds())"
    try:
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, check=True)
        return float(out.stdout.split()[-1])
    except (subprocess.SubprocessError, OSError, ValueError, IndexError):
        return here  # no fresh process here: this process's own load (or compile) time


def estimate(config: dict, n_sample: int = 4, cores: int = 2, report=lambda s: None) -> Estimate:
    """Run ``n_sample`` cases of a validated config and scale them to the grid."""
    grid = grid_mod.expand(config)
    path = mechanism.resolve(config["mechanism"])
    gas = mechanism.load(path)
    info = mechanism.describe(gas)
    settings = runner.RunSettings.from_config(config)
    meta = runner.provenance(path, grid.mechanism_sha256, config_mod.config_hash(config))
    sample = sample_cases(list(grid.cases), n_sample)
    kernel_seconds = 0.0
    if settings.sea is not None and any(m != "log-mean" for m in settings.sea.metrics):
        # every job loads the compiled SEA kernels once: time it here, outside the sampled cases
        kernel_seconds = _kernel_load_seconds()
    seconds, sizes, sea_seconds = [], [], []
    with tempfile.TemporaryDirectory() as tmp:
        for k, case in enumerate(sample, 1):
            target = Path(tmp) / f"{case.case_id}.nc"
            started = time.perf_counter()
            ds = runner.run_case_to_file(case, gas, info, settings, meta, target)
            seconds.append(time.perf_counter() - started)
            if "sea_comparison_wall_time" in ds:
                sea_seconds.append(float(ds["sea_comparison_wall_time"]))
            sizes.append(target.stat().st_size)
            elapsed = sum(seconds)
            report(f"[{k}/{len(sample)}] {case.label}: {seconds[-1]:.2f} s, {sizes[-1] / 1e6:.2f} MB; "
                   f"{runner.clock(elapsed)} elapsed, about {runner.clock(elapsed / k * (len(sample) - k))} left")
    return Estimate(n_cases=len(grid.cases), n_species=gas.n_species, n_reactions=gas.n_reactions,
                    sample_labels=tuple(c.label for c in sample), seconds_per_case=tuple(seconds),
                    bytes_per_case=statistics.mean(sizes), cores=cores,
                    cases_per_job=int(config["batch"]["cases_per_job"]), kernel_load_seconds=kernel_seconds,
                    sea_seconds_per_case=tuple(sea_seconds))


def estimate_record(e: Estimate) -> dict:
    """The estimate for scripts (``sigmagrid estimate --json``): units in the key names."""
    return {
        "cases": e.n_cases, "species": e.n_species, "reactions": e.n_reactions,
        "sampled_cases": list(e.sample_labels), "seconds_per_sampled_case": list(e.seconds_per_case),
        "sea_seconds_per_sampled_case": list(e.sea_seconds_per_case),
        "job_start_seconds": JOB_START_SECONDS, "kernel_load_seconds": e.kernel_load_seconds,
        "cases_per_job": e.cases_per_job, "cores": e.cores,
        "cpu_seconds": e.cpu_seconds, "wall_seconds": e.wall_seconds,
        "disk_bytes": e.disk_bytes, "bytes_per_case": e.bytes_per_case,
    }


def format_estimate(e: Estimate) -> str:
    return "\n".join([
        f"grid: {e.n_cases} cases; mechanism {e.n_species} species, {e.n_reactions} reactions",
        f"sampled {len(e.seconds_per_case)} cases: {min(e.seconds_per_case):.2f} to "
        f"{max(e.seconds_per_case):.2f} s per case (mean {statistics.mean(e.seconds_per_case):.2f} s)",
        *([f"of which the SEA comparison: mean {statistics.mean(e.sea_seconds_per_case):.2f} s per case "
           f"({statistics.mean(e.sea_seconds_per_case) / statistics.mean(e.seconds_per_case):.0%} of a case; "
           "sea.enabled: false saves it)"] if e.sea_seconds_per_case else []),
        f"per job: {JOB_START_SECONDS:.1f} s start-up"
        + (f" + {e.kernel_load_seconds:.1f} s to load the compiled SEA kernels" if e.kernel_load_seconds else "")
        + f", {e.cases_per_job} cases per job",
        f"estimated CPU time   {e.cpu_seconds / 60:10.1f} min",
        f"estimated wall time  {e.wall_seconds / 60:10.1f} min on {e.cores} cores",
        f"estimated disk       {e.disk_bytes / 1e9:10.3f} GB ({e.bytes_per_case / 1e6:.2f} MB per case)",
    ])
