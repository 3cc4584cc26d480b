"""Questions to a finished grid, from Python or from ``sigmagrid query``.

Every function takes the opened files (xarray Datasets) and returns a pandas DataFrame whose
column names carry their units (``ignition_delay [s]``), the same table the command prints.

Selections pick cases by any coordinate along ``case`` (reactor, composition_name,
equivalence_ratio, initial_temperature, initial_pressure, status, label, case) or by any per-case
variable of the file (ignition_delay, ...): a value, a list of values, or a range ``(low, high)``
(inclusive; None for an open end). Numbers match to a relative 1e-9, so 1013250 matches the
stored 1013250.0. ::

    from sigmagrid import query
    s = query.open_dataset("results/summary.nc")
    query.top_reactions(s, {"reactor": "isolated", "equivalence_ratio": (1.01, None)}, n=5)
    p = query.open_dataset("results/progress.nc")
    query.top_reactions_at(p, 0.5, {"initial_pressure": 1013250})
    query.reaction_cases(s, "H + O2 <=> O + OH")     # or by index: query.reaction_cases(s, 1)

Reactions are named by their index (the files' ``reaction`` coordinate) or by their equation as
the file writes it (``equation``); an equation that several reactions share (duplicates) is
refused with the indices to choose from.
"""

from __future__ import annotations

import json
import math
import time
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd
import xarray as xr

from .errors import InputError

MATCH_RTOL = 1e-9


def open_dataset(path: str | Path, what: str = "file") -> xr.Dataset:
    """Open a summary, progress or ranking file fully into memory; a missing file, or one of
    another major format version, is an InputError."""
    from . import store

    return store.open_input(path, what, " (run the grid first: snakemake --cores 2)")


def selectable(ds: xr.Dataset, dim: str = "case") -> list[str]:
    """Names a selection may use: coordinates along ``dim`` first, then per-case variables."""
    coords = [str(n) for n, c in ds.coords.items() if c.dims == (dim,)]
    variables = [str(n) for n, v in ds.data_vars.items() if v.dims == (dim,)]
    return coords + variables


def _match(values: np.ndarray, wanted: Any) -> np.ndarray:
    if isinstance(wanted, Mapping):
        wanted = (wanted.get("min"), wanted.get("max"))
    if isinstance(wanted, slice):
        wanted = (wanted.start, wanted.stop)
    numeric = values.dtype.kind in "fiu"
    if isinstance(wanted, tuple):
        lo, hi = wanted
        if not numeric:
            raise ValueError("a range needs a numeric coordinate")
        ok = np.ones(values.shape, bool)
        if lo is not None:
            ok &= values >= float(lo) - MATCH_RTOL * abs(float(lo))
        if hi is not None:
            ok &= values <= float(hi) + MATCH_RTOL * abs(float(hi))
        return ok
    items = list(wanted) if isinstance(wanted, (list, set, np.ndarray)) else [wanted]
    ok = np.zeros(values.shape, bool)
    for item in items:
        if numeric:
            ok |= np.isclose(values.astype(float), float(item), rtol=MATCH_RTOL, atol=0.0)
        else:
            ok |= values.astype(str) == str(item)
    return ok


def find_reaction(ds: xr.Dataset, key: int | str, field: str = "reaction") -> int:
    """The ``reaction`` index (the files' coordinate) of ``key``: an index (int or digits) or an
    equation as the file writes it (spaces need not match).

    Raises InputError naming the allowed values for an unknown index or equation, and the
    candidates' indices for an equation that several reactions share (duplicates).
    """
    index = ds["reaction"].values.astype(int)
    text = str(key).strip()
    if isinstance(key, (int, np.integer)) or text.isdigit():
        wanted = int(text)
        if wanted not in set(index.tolist()):
            raise InputError(field, f"no reaction with index {wanted}; the file has {index.size} reactions, "
                             f"indices {index.min()}..{index.max()}" + (" (with gaps: a cut mechanism)"
                                                                        if index.size != index.max() - index.min() + 1 else ""))
        return wanted
    equations = np.array([" ".join(str(e).split()) for e in ds["equation"].values])
    hits = index[equations == " ".join(text.split())]
    if hits.size == 1:
        return int(hits[0])
    if hits.size > 1:
        raise InputError(field, f"{text!r} matches {hits.size} reactions (duplicates), indices "
                         f"{', '.join(map(str, hits))}: give one index")
    raise InputError(field, f"no reaction {text!r}; give an index ({index.min()}..{index.max()}) or an equation "
                     f"as the file writes it, e.g. {str(ds['equation'].values[0])!r}")


def reaction_cases(summary: xr.Dataset, reaction: int | str, selection: Mapping[str, Any] | None = None
                   ) -> pd.DataFrame:
    """One reaction over the selected cases: its integrated share [1] and entropy produced
    [J K-1] per case, with the case parameters. ``reaction``: index or equation (see
    :func:`find_reaction`)."""
    j = find_reaction(summary, reaction)
    s = select(summary, selection).sel(reaction=j)
    table = _case_columns(s)
    table["integrated_share [1]"] = s["integrated_share"].values.astype(float)
    table["entropy_produced [J K-1]"] = s["entropy_produced"].values.astype(float)
    table.attrs.update(reaction=j, equation=str(s["equation"].values))
    return table.sort_values("label", kind="stable").reset_index(drop=True)


def _reaction_columns(ds: xr.Dataset) -> dict:
    return {"reaction": ds["reaction"].values.astype(int), "equation": ds["equation"].values.astype(str)}


def select(ds: xr.Dataset, selection: Mapping[str, Any] | None, dim: str = "case", field: str = "--select") -> xr.Dataset:
    """The cases of ``ds`` that meet every condition of ``selection`` (see the module docstring).

    Raises InputError naming the allowed names for an unknown one, and when nothing matches.
    """
    if not selection:
        return ds
    allowed = selectable(ds, dim)
    keep = np.ones(ds.sizes[dim], bool)
    for name, wanted in selection.items():
        if name not in allowed:
            coords = [n for n in allowed if n in ds.coords]
            raise InputError(field, f"unknown case coordinate {name!r}; allowed: {', '.join(coords)} "
                             f"(or a per-case variable: {', '.join(n for n in allowed if n not in ds.coords)})")
        values = ds[name].values
        try:
            keep &= _match(values, wanted)
        except (TypeError, ValueError):
            raise InputError(field, f"{name}: cannot compare {wanted!r} with its values "
                             f"(e.g. {values[:3].tolist()})") from None
    if not keep.any():
        described = "; ".join(f"{k}={_describe_wanted(v)}" for k, v in selection.items())
        raise InputError(field, f"no case matches {described}; the file has {ds.sizes[dim]} cases")
    return ds.isel({dim: np.flatnonzero(keep)})


def _describe_wanted(wanted) -> str:
    if isinstance(wanted, Mapping):
        wanted = (wanted.get("min"), wanted.get("max"))
    if isinstance(wanted, tuple):
        return f"{'' if wanted[0] is None else wanted[0]}..{'' if wanted[1] is None else wanted[1]}"
    if isinstance(wanted, (list, tuple, set)):
        return ",".join(map(str, wanted))
    return str(wanted)


def parse_selection(items: list[str] | None) -> dict[str, Any]:
    """``["reactor=isolated", "equivalence_ratio=0.9..1.5", "initial_pressure=101325,1013250"]`` -> dict.

    ``NAME=V`` one value, ``NAME=V1,V2`` any of them, ``NAME=LO..HI`` an inclusive range (either end
    may be left out). Values that read as numbers are numbers.
    """
    out: dict[str, Any] = {}
    for item in items or []:
        name, sep, text = item.partition("=")
        name, text = name.strip(), text.strip()
        if not sep or not name or not text:
            raise InputError("--select", f"{item!r} must read NAME=VALUE, NAME=V1,V2 or NAME=LOW..HIGH")
        if ".." in text:
            lo, _, hi = text.partition("..")
            try:
                out[name] = (float(lo) if lo.strip() else None, float(hi) if hi.strip() else None)
            except ValueError:
                raise InputError("--select", f"{item!r}: a range needs numbers, e.g. {name}=0.8..1.2") from None
            continue
        values = [_number_or_text(v) for v in text.split(",") if v.strip()]
        out[name] = values[0] if len(values) == 1 else values
    return out


def _number_or_text(text: str):
    text = text.strip()
    try:
        value = float(text)
        return value if math.isfinite(value) else text
    except ValueError:
        return text


def _case_columns(ds: xr.Dataset) -> pd.DataFrame:
    return pd.DataFrame({
        "case_id": ds["case"].values.astype(str),
        "label": ds["label"].values.astype(str) if "label" in ds else "",
        "reactor": ds["reactor"].values.astype(str),
        "equivalence_ratio [1]": ds["equivalence_ratio"].values.astype(float),
        "initial_temperature [K]": ds["initial_temperature"].values.astype(float),
        "initial_pressure [Pa]": ds["initial_pressure"].values.astype(float),
        "status": ds["status"].values.astype(str),
    })


def top_reactions(summary: xr.Dataset, selection: Mapping[str, Any] | None = None, n: int = 10,
                  by: str = "mean") -> pd.DataFrame:
    """The reactions that produce the most entropy over the selected cases.

    Parameters
    ----------
    summary : ``results/summary.nc`` (its ``integrated_share`` is I_jc / sum_j I_jc, 1).
    by : ``mean`` (mean share over the cases) or ``max`` (largest share in any case).

    Returns a DataFrame of n rows: reaction (index), equation, mean and largest integrated share [1], entropy
    produced summed over the selected cases [J K-1], and the number of cases where the share is
    negative (the reaction consumes entropy there).
    """
    if by not in ("mean", "max"):
        raise InputError("--by", f"{by!r} is not allowed; allowed values: mean, max")
    s = select(summary, selection)
    usable = s["status"].values.astype(str) != "failed"
    share = s["integrated_share"].values[usable].astype(float)
    if share.size == 0 or not np.isfinite(share).any():
        raise InputError("--select", "none of the selected cases has entropy shares (all failed)")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        table = pd.DataFrame({
            **_reaction_columns(s),
            "share_mean [1]": np.nanmean(share, axis=0),
            "share_max [1]": np.nanmax(share, axis=0),
            "entropy_produced [J K-1]": np.nansum(s["entropy_produced"].values[usable], axis=0),
            "negative_in_cases [1]": (share < 0).sum(axis=0),
        })
    key = "share_mean [1]" if by == "mean" else "share_max [1]"
    table = table.sort_values(key, ascending=False, kind="stable").head(n).reset_index(drop=True)
    table.insert(0, "rank [1]", np.arange(1, len(table) + 1))
    table.attrs["cases"] = int(usable.sum())
    return table


def top_reactions_local(ranking: xr.Dataset, selection: Mapping[str, Any] | None = None,
                        n: int = 10) -> pd.DataFrame:
    """The reactions with the largest local share over the selected cases (EPA criterion).

    ``ranking`` is ``results/ranking.nc``; its ``local_share_peak`` (case, reaction) is the largest
    sigma_j / sigma along each path where sigma is not negligible (see :mod:`sigmagrid.rank`).
    Columns: largest local share over the selection [1], the case label where it occurs, and
    whether the reaction consumes entropy somewhere in the grid (flagged, never ranked there).
    """
    r = select(ranking, selection)
    local = r["local_share_peak"].values.astype(float)
    if not np.isfinite(local).any():
        raise InputError("--select", "none of the selected cases was usable for the ranking")
    finite = np.isfinite(local).any(axis=0)
    best = np.where(finite, np.nanargmax(np.where(np.isfinite(local), local, -np.inf), axis=0), 0)
    labels = r["label"].values.astype(str) if "label" in r.coords else r["case"].values.astype(str)
    table = pd.DataFrame({
        **_reaction_columns(r),
        "local_share_max [1]": np.where(finite, local[best, np.arange(local.shape[1])], np.nan),
        "case_of_max": np.where(finite, labels[best], ""),
        "negative_entropy": r["negative_entropy"].values.astype(bool),
    })
    table = table.sort_values(["negative_entropy", "local_share_max [1]"], ascending=[True, False],
                              kind="stable").head(n).reset_index(drop=True)
    table.insert(0, "rank [1]", np.arange(1, len(table) + 1))
    table.attrs["cases"] = int(r.sizes["case"])
    return table


def top_reactions_at(progress: xr.Dataset, level: float, selection: Mapping[str, Any] | None = None,
                     n: int = 10) -> pd.DataFrame:
    """The reactions with the largest local share sigma_j / sigma at one progress level, over the selection.

    ``progress`` is ``results/progress.nc``; ``level`` (1) is taken at the nearest grid level.
    Columns: mean and largest share [1], mean affinity [J mol-1], mean net rate [mol m-3 s-1].
    """
    level = _check_level(progress, level)
    p = select(progress, selection).sel(progress=level, method="nearest")
    share = p["local_share"].values.astype(float)
    if not np.isfinite(share).any():
        raise InputError("--at", f"none of the selected cases reaches progress {level:g}")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        table = pd.DataFrame({
            **_reaction_columns(p),
            "share_mean [1]": np.nanmean(share, axis=0),
            "share_max [1]": np.nanmax(share, axis=0),
            "affinity_mean [J mol-1]": np.nanmean(p["affinity"].values.astype(float), axis=0),
            "net_rate_mean [mol m-3 s-1]": np.nanmean(p["net_rate"].values.astype(float), axis=0),
        })
    table = table.sort_values("share_mean [1]", ascending=False, kind="stable").head(n).reset_index(drop=True)
    table.insert(0, "rank [1]", np.arange(1, len(table) + 1))
    table.attrs["progress"] = float(p["progress"])
    return table


def _check_level(progress: xr.Dataset, level: float) -> float:
    if not (isinstance(level, (int, float)) and 0.0 <= float(level) <= 1.0):
        raise InputError("level", f"must be a progress between 0 and 1, got {level!r}")
    return float(level)


#: Headline per-case variables of the summary: name -> column.
HEADLINE = {
    "ignition_delay": "ignition_delay [s]",
    "time_to_50pct": "time_to_50pct [s]",
    "time_to_90pct": "time_to_90pct [s]",
    "time_to_99pct": "time_to_99pct [s]",
    "equilibrium_temperature": "equilibrium_temperature [K]",
    "entropy_produced_total": "entropy_produced [J K-1]",
    "balance_residual": "balance_residual [1]",
}


def sea_agreement(case_file: str | Path) -> dict[str, float]:
    """SEA agreement of one case file, where the file has it: per metric the fit quality [1] and
    the largest Fisher-Rao path angle [rad]. Empty when the file has no SEA variables."""
    import netCDF4

    out: dict[str, float] = {}
    try:
        with netCDF4.Dataset(case_file) as nc:
            if "metric" not in nc.variables:
                return out
            metrics = [str(m) for m in nc.variables["metric"][:]]
            if "fit_quality" in nc.variables:
                for m, v in zip(metrics, np.ma.filled(nc.variables["fit_quality"][:].astype(float), np.nan)):
                    out[f"fit_quality_{m} [1]"] = float(v)
            if "path_angle" in nc.variables:
                angle = np.ma.filled(nc.variables["path_angle"][:].astype(float), np.nan)
                with np.errstate(invalid="ignore"):
                    largest = np.where(np.isfinite(angle).any(axis=1), np.nanmax(
                        np.where(np.isfinite(angle), angle, -np.inf), axis=1), np.nan)
                for m, v in zip(metrics, largest):
                    out[f"largest_path_angle_{m} [rad]"] = float(v)
    except (OSError, KeyError, IndexError, ValueError):
        return {}
    return out


def case_table(summary: xr.Dataset, selection: Mapping[str, Any] | None = None,
               cases_dir: str | Path | None = None) -> pd.DataFrame:
    """One row per selected case: parameters, status and headline numbers with units.

    With ``cases_dir`` (the folder of the case files), SEA agreement columns are added for the
    cases whose files carry ``fit_quality`` / ``path_angle`` (see :func:`sea_agreement`).
    """
    s = select(summary, selection)
    table = _case_columns(s)
    for name, column in HEADLINE.items():
        table[column] = s[name].values.astype(float) if name in s else np.nan
    if "reason" in s:
        table["reason"] = s["reason"].values.astype(str)
    if cases_dir is not None and Path(cases_dir).is_dir():
        extra = [sea_agreement(Path(cases_dir) / f"{cid}.nc") for cid in table["case_id"]]
        if any(extra):
            sea = pd.DataFrame(extra)
            for column in sea.columns:
                table[column] = sea[column].to_numpy(float)
    return table.sort_values("label", kind="stable").reset_index(drop=True)


def at_progress(progress: xr.Dataset, level: float, selection: Mapping[str, Any] | None = None,
                species: list[str] | None = None) -> pd.DataFrame:
    """Per selected case, the state at one progress level: time [s], temperature [K], pressure
    [Pa], sigma [W m-3 K-1], the reaction with the largest local share there (index and
    equation) and that share [1], and
    the mole fractions of ``species`` [1]."""
    level = _check_level(progress, level)
    p = select(progress, selection).sel(progress=level, method="nearest")
    table = _case_columns(p)
    table["time [s]"] = p["time"].values
    table["temperature [K]"] = p["temperature"].values
    table["pressure [Pa]"] = p["pressure"].values
    table["entropy_production [W m-3 K-1]"] = p["entropy_production_total"].values
    share = p["local_share"].values.astype(float)
    finite = np.isfinite(share).any(axis=1)
    best = np.where(finite, np.argmax(np.where(np.isfinite(share), share, -np.inf), axis=1), 0)
    table["dominant_reaction"] = pd.array(np.where(finite, p["reaction"].values.astype(int)[best], 0),
                                          dtype="Int64")
    table.loc[~finite, "dominant_reaction"] = pd.NA
    table["dominant_equation"] = np.where(finite, p["equation"].values.astype(str)[best], "")
    table["dominant_share [1]"] = np.where(finite, share[np.arange(share.shape[0]), best], np.nan)
    names = list(p["species"].values.astype(str))
    for sp in species or []:
        if sp not in names:
            raise InputError("--species", f"unknown species {sp!r}; the file has: {', '.join(names)}")
        table[f"X_{sp} [1]"] = p["mole_fraction"].sel(species=sp).values
    table.attrs["progress"] = float(p["progress"])
    return table.sort_values("label", kind="stable").reset_index(drop=True)


# --------------------------------------------------------------------------------------- output


def _cell(value) -> str:
    if isinstance(value, (float, np.floating)):
        return "-" if not np.isfinite(value) else f"{value:.4g}"
    if value is pd.NA or value is None:
        return "-"
    return str(value)


def aligned(table: pd.DataFrame) -> str:
    """The table as aligned text columns for people: numbers right-aligned, 4 significant digits."""
    columns = list(table.columns)
    cells = [[_cell(v) for v in table[c].tolist()] for c in columns]
    numeric = [pd.api.types.is_numeric_dtype(table[c]) and not pd.api.types.is_bool_dtype(table[c]) for c in columns]
    widths = [max([len(c)] + [len(x) for x in col]) for c, col in zip(columns, cells)]
    lines = ["  ".join(c.rjust(w) if num else c.ljust(w) for c, w, num in zip(columns, widths, numeric)).rstrip()]
    for i in range(len(table)):
        lines.append("  ".join(col[i].rjust(w) if num else col[i].ljust(w)
                               for col, w, num in zip(cells, widths, numeric)).rstrip())
    return "\n".join(lines)


def render(table: pd.DataFrame, fmt: str = "table") -> str:
    """``table`` (aligned text), ``csv`` or ``json`` (a list of records; NaN becomes null)."""
    if fmt == "table":
        return aligned(table)
    if fmt == "csv":
        return table.to_csv(index=False, float_format="%.10g").rstrip("\n")
    if fmt == "json":
        records = json.loads(table.to_json(orient="records", double_precision=15))
        return json.dumps(records, indent=1)
    raise InputError("--format", f"{fmt!r} is not allowed; allowed values: table, csv, json")


# ------------------------------------------------------------------------------------ benchmark


def synthetic_summary(n_cases: int = 1000, n_reactions: int = 325, seed: int = 0) -> xr.Dataset:
    """A summary-shaped Dataset of ``n_cases`` made-up cases (random shares), only for timing."""
    rng = np.random.default_rng(seed)
    produced = rng.lognormal(-6, 3, size=(n_cases, n_reactions))
    share = produced / produced.sum(axis=1, keepdims=True)
    phi = rng.choice([0.5, 0.8, 1.0, 1.2, 2.0], n_cases)
    temperature = rng.choice([900.0, 1000.0, 1100.0, 1200.0], n_cases)
    pressure = rng.choice([101325.0, 506625.0, 1013250.0], n_cases)
    reactor = rng.choice(["isolated", "constant-pressure"], n_cases)
    ids = np.array([f"{i:016x}" for i in range(n_cases)])
    from . import store

    coords = {"case": ids, **store.reaction_coords(np.arange(n_reactions), [f"R{j}" for j in range(n_reactions)],
                                                   np.arange(n_reactions), np.ones(n_reactions)),
              "label": ("case", np.array([f"{r}_phi{p:g}_T{t:g}K_{i}" for i, (r, p, t) in
                                          enumerate(zip(reactor, phi, temperature))])),
              "reactor": ("case", reactor), "composition_name": ("case", np.array([f"phi{p:g}" for p in phi])),
              "equivalence_ratio": ("case", phi), "initial_temperature": ("case", temperature),
              "initial_pressure": ("case", pressure), "status": ("case", np.array(["relaxed"] * n_cases))}
    data = {"entropy_produced": (("case", "reaction"), produced), "integrated_share": (("case", "reaction"), share),
            "reason": ("case", np.array([""] * n_cases))}
    for name in HEADLINE:
        data[name] = ("case", rng.lognormal(-7, 1, n_cases))
    from . import fileformat

    return fileformat.finish(xr.Dataset(data, coords=coords), "summary", "synthetic, for timing the queries")


def benchmark(n_cases: int = 1000, n_reactions: int = 325, folder: str | Path | None = None) -> list[tuple[str, float]]:
    """Seconds per query on a synthetic summary of ``n_cases`` written to netCDF and read back.

    Each time includes opening the file, as a command-line query does.
    """
    import tempfile

    from . import store

    with tempfile.TemporaryDirectory(dir=folder) as tmp:
        path = Path(tmp) / "summary.nc"
        store.write_atomic(synthetic_summary(n_cases, n_reactions), path)
        tasks = [
            ("top reactions, all cases", lambda s: top_reactions(s, None, 10)),
            ("top reactions, rich isolated at 10 atm", lambda s: top_reactions(
                s, {"reactor": "isolated", "equivalence_ratio": (1.01, None), "initial_pressure": 1013250}, 10)),
            ("case table, T0 in 1000..1100 K", lambda s: case_table(s, {"initial_temperature": (1000, 1100)})),
        ]
        out = []
        for name, task in tasks:
            started = time.perf_counter()
            task(open_dataset(path))
            out.append((name, time.perf_counter() - started))
        # the same question as a user asks it: a fresh interpreter, imports and all
        import subprocess
        import sys

        started = time.perf_counter()
        done = subprocess.run([sys.executable, "-m", "sigmagrid", "query", "top", "--summary", str(path),
                               "--select", "reactor=isolated", "--format", "csv"], capture_output=True, text=True)
        if done.returncode == 0:
            out.append(("whole command `sigmagrid query top` (new process)", time.perf_counter() - started))
    return out
