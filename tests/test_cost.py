"""The cost estimate runs real sample cases and scales them; the benchmark's table is well formed."""

import pytest

from sigmagrid import config as config_mod, cost, grid as grid_mod
from conftest import REPO, run_cli


def test_sample_includes_the_extremes_of_the_grid():
    config = config_mod.load(REPO / "config" / "config.yaml")
    cases = list(grid_mod.expand(config).cases)
    sample = cost.sample_cases(cases, 4)
    temps = {c.temperature for c in sample}
    pressures = {c.pressure for c in sample}
    assert min(c.temperature for c in cases) in temps and max(c.temperature for c in cases) in temps
    assert min(c.pressure for c in cases) in pressures and max(c.pressure for c in cases) in pressures
    assert len(sample) == 4 and len(set(sample)) == 4


def test_estimate_scales_measured_cases():
    config = config_mod.load(REPO / "config" / "config.yaml")
    result = cost.estimate(config, n_sample=2, cores=2)
    assert result.n_cases == 24 and len(result.seconds_per_case) == 2
    assert all(t > 0 for t in result.seconds_per_case)
    # CPU time is at least the sampled mean times the number of cases
    assert result.cpu_seconds >= 24 * min(result.seconds_per_case)
    assert result.wall_seconds == result.cpu_seconds / 2
    assert 1e4 < result.bytes_per_case < 5e6
    # the demo runs SEA with fitted metrics: each of its 4 jobs loads the compiled kernels once
    n_jobs = -(-24 // result.cases_per_job)
    assert result.cpu_seconds == pytest.approx(sum(result.seconds_per_case) / 2 * 24 + n_jobs * (
        cost.JOB_START_SECONDS + result.kernel_load_seconds))


def test_estimate_without_sea_loads_no_kernels():
    config = config_mod.load(REPO / "config" / "config.yaml")
    config["sea"] = {"enabled": False}
    result = cost.estimate(config, n_sample=1, cores=2)
    assert result.kernel_load_seconds == 0.0


def test_estimate_command_refuses_bad_sample():
    done = run_cli("estimate", str(REPO / "config" / "config.yaml"), "--sample", "0")
    assert done.returncode == 2 and "--sample" in done.stderr and "Traceback" not in done.stderr


def test_benchmark_measures_each_codec_on_a_real_case():
    """The observe figures of ``sigmagrid bench`` for the three storage codecs: each one writes a
    real gri30 case file of its own size (no timing is asserted; speeds are the benchmark's job)."""
    from sigmagrid import bench

    results = bench.observe_ratio(1)
    results.update(bench.observe_codecs(1))
    assert results["observe_compression"] == "zlib"
    assert results["bytes_per_case"] < results["bytes_per_case_blosc_zstd"] < results["bytes_per_case_none"]
    assert all(results[k] > 0 for k in ("observe_ratio", "observe_ratio_blosc_zstd", "observe_ratio_none"))
    table = bench.format_table(results)
    assert "observe_ratio_blosc_zstd" in table and "storage.compression: none" in table
