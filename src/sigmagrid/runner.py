"""Running cases: one case to one file, a batch of cases, a whole grid without Snakemake.

A case that fails is written as a file with status ``failed`` and the reason; it never stops
the other cases of its batch.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import fcntl
import os
import shutil
import sys
import time
import traceback
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import cantera as ct
import numpy as np
import xarray as xr

from . import __version__, config as config_mod, diagnostics, fileformat, grid as grid_mod, mechanism, safety, store
from . import sea as sea_mod
from .errors import InputError, StorageError
from .reactors import Relaxation, RelaxSettings, relax


@dataclass(frozen=True)
class RunSettings:
    relax: RelaxSettings
    max_samples: int = 500
    max_bytes: float = 16e6  # bytes of stored float32 samples per case, before compression
    compression: str = "zlib"  # codec of the stored samples, one of store.COMPRESSIONS
    sea: "sea_mod.SeaSettings | None" = None  # None: no steepest-entropy-ascent comparison

    @classmethod
    def from_config(cls, config: dict) -> "RunSettings":
        stop, solver = config["stop"], config["solver"]
        return cls(
            relax=RelaxSettings(max_time=float(stop["max_time"]),
                                isothermal_max_time=float(stop["isothermal_max_time"]),
                                progress_tolerance=float(stop["progress_tolerance"]),
                                ignition_rise=float(stop["ignition_rise"]), rtol=float(solver["rtol"]),
                                atol=float(solver["atol"]), max_steps=int(solver["max_steps"]),
                                volume=float(config["reactor_volume"])),
            max_samples=int(config["storage"]["max_samples"]),
            max_bytes=float(config["storage"]["max_bytes"]),
            compression=config["storage"]["compression"],
            sea=_sea_settings(config.get("sea", {})),
        )


def _sea_settings(section: dict) -> "sea_mod.SeaSettings | None":
    section = dict(section)
    if not section.pop("enabled", True):
        return None
    try:
        return sea_mod.SeaSettings.from_mapping(section)
    except ValueError as err:
        field, _, message = str(err).partition(": ")
        raise InputError(field if field.startswith("sea") else "sea", message or str(err)) from None


def provenance(mechanism_path: Path, mechanism_sha256: str, config_sha256: str = "", study: str = "") -> dict:
    return {
        "mechanism": mechanism_path.name, "mechanism_path": str(mechanism_path),
        "mechanism_sha256": mechanism_sha256, "config_sha256": config_sha256,
        "sigmagrid_version": __version__, "cantera_version": ct.__version__,
        "python_version": sys.version.split()[0], "numpy_version": np.__version__, "study": study,
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
    }


def _failed_relaxation(gas: ct.Solution, case: grid_mod.Case, reason: str, settings: RelaxSettings) -> Relaxation:
    gas.TPX = case.temperature, case.pressure, case.mole_fractions()
    one = np.array
    return Relaxation(
        reactor=case.reactor, status="failed", reason=reason, mass=gas.density * settings.volume,
        time=one([0.0]), temperature=one([gas.T]), pressure=one([gas.P]), density=one([gas.density]),
        mass_fractions=gas.Y[None, :].copy(), entropy=one([np.nan]), potential=one([np.nan]),
        entropy_production_total=one([np.nan]), entropy_produced=np.full(gas.n_reactions, np.nan),
        equilibrium=None, audit=None, molecular_weights=gas.molecular_weights,
    )


def run_case(case: grid_mod.Case, gas: ct.Solution, info: mechanism.MechanismInfo, settings: RunSettings,
             meta: dict) -> xr.Dataset:
    """Relax one case and build its Dataset. Never raises for a failing case: status says it."""
    mole_fractions = case.mole_fractions()
    try:
        relaxation = relax(gas, info, case.reactor, case.temperature, case.pressure, mole_fractions, settings.relax,
                           keep_rates=settings.sea is not None)
    except Exception as err:  # noqa: BLE001 - recorded, not hidden
        relaxation = _failed_relaxation(gas, case, f"{type(err).__name__}: {err}", settings.relax)
    relaxation.notes.extend(case_notes(relaxation, gas))
    ignition_index = ()
    if np.isfinite(relaxation.ignition_delay):
        ignition_index = (int(np.searchsorted(relaxation.time, relaxation.ignition_delay)),)
    budget = store.sample_budget(settings.max_samples, settings.max_bytes, gas.n_reactions, gas.n_species)
    idx = store.choose_samples(relaxation.time, relaxation.progress, relaxation.temperature,
                               budget, keep=ignition_index)
    state = diagnostics.evaluate(gas, relaxation.temperature[idx], relaxation.density[idx],
                                 np.clip(relaxation.mass_fractions[idx], 0.0, None))
    screen = safety.screen_flammability(mole_fractions)
    eq = relaxation.equilibrium
    ds = store.case_dataset(
        case=case, relaxation=relaxation, reaction_state=state, sample_index=idx, info=info,
        equations=info.equations, species=info.species,
        equilibrium_mole_fractions=eq.mole_fractions if eq else None, flammability=screen, provenance=meta,
    )
    ds.attrs["stored_sample_budget"] = budget
    if settings.sea is not None:
        # never raises for a failing SEA path: its status and reason are stored per metric
        sea_ds = sea_mod.compare(gas, info, relaxation, idx, settings.sea)
        # the comparison labels reactions by position; the case file by source index
        ds = ds.merge(sea_ds.drop_vars("reaction"), compat="override")
        ds.attrs.update(sea_ds.attrs)  # merge keeps the first attributes only: the SEA settings and skip reason
        ds = fileformat.finish(ds, "case", f"case {case.case_id} relaxed and compared with steepest entropy ascent")
    return ds


#: |relative drift| of the held energy above which a case carries a note (round-off is ~1e-12).
ENERGY_DRIFT_NOTE = 1e-6


def case_notes(relaxation: Relaxation, gas: ct.Solution) -> list[str]:
    """Warnings about one case: energy not held, temperatures outside the thermo data's range."""
    notes = []
    drift = relaxation.energy_drift
    if np.isfinite(drift) and abs(drift) > ENERGY_DRIFT_NOTE:
        notes.append(f"held energy drifted by {drift:.2g} (relative): check the thermo data near the "
                     "temperatures crossed (NASA7 midpoints)")
    if relaxation.temperature.size:
        low = max(sp.thermo.min_temp for sp in gas.species())
        high = min(sp.thermo.max_temp for sp in gas.species())
        t_min, t_max = float(np.nanmin(relaxation.temperature)), float(np.nanmax(relaxation.temperature))
        if relaxation.equilibrium is not None:
            t_max = max(t_max, relaxation.equilibrium.temperature)
        if t_max > high or t_min < low:
            notes.append(f"temperatures {t_min:.0f}-{t_max:.0f} K leave the range where the thermo data of "
                         f"every species hold ({low:g}-{high:g} K): values there are extrapolated")
    return notes


def run_cases(config: dict, cases: list[grid_mod.Case], out_dir: str | Path,
              report: Callable[[str], None] = print, skip_existing: bool = False,
              grid: grid_mod.Grid | None = None, detail: Callable[[str], None] | None = None) -> list[Path]:
    """Run cases one after the other, writing ``<out_dir>/<case_id>.nc`` atomically for each.

    ``grid``: the expansion the cases come from; its parsed mechanism is reused (parsing a
    1268-species mechanism takes about 0.8 s). ``detail``: receives one more line per case, its
    SEA paths (status, largest path angle in rad, path time in s).
    """
    out_dir = Path(out_dir)
    if grid is not None and grid.gas is not None:
        path, sha, gas = grid.mechanism_path, grid.mechanism_sha256, grid.gas
    else:
        path = mechanism.resolve(config["mechanism"])
        sha = mechanism.file_sha256(path)
        gas = mechanism.load(path, phase=config.get("phase"))
    info = mechanism.describe(gas)
    settings = RunSettings.from_config(config)
    meta = provenance(path, sha, config_mod.config_hash(config), config.get("study", ""))
    meta["mechanism_phase"] = gas.name
    meta["settings_sha256"] = config_mod.settings_hash(config)
    for note in info.notes:
        report(f"note: {note}")
    written = []
    reuse = [skip_existing and _reusable(out_dir / f"{case.case_id}.nc", meta["settings_sha256"]) for case in cases]
    if any(reuse):
        report(f"{sum(reuse)} of {len(cases)} cases already finished with the same settings: kept, not rerun")
    to_run, done, run_started = len(cases) - sum(reuse), 0, time.perf_counter()
    for n, (case, reused) in enumerate(zip(cases, reuse), 1):
        target = out_dir / f"{case.case_id}.nc"
        store.remove_stale_temporaries(target)  # a killed earlier run may have left one
        if reused:
            written.append(target)
            continue
        started = time.perf_counter()
        try:
            ds = run_case_to_file(case, gas, info, settings, meta, target)
        except OSError as err:
            raise storage_error(out_dir, err, f"case file {target.name}",
                                f"{len(written)} finished case files are kept") from None
        written.append(target)
        done += 1
        elapsed = time.perf_counter() - run_started
        why = f" ({ds.attrs['reason']})" if ds.attrs["reason"] else ""
        report(f"[{n}/{len(cases)}] {case.label}: {ds.attrs['status']} in {time.perf_counter() - started:.2f} s, "
               f"balance residual {float(ds['balance_residual']):.1e}{why}; {clock(elapsed)} elapsed, "
               f"about {clock(elapsed / done * (to_run - done))} left")
        if detail is not None and "sea_status" in ds:
            detail("    SEA paths: " + ", ".join(
                f"{m} {st} {a:.3g} rad {w:.2f} s" for m, st, a, w in zip(
                    ds["metric"].values, ds["sea_status"].values, ds["largest_path_angle"].values,
                    ds["sea_wall_time"].values)))
    return written


def clock(seconds: float) -> str:
    """A duration for people: 42 s, 3 min 20 s, 2 h 05 min."""
    seconds = int(round(seconds))
    if seconds < 60:
        return f"{seconds} s"
    if seconds < 3600:
        return f"{seconds // 60} min {seconds % 60:02d} s"
    return f"{seconds // 3600} h {seconds % 3600 // 60:02d} min"


def _reusable(target: Path, settings_sha256: str) -> bool:
    """A finished case file made with the same case settings: reruns skip it, others redo it.

    Case ids follow the physics and the mechanism only; the stop, solver and storage settings
    are in ``settings_sha256`` (see :func:`sigmagrid.config.settings_hash`).
    """
    if not target.is_file():
        return False
    try:
        with xr.open_dataset(target) as ds:
            # a file of another format version is recomputed, never kept
            return (ds.attrs.get("settings_sha256") == settings_sha256
                    and str(ds.attrs.get(fileformat.VERSION_ATTRIBUTE, "")).split(".")[0]
                    == fileformat.FORMAT_VERSION.split(".")[0])
    except Exception:  # noqa: BLE001 - damaged: compute it again
        return False


def run_case_to_file(case: grid_mod.Case, gas: ct.Solution, info: mechanism.MechanismInfo,
                     settings: RunSettings, meta: dict, target: str | Path) -> xr.Dataset:
    """Run one case and write its file atomically; an internal error becomes a failed case file."""
    try:
        ds = run_case(case, gas, info, settings, meta)
    except Exception:  # noqa: BLE001 - a bug of ours must not cost the other cases
        reason = "internal error: " + traceback.format_exc(limit=3).strip().splitlines()[-1]
        relaxation = _failed_relaxation(gas, case, reason, settings.relax)
        state = diagnostics.evaluate(gas, relaxation.temperature, relaxation.density, relaxation.mass_fractions)
        ds = store.case_dataset(case=case, relaxation=relaxation, reaction_state=state, sample_index=[0],
                                info=info, equations=info.equations, species=info.species,
                                equilibrium_mole_fractions=None,
                                flammability=safety.screen_flammability(case.mole_fractions()), provenance=meta)
    store.write_atomic(ds, target, settings.compression)
    return ds


def run_single(config: dict, case: grid_mod.Case, target: str | Path) -> xr.Dataset:
    """One case of a validated config to one file."""
    path = mechanism.resolve(config["mechanism"])
    gas = mechanism.load(path, phase=config.get("phase"))
    meta = provenance(path, mechanism.file_sha256(path), config_mod.config_hash(config), config.get("study", ""))
    meta["mechanism_phase"] = gas.name
    meta["settings_sha256"] = config_mod.settings_hash(config)
    return run_case_to_file(case, gas, mechanism.describe(gas), RunSettings.from_config(config), meta, target)


def write_summary(case_files: list[str | Path], summary_path: str | Path, table_path: str | Path,
                  workers: int | None = None) -> xr.Dataset:
    """Combine case files into ``summary.nc`` and ``cases.csv`` (both written atomically);
    ``workers`` processes read the files (default: the available cores, at most 4)."""
    summary, table = store.summarize(case_files, workers)
    store.write_atomic(summary, summary_path)
    units = {name: u for name, (u, _) in store.SCALARS.items()}
    renamed = table.rename(columns={
        **{name: f"{name} [{u}]" for name, u in units.items()},
        "initial_temperature": "initial_temperature [K]", "initial_pressure": "initial_pressure [Pa]",
        "equivalence_ratio": "equivalence_ratio [1]",
        **{f"time_to_{lv}pct": f"time_to_{lv}pct [s]" for lv in (50, 90, 99)}})
    store.write_text_atomic(renamed.to_csv(index=False, float_format="%.8g"), table_path)
    return summary


def storage_error(folder: Path, err: OSError, what: str, kept: str) -> StorageError:
    """One line for a write that the folder refused: which folder, why (as far as the system
    tells: netCDF-C reports a full disk as "Permission denied"), what was kept, how to go on."""
    folder = Path(folder)
    if not folder.is_dir():
        why = "the folder no longer exists"
    elif not os.access(folder, os.W_OK):
        why = "the folder is read-only"
    else:
        try:
            free = shutil.disk_usage(folder).free
        except OSError:
            free = None
        if err.errno == errno.ENOSPC or (free is not None and free < LOW_SPACE_BYTES):
            why = "no space left on the device" + (f" ({free / 2**20:.1f} MiB free)" if free is not None else "")
        else:
            why = err.strerror or type(err).__name__
    return StorageError(f"cannot write {what} in '{folder}': {why}. No partial file is left; {kept}. "
                        "Free space or fix the folder, then rerun the same command to continue")


#: bytes, free space below which a refused write is put down to a full disk (a case file is kB-MB)
LOW_SPACE_BYTES = 64 * 2**20


def run_grid(config: dict, results: str | Path = "results", report: Callable[[str], None] = print,
             detail: Callable[[str], None] | None = None) -> xr.Dataset:
    """The whole job in one process: every case, then the summary. Reruns skip finished case files.

    The results folder is locked for the run; a second run on the same folder is refused.
    """
    results = Path(results)
    grid = grid_mod.expand(config)
    with contextlib.ExitStack() as stack:
        try:
            stack.enter_context(folder_lock(results))
        except OSError as err:
            raise storage_error(results, err, f"the lock file {LOCK_NAME}", "nothing was run") from None
        files = run_cases(config, list(grid.cases), results / "cases", report=report, skip_existing=True,
                          grid=grid, detail=detail)
        try:
            return write_summary(files, results / "summary.nc", results / "cases.csv")
        except OSError as err:
            raise storage_error(results, err, "the summary", f"all {len(files)} case files are kept") from None


LOCK_NAME = ".sigmagrid-run.lock"


@contextlib.contextmanager
def folder_lock(folder: Path):
    """An exclusive ``flock`` on ``folder/.sigmagrid-run.lock`` for the duration of a run.

    The kernel drops the lock when the process ends, however it ends: a killed run leaves no
    stale lock behind. Raises InputError naming ``--results`` if another run holds it.
    """
    folder.mkdir(parents=True, exist_ok=True)
    handle = open(folder / LOCK_NAME, "a+")
    try:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            handle.seek(0)
            holder = handle.read().strip() or "another process"
            raise InputError("--results", f"'{folder}' is in use by another sigmagrid run ({holder}); wait for "
                             "it to finish or give another --results folder") from None
        handle.seek(0)
        handle.truncate()
        handle.write(f"pid {os.getpid()}")
        handle.flush()
        yield
    finally:
        handle.close()
