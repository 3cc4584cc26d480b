"""Every case of a grid on one progress grid: a rectangular (case, progress, ...) dataset.

The progress lambda = (Phi - Phi_0) / (Phi_eq - Phi_0) runs from 0 to 1 in every case (Phi is S in
the adiabatic reactors, S - H/T in the isothermal one). Resampled onto one
lambda grid, questions across cases become one selection, for example the reactions that dominate
at half progress in the rich cases at 10 bar::

    p = xr.open_dataset("results/progress.nc")
    rich = p.where((p.equivalence_ratio > 1) & (p.initial_pressure == 1013250.0), drop=True)
    rich.local_share.sel(progress=0.5).mean("case").to_series().nlargest(5)

Resampling is linear in lambda between the stored samples of each case file. Where the stored
progress decreases by round-off its running maximum is used, so lambda is a monotone path
coordinate. Levels a case never reaches (a case stopped early) are NaN; a level at most
:data:`REACH_TOLERANCE` above the last stored progress takes the last sample, so the level 1 is the
end state of a relaxed case (which stops at 1 - ``stop.progress_tolerance``).
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import numpy as np
import xarray as xr

from . import fileformat, store

#: Levels always on the grid, so that ``.sel(progress=0.5)`` is exact.
KEY_LEVELS = (0.0, 0.001, 0.01, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99, 0.999, 1.0)
#: A level this far (1) above the largest stored progress of a case still counts as reached.
REACH_TOLERANCE = 1e-6
DEFAULT_POINTS = 101


def progress_grid(points: int = DEFAULT_POINTS) -> np.ndarray:
    """The progress levels, 1: cosine-spaced (dense near 0 and 1) plus :data:`KEY_LEVELS`.

    lambda_i = (1 - cos(pi i / (n - 1))) / 2, the Chebyshev-Lobatto points on [0, 1]: spacing
    about 2.5e-4 at the ends for n = 101, where ignition and the final approach happen.
    """
    if points < 2:
        raise ValueError("the progress grid needs at least 2 points")
    cosine = 0.5 * (1.0 - np.cos(np.pi * np.arange(points) / (points - 1)))
    levels = np.unique(np.round(np.concatenate([cosine, KEY_LEVELS]), 12))
    return levels


def interpolation_weights(progress: np.ndarray, levels: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Indices and weights that carry samples at ``progress`` to ``levels`` (both 1).

    Returns ``(lower, upper, weight)`` so that value(level) = (1 - w) v[lower] + w v[upper], and
    ``reached`` folded in as NaN weights where a level is beyond the path.
    """
    lam = np.maximum.accumulate(np.where(np.isfinite(progress), progress, -np.inf))
    n = lam.size
    upper = np.searchsorted(lam, levels, side="left").clip(0, n - 1)
    lower = (upper - 1).clip(0, n - 1)
    span = lam[upper] - lam[lower]
    with np.errstate(invalid="ignore", divide="ignore"):
        weight = np.where(span > 0, (levels - lam[lower]) / span, 1.0)
    weight = np.clip(weight, 0.0, 1.0)
    beyond = levels > lam[-1]
    near_end = beyond & (levels - lam[-1] <= REACH_TOLERANCE)
    lower = np.where(near_end, n - 1, lower)
    upper = np.where(near_end, n - 1, upper)
    weight = np.where(beyond & ~near_end, np.nan, weight)
    at_start = levels <= lam[0]
    weight = np.where(at_start, 0.0, weight)
    lower = np.where(at_start, 0, lower)
    return lower, upper, weight


def _carry(values: np.ndarray, lower, upper, weight) -> np.ndarray:
    """Linear interpolation of the rows of ``values`` (time first) with precomputed weights."""
    w = weight.reshape((-1,) + (1,) * (values.ndim - 1))
    return (1.0 - w) * values[lower] + w * values[upper]


def path_progress(ds: xr.Dataset) -> np.ndarray:
    """The progress of each stored sample of a case file (1), ``path_progress`` (time); an empty
    array when the file has none."""
    if "path_progress" in ds.variables and ds["path_progress"].dims == ("time",):
        return np.asarray(ds["path_progress"].values, dtype=float)
    return np.array([])


def resample_case(ds: xr.Dataset, levels: np.ndarray) -> dict[str, np.ndarray]:
    """One case file's path on the progress levels: arrays keyed by variable name.

    ``local_share`` is sigma_j / sigma with sigma the sum of the stored sigma_j at the same
    level (so it sums to 1 over reactions wherever sigma is not zero); NaN where sigma is zero.
    """
    nl = levels.size
    ns, nr = ds.sizes["species"], ds.sizes["reaction"]
    out = {"time": np.full(nl, np.nan), "temperature": np.full(nl, np.nan), "pressure": np.full(nl, np.nan),
           "mole_fraction": np.full((nl, ns), np.nan), "entropy_production_total": np.full(nl, np.nan),
           "local_share": np.full((nl, nr), np.nan), "affinity": np.full((nl, nr), np.nan),
           "net_rate": np.full((nl, nr), np.nan)}
    progress = path_progress(ds)
    if progress.ndim != 1 or progress.size < 2 or not np.isfinite(progress).any():
        return out  # failed case or a start at equilibrium: progress undefined
    lower, upper, weight = interpolation_weights(progress, levels)
    time = np.asarray(ds["time"].values, dtype=float)
    out["time"] = _carry(time, lower, upper, weight)
    for name in ("temperature", "pressure"):
        out[name] = _carry(np.asarray(ds[name].values, dtype=float), lower, upper, weight)
    out["mole_fraction"] = _carry(np.asarray(ds["mole_fraction"].values, dtype=float), lower, upper, weight)
    sigma_j = _carry(np.asarray(ds["entropy_production"].values, dtype=float), lower, upper, weight)
    total = sigma_j.sum(axis=1)
    out["entropy_production_total"] = total
    with np.errstate(invalid="ignore", divide="ignore"):
        out["local_share"] = np.where(total[:, None] != 0, sigma_j / total[:, None], np.nan)
    for name in ("affinity", "net_rate"):
        out[name] = _carry(np.asarray(ds[name].values, dtype=float), lower, upper, weight)
    for name in ("mole_fraction", "local_share", "affinity", "net_rate"):
        out[name] = out[name].astype(np.float32)  # stored as float32: keep the memory of a big grid small
    return out


_READ = ("path_progress", "temperature", "pressure", "mole_fraction", "entropy_production", "affinity", "net_rate")

#: The resampled variables; their dimensions, units and descriptions are in sigmagrid.fileformat.
_VARIABLES = ("time", "temperature", "pressure", "mole_fraction", "entropy_production_total", "local_share",
              "affinity", "net_rate")


def resample(paths: list[str | Path], points: int = DEFAULT_POINTS,
             report: Callable[[str], None] | None = None) -> xr.Dataset:
    """All case files on one progress grid.

    Parameters
    ----------
    paths : case files (``results/cases/<case_id>.nc``) of one grid (one mechanism).
    points : number of cosine-spaced levels before :data:`KEY_LEVELS` are added.

    Returns
    -------
    Dataset with dimensions (case, progress), (case, progress, species) and (case, progress,
    reaction); the case parameters (reactor, equivalence_ratio, initial_temperature,
    initial_pressure, status, label, composition_name) are coordinates along ``case``.
    Cases in case-id order, as in the summary. Unreadable files become all-NaN rows with status
    ``failed``.
    """
    levels = progress_grid(points)
    paths = sorted(map(Path, paths), key=lambda p: p.stem)
    if not paths:
        raise ValueError("no case files to resample")
    rows, meta, species, reactions, attrs, reaction_aux = [], [], None, None, {}, {}
    for n, path in enumerate(paths, 1):
        try:
            with xr.open_dataset(path) as whole:  # only the variables resampled
                fileformat.check(whole.attrs, path, "case")
                ds = whole[[v for v in _READ if v in whole.variables]].load()
                attrs_of_case = dict(whole.attrs)
        except Exception as err:  # a damaged file must not stop the others
            rows.append(None)
            meta.append({"case_id": path.stem, "status": "failed", "label": path.stem, "reason": str(err)})
            continue
        ds.attrs.update(attrs_of_case)
        if reactions is None:
            species, reactions = list(ds["species"].values), list(ds["reaction"].values)
            reaction_aux = store.reaction_coords_of(ds)
            attrs = {k: ds.attrs[k] for k in ("mechanism", "mechanism_sha256", "study") if k in ds.attrs}
        if list(ds["reaction"].values) != reactions or list(ds["species"].values) != species:
            rows.append(None)
            meta.append({"case_id": path.stem, "status": "failed", "label": ds.attrs.get("label", path.stem),
                         "reason": "case file of a different mechanism"})
            continue
        rows.append(resample_case(ds, levels))
        meta.append({k: ds.attrs.get(k) for k in store.CASE_COORDS})
        if report and (n % 200 == 0 or n == len(paths)):
            report(f"resampled {n}/{len(paths)} case files")
    if reactions is None:
        raise ValueError("no readable case file: nothing to resample")
    nl, ns, nr = levels.size, len(species), len(reactions)
    shapes = {"progress": (nl,), "species": (nl, ns), "reaction": (nl, nr)}
    data = {}
    for name in _VARIABLES:
        dims = fileformat.VARIABLES["progress"][name].dims
        shape = shapes[dims[-1]] if len(dims) == 3 else (nl,)
        stack = np.stack([r[name] if r is not None else np.full(shape, np.nan) for r in rows])
        dtype = np.float32 if len(dims) == 3 else np.float64  # 3-D fields are large; float32 as in case files
        data[name] = (dims, stack.astype(dtype))

    def column(key, default, kind=str):
        return np.array([m.get(key, default) if m.get(key) is not None else default for m in meta], dtype=kind)

    coords = {
        "case": ("case", column("case_id", ""), {"long_name": "case id"}),
        "progress": ("progress", levels, {"units": "1", "long_name": "progress (Phi - Phi_0)/(Phi_eq - Phi_0)"}),
        "species": ("species", np.array(species, dtype=str), {"long_name": "species name"}),
        **reaction_aux,
        "label": ("case", column("label", ""), {"long_name": "case label"}),
        "reactor": ("case", column("reactor", ""), {"long_name": "reactor type"}),
        "composition_name": ("case", column("composition_name", ""), {"long_name": "mixture name"}),
        "equivalence_ratio": ("case", column("equivalence_ratio", np.nan, float),
                              {"units": "1", "long_name": "equivalence ratio"}),
        "initial_temperature": ("case", column("initial_temperature", np.nan, float),
                                {"units": "K", "long_name": "initial temperature"}),
        "initial_pressure": ("case", column("initial_pressure", np.nan, float),
                             {"units": "Pa", "long_name": "initial pressure"}),
        "status": ("case", column("status", "failed"),
                   {"long_name": "case status: relaxed, not-relaxed or failed"}),
    }
    cube = xr.Dataset(data, coords=coords, attrs={
        "title": f"sigmagrid cases on one progress grid {attrs.get('study', '')}".strip(),
        "source": "sigmagrid",
        "comment": "linear in progress between stored samples; levels beyond a case's path are NaN",
        **attrs})
    return fileformat.finish(cube, "progress", f"resampled from {len(paths)} case files")


def write(paths: list[str | Path], out: str | Path, points: int = DEFAULT_POINTS,
          report: Callable[[str], None] | None = None) -> xr.Dataset:
    """:func:`resample` and write the result atomically to ``out`` (netCDF)."""
    ds = resample(paths, points, report)
    store.write_atomic(ds, out)
    return ds
