"""Figures over the whole grid: maps of headline numbers, the reaction ranking, the cuts.

    map_<quantity>          one panel per reactor type (rows) and initial pressure (columns), cells
                            over (equivalence ratio, initial temperature): ignition delay, entropy
                            produced, time to 90 % progress, and the largest SEA path angle per metric
    ranking                 shares of the top reactions under the three ranking criteria
    cuts                    reactions kept against the largest error of each reduced mechanism

Inputs: ``summary.nc`` (always), ``ranking.nc``/``ranking.csv`` and ``reduction.nc``/``reduction.csv``
when the ranking and the cuts were made; a figure whose input is absent is skipped with a note.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import xarray as xr
from matplotlib import colormaps
from matplotlib.colors import LogNorm, Normalize
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator

from . import plotstyle as ps, store
from .errors import InputError
from .figures import Skipped


@dataclass(frozen=True)
class MapQuantity:
    variable: str
    title: str  # what the colour shows
    units: str
    log: bool  # logarithmic colour scale (times span decades)


MAP_QUANTITIES = {
    "ignition_delay": MapQuantity("ignition_delay", "ignition delay", "s", True),
    # log colours: the entropy produced grows with the mass held, so with the pressure, and a linear
    # scale would hide the variation with phi and T0 within a panel
    "entropy_produced": MapQuantity("entropy_produced_total", "entropy produced", "J K-1", True),
    "time_to_90pct": MapQuantity("time_to_90pct", "time to 90 % progress", "s", True),
}
#: the summary variable of the SEA comparison mapped per metric, if present
PATH_ANGLE = ("largest_path_angle", "largest_sea_path_angle", "path_angle_max")

RANKING_SIZE = (1200, 800)
CUTS_SIZE = (1300, 560)


def map_size(n_rows: int, n_cols: int) -> tuple[int, int]:
    """Pixel size of a map figure with n_rows x n_cols panels (the tests rely on this rule)."""
    return max(720, 160 + 330 * n_cols), 120 + 300 * n_rows


def open_summary(path: str | Path) -> xr.Dataset:
    """Open summary.nc, or raise InputError if it is not a grid summary."""
    path = Path(path)
    ds = store.open_input(path, "SUMMARY")
    if "case" not in ds.dims or "entropy_produced" not in ds or "reactor" not in ds.coords:
        raise InputError("SUMMARY", f"'{path}' is not a sigmagrid grid summary (no case dimension with "
                         "entropy_produced); a single case file is plotted with 'sigmagrid plot'")
    return ds


def _facets(summary: xr.Dataset) -> list[tuple[str, float, str, np.ndarray]]:
    """(reactor, pressure, mixture, case indices) per panel; mixtures split only where needed."""
    reactor = summary["reactor"].values.astype(str)
    pressure = summary["initial_pressure"].values.astype(float)
    phi = summary["equivalence_ratio"].values.astype(float)
    temp = summary["initial_temperature"].values.astype(float)
    mixture = summary["composition_name"].values.astype(str) if "composition_name" in summary.coords \
        else np.array([""] * summary.sizes["case"])
    keys = list(zip(phi.round(12), temp.round(9)))
    split = False
    for r in np.unique(reactor):
        for p in np.unique(pressure):
            cell = [keys[i] for i in np.flatnonzero((reactor == r) & (pressure == p))]
            split |= len(cell) != len(set(cell))
    facets = []
    for r in np.unique(reactor):
        for m in (np.unique(mixture) if split else [""]):
            for p in np.unique(pressure):
                sel = (reactor == r) & (pressure == p) & ((mixture == m) if split else True)
                if sel.any():
                    facets.append((r, p, m, np.flatnonzero(sel)))
    return facets


def _text_colour(rgba) -> str:
    """Black or white, whichever reads better on a cell of this colour (relative luminance)."""
    r, g, b = rgba[:3]
    return "black" if 0.2126 * r + 0.7152 * g + 0.0722 * b > 0.45 else "white"


def _cell_text(value: float, log: bool) -> str:
    # one format per map: scientific where the colour scale is logarithmic
    return f"{value:.2e}" if log or not 1e-2 <= abs(value) < 1e4 else f"{value:.3g}"


def plot_map(summary: xr.Dataset, values: np.ndarray, title: str, units: str, log: bool):
    """Heat maps of one per-case value over (equivalence ratio, initial temperature).

    One panel per reactor type (rows) and initial pressure (columns), one colour scale for all,
    the value printed in each cell; cases that did not relax are marked, missing values say so.
    """
    if np.isnan(summary["equivalence_ratio"].values.astype(float)).all():
        raise Skipped("the grid has no equivalence ratios (explicit compositions without fuel or oxidizer)")
    facets = _facets(summary)
    rows = sorted({(f[0], f[2]) for f in facets})
    cols = sorted({f[1] for f in facets})
    finite = values[np.isfinite(values)]
    if log:
        finite = finite[finite > 0]
    if finite.size == 0:
        raise Skipped(f"no case has a finite {title}")
    vmin, vmax = float(finite.min()), float(finite.max())
    if vmin == vmax:
        vmin, vmax = (vmin / 2, vmax * 2) if log else (vmin - 0.5 * abs(vmin or 1), vmax + 0.5 * abs(vmax or 1))
    norm = LogNorm(vmin, vmax) if log else Normalize(vmin, vmax)
    cmap = colormaps[ps.MAP_CMAP].with_extremes(bad="#EEEEEE")
    fig = ps.new_figure(*map_size(len(rows), len(cols)))
    axes = fig.subplots(len(rows), len(cols), squeeze=False)
    status = summary["status"].values.astype(str)
    phi_all = summary["equivalence_ratio"].values.astype(float)
    t_all = summary["initial_temperature"].values.astype(float)
    marked = False
    mesh = None
    for r_i, (reactor, mixture) in enumerate(rows):
        for c_i, pressure in enumerate(cols):
            ax = axes[r_i, c_i]
            hit = [f for f in facets if f[0] == reactor and f[2] == mixture and f[1] == pressure]
            if not hit:
                ax.set_visible(False)
                continue
            idx = hit[0][3]
            phis, temps = np.unique(phi_all[idx]), np.unique(t_all[idx])
            grid = np.full((temps.size, phis.size), np.nan)
            for i in idx:
                grid[np.searchsorted(temps, t_all[i]), np.searchsorted(phis, phi_all[i])] = values[i]
            shown = np.where(grid > 0, grid, np.nan) if log else grid
            mesh = ax.pcolormesh(np.arange(phis.size + 1) - 0.5, np.arange(temps.size + 1) - 0.5,
                                 np.ma.masked_invalid(shown), cmap=cmap, norm=norm, edgecolors="white", lw=1.5)
            for i in idx:
                x, y = np.searchsorted(phis, phi_all[i]), np.searchsorted(temps, t_all[i])
                v = values[i]
                not_relaxed = status[i] != "relaxed"
                marked |= not_relaxed
                text = ("failed" if status[i] == "failed" else "n/a") if not np.isfinite(v) else _cell_text(v, log)
                text += " *" if not_relaxed and status[i] != "failed" else ""
                colour = _text_colour(cmap(norm(v))) if np.isfinite(v) and (v > 0 or not log) else "0.3"
                ax.text(x, y, text, ha="center", va="center", fontsize=ps.FONT_SIZE - 1, color=colour)
            ax.set_xticks(np.arange(phis.size), [f"{p:.3g}" for p in phis])
            ax.set_yticks(np.arange(temps.size), [f"{t:.0f}" for t in temps])
            ax.set_xlim(-0.5, phis.size - 0.5)
            ax.set_ylim(-0.5, temps.size - 0.5)
            ax.tick_params(length=0)
            for spine in ax.spines.values():
                spine.set_visible(False)
            head = f"{reactor}{', ' + mixture if mixture else ''}, P₀ = {pressure / 1e5:.4g} bar"
            ax.set_title(head, fontsize=ps.FONT_SIZE)
            if r_i == len(rows) - 1 or not axes[min(r_i + 1, len(rows) - 1), c_i].get_visible():
                ax.set_xlabel(ps.axis_label("equivalence ratio φ", "1"))
            if c_i == 0:
                ax.set_ylabel(ps.axis_label("initial temperature T₀", "K"))
    bar = fig.colorbar(mesh, ax=axes.ravel().tolist(), location="right", shrink=0.9)
    bar.set_label(ps.axis_label(title, units))
    fig.suptitle(f"{title} over the grid" + (f": {summary.attrs['study']}" if summary.attrs.get("study") else ""),
                 fontsize=ps.FONT_SIZE + 1)
    if marked:
        fig.text(0.005, 0.005, "* case did not relax to equilibrium within stop.max_time; 'n/a': value not defined "
                 "(for example no ignition)", fontsize=ps.FONT_SIZE - 2)
    return fig


def path_angle_variable(summary: xr.Dataset) -> str | None:
    """Name of the summary's largest-path-angle variable (case, metric), if the SEA ran."""
    for name in PATH_ANGLE:
        if name in summary and "metric" in summary[name].dims:
            return name
    for name, var in summary.data_vars.items():  # any (case, metric) angle in rad
        if "metric" in var.dims and "case" in var.dims and var.attrs.get("units") == "rad" and var.ndim == 2:
            return name
    return None


# ------------------------------------------------------------------------------ ranking and cuts


def _read_table(path: str | Path, field: str) -> pd.DataFrame:
    """A ranking or reduction table from its .nc or .csv; csv column units '[..]' are dropped."""
    path = Path(path)
    if not path.is_file():
        raise InputError(field, f"'{path}' does not exist")
    try:
        if path.suffix == ".nc":
            return store.open_checked(path)
        table = pd.read_csv(path)
    except Exception as err:  # noqa: BLE001
        raise InputError(field, f"cannot read '{path}': {type(err).__name__}: {err}") from None
    table.columns = [re.sub(r"\s*\[[^\]]*\]$", "", c) for c in table.columns]
    return table


def _ranking_frame(source) -> pd.DataFrame:
    """reaction, local_share_max, integrated_share_max, integrated_share_mean, rank_local, flagged."""
    if isinstance(source, pd.DataFrame) and source.attrs.get("normalized"):
        return source
    if isinstance(source, xr.Dataset):
        need = ["local_share_max", "integrated_share_max", "integrated_share_mean", "rank", "negative_entropy"]
        if any(v not in source for v in need) or "reaction" not in source.dims:
            raise InputError("--ranking", "is not a ranking file (ranking.nc from 'sigmagrid rank'): it lacks "
                             + ", ".join(v for v in need if v not in source))
        frame = pd.DataFrame({
            "reaction": source["equation"].values.astype(str),
            "local_share_max": source["local_share_max"].values,
            "integrated_share_max": source["integrated_share_max"].values,
            "integrated_share_mean": source["integrated_share_mean"].values,
            "rank_local": source["rank"].sel(criterion="local").values,
            "negative_entropy": source["negative_entropy"].values.astype(bool)})
        frame["index"] = source["reaction"].values.astype(float)
    else:
        frame = source.copy()
        need = ["reaction", "equation", "local_share_max", "integrated_share_max", "integrated_share_mean",
                "rank_local"]
        missing = [c for c in need if c not in frame]
        if missing:
            raise InputError("--ranking", f"is not a ranking table (ranking.csv): it lacks {', '.join(missing)}")
        frame["negative_entropy"] = frame.get("negative_entropy", False)
        frame["index"] = frame["reaction"].astype(float)
        frame["reaction"] = frame["equation"].astype(str)
    frame.attrs["normalized"] = True
    return frame


def plot_ranking(source, top: int = 12):
    """Horizontal bars: the top reactions' shares under the local, largest and mean criteria."""
    frame = _ranking_frame(source)
    ranked = frame[np.isfinite(frame["rank_local"].astype(float))].sort_values("rank_local")
    flagged = int(frame["negative_entropy"].astype(bool).sum())
    if ranked.empty:
        raise Skipped("no ranked reaction")
    shown = ranked.head(top)
    seen = frame["reaction"].value_counts()
    labels = [ps.equation_label(r, int(i) if np.isfinite(i) else None, seen[r] > 1)
              for r, i in zip(shown["reaction"], shown["index"].astype(float))]
    fig = ps.new_figure(*RANKING_SIZE)
    ax = fig.subplots()
    y = np.arange(len(shown))
    series = [("local_share_max", "local share, largest over the grid", ps.OKABE_ITO["blue"]),
              ("integrated_share_max", "integrated share, largest case", ps.OKABE_ITO["orange"]),
              ("integrated_share_mean", "integrated share, mean over the cases", ps.OKABE_ITO["bluish green"])]
    height = 0.26
    for k, (column, text, colour) in enumerate(series):
        values = shown[column].to_numpy(float)
        ax.barh(y + (k - 1) * height, values, height=height, color=colour, label=text)
    ax.set_yticks(y, labels, fontsize=ps.FONT_SIZE)
    ax.invert_yaxis()
    ax.set_xlim(0, min(1.0, max(0.05, float(np.nanmax(shown[[s[0] for s in series]].to_numpy(float))) * 1.1)))
    ax.set_xlabel(ps.axis_label("share of the entropy production", "1"))
    ax.grid(True, axis="x", color="0.9", lw=0.6)
    ax.set_axisbelow(True)
    title = f"top {len(shown)} of {len(ranked)} ranked reactions, ordered by the local criterion"
    if flagged:
        title += f"; {flagged} reaction(s) consuming entropy are flagged and not ranked"
    ax.set_title(title, fontsize=ps.FONT_SIZE + 1)
    fig.legend(loc="outside lower center", ncols=3, frameon=False, fontsize=ps.FONT_SIZE - 1)
    return fig


_ERROR_PANELS = (("ignition_delay_error", "ignition delay, relative error", "1"),
                 ("equilibrium_temperature_error", "equilibrium temperature, error", "K"),
                 ("entropy_produced_error", "entropy produced, relative error", "1"))


def _cuts_frame(source) -> pd.DataFrame:
    if isinstance(source, pd.DataFrame) and source.attrs.get("normalized"):
        return source
    if isinstance(source, xr.Dataset):
        need = ["criterion", "threshold", "n_reactions", "n_species"] + [f"{k}_max" for k, _, _ in _ERROR_PANELS]
        if any(v not in source for v in need) or "cut" not in source.dims:
            raise InputError("--reduction", "is not a reduction file (reduction.nc from 'sigmagrid cut-report'): "
                             "it lacks " + ", ".join(v for v in need if v not in source))
        frame = pd.DataFrame({"cut": source["cut"].values.astype(str),
                              "criterion": source["criterion"].values.astype(str),
                              "threshold": source["threshold"].values.astype(float),
                              "reactions": source["n_reactions"].values, "species": source["n_species"].values,
                              "failed": source["failed_cases"].values if "failed_cases" in source else 0,
                              "ratio": (source["largest_error_ratio"].values if "largest_error_ratio" in source
                                        else np.nan),
                              "best": (source["smallest_of_criterion"].values.astype(bool)
                                       if "smallest_of_criterion" in source else False),
                              **{f"{k}_max": source[f"{k}_max"].values for k, _, _ in _ERROR_PANELS}})
        tolerances = {k: source.attrs.get(f"tolerance_{k}", np.nan) for k, _, _ in _ERROR_PANELS}
    else:
        frame = source.rename(columns={"failed_cases": "failed", "largest_error_ratio": "ratio",
                                       "smallest_of_criterion": "best"}).copy()
        missing = [c for c in ["criterion", "threshold", "reactions", "species"] if c not in frame]
        if missing:
            raise InputError("--reduction", f"is not a reduction table (reduction.csv): it lacks {', '.join(missing)}")
        tolerances = {k: np.nan for k, _, _ in _ERROR_PANELS}
    frame.attrs["tolerances"] = tolerances
    frame.attrs["normalized"] = True
    return frame


def _label_cuts(ax, part: pd.DataFrame, shown: np.ndarray, colour: str, series: int, on_edge: np.ndarray) -> None:
    """Threshold and species kept beside each point; alternately above and below (always above for
    a point on the bottom edge), turned inwards near the right edge, so that neighbouring cuts do
    not print over each other."""
    x_max = float(part["reactions"].max())
    failed = part["failed"].to_numpy(int) if "failed" in part else np.zeros(len(part), int)
    for n, (x, y, thr, species, bad) in enumerate(zip(part["reactions"], shown, part["threshold"], part["species"],
                                                       failed)):
        if not np.isfinite(y):
            continue
        right = x > 0.8 * x_max
        text = f"≥{thr:g}: {int(species)} sp." + (f", {bad} failed" if bad > 0 else "")
        dy = 8 + 10 * n if on_edge[n] else (8 if n % 2 == 0 else -14) - 10 * series
        label = ax.annotate(text, (x, y), textcoords="offset points", xytext=(-5 if right else 5, dy),
                            ha="right" if right else "left", fontsize=ps.FONT_SIZE - 2, color=colour)
        label.set_in_layout(False)  # labels sit inside the panel; the layout must not shrink for them


def plot_cuts(source, total_reactions: int | None = None):
    """Reactions kept against the largest error over the grid, one panel per error, per criterion."""
    frame = _cuts_frame(source)
    frame = frame[frame["reactions"].astype(float) > 0]
    if frame.empty:
        raise Skipped("no reduced mechanism that loads")
    have = [p for p in _ERROR_PANELS if f"{p[0]}_max" in frame and np.isfinite(frame[f"{p[0]}_max"].astype(float)).any()]
    if not have:
        raise Skipped("the cuts were not validated (no errors to show)")
    fig = ps.new_figure(*CUTS_SIZE)
    axes = fig.subplots(1, len(have), squeeze=False)[0]
    criteria = sorted(frame["criterion"].unique())
    markers = ["o", "s", "^", "D", "v"]
    for ax, (key, text, units) in zip(axes, have):
        values = frame[f"{key}_max"].to_numpy(float)
        positive = values[np.isfinite(values) & (values > 0)]
        tol = frame.attrs["tolerances"].get(key, np.nan)
        # a log axis has no 0: exact zeros go on the bottom edge with an open marker of their own
        lowest = [*positive, *([tol] if np.isfinite(tol) and tol > 0 else [])]
        floor = min(lowest) / 30 if lowest else 1e-12
        top = max([floor * 1e3, *positive, *([tol] if np.isfinite(tol) else [])]) * 3
        for k, criterion in enumerate(criteria):
            part = frame[frame["criterion"] == criterion].sort_values("reactions")
            v = part[f"{key}_max"].to_numpy(float)
            x = part["reactions"].to_numpy(float)
            colour = ps.LINE_SERIES[k % len(ps.LINE_SERIES)]
            marker = markers[k % len(markers)]
            above = np.isfinite(v) & (v > 0)
            zero = np.isfinite(v) & (v == 0)
            ax.plot(x[above], v[above], marker=marker, ms=6, lw=1.2, color=colour,
                    ls=ps.LINESTYLES[k % len(ps.LINESTYLES)], label=f"criterion {criterion}")
            if zero.any():  # (an empty unclipped line would stretch the layout to the figure's corner)
                ax.plot(x[zero], np.full(zero.sum(), floor), marker=marker, ms=7, ls="none", mfc="white",
                        mec=colour, mew=1.5, clip_on=False, zorder=5)
            # with many criteria their cuts coincide and labels would print over each other;
            # the criteria figure compares them
            if ax is axes[0] and len(part) <= 10 and len(criteria) <= 2:
                _label_cuts(ax, part, np.where(zero, floor, np.where(above, v, np.nan)), colour, k, zero)
        ax.set_ylim(floor, top)
        if np.isfinite(tol) and tol > 0:
            ax.axhline(tol, color="0.3", lw=1.0, ls=":")
            ax.text(0.01, tol, " tolerance", transform=ax.get_yaxis_transform(), va="bottom", fontsize=ps.FONT_SIZE - 2,
                    color="0.3", clip_on=True).set_in_layout(False)
        if total_reactions:
            ax.axvline(total_reactions, color="0.6", lw=0.8)
        ax.set_yscale("log")
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_xlabel(ps.axis_label("reactions kept", "1"))
        ax.set_ylabel(ps.axis_label(f"largest {text}", units))
        ax.grid(True, color="0.9", lw=0.6)
    handles, texts = axes[0].get_legend_handles_labels()
    handles.append(Line2D([], [], marker="o", ms=7, ls="none", mfc="white", mec="0.3", mew=1.5))
    texts.append("error exactly 0 (on the bottom edge)")
    fig.legend(handles, texts, loc="outside lower center", ncols=len(texts), frameon=False, fontsize=ps.FONT_SIZE - 1)
    note = "largest error over the validated cases; labels: threshold, species kept, failed cases"
    if total_reactions:
        note += f"; grey line: full mechanism, {total_reactions} reactions"
    fig.suptitle(note, fontsize=ps.FONT_SIZE - 1)
    return fig


def plot_criteria(source, total_species: int | None = None, total_reactions: int | None = None):
    """Every criterion on the same axes: species kept (left) and reactions kept (right) against the
    largest error over its tolerance (1, the worst of the three errors); a ring marks each
    criterion's smallest cut within tolerances."""
    frame = _cuts_frame(source)
    if "ratio" not in frame:
        raise Skipped("the reduction file has no largest_error_ratio (written before the criteria comparison)")
    frame = frame[(frame["reactions"].astype(float) >= 0)]
    ratio = frame["ratio"].to_numpy(float)
    if not np.isfinite(ratio).any():
        raise Skipped("the cuts were not validated (no errors to show)")
    positive = ratio[np.isfinite(ratio) & (ratio > 0)]
    floor = min([*positive, 1.0]) / 30
    top = max([*positive, 1.0]) * 3
    infinite = np.isinf(ratio)
    fig = ps.new_figure(*CUTS_SIZE)
    axes = fig.subplots(1, 2, squeeze=False)[0]
    markers = ["o", "s", "^", "D", "v", "P"]
    criteria = list(dict.fromkeys(frame["criterion"]))
    for ax, size, total, label in ((axes[0], "species", total_species, "species kept"),
                                   (axes[1], "reactions", total_reactions, "reactions kept")):
        for k, criterion in enumerate(criteria):
            part = frame[frame["criterion"] == criterion].sort_values([size, "threshold"])
            x = part[size].to_numpy(float)
            # exact zeros on the bottom edge, no ignition where the full mechanism ignites on the top
            y = np.clip(part["ratio"].to_numpy(float), floor, top)
            colour = ps.LINE_SERIES[k % len(ps.LINE_SERIES)]
            ax.plot(x, y, marker=markers[k % len(markers)], ms=6, lw=1.2, color=colour,
                    ls=ps.LINESTYLES[k % len(ps.LINESTYLES)], label=criterion, clip_on=False)
            best = part["best"].to_numpy(bool) if "best" in part else np.zeros(len(part), bool)
            if best.any():
                ax.plot(x[best], y[best], marker="o", ms=15, ls="none", mfc="none", mec=colour, mew=1.5)
        ax.axhline(1.0, color="0.3", lw=1.0, ls=":")
        ax.text(0.01, 1.0, " tolerance", transform=ax.get_yaxis_transform(), va="bottom",
                fontsize=ps.FONT_SIZE - 2, color="0.3").set_in_layout(False)
        if total:
            ax.axvline(total, color="0.6", lw=0.8)
        ax.set_yscale("log")
        ax.set_ylim(floor, top)
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_xlabel(ps.axis_label(label, "1"))
        ax.set_ylabel(ps.axis_label("largest error / tolerance", "1"))
        ax.grid(True, color="0.9", lw=0.6)
    handles, texts = axes[0].get_legend_handles_labels()
    handles.append(Line2D([], [], marker="o", ms=12, ls="none", mfc="none", mec="0.3", mew=1.5))
    texts.append("smallest within tolerances")
    fig.legend(handles, texts, loc="outside lower center", ncols=min(len(texts), 7), frameon=False,
               fontsize=ps.FONT_SIZE - 1)
    note = "worst of the three errors over its tolerance, over the validated cases"
    if infinite.any():
        note += "; on the top edge: ignition lost or gained"
    fig.suptitle(note, fontsize=ps.FONT_SIZE - 1)
    return fig


# ------------------------------------------------------------------------------------- driver


def plot_grid(summary_path: str | Path, out_dir: str | Path, ranking: str | Path | None = None,
              reduction: str | Path | None = None, top: int = 12,
              log: Callable[[str], None] = print) -> list[Path]:
    """Every grid figure the inputs support, PNG and SVG, in ``out_dir``; returns the PNG files."""
    summary = open_summary(summary_path)
    if top < 1:
        raise InputError("--top", f"must be at least 1, got {top}")
    out_dir = Path(out_dir)
    jobs: list[tuple[str, str, Callable]] = []
    skipped = []  # said once every input has been read: a bad input is then the only message
    for name, q in MAP_QUANTITIES.items():
        values = summary[q.variable].values.astype(float) if q.variable in summary else None
        if values is None:
            skipped.append(f"map_{name} skipped: {q.variable} not in {summary_path}")
            continue
        jobs.append((f"map_{name}", f"Map of {q.title}",
                     lambda v=values, q=q: plot_map(summary, v, q.title, q.units, q.log)))
    angle = path_angle_variable(summary)
    if angle is None:
        skipped.append(f"map_path_angle skipped: no SEA path angle per case and metric in {summary_path}")
    else:
        var = summary[angle].transpose("case", "metric")
        for m in summary["metric"].values.astype(str):
            jobs.append((f"map_path_angle_{m}", f"Map of the largest SEA path angle, {m}",
                         lambda m=m: plot_map(summary, var.sel(metric=m).values.astype(float),
                                              f"largest SEA path angle ({m} metric)", "rad", False)))
    if ranking is None:
        skipped.append("ranking skipped: no ranking file given (results/ranking.nc from the ranking step)")
    else:
        ranks = _ranking_frame(_read_table(ranking, "--ranking"))
        jobs.append(("ranking", "Ranking of reactions by entropy produced", lambda: plot_ranking(ranks, top)))
    if reduction is None:
        skipped.append("cuts skipped: no reduction file given (results/reduction.nc from the cut step)")
    else:
        cut_table = _cuts_frame(_read_table(reduction, "--reduction"))
        jobs.append(("cuts", "Reduced mechanisms: size against error",
                     lambda: plot_cuts(cut_table, summary.sizes["reaction"])))
        jobs.append(("criteria", "Reduction criteria side by side: size against the largest error",
                     lambda: plot_criteria(cut_table, None, summary.sizes["reaction"])))
    for line in skipped:
        log(line)
    out_dir.mkdir(parents=True, exist_ok=True)  # only once every input has been read
    written = []
    for name, title, make in jobs:
        try:
            fig = make()
        except Skipped as why:
            log(f"{name} skipped: {why}")
            continue
        for suffix in (".png", ".svg"):
            ps.save(fig, out_dir / f"{name}{suffix}", title=title, description=summary.attrs.get("title", ""))
        written.append(out_dir / f"{name}.png")
        log(f"wrote {out_dir / name}.png and .svg")
    return written
