"""``sigmagrid bench``: what the pipeline costs on top of the chemistry, measured side by side.

Each ratio is taken pair by pair (pipeline run, then the bare Cantera run of the same case, the
order alternating), and the median over the repeats is reported, so machine noise cancels.
Bare Cantera means the same reactor, the same tolerances, stepped to the same end time with
``ReactorNet.step()`` and every state appended to a ``SolutionArray``: the usual way to record a
reactor's path.
"""

from __future__ import annotations

import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import cantera as ct
import numpy as np
import yaml

from . import config as config_mod, grid as grid_mod, mechanism, runner, store
from .reactors import make_network

METHANE_AIR = {"fuel": "CH4:1", "oxidizer": "O2:1, N2:3.76"}
LARGE_MECHANISM = "example_data/n-hexane-NUIG-2015.yaml"  # 1268 species, 5336 reactions (ships with Cantera)

TARGETS = {
    "observe_ratio": ("<=", 1.5),
    "sea_ratio_max": ("<=", 3.0),
    "sea_comparison_ratio": ("<=", 3.0),
    "grid_efficiency": (">=", 0.8),
    "bytes_per_case": ("<=", 2_000_000),
    "large_ratio": ("<=", 1.3),
    "large_peak_memory_bytes": ("<=", 4 * 2**30),
    "query_seconds": ("<=", 1.0),
}


def _methane_config(**overrides) -> dict:
    raw = {"study": "benchmark: methane-air ignition", "mechanism": "gri30.yaml", "reactors": ["isolated"],
           "feed": dict(METHANE_AIR, equivalence_ratio=[1.0]), "temperature": [1300.0],
           "pressure": [ct.one_atm], "stop": {"max_time": 1.0}, "sea": {"enabled": False}}
    raw.update(overrides)
    return config_mod.validate(raw)


def bare_cantera(gas: ct.Solution, case: grid_mod.Case, settings, end_time: float) -> float:
    """Wall time of the usual Cantera loop: step() to ``end_time``, append each state. Seconds."""
    gas.TPX = case.temperature, case.pressure, case.mole_fractions()
    started = time.perf_counter()
    reactor, net = make_network(case.reactor, gas, settings)
    states = ct.SolutionArray(gas, extra=["t"])
    while net.time < end_time:
        net.step()
        states.append(reactor.phase.state if hasattr(reactor, "phase") else reactor.thermo.state, t=net.time)
    return time.perf_counter() - started


class _Pipeline:
    """One case through the pipeline as a batch runs it: mechanism parsed once, then per case
    relaxation, diagnostics at the stored samples and the atomic file write."""

    def __init__(self, config: dict):
        path = mechanism.resolve(config["mechanism"])
        self.gas = mechanism.load(path)
        self.info = mechanism.describe(self.gas)
        self.settings = runner.RunSettings.from_config(config)
        self.meta = runner.provenance(path, mechanism.file_sha256(path), config_mod.config_hash(config))

    def once(self, case: grid_mod.Case, folder: Path) -> tuple[float, float, int]:
        """(wall seconds, end time of the path, file bytes)."""
        target = folder / f"{case.case_id}.nc"
        started = time.perf_counter()
        ds = runner.run_case_to_file(case, self.gas, self.info, self.settings, self.meta, target)
        elapsed = time.perf_counter() - started
        return elapsed, float(ds["time"][-1]), target.stat().st_size


def observe_ratio(repeats: int, config: dict | None = None) -> dict:
    """Per-case pipeline without SEA (relax, diagnostics, file) against bare Cantera."""
    config = config or _methane_config()
    codec = config["storage"]["compression"]
    case = grid_mod.expand(config).cases[0]
    pipeline = _Pipeline(config)
    gas = mechanism.load(mechanism.resolve(config["mechanism"]))
    settings = pipeline.settings.relax
    ratios, ours, bare, size = [], [], [], 0
    with tempfile.TemporaryDirectory() as tmp:
        _, end, _ = pipeline.once(case, Path(tmp))  # warm-up; fixes the common end time
        for i in range(repeats):
            if i % 2:  # alternate the order so drifts in machine speed cancel
                t_bare = bare_cantera(gas, case, settings, end)
                t_ours, _, size = pipeline.once(case, Path(tmp))
            else:
                t_ours, _, size = pipeline.once(case, Path(tmp))
                t_bare = bare_cantera(gas, case, settings, end)
            ours.append(t_ours)
            bare.append(t_bare)
            ratios.append(t_ours / t_bare)
    return {"observe_ratio": statistics.median(ratios), "observe_seconds": statistics.median(ours),
            "bare_seconds": statistics.median(bare), "bytes_per_case": size,
            "observe_case": f"{case.label} ({config['mechanism']})", "observe_compression": codec}


def observe_codecs(repeats: int) -> dict:
    """observe_ratio and bytes_per_case with the non-default ``storage.compression`` codecs."""
    out = {}
    for codec in store.COMPRESSIONS[1:]:
        found = observe_ratio(repeats, _methane_config(storage={"compression": codec}))
        key = codec.replace("-", "_")
        out[f"observe_ratio_{key}"] = found["observe_ratio"]
        out[f"bytes_per_case_{key}"] = found["bytes_per_case"]
    return out


def grid_config(n_cases: int) -> dict:
    """A methane-air grid on gri30.yaml with about ``n_cases`` cases (SEA off)."""
    n_phi = 5
    n_t = 5 if n_cases >= 100 else 2
    n_p = max(1, round(n_cases / (2 * n_phi * n_t)))
    return _methane_config(
        reactors=["isolated", "constant-pressure"],
        feed=dict(METHANE_AIR, equivalence_ratio=[round(x, 3) for x in np.linspace(0.7, 1.3, n_phi)]),
        temperature=[float(t) for t in np.linspace(1200.0, 1600.0, n_t)],
        pressure=[float(p) for p in np.geomspace(ct.one_atm, 20 * ct.one_atm, n_p)],
        # 4 jobs, two per core: a job's start (imports, grid expansion: 0.5 s) is paid 4 times,
        # and jobs of 50 cases balance well (a case costs 0.2-0.5 s)
        batch={"cases_per_job": max(1, -(-(2 * n_phi * n_t * n_p) // 4))},
    )


def find_snakefile(workflow: str | Path | None = None) -> Path | None:
    """The project's Snakefile: in ``workflow`` if given, else in the current folder, else in the
    source checkout this package runs from (an editable install); None where there is none (an
    installed package carries the library, not the workflow)."""
    places = [Path(workflow)] if workflow is not None else [Path.cwd(), Path(__file__).resolve().parents[2]]
    for folder in places:
        if (folder / "Snakefile").is_file() and (folder / "workflow").is_dir():
            return folder / "Snakefile"
    return None


def _snakemake(workdir: Path, snakefile: Path, cores: int = 2) -> tuple[float, int]:
    """Wall time of a Snakemake run of the project's workflow in ``workdir``; peak RSS of any job."""
    started = time.perf_counter()
    # the cases and the summary only: ranking, cuts and figures are other work
    proc = subprocess.Popen([sys.executable, "-m", "snakemake", "results/summary.nc", "--cores", str(cores),
                             "-q", "-s", str(snakefile), "-d", str(workdir),
                             "--configfile", str(workdir / "config.yaml")],
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    output, _ = proc.communicate()
    elapsed = time.perf_counter() - started
    if proc.returncode != 0:
        raise RuntimeError("snakemake failed:\n" + output.decode(errors="replace")[-2000:])
    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024
    return elapsed, peak


def grid_efficiency(n_cases: int, repeats: int = 1, snakefile: Path | None = None) -> dict:
    """Serial in-process time / 2 against the wall time through Snakemake on 2 cores; both make
    every case file and the summary. The median over ``repeats`` pairs, the order alternating
    (each pair's ratio is in ``grid_efficiency_pairs``).

    Single pairs are noisy on the machine we develop on: the speed of its two virtual cores
    drifts with the host's load (a CPU-bound loop alone took 0.46-0.79 s from one run to the
    next), and a 200-case Snakemake run took 27-36 s on the same day.
    """
    config = grid_config(n_cases)
    cases = list(grid_mod.expand(config).cases)
    ratios, serials, walls, peak = [], [], [], 0
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(repeats):
            run_dir = Path(tmp) / str(i)

            def serial() -> float:
                started = time.perf_counter()
                # the same work as the Snakemake target: every case, then the summary, all in this
                # one process (the summary's forked readers would make the baseline partly parallel)
                files = runner.run_cases(config, cases, run_dir / "serial", report=lambda s: None)
                runner.write_summary(files, run_dir / "serial.nc", run_dir / "serial.csv", workers=1)
                return time.perf_counter() - started

            def flow() -> float:
                nonlocal peak
                work = run_dir / "flow"
                work.mkdir(parents=True)
                (work / "config.yaml").write_text(yaml.safe_dump(json.loads(json.dumps(config))))
                wall, job_peak = _snakemake(work, snakefile or find_snakefile())
                peak = max(peak, job_peak)
                return wall

            if i % 2:
                wall = flow()
                t_serial = serial()
            else:
                t_serial = serial()
                wall = flow()
            serials.append(t_serial)
            walls.append(wall)
            ratios.append((t_serial / 2) / wall)
    return {"grid_efficiency": statistics.median(ratios), "grid_cases": len(cases),
            "grid_serial_seconds": statistics.median(serials), "grid_snakemake_seconds": statistics.median(walls),
            "job_peak_memory_bytes": peak,
            "grid_efficiency_pairs": ratios}


def _large_worker(max_time: float, out: str) -> None:
    # run in a child process so its peak memory is its own
    config = config_mod.validate({
        "mechanism": LARGE_MECHANISM, "reactors": ["constant-pressure"],
        "feed": {"fuel": "NC6H14:1", "oxidizer": "O2:1, N2:3.76", "equivalence_ratio": [1.0]},
        "temperature": [1000.0], "pressure": [10 * ct.one_atm], "stop": {"max_time": max_time},
        "solver": {"rtol": 1e-8, "atol": 1e-16}, "sea": {"enabled": False}})
    case = grid_mod.expand(config).cases[0]
    with tempfile.TemporaryDirectory() as tmp:
        t_ours, end, size = _Pipeline(config).once(case, Path(tmp))
    gas = mechanism.load(mechanism.resolve(LARGE_MECHANISM))
    t_bare = bare_cantera(gas, case, runner.RunSettings.from_config(config).relax, end)
    Path(out).write_text(json.dumps({"ours": t_ours, "bare": t_bare, "bytes": size, "species": gas.n_species,
                                     "reactions": gas.n_reactions}))


def large_ratio(repeats: int, max_time: float) -> dict:
    ratios, peaks, info = [], [], {}
    for _ in range(repeats):
        with tempfile.NamedTemporaryFile(suffix=".json") as handle:
            proc = subprocess.Popen([sys.executable, "-c", "import sys; from sigmagrid.bench import _large_worker; "
                                     f"_large_worker({max_time!r}, {handle.name!r})"])
            _, status, usage = os.wait4(proc.pid, 0)
            if status != 0:
                raise RuntimeError("large-mechanism benchmark failed")
            info = json.loads(Path(handle.name).read_text())
        ratios.append(info["ours"] / info["bare"])
        peaks.append(usage.ru_maxrss * 1024)
    return {"large_ratio": statistics.median(ratios), "large_peak_memory_bytes": max(peaks),
            "large_mechanism": f"{Path(LARGE_MECHANISM).name} ({info['species']} species, "
                               f"{info['reactions']} reactions)", "large_seconds": info["ours"],
            "large_bytes_per_case": info["bytes"]}


def _hydrogen_config() -> dict:
    """The hydrogen benchmark case: H2-air, phi 1, 1000 K, 10 atm, isolated, on h2o2.yaml."""
    return _methane_config(mechanism="h2o2.yaml", feed={"fuel": "H2:1", "oxidizer": "O2:1, N2:3.76",
                                                        "equivalence_ratio": [1.0]},
                           temperature=[1000.0], pressure=[10 * ct.one_atm])


def sea_ratio(repeats: int) -> dict:
    """The whole SEA comparison (``sea.compare``: fits, alignment, every default path, the
    near-equilibrium check) against bare Cantera integrating the same case, on the gri30 and the
    h2o2 benchmark cases: ``sea_comparison_ratio_<mechanism>``, medians of pairwise ratios, the
    order alternating; ``sea_comparison_ratio`` is the larger. Each path's own integration
    (``sea_wall_time``) against bare Cantera on gri30 is ``sea_ratio_<metric>``."""
    from . import sea, store
    from .reactors import relax
    from .sea import compiled

    kernel_seconds = compiled.load_seconds()  # once per process, before any clock
    out = {"sea_kernel_load_seconds": kernel_seconds}
    for name, config in (("gri30", _methane_config()), ("h2o2", _hydrogen_config())):
        case = grid_mod.expand(config).cases[0]
        pipeline = _Pipeline(config)
        settings = pipeline.settings.relax
        gas = mechanism.load(mechanism.resolve(config["mechanism"]))
        r = relax(pipeline.gas, pipeline.info, case.reactor, case.temperature, case.pressure,
                  case.mole_fractions(), settings, keep_rates=True)  # as runner.run_case does with SEA on
        budget = store.sample_budget(pipeline.settings.max_samples, pipeline.settings.max_bytes,
                                     pipeline.gas.n_reactions, pipeline.gas.n_species)
        idx = store.choose_samples(r.time, r.progress, r.temperature, budget)
        sea.compare(pipeline.gas, pipeline.info, r, idx, sea.SeaSettings())  # warm-up
        ratios, per_metric = [], {}
        for i in range(repeats):
            def ours():
                started = time.perf_counter()
                ds = sea.compare(pipeline.gas, pipeline.info, r, idx, sea.SeaSettings())
                return time.perf_counter() - started, ds
            if i % 2:
                t_bare = bare_cantera(gas, case, settings, float(r.time[-1]))
                t_ours, ds = ours()
            else:
                t_ours, ds = ours()
                t_bare = bare_cantera(gas, case, settings, float(r.time[-1]))
            ratios.append(t_ours / t_bare)
            if name == "gri30":
                for metric, seconds in zip(ds["metric"].values, ds["sea_wall_time"].values):
                    per_metric.setdefault(str(metric), []).append(float(seconds) / t_bare)
            out[f"sea_statuses_{name}"] = [str(v) for v in ds["sea_status"].values]
        out[f"sea_comparison_ratio_{name}"] = statistics.median(ratios)
        out[f"sea_comparison_pairs_{name}"] = ratios
        out.update({f"sea_ratio_{m}": statistics.median(v) for m, v in per_metric.items()})
    out["sea_comparison_ratio"] = max(out["sea_comparison_ratio_gri30"], out["sea_comparison_ratio_h2o2"])
    out["sea_ratio_max"] = max(v for k, v in out.items() if k.startswith("sea_ratio_") and k != "sea_ratio_max")
    return out


def query_seconds() -> dict:
    """A top-reactions query on a synthetic 1000-case summary, opening the file included."""
    from . import query

    timings = query.benchmark(1000)
    top = [t for name, t in timings if name.startswith("top reactions")]
    return {"query_seconds": max(top), "query_command_seconds": timings[-1][1] if timings else float("nan")}


def check_targets(results: dict) -> dict:
    verdict = {}
    for key, (op, limit) in TARGETS.items():
        if key in results and results[key] is not None:
            value = results[key]
            verdict[key] = bool(value <= limit if op == "<=" else value >= limit)
    return verdict


SECTIONS = ("observe", "sea", "query", "grid", "large")


def run(quick: bool = False, report=print, only: tuple[str, ...] = SECTIONS, workflow=None) -> dict:
    """The measurements of ``only`` (all by default); ``quick`` takes under a minute, the full run
    under 15 minutes. The grid section runs the project's workflow (``workflow``: its folder; see
    :func:`find_snakefile`) and is skipped, with a note, where there is none."""
    warnings.simplefilter("ignore")
    results: dict = {"quick": quick, "cantera_version": ct.__version__, "cpu_count": os.cpu_count(),
                     "date": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()), "machine": platform.machine(),
                     "command": " ".join(sys.argv)}
    if "observe" in only:
        report("observe: gri30 case, pipeline vs bare Cantera ...")
        results.update(observe_ratio(3 if quick else 7))
        report("observe: the same with the other storage codecs ...")
        results.update(observe_codecs(3 if quick else 7))
    if "sea" in only:
        report("SEA comparison: the whole comparison and each path vs bare Cantera (gri30, h2o2) ...")
        results.update(sea_ratio(1 if quick else 5))
    if "query" in only:
        report("query: top reactions on a synthetic 1000-case summary ...")
        results.update(query_seconds())
    snakefile = find_snakefile(workflow) if "grid" in only else None
    if "grid" in only and snakefile is None:
        where = f"'{workflow}'" if workflow is not None else f"the current folder ({Path.cwd()})"
        report(f"grid: skipped: no Snakefile and workflow/ folder in {where}; run from the project folder "
               "or pass --workflow FOLDER")
        results["grid_skipped"] = f"no workflow in {where}"
    elif "grid" in only:
        report("grid: serial in-process vs Snakemake on 2 cores ...")
        results.update(grid_efficiency(20 if quick else 200, 1 if quick else 3, snakefile))
    if "large" in only:
        report("large mechanism: sparse preconditioned solver ...")
        results.update(large_ratio(1 if quick else 3, 0.002 if quick else 0.02))
    results["targets_met"] = check_targets(results)
    return results


def format_table(results: dict) -> str:
    rows = [("observe_ratio", "pipeline / bare Cantera, one gri30 case", "1"),
            ("observe_seconds", "pipeline time per case", "s"),
            ("bytes_per_case", "case file size", "B"),
            *[(f"{name}_{codec.replace('-', '_')}", f"{what}, storage.compression: {codec}", unit)
              for codec in store.COMPRESSIONS[1:]
              for name, what, unit in (("observe_ratio", "pipeline / bare Cantera", "1"),
                                       ("bytes_per_case", "case file size", "B"))],
            ("grid_efficiency", "(serial time / 2) / Snakemake wall time", "1"),
            ("grid_snakemake_seconds", f"Snakemake wall time, {results.get('grid_cases')} cases", "s"),
            ("job_peak_memory_bytes", "peak memory of a job", "B"),
            ("large_ratio", f"pipeline / bare Cantera, {results.get('large_mechanism')}", "1"),
            ("large_peak_memory_bytes", "peak memory, large case", "B"),
            ("query_seconds", "top-reactions query, 1000-case summary", "s"),
            ("query_command_seconds", "the same as a `sigmagrid query` command (new process)", "s")]
    rows += [(f"sea_comparison_ratio_{m}", f"whole SEA comparison / bare Cantera, {m} case", "1")
             for m in ("gri30", "h2o2")]
    rows += [("sea_comparison_ratio", "the larger of the two", "1")]
    rows += [(k, f"SEA path / bare Cantera, metric {k[10:]}", "1") for k in results if k.startswith("sea_ratio_")]
    rows += [("sea_kernel_load_seconds", "compiled SEA kernels, once per process (numba cache or compile)", "s")]
    met = results.get("targets_met", {})
    lines = [f"{'figure':26} {'value':>14}  {'unit':4}  {'target':10}  what"]
    for key, what, unit in rows:
        if key not in results:
            continue
        value = results[key]
        target = TARGETS.get(key)
        mark = "" if key not in met else ("met" if met[key] else "MISSED")
        target_text = f"{target[0]} {target[1]:g} {mark}" if target else ""
        lines.append(f"{key:26} {value:14.4g}  {unit:4}  {target_text:10}  {what}")
    if results.get("quick"):
        lines.append("quick mode: one repeat, a 20-case grid and 2 ms of the large case, so fixed costs (job starts, "
                     "the large mechanism's equilibrium) dominate grid_efficiency and large_ratio; run without "
                     "--quick for the figures the targets refer to")
    return "\n".join(lines)
