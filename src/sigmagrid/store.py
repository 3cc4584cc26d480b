"""The netCDF layout of a case file and of the grid summary; atomic writes; combining cases.

Files follow the CF 1.10 conventions where they apply: every variable has ``units`` (UDUNITS-2
spelling) and ``long_name``; provenance sits in the global attributes. The store knows nothing of
how the cases were scheduled.
"""

from __future__ import annotations

import multiprocessing as mp
import os
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from . import fileformat, missing
from .atomic import atomic_path, remove_stale_temporaries, write_text_atomic  # noqa: F401 (store.* API)

CONVENTIONS = "CF-1.10"

#: Per-case scalar variables copied into the summary and cases.csv: name -> (units, long name).
SCALARS = fileformat.SCALARS


#: Significant decimal digits kept in the stored path samples (lossy quantization, then lossless
#: compression). Integrals and balances use float64 at full solver resolution and are not affected.
SIGNIFICANT_DIGITS = {"affinity": 5, "net_rate": 5, "mole_fraction": 5,
                      "forward_rate": 4, "reverse_rate": 4, "entropy_production": 4}

#: Mantissa bits kept by netCDF's BitRound quantization (Kloewer et al. 2021, Nature Computational
#: Science 1, 713) for d significant digits: the fewest bits b whose worst relative rounding error
#: 2^-(b+1) is no larger than that of d decimal digits, 5 10^-d (4 digits: 10 bits, 5 digits: 14).
#: BitRound costs a mask per value where GranularBitRound takes a logarithm per value: on a gri30
#: case file the write went from 0.12 s to 0.07 s, the file from 1.87 to 1.72 MB.
SIGNIFICANT_BITS = {name: int(np.ceil(np.log2(10.0**d / 5.0))) - 1 for name, d in SIGNIFICANT_DIGITS.items()}

#: zlib level of the case files: level 1 costs about 20 % less time than 4 for 3 % more bytes
#: once the samples are bit-rounded
COMPRESSION_LEVEL = 1

#: Codecs of the stored path samples (``storage.compression``). ``zlib`` (deflate with byte
#: shuffle) is read by every netCDF-4/HDF5 reader. ``blosc-zstd`` compresses the bit-rounded
#: samples about 3x faster for 10 % more bytes; its HDF5 filter (id 32001) ships with the netCDF4
#: wheels and netCDF-C >= 4.9 builds, but h5py and h5netcdf need ``import hdf5plugin`` first.
#: ``none`` writes the samples as they are: fastest, readable everywhere, twice the bytes.
COMPRESSIONS = ("zlib", "blosc-zstd", "none")

#: netCDF-C's blosc filter fails the whole write ("Buffer is uncompressible") on a chunk it cannot
#: shrink, which a tiny array can be; arrays below this size keep zlib. Bit-rounded samples at or
#: above it always shrink: their low mantissa byte is zero.
BLOSC_MIN_BYTES = 4096


def disequilibrium(ds: xr.Dataset) -> xr.DataArray:
    """x_j = A_j / (R T) of a case file, dimensionless (derived, so it is not stored)."""
    from .units import GAS_CONSTANT

    x = ds["affinity"].astype(float) / (GAS_CONSTANT * ds["temperature"])
    return x.assign_attrs(units="1", long_name="degree of disequilibrium x_j = A_j / (R T)")


def open_checked(path: str | Path, kind: str = "") -> xr.Dataset:
    """Open a sigmagrid netCDF file fully into memory, refusing another major format version
    (:func:`sigmagrid.fileformat.check` raises :class:`~sigmagrid.fileformat.FormatError`)."""
    with xr.open_dataset(path) as ds:
        fileformat.check(ds.attrs, path, kind)
        return ds.load()


def reaction_coords(index, equation, duplicate_group, reversible) -> dict:
    """The ``reaction`` dimension coordinate (source-mechanism index) and its auxiliary
    coordinates ``equation``, ``duplicate_group`` (index of the group's first member) and
    ``reversible``, as (dims, values) pairs; attributes come from :mod:`sigmagrid.fileformat`."""
    return {"reaction": ("reaction", np.asarray(index, dtype=np.int64)),
            "equation": ("reaction", np.asarray(equation, dtype=str)),
            "duplicate_group": ("reaction", np.asarray(duplicate_group, dtype=np.int64)),
            "reversible": ("reaction", np.asarray(reversible).astype(np.int8))}


def reaction_coords_of(ds: xr.Dataset) -> dict:
    """:func:`reaction_coords` of a file that has them (a case file, summary, ranking)."""
    return reaction_coords(ds["reaction"].values, ds["equation"].values, ds["duplicate_group"].values,
                           ds["reversible"].values)


def choose_samples(time: np.ndarray, progress: np.ndarray, temperature: np.ndarray, budget: int,
                   keep: tuple[int, ...] = ()) -> np.ndarray:
    """Indices of at most ``budget`` samples of a full path, placed where the path changes.

    Arc length is measured in progress, in log time and in temperature (each normalized to its
    range), so samples crowd around ignition and the early induction, not uniformly in time. The
    first and last steps and the indices in ``keep`` are always included.
    """
    n = time.size
    if n <= budget:
        return np.arange(n)
    positive = time[time > 0]
    t_floor = positive[0] if positive.size else 1.0
    logt = np.log(np.maximum(time, t_floor))
    parts = [np.abs(np.diff(logt)) / max(np.ptp(logt), 1e-300)]
    if np.isfinite(progress).all():
        parts.append(np.abs(np.diff(progress)))
    parts.append(np.abs(np.diff(temperature)) / max(np.ptp(temperature), 1e-300))
    step = np.sum(parts, axis=0)
    arc = np.concatenate([[0.0], np.cumsum(step)])
    fixed = np.unique(np.array([0, n - 1, *[k for k in keep if 0 <= k < n]], dtype=int))
    free = budget - fixed.size
    if arc[-1] <= 0 or free <= 0:
        chosen = np.linspace(0, n - 1, budget).round().astype(int)
        return np.unique(np.concatenate([fixed, chosen]))[:budget]
    # a few rounds: duplicates from crowded arcs free budget for the next round
    count = free
    for _ in range(8):
        targets = np.linspace(0.0, arc[-1], count + 2)[1:-1]
        idx = np.unique(np.concatenate([fixed, np.searchsorted(arc, targets).clip(0, n - 1)]))
        if idx.size >= budget or count >= 4 * budget:
            break
        count += budget - idx.size
    if idx.size > budget:
        extra = np.setdiff1d(idx, fixed)
        take = np.linspace(0, extra.size - 1, budget - fixed.size).round().astype(int)
        idx = np.unique(np.concatenate([fixed, extra[take]]))
    return idx


#: Float32 arrays stored per sample: affinity, forward, reverse and net rate, entropy production
#: (per reaction), mole fractions (per species) and a dozen scalars.
_PER_REACTION_ARRAYS = 5
_PER_SAMPLE_SCALARS = 12
MIN_SAMPLES = 20


def sample_budget(max_samples: int, max_bytes: float, n_reactions: int, n_species: int) -> int:
    """Stored samples of one case: ``max_samples``, fewer where their float32 arrays would exceed
    ``max_bytes`` (bytes before compression), never fewer than :data:`MIN_SAMPLES`.

    On gri30 (325 reactions) a sample is 6.7 kB, so the default 16 MB keeps all 500 samples; on a
    5336-reaction mechanism a sample is 107 kB and the budget keeps 150 (a 500-sample file was
    29 MB and took 1.5 s to compress). Integrals and balances use every solver step regardless.
    """
    per_sample = 4 * (_PER_REACTION_ARRAYS * n_reactions + n_species + _PER_SAMPLE_SCALARS)
    return int(max(MIN_SAMPLES, min(max_samples, max_bytes // per_sample)))


def _attrs(units: str, long_name: str, **extra) -> dict:
    return {"units": units, "long_name": long_name, **extra}


def write_atomic(ds: xr.Dataset, path: str | Path, compression: str = "zlib") -> Path:
    """Write a Dataset to netCDF under a temporary name in the same folder, then rename.

    ``compression`` is one of :data:`COMPRESSIONS`; it picks the codec of the bit-rounded path
    samples (the other arrays always use zlib, or nothing with ``none``). The stored values are
    the same with every codec. A killed process leaves at most a ``.tmp-*`` file, never a
    half-written ``path``.
    """
    if compression not in COMPRESSIONS:
        raise ValueError(f"storage.compression must be one of {', '.join(COMPRESSIONS)}, not {compression!r}")
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    encoding = {}
    for name, var in ds.variables.items():
        enc = {}
        if var.dtype.kind in "fiu" and var.ndim >= 1 and var.size > 0 and compression != "none":
            enc = {"zlib": True, "complevel": COMPRESSION_LEVEL, "shuffle": True,
                   "chunksizes": tuple(min(s, 512) if i == 0 else s for i, s in enumerate(var.shape))}
        if name in SIGNIFICANT_BITS and var.dtype == np.float32:
            if compression == "blosc-zstd" and var.nbytes >= BLOSC_MIN_BYTES:
                del enc["zlib"], enc["complevel"], enc["shuffle"]
                enc.update(compression="blosc_zstd", complevel=1, blosc_shuffle=1)
            # quantize the mantissa (with every codec, so the stored values do not depend on it):
            # float32 noise digits do not compress
            enc.update(significant_digits=SIGNIFICANT_BITS[name], quantize_mode="BitRound")
        if var.dtype.kind == "f":
            # CF: coordinate variables carry no fill value; data variables mark missing as NaN
            enc["_FillValue"] = None if name in ds.dims else np.nan
        if enc:
            encoding[name] = enc
    with atomic_path(path, ".tmp-nc") as tmp:
        _to_netcdf4(ds, tmp, encoding)
    return path


def _to_netcdf4(ds: xr.Dataset, path: Path, encoding: dict) -> None:
    """``ds.to_netcdf(path, engine="netcdf4", format="NETCDF4", encoding=encoding)``, except that
    every variable is defined before any array is written.

    xarray writes each array right after defining its variable. Each such write ends netCDF-C's
    define mode, which writes out the metadata defined so far, and the next definition reopens
    it: a case file of 38 variables took 0.024 s on h2o2 and 0.065 s on gri30, against 0.014 s
    and 0.054 s defined first (2026-12-03). The encoding is xarray's own (its store and
    ``dump_to_store``); only the order of the writes differs. Where that internal API has moved
    or fails, the plain ``to_netcdf`` writes the file.
    """
    try:
        from xarray.backends.common import ArrayWriter
        from xarray.backends.netCDF4_ import NetCDF4DataStore
        try:
            from xarray.backends.writers import dump_to_store
        except ImportError:  # xarray before 2025
            from xarray.backends.api import dump_to_store

        class DefineFirst(ArrayWriter):
            __slots__ = ("pending",)

            def __init__(self):
                super().__init__()
                self.pending = []

            def add(self, source, target, region=None):
                self.pending.append((source, target, region))

        writer = DefineFirst()
        store = NetCDF4DataStore.open(str(path), mode="w", format="NETCDF4")
        try:
            dump_to_store(ds, store, writer, encoding=encoding)
            for source, target, region in writer.pending:
                target[region if region else ...] = source
        finally:
            store.close()
    except Exception:  # noqa: BLE001 - xarray's public writer says what is wrong, or works
        ds.to_netcdf(path, engine="netcdf4", format="NETCDF4", encoding=encoding)


#: Case-file attributes repeated in every row of cases.csv, so the table alone says how it was made.
PROVENANCE_COLUMNS = ("mechanism", "mechanism_sha256", "config_sha256", "settings_sha256", "sigmagrid_version",
                      "cantera_version")

CASE_COORDS = ("case_id", "label", "reactor", "composition_name", "equivalence_ratio",
               "initial_temperature", "initial_pressure", "status")


def open_input(path: str | Path, field: str, missing_hint: str = "") -> xr.Dataset:
    """Open a netCDF file a user named, fully into memory; a missing or unreadable file is an
    InputError naming ``field``, not a traceback."""
    from .errors import InputError

    path = Path(path)
    if not path.is_file():
        raise InputError(field, f"'{path}' does not exist{missing_hint}")
    try:
        with xr.open_dataset(path) as opened:
            attrs = dict(opened.attrs)
            loaded = opened.load()
    except Exception as err:  # noqa: BLE001 - any reader error means "not a netCDF file we can read"
        raise InputError(field, f"'{path}' is not a readable netCDF file ({type(err).__name__})") from None
    try:
        fileformat.check(attrs, path)
    except fileformat.FormatError as err:
        raise InputError(field, str(err)) from None
    return loaded


def open_case(path: str | Path) -> xr.Dataset:
    """Open a case file fully into memory (the file is closed afterwards); a file of another
    major format version raises :class:`~sigmagrid.fileformat.FormatError`."""
    return open_checked(path, "case")


#: Per-case figures of the SEA comparison carried into the summary (dims after ``case``).
SEA_FIGURES = ("largest_path_angle", "time_ratio", "slow_mode_difference", "fit_quality",
               "entropy_production_ratio", "sea_status")


def _sea_summary(parts: list[dict]) -> tuple[dict, dict, list[str]]:
    """(summary variables, cases.csv columns, metric names) of the SEA figures; empty when no
    case has them."""
    present = [p for p in parts if p]
    if not present:
        return {}, {}, []
    metrics = list(present[0]["largest_path_angle"]["metric"].values) if "largest_path_angle" in present[0] else []
    data, columns = {}, {}
    for name in SEA_FIGURES:
        template = next((p[name] for p in present if name in p), None)
        if template is None:
            continue
        is_text = template.dtype.kind in "OUS"
        shape = template.shape
        stack = []
        for part in parts:
            value = part.get(name)
            if value is not None and value.shape == shape:
                stack.append(value.values.astype(str) if is_text else value.values.astype(float))
            else:
                stack.append(np.full(shape, "" if is_text else np.nan, dtype=object if is_text else float))
        array = np.array(stack, dtype=str if is_text else float)
        attrs = {k: v for k, v in template.attrs.items() if k in ("units", "long_name")}
        data[name] = (("case", *template.dims), array, attrs)
        if template.dims == ("metric",):
            unit = attrs.get("units", "")
            for i, metric in enumerate(metrics):
                columns[f"{name}_{metric}" + (f" [{unit}]" if unit and not is_text else "")] = array[:, i]
    return data, columns, metrics


def _summary_part(path: Path) -> dict:
    """What the summary takes from one case file: its attributes and the variables without a
    ``time`` dimension, read with netCDF4 directly, as plain data (cheap to pickle).

    Returns ``{"attrs": {...}, "vars": {name: (dims, values, attrs)}, "coords": {dim: values}}``
    with the values as stored (no CF decoding). The (time, reaction) arrays are most of a file,
    and xarray's decoding machinery costs about 20 ms a file: reading everything through xarray
    made the summary of a 200-case gri30 grid take 7.7 s; this reader, and building no Dataset
    per file, 2-3 s.
    """
    import netCDF4

    with netCDF4.Dataset(path) as nc:
        nc.set_auto_mask(False)
        fileformat.check({k: nc.getncattr(k) for k in nc.ncattrs()}, path, "case")
        data, coords = {}, {}
        for name, var in nc.variables.items():
            if "time" in var.dimensions:
                continue
            if name in nc.dimensions:
                coords[name] = var[...]
                continue
            var_attrs = {k: var.getncattr(k) for k in var.ncattrs() if not k.startswith("_")}
            data[name] = (var.dimensions, var[...], var_attrs)
        return {"attrs": {k: nc.getncattr(k) for k in nc.ncattrs()}, "vars": data, "coords": coords}


def _part_array(part: dict, name: str) -> xr.DataArray:
    """One variable of a summary part as a DataArray with the coordinates of its dimensions."""
    dims, values, attrs = part["vars"][name]
    return xr.DataArray(values, dims=dims, attrs=attrs,
                        coords={d: part["coords"][d] for d in dims if d in part["coords"]})


def _summary_part_or_error(path: Path) -> dict | str:
    """:func:`_summary_part`, or the reason it failed (a damaged file must not stop the summary)."""
    try:
        return _summary_part(path)
    except Exception as err:  # noqa: BLE001 - any reader error is recorded with the case
        return f"unreadable case file: {err}"


#: below this many case files the summary reads them in this process
PARALLEL_READ_FROM = 64


def available_cores() -> int:
    """CPUs this process may run on (its affinity: a SLURM or cgroup allocation), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def _summary_parts(paths: list[Path], workers: int | None = None) -> list[dict | str]:
    """:func:`_summary_part_or_error` of every path, in order; in ``workers`` processes (default
    4), at most the available cores, for a large grid.

    Opening a netCDF file costs about 14 ms of CPU (netCDF-C reads all its metadata), most of a
    200-case summary's 7 s, and the summary runs alone at the end of a grid: the cores the case
    jobs used are free. Forked workers inherit the imports, so they start in milliseconds.
    """
    # never more than this process may use (a cluster job's allocation), whatever was asked
    workers = min(available_cores(), 4 if workers is None else workers)
    if workers < 2 or len(paths) < PARALLEL_READ_FROM or "fork" not in mp.get_all_start_methods():
        return [_summary_part_or_error(p) for p in paths]
    chunk = -(-len(paths) // workers)
    with ProcessPoolExecutor(workers, mp_context=mp.get_context("fork")) as pool:
        return list(pool.map(_summary_part_or_error, paths, chunksize=chunk))


def summarize(paths: list[str | Path], workers: int | None = None) -> tuple[xr.Dataset, pd.DataFrame]:
    """Combine case files into the grid summary and the cases table.

    ``workers``: processes that read the case files (see :func:`_summary_parts`).

    Returns the summary Dataset (dimensions case x reaction) and a DataFrame, one row per case.
    Cases whose file does not open are listed with status ``failed`` and the reason.
    """
    rows, produced, reactions, attrs, sea_parts, reaction_aux = [], [], None, {}, [], {}
    ordered = sorted(map(Path, paths))
    for path, part in zip(ordered, _summary_parts(ordered, workers)):
        if isinstance(part, str):
            rows.append({"case_id": path.stem, "status": "failed", "reason": part})
            produced.append(None)
            sea_parts.append({})
            continue
        meta, values = part["attrs"], part["vars"]
        if reactions is None:
            reactions = list(part["coords"]["reaction"])
            reaction_aux = {k: values[k][1] for k in ("equation", "duplicate_group", "reversible")}
            attrs = {k: meta[k] for k in ("mechanism", "mechanism_sha256", "config_sha256",
                                           "sigmagrid_version", "cantera_version", "study") if k in meta}
        row = {"case_id": meta["case_id"], "label": meta["label"], "reactor": meta["reactor"],
               "composition_name": meta["composition_name"], "composition": meta["composition"],
               "equivalence_ratio": float(meta["equivalence_ratio"]),
               "initial_temperature": float(meta["initial_temperature"]),
               "initial_pressure": float(meta["initial_pressure"]),
               "status": meta["status"], "reason": meta.get("reason", ""),
               "missing": meta.get("missing_values", ""), "audit_notes": meta.get("audit_notes", ""),
               "flammability_at_ambient": meta.get("flammability_at_ambient", "unknown"),
               **{k: meta.get(k, "") for k in PROVENANCE_COLUMNS}}
        for name in SCALARS:
            row[name] = float(values[name][1]) if name in values else np.nan
        levels = part["coords"].get("progress_level")
        for level in (50, 90, 99):
            if "time_to_progress" in values:
                (at,) = np.flatnonzero(levels == level / 100)  # an exact label, as xarray's sel
                row[f"time_to_{level}pct"] = float(values["time_to_progress"][1][at])
            else:
                row[f"time_to_{level}pct"] = np.nan
        rows.append(row)
        produced.append(values["entropy_produced"][1] if "entropy_produced" in values else None)
        sea_parts.append({name: _part_array(part, name) for name in SEA_FIGURES if name in values})
    sea_data, sea_columns, sea_metrics = _sea_summary(sea_parts)
    table = pd.DataFrame(rows)
    for column, values in sea_columns.items():
        table[column] = values
    if reactions is None:
        raise ValueError("no readable case file: nothing to summarize")
    nr = len(reactions)
    matrix = np.array([p if p is not None and len(p) == nr else np.full(nr, np.nan) for p in produced])
    totals = matrix.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(totals != 0, matrix / totals, np.nan)
    table = table.fillna({"label": table["case_id"], "reactor": "", "composition_name": "", "composition": "",
                          "reason": "", "missing": "", "audit_notes": "", "flammability_at_ambient": "unknown",
                          **{k: "" for k in PROVENANCE_COLUMNS}})
    coords = {
        "case": ("case", table["case_id"].to_numpy(str), {"long_name": "case id"}),
        **reaction_coords(reactions, **reaction_aux),
        "label": ("case", table["label"].to_numpy(str), {"long_name": "case label"}),
        "reactor": ("case", table["reactor"].to_numpy(str), {"long_name": "reactor type"}),
        "composition_name": ("case", table["composition_name"].to_numpy(str), {"long_name": "mixture name"}),
        "equivalence_ratio": ("case", table["equivalence_ratio"].to_numpy(float),
                              _attrs("1", "equivalence ratio")),
        "initial_temperature": ("case", table["initial_temperature"].to_numpy(float),
                                _attrs("K", "initial temperature")),
        "initial_pressure": ("case", table["initial_pressure"].to_numpy(float), _attrs("Pa", "initial pressure")),
        "status": ("case", table["status"].to_numpy(str), {"long_name": "case status: relaxed, not-relaxed or failed"}),
    }
    data = {
        "entropy_produced": (("case", "reaction"), matrix,
                             _attrs("J K-1", "entropy produced by each reaction over the case")),
        "integrated_share": (("case", "reaction"), share,
                             _attrs("1", "integrated share of each reaction in the entropy produced (sums to 1)")),
        "reason": ("case", table["reason"].to_numpy(str), {"long_name": "why a case did not relax"}),
        "missing": ("case", table["missing"].to_numpy(str),
                    {"long_name": "which values of the case are missing (NaN) and why"}),
        "audit_notes": ("case", table["audit_notes"].to_numpy(str),
                        {"long_name": "warnings about the mechanism and the case (irreversible reactions, thermo gaps)"}),
    }
    for name, (units, long_name) in SCALARS.items():
        data[name] = ("case", table[name].to_numpy(float), _attrs(units, long_name))
    for level in (50, 90, 99):
        data[f"time_to_{level}pct"] = ("case", table[f"time_to_{level}pct"].to_numpy(float),
                                       _attrs("s", f"time to reach {level} % progress"))
    data.update(sea_data)
    if sea_data:
        coords["metric"] = ("metric", np.array(sea_metrics, dtype=str), {"long_name": "SEA metric"})
        coords["progress_level"] = ("progress_level", np.array([0.5, 0.9, 0.99]), _attrs("1", "progress level"))
    summary = xr.Dataset(data, coords=coords, attrs={
        "Conventions": CONVENTIONS, "title": f"sigmagrid grid summary {attrs.get('study', '')}".strip(),
        "source": "sigmagrid", **attrs})
    return fileformat.finish(summary, "summary", f"combined from {len(paths)} case files"), table


def case_dataset(*, case, relaxation, reaction_state, sample_index, info, equations, species,
                 equilibrium_mole_fractions, flammability, provenance: dict) -> xr.Dataset:
    """The per-case Dataset: stored samples of the path, their diagnostics, and the case's scalars.

    ``reaction_state`` holds the diagnostics at the stored samples (see
    :func:`sigmagrid.diagnostics.evaluate`); integrals come from the full-resolution path.
    """
    r = relaxation
    idx = np.asarray(sample_index, dtype=int)
    f32 = np.float32
    sigma = reaction_state.entropy_production  # computed once: (time, reaction) arrays can be large
    n_species = len(species)
    mw = r.molecular_weights
    y = r.mass_fractions[idx]
    with np.errstate(invalid="ignore", divide="ignore"):
        moles = np.clip(y, 0.0, None) / mw
        x = moles / moles.sum(axis=1, keepdims=True) if y.size else y
    progress_levels = np.array([0.5, 0.9, 0.99])
    times_to = np.array([r.progress_time(level) for level in progress_levels])
    audit = r.audit
    eq = r.equilibrium
    scalars = {
        "balance_residual": r.balance_residual,
        "ignition_delay": r.ignition_delay,
        "equilibrium_temperature": eq.temperature if eq else np.nan,
        "equilibrium_pressure": eq.pressure if eq else np.nan,
        "final_temperature": float(r.temperature[-1]) if r.time.size else np.nan,
        "entropy_change": float(r.potential[-1] - r.potential[0]) if r.time.size else np.nan,
        "entropy_produced_total": float(r.entropy_produced.sum()),
        "energy_drift": r.energy_drift,
        "negative_entropy_share": audit.negative_share if audit else np.nan,
        "worst_reversible_ratio": audit.worst_reversible_ratio if audit else np.nan,
        "worst_duplicate_group_ratio": audit.worst_group_ratio if audit else np.nan,
        "closed_vessel_pressure_ratio": (eq.pressure / case.pressure) if (eq and case.reactor == "isolated") else np.nan,
        "solver_steps": float(r.n_steps),
        "wall_time": r.wall_seconds,
    }
    data = {
        # no CF standard name: air_temperature and air_pressure mean the atmosphere
        "temperature": ("time", r.temperature[idx], _attrs("K", "temperature")),
        "pressure": ("time", r.pressure[idx], _attrs("Pa", "pressure")),
        "volume": ("time", r.volume[idx], _attrs("m3", "reactor volume")),
        "density": ("time", r.density[idx], _attrs("kg m-3", "density")),
        "entropy": ("time", r.entropy[idx], _attrs("J K-1", "total entropy of the reactor contents")),
        "potential": ("time", r.potential[idx],
                      _attrs("J K-1", "potential that grows to its equilibrium maximum: S (adiabatic), S - H/T (isothermal)")),
        # not "progress": that name is the 0-1 grid of progress.nc (the SEA grid is "sea_progress")
        "path_progress": ("time", r.progress[idx], _attrs("1", "progress (Phi - Phi_0)/(Phi_eq - Phi_0)")),
        "mole_fraction": (("time", "species"), x.astype(f32), _attrs("1", "mole fraction")),
        "affinity": (("time", "reaction"), reaction_state.affinity.astype(f32),
                     _attrs("J mol-1", "affinity A_j = -sum_k nu_kj mu_k")),
        "forward_rate": (("time", "reaction"), reaction_state.forward_rate.astype(f32),
                         _attrs("mol m-3 s-1", "forward rate of progress")),
        "reverse_rate": (("time", "reaction"), reaction_state.reverse_rate.astype(f32),
                         _attrs("mol m-3 s-1", "reverse rate of progress")),
        "net_rate": (("time", "reaction"), reaction_state.net_rate.astype(f32),
                     _attrs("mol m-3 s-1", "net rate of progress q_j")),
        "entropy_production": (("time", "reaction"), sigma.astype(f32),
                               _attrs("W m-3 K-1", "entropy production density of each reaction A_j q_j / T")),
        "entropy_production_total": ("time", sigma.sum(axis=1),
                                     _attrs("W m-3 K-1", "total entropy production density")),
        "entropy_produced": ("reaction", r.entropy_produced,
                             _attrs("J K-1", "entropy produced by each reaction: integral of V sigma_j dt "
                                    "over the full-resolution path")),
        "negative_prefactor": ("reaction", info.negative_prefactor.astype(np.int8),
                               {"long_name": "Arrhenius pre-exponential factor is negative", "units": "1",
                                "flag_values": np.array([0, 1], dtype=np.int8), "flag_meanings": "positive negative"}),
        "equilibrium_mole_fraction": ("species", np.asarray(equilibrium_mole_fractions, dtype=float)
                                      if equilibrium_mole_fractions is not None else np.full(n_species, np.nan),
                                      _attrs("1", "mole fraction at equilibrium")),
        "time_to_progress": ("progress_level", times_to, _attrs("s", "first time the progress reaches the level")),
    }
    why = missing.reasons(r, scalars, dict(zip(progress_levels.tolist(), times_to.tolist())))
    for name, (units, long_name) in SCALARS.items():
        extra = {"comment": f"missing: {why[name]}"} if name in why else {}
        data[name] = ((), float(scalars[name]), _attrs(units, long_name, **extra))
    times_why = [f"{int(round(100 * lv))} %: {why[k]}" for lv, k in missing.PROGRESS_TIMES.items() if k in why]
    if times_why:
        data["time_to_progress"][2]["comment"] = "missing: " + "; ".join(times_why)
    if not np.isfinite(data["path_progress"][1]).all():
        data["path_progress"][2]["comment"] = ("missing: progress is undefined when the initial state is at "
                                          "equilibrium" if r.at_equilibrium_start else "missing: case failed")
    for name, (_, values, var_attrs) in data.items():
        values = np.asarray(values)
        if values.dtype.kind == "f" and "comment" not in var_attrs and not np.isfinite(values).all():
            var_attrs["comment"] = (f"missing: non-finite values where the computation broke down "
                                    f"(case {r.status}{': ' + r.reason[:200] if r.reason else ''})")
    notes = [*getattr(info, "notes", ()), *getattr(r, "notes", ())]
    coords = {
        # Elapsed time in plain seconds: a CF reference date ("s since ...") would make every
        # netCDF reader decode it to calendar dates at ns resolution and merge the sub-ns samples of
        # the induction period. The CF checker's §4.4 reference-date rule is the one rule not met.
        "time": ("time", r.time[idx], {"units": "s", "long_name": "time since the start of the relaxation",
                                       "standard_name": "time", "axis": "T"}),
        "species": ("species", np.array(species, dtype=str), {"long_name": "species name"}),
        # duplicate_group holds positions in the mechanism; the files hold source indices
        **reaction_coords(info.reaction_index, equations, info.reaction_index[info.duplicate_group],
                          info.reversible),
        "progress_level": ("progress_level", progress_levels, _attrs("1", "progress level")),
    }
    attrs = {
        "Conventions": CONVENTIONS,
        "title": f"sigmagrid case {case.label}",
        "source": f"sigmagrid {provenance.get('sigmagrid_version', '')} with Cantera {provenance.get('cantera_version', '')}",
        "comment": "Model output. Not a basis for vessel design, venting or hazard classification.",
        "case_id": case.case_id, "label": case.label, "reactor": case.reactor,
        "composition_name": case.composition_name, "composition": case.composition,
        "equivalence_ratio": case.equivalence_ratio, "initial_temperature": case.temperature,
        "initial_pressure": case.pressure, "status": r.status, "reason": r.reason,
        "n_irreversible_reactions": int(audit.n_irreversible) if audit else -1,
        "negative_duplicate_members": ", ".join(equations[j] for j in audit.negative_members) if audit else "",
        "flammability_at_ambient": flammability.verdict, "flammability_note": flammability.reason,
        "missing_values": missing.as_text(why), "audit_notes": "; ".join(notes),
        **{k: v for k, v in provenance.items() if k != "created"},
    }
    return fileformat.finish(xr.Dataset(data, coords=coords, attrs=attrs), "case",
                             f"case {case.case_id} relaxed from its initial state")
