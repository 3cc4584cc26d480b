"""Per-case figures, drawn from one case file (``results/cases/<case_id>.nc``).

    entropy_production  sigma_j over log time, the top reactions stacked and the rest grouped,
                        above the share of each in the total; beside it, where the entropy is
                        made, drawn so that areas are entropy
    affinity_rate       |q_j| against |x_j| on log axes for the top reactions, with the exact
                        mass-action relation q = r+ (1 - exp(-x)) and the linear (Onsager) line
    sea_paths           entropy (the reactor's potential) and temperature against the time since
                        progress lambda_0, observed and for each steepest-entropy-ascent (SEA) path
    alignment           cos theta between the observed rates and steepest ascent, per metric,
                        against log time and against progress

The SEA figures need the SEA variables (``alignment(metric, time)``, ``sea_time(metric, sea_progress)``,
...); a file without them gets the other figures and a note saying why these were skipped.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import xarray as xr
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.lines import Line2D

from . import plotstyle as ps, store
from .errors import InputError
from .grid import select_cases  # noqa: F401 (figures.select_cases: which cases get figures)

#: name -> one-line title (the long captions are in workflow/report/case_figures.rst)
CASE_FIGURES = {
    "entropy_production": "Entropy production by reaction over time",
    "affinity_rate": "Net rate against disequilibrium for the top reactions",
    "sea_paths": "Entropy and temperature: observed and steepest-ascent paths",
    "alignment": "Alignment of the observed rates with steepest ascent",
}
SIZE = (1200, 750)  # px, every per-case figure
TOP_REACTIONS = 6


class Skipped(Exception):
    """A figure this file cannot support; the message says why (logged, never fatal)."""


def open_case_file(path: str | Path) -> xr.Dataset:
    """Open a case file for plotting, or raise InputError naming the file if it is not one."""
    ds = store.open_input(path, "FILE")
    needed = ("entropy_production", "entropy_production_total", "entropy_produced", "net_rate", "forward_rate",
              "reverse_rate", "affinity", "temperature", "potential")
    if "case_id" not in ds.attrs or any(v not in ds for v in needed):
        hint = " (it is a grid summary: plot it with 'sigmagrid plot-grid')" \
            if "case" in ds.dims else ""
        raise InputError("FILE", f"'{path}' is not a sigmagrid case file: it lacks "
                         f"{'the case_id attribute' if 'case_id' not in ds.attrs else 'per-reaction diagnostics'}{hint}")
    return ds


def reaction_labels(ds: xr.Dataset) -> list[str]:
    """Legend text for every reaction, with R-numbers (the reaction index) and duplicate marks."""
    equations = [str(e) for e in ds["equation"].values]
    seen = {}
    for e in equations:
        seen[e] = seen.get(e, 0) + 1
    return [ps.equation_label(e, int(j), seen[e] > 1) for j, e in zip(ds["reaction"].values, equations)]


def top_reactions(ds: xr.Dataset, n: int) -> np.ndarray:
    """Indices of the n reactions that produce the most entropy over the case, largest first."""
    produced = np.nan_to_num(np.asarray(ds["entropy_produced"].values, dtype=float), nan=-np.inf)
    order = np.argsort(-produced, kind="stable")
    return order[:max(1, min(n, order.size))]


def _case_title(ds: xr.Dataset) -> str:
    a = ds.attrs
    return (f"{a.get('reactor', '?')}, φ = {float(a.get('equivalence_ratio', np.nan)):.3g}, "
            f"T₀ = {float(a.get('initial_temperature', np.nan)):.0f} K, "
            f"P₀ = {float(a.get('initial_pressure', np.nan)) / 1e5:.4g} bar  ({a.get('status', '?')})")


def _positive_time(ds: xr.Dataset) -> np.ndarray:
    """Mask of samples with t > 0 (a log time axis cannot show t = 0)."""
    return np.asarray(ds["time"].values) > 0


def _mark_ignition(ax, ds: xr.Dataset) -> None:
    t_ign = float(ds["ignition_delay"]) if "ignition_delay" in ds else np.nan
    if np.isfinite(t_ign) and t_ign > 0:
        ax.axvline(t_ign, color="0.35", lw=0.8, ls=":")


#: share of the entropy produced that the zoomed panel of the entropy-production figure holds
WINDOW_SHARE = 0.8


def production_window(t: np.ndarray, total: np.ndarray, share: float = WINDOW_SHARE) -> tuple[float, float]:
    """The shortest time interval (s) in which ``share`` of the entropy is produced, padded by half
    its width on each side. Where the entropy is made: on linear axes there, areas are entropy.
    """
    increments = np.concatenate([[0.0], np.cumsum(0.5 * (total[1:] + total[:-1]) * np.diff(t))])
    if not increments[-1] > 0:
        return float(t[0]), float(t[-1])
    cumulative = increments / increments[-1]
    ends = np.searchsorted(cumulative, cumulative + share).clip(0, t.size - 1)
    usable = cumulative + share <= 1.0 + 1e-12
    widths = np.where(usable, t[ends] - t, np.inf)
    i = int(np.argmin(widths))
    lo, hi = float(t[i]), float(t[ends[i]])
    pad = 0.5 * max(hi - lo, 1e-300)
    return max(float(t[0]), lo - pad), min(float(t[-1]), hi + pad)


def plot_entropy_production(ds: xr.Dataset, top: int = TOP_REACTIONS):
    """Stacked sigma_j (top reactions, the rest grouped) and the share of each in sigma.

    Left, over log time: the whole path, sigma on a log axis (there band thicknesses are not
    proportional to the parts; read the shares below it). Right, over linear time and sigma: the
    shortest stretch in which 80 % of the entropy is produced, where each band's area is its entropy.
    """
    keep = _positive_time(ds)
    if keep.sum() < 3:
        raise Skipped("fewer than three stored samples after t = 0")
    t = ds["time"].values[keep]
    sigma = np.asarray(ds["entropy_production"].values, dtype=float)[keep]
    sigma = np.nan_to_num(sigma, nan=0.0)
    idx = top_reactions(ds, top)
    labels = reaction_labels(ds)
    # irreversible reactions can produce negative sigma_j: a stack cannot show it, the note does
    negative = np.clip(sigma, None, 0.0).sum()
    positive = np.clip(sigma, 0.0, None)
    parts = [positive[:, j] for j in idx]
    rest = positive.sum(axis=1) - np.sum(parts, axis=0)
    parts.append(np.clip(rest, 0.0, None))
    names = [labels[j] for j in idx] + [f"all other {sigma.shape[1] - idx.size} reactions"]
    colours = ps.SERIES[:idx.size] + [ps.REST]
    total = np.sum(parts, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = [np.where(total > 0, p / total, np.nan) for p in parts]

    fig = ps.new_figure(*SIZE)
    (ax_s, ax_z), (ax_f, ax_zf) = fig.subplots(2, 2, height_ratios=[3, 2], width_ratios=[3, 2])
    ax_s.sharex(ax_f)
    ax_z.sharex(ax_zf)
    # log y: sigma spans many decades between induction and ignition; the top edge is the total
    ax_s.stackplot(t, parts, colors=colours, labels=names, lw=0)
    ax_s.plot(t, total, color=ps.OBSERVED, lw=0.8)
    ax_s.set_xscale("log")
    ax_s.set_yscale("log")
    peak = float(np.nanmax(total)) if np.isfinite(total).any() and total.max() > 0 else 1.0
    floor = max(float(np.nanmin(np.where(total > 0, total, np.inf))), peak * 1e-12)
    ax_s.set_ylim(floor, peak * 3)
    ax_s.set_ylabel(ps.axis_label("entropy production σ (stacked)", "W m-3 K-1"))
    ax_s.set_title("whole path, log time", fontsize=ps.FONT_SIZE, pad=14)
    ax_f.stackplot(t, shares, colors=colours, lw=0)
    ax_f.set_ylim(0, 1)
    ax_f.set_ylabel(ps.axis_label("share of σ", "1"))
    ax_f.set_xlabel(ps.axis_label("time since start", "s"))
    lo, hi = production_window(t, total)
    # a single burst is best seen on linear time; a window spanning decades (a two-stage path) on
    # log time with sigma t, whose area per unit ln t is again the entropy produced
    burst = hi < 3 * lo
    if not burst:
        lo, hi = float(t[0]), float(t[-1])
    inside = (t >= lo) & (t <= hi)
    weight = np.ones_like(t) if burst else t
    ax_z.stackplot(t[inside], [p[inside] * weight[inside] for p in parts], colors=colours, lw=0)
    ax_z.set_ylim(0, None)
    ax_zf.stackplot(t[inside], [f[inside] for f in shares], colors=colours, lw=0)
    ax_zf.set_ylim(0, 1)
    ax_zf.set_xlabel(ps.axis_label("time since start", "s"))
    if burst:
        ax_z.set_title(f"zoom: {WINDOW_SHARE:.0%} of the entropy, linear time", fontsize=ps.FONT_SIZE, pad=14)
        ax_z.set_ylabel(ps.axis_label("σ (stacked)", "W m-3 K-1"))
        ax_zf.ticklabel_format(axis="x", style="sci", scilimits=(-3, 4), useOffset=False)
    else:
        ax_z.set_title("σ·t on log time: area = entropy produced", fontsize=ps.FONT_SIZE, pad=14)
        ax_z.set_ylabel(ps.axis_label("σ·t (stacked)", "J m-3 K-1"))
        ax_z.set_xscale("log")
    ax_z.ticklabel_format(axis="y", style="sci", scilimits=(-3, 4))
    for ax in (ax_s, ax_f, ax_z, ax_zf):
        _mark_ignition(ax, ds)
        ax.grid(True, which="major", axis="y", color="0.9", lw=0.6)
    for ax in (ax_s, ax_z):
        ax.tick_params(labelbottom=False)
    fig.suptitle(_case_title(ds), fontsize=ps.FONT_SIZE + 1)
    handles, texts = ax_s.get_legend_handles_labels()
    if np.isfinite(float(ds.get("ignition_delay", np.nan))):
        handles.append(Line2D([], [], color="0.35", lw=0.8, ls=":"))
        texts.append("ignition delay")
    fig.legend(handles, texts, loc="outside right upper", fontsize=ps.FONT_SIZE - 1, frameon=False,
               title="largest entropy producers", title_fontsize=ps.FONT_SIZE - 1)
    if negative < 0:
        fig.text(0.01, 0.005, f"negative σ of irreversible reactions not stacked: "
                 f"{-negative / max(positive.sum(), 1e-300):.2%} of the positive", fontsize=ps.FONT_SIZE - 2)
    return fig


def equilibrium_one_way_rate(ds: xr.Dataset) -> np.ndarray:
    """r_eq,j: the geometric mean of forward and reverse rates at the last sample.

    At equilibrium r+ = r- = r_eq; near it, sqrt(r+ r-) is r_eq to second order in x.
    """
    rf = np.asarray(ds["forward_rate"].values[-1], dtype=float)
    rr = np.asarray(ds["reverse_rate"].values[-1], dtype=float)
    return np.sqrt(np.clip(rf, 0, None) * np.clip(rr, 0, None))


def plot_affinity_rate(ds: xr.Dataset, top: int = TOP_REACTIONS):
    """|q| against |x| for the top reactions: observed samples, mass action, Onsager line."""
    idx = top_reactions(ds, top)
    x = np.asarray(store.disequilibrium(ds).values, dtype=float)
    q = np.asarray(ds["net_rate"].values, dtype=float)
    rf = np.asarray(ds["forward_rate"].values, dtype=float)
    progress = _sample_progress(ds)
    r_eq = equilibrium_one_way_rate(ds)
    labels = reaction_labels(ds)
    ncols = 3 if idx.size > 4 else 2 if idx.size > 1 else 1
    nrows = int(np.ceil(idx.size / ncols))
    fig = ps.new_figure(*SIZE)
    axes = np.atleast_1d(fig.subplots(nrows, ncols, squeeze=False)).ravel()
    norm = Normalize(0.0, 1.0)
    shown = 0
    for ax, j in zip(axes, idx):
        ok = np.isfinite(x[:, j]) & np.isfinite(q[:, j]) & (np.abs(x[:, j]) > 0) & (np.abs(q[:, j]) > 0)
        ax.set_title(labels[j], fontsize=ps.FONT_SIZE - 1)
        if ok.sum() < 2:
            ax.text(0.5, 0.5, "no finite samples", ha="center", va="center", transform=ax.transAxes)
            continue
        shown += 1
        xa, qa = np.abs(x[ok, j]), np.abs(q[ok, j])
        # exact mass action at the observed forward rates, in time order: the samples must sit on it
        with np.errstate(over="ignore", invalid="ignore"):  # x << 0 overflows: such samples are off-axis
            exact = np.abs(rf[ok, j] * -np.expm1(-x[ok, j]))
        ax.plot(xa, exact, color=ps.OBSERVED, lw=0.6, alpha=0.8, zorder=3)
        forward = x[ok, j] >= 0
        ax.scatter(xa[forward], qa[forward], c=progress[ok][forward], cmap=ps.PATH_CMAP, norm=norm, s=14,
                   marker="o", linewidths=0, zorder=2)
        ax.scatter(xa[~forward], qa[~forward], c=progress[ok][~forward], cmap=ps.PATH_CMAP, norm=norm, s=18,
                   marker="v", linewidths=0, zorder=2)
        if np.isfinite(r_eq[j]) and r_eq[j] > 0:
            grid = np.geomspace(xa.min(), xa.max(), 200)
            ax.plot(grid, r_eq[j] * grid, color=ps.OKABE_ITO["vermillion"], ls="--", lw=1.3,
                    label="Onsager line r_eq x", zorder=4)
        ax.set_xscale("log")
        ax.set_yscale("log")
        # the first samples, with radicals at trace levels, reach 1e-30: they would squash the rest
        ax.set_ylim(max(qa.min(), qa.max() * 1e-12) / 2, qa.max() * 3)
        ps.readable_log_ticks(ax)
        ax.grid(True, which="major", color="0.9", lw=0.6)
    for ax in axes[idx.size:]:
        ax.set_visible(False)
    for ax in axes[:idx.size]:
        if ax.get_subplotspec().is_last_row() or not axes[min(idx.size - 1, list(axes).index(ax) + ncols)].get_visible():
            ax.set_xlabel(ps.axis_label("|x| = |A|/(RT)", "1"))
        if ax.get_subplotspec().is_first_col():
            ax.set_ylabel(ps.axis_label("|q|", "mol m-3 s-1"))
    if shown == 0:
        raise Skipped("no reaction has finite, nonzero affinity and rate")
    handles = [Line2D([], [], color=ps.OBSERVED, lw=0.6),
               Line2D([], [], color=ps.OKABE_ITO["vermillion"], ls="--", lw=1.3),
               Line2D([], [], color="0.4", marker="o", ls="none", ms=5),
               Line2D([], [], color="0.4", marker="v", ls="none", ms=5)]
    texts = ["mass action q = r₊(1 − e⁻ˣ)", "Onsager line q = r_eq x", "sample, x > 0 (net forward)",
             "sample, x < 0 (net reverse)"]
    fig.legend(handles, texts, loc="outside lower center", ncols=4, frameon=False, fontsize=ps.FONT_SIZE - 1)
    bar = fig.colorbar(ScalarMappable(norm=norm, cmap=ps.PATH_CMAP), ax=list(axes[:idx.size]),
                       location="right", shrink=0.8)
    bar.set_label(ps.axis_label("progress λ of the sample", "1"))
    title = _case_title(ds)
    if ds.attrs.get("status") != "relaxed":
        title += "\ncase did not relax: r_eq, taken at the last sample, is not the equilibrium value"
    fig.suptitle(title, fontsize=ps.FONT_SIZE + 1)
    return fig


@dataclass(frozen=True)
class SeaView:
    """The SEA variables of a case file, with the progress dimension found from the data."""

    metrics: list[str]
    progress: np.ndarray  # lambda grid, 1
    time: np.ndarray  # (metric, sea_progress), s
    temperature: np.ndarray  # (metric, sea_progress), K
    status: list[str]
    alignment: np.ndarray | None  # (metric, time), 1


def sea_view(ds: xr.Dataset) -> SeaView:
    """Collect the SEA variables or raise Skipped naming what is missing."""
    missing = [v for v in ("sea_time", "sea_temperature") if v not in ds]
    if missing or "metric" not in ds.dims:
        raise Skipped("no steepest-entropy-ascent comparison in this case file "
                      f"(missing {', '.join(missing) or 'the metric dimension'})")
    dim = [d for d in ds["sea_time"].dims if d != "metric"][0]
    metrics = [str(m) for m in ds["metric"].values]
    status = [str(s) for s in ds["sea_status"].values] if "sea_status" in ds else ["?"] * len(metrics)
    align = None
    if "alignment" in ds:
        align = np.asarray(ds["alignment"].transpose("metric", ...).values, dtype=float)
    return SeaView(metrics, np.asarray(ds[dim].values, dtype=float),
                   np.asarray(ds["sea_time"].transpose("metric", dim).values, dtype=float),
                   np.asarray(ds["sea_temperature"].transpose("metric", dim).values, dtype=float), status, align)


def _potential_label(ds: xr.Dataset) -> str:
    if ds.attrs.get("reactor") == "isothermal":
        return "Δ(S − H/T) since start"
    return "entropy change S − S₀"


def _sample_progress(ds: xr.Dataset) -> np.ndarray:
    """Progress lambda of each stored sample (1): the case file's ``path_progress``."""
    if "path_progress" in ds and ds["path_progress"].dims == ("time",):
        return np.asarray(ds["path_progress"].values, dtype=float)
    return np.full(ds.sizes["time"], np.nan)


def plot_sea_paths(ds: xr.Dataset):
    """Potential and temperature against log time since lambda_0, observed and each SEA path.

    Every path is drawn on its own clock from the moment it has progress lambda_0 (the SEA start):
    the SEA paths start from the observed state there, and a metric's time scale is its own, so
    only the time taken from that common state can be compared. The observed path is taken on the
    same progress grid (``observed_time``, ``observed_temperature``) where the file has it.
    """
    view = sea_view(ds)
    t = np.asarray(ds["time"].values, dtype=float)
    phi = np.asarray(ds["potential"].values, dtype=float)
    lam = _sample_progress(ds)
    temperature = np.asarray(ds["temperature"].values, dtype=float)
    phi0 = phi[0]
    # the SEA paths are stored on a progress grid: Phi = Phi0 + lambda (Phi_eq - Phi0)
    ok = np.isfinite(lam) & (lam > 0.5)
    span = float(np.median((phi[ok] - phi0) / lam[ok])) if ok.any() else np.nan
    if "observed_time" in ds and np.isfinite(ds["observed_time"].values).sum() >= 2:
        obs_t = np.asarray(ds["observed_time"].values, dtype=float)
        obs_phi = span * view.progress
        obs_T = (np.asarray(ds["observed_temperature"].values, dtype=float) if "observed_temperature" in ds
                 else np.interp(obs_t, t, temperature))
        first = np.flatnonzero(np.isfinite(obs_t))[0]
        obs_dt = obs_t - obs_t[first]
    else:  # the samples after the first one at or above lambda_0
        start = int(np.searchsorted(lam, view.progress[0]))
        obs_dt, obs_phi, obs_T = t - t[min(start, t.size - 1)], phi - phi0, temperature
    # the isothermal reactor holds T: a flat temperature panel would say nothing
    held = ds.attrs.get("reactor") == "isothermal"
    fig = ps.new_figure(*SIZE)
    if held:
        ax_s, ax_t = fig.subplots(), None
    else:
        ax_s, ax_t = fig.subplots(2, 1, sharex=True)
    good = np.isfinite(obs_dt) & (obs_dt > 0)
    ax_s.plot(obs_dt[good], obs_phi[good], color=ps.OBSERVED, lw=2.2, label="observed (Cantera kinetics)")
    if ax_t is not None:
        ax_t.plot(obs_dt[good], obs_T[good], color=ps.OBSERVED, lw=2.2)
    drawn = 0
    for i, metric in enumerate(view.metrics):
        finite = np.flatnonzero(np.isfinite(view.time[i]))
        dt = view.time[i] - (view.time[i][finite[0]] if finite.size else np.nan)
        good = np.isfinite(dt) & np.isfinite(view.temperature[i]) & (dt > 0)
        colour, style = ps.LINE_SERIES[i % len(ps.LINE_SERIES)], ps.LINESTYLES[i % len(ps.LINESTYLES)]
        label = f"SEA, {metric}" + ("" if view.status[i] in ("ok", "?") else f" ({view.status[i]})")
        if good.sum() < 2:
            ax_s.plot([], [], color=colour, ls=style, label=label + ": no path")
            continue
        drawn += 1
        ax_s.plot(dt[good], span * view.progress[good], color=colour, ls=style, lw=1.6, label=label)
        if ax_t is not None:
            ax_t.plot(dt[good], view.temperature[i][good], color=colour, ls=style, lw=1.6)
    ax_s.set_xscale("log")
    ax_s.set_ylabel(ps.axis_label(_potential_label(ds), "J K-1"))
    x_label = ps.axis_label(f"time since the path reached λ₀ = {view.progress[0]:.3g}", "s")
    if ax_t is None:
        ax_s.set_xlabel(x_label)
        ax_s.set_title(_case_title(ds) + f"; temperature held at {temperature[0]:.0f} K", fontsize=ps.FONT_SIZE + 1)
    else:
        ax_t.set_ylabel(ps.axis_label("temperature", "K"))
        ax_t.set_xlabel(x_label)
        ax_s.set_title(_case_title(ds), fontsize=ps.FONT_SIZE + 1)
    for ax in (ax_s, ax_t):
        if ax is not None:
            ax.grid(True, color="0.9", lw=0.6)
    fig.legend(*ax_s.get_legend_handles_labels(), loc="outside right upper", frameon=False,
               fontsize=ps.FONT_SIZE - 1, title="path", title_fontsize=ps.FONT_SIZE - 1)
    if drawn == 0:
        fig.text(0.5, 0.5, "no steepest-ascent path finished for this case", ha="center", fontsize=ps.FONT_SIZE + 2)
    return fig


def plot_alignment(ds: xr.Dataset):
    """cos theta along the observed path for each metric: against log time and against progress.

    Two views because they weigh the path differently: on log time the long induction takes most
    of the axis, on progress lambda (entropy made so far) the stretch where the entropy is made does.
    """
    view = sea_view(ds)
    if view.alignment is None:
        raise Skipped("no alignment(metric, time) in this case file")
    keep = _positive_time(ds)
    t = ds["time"].values[keep]
    lam = _sample_progress(ds)[keep]
    fig = ps.new_figure(*SIZE)
    ax_t, ax_p = fig.subplots(1, 2, sharey=True)
    low = 0.0
    for i, metric in enumerate(view.metrics):
        a = view.alignment[i][keep]
        colour, style = ps.LINE_SERIES[i % len(ps.LINE_SERIES)], ps.LINESTYLES[i % len(ps.LINESTYLES)]
        if not np.isfinite(a).any():
            ax_t.plot([], [], color=colour, ls=style, label=f"{metric}: not available")
            continue
        low = min(low, float(np.nanmin(a)))
        ax_t.plot(t, a, color=colour, ls=style, lw=1.6, label=metric)
        ax_p.plot(lam, a, color=colour, ls=style, lw=1.6)
    ax_t.set_xscale("log")
    ax_t.set_ylim(np.floor(low * 10) / 10 - 0.02, 1.02)
    ax_t.set_ylabel(ps.axis_label("alignment cos θ", "1"))
    ax_t.set_xlabel(ps.axis_label("time since start", "s"))
    ax_p.set_xlabel(ps.axis_label("progress λ (share of the entropy rise made)", "1"))
    ax_p.set_xlim(0, 1)
    for ax in (ax_t, ax_p):
        ax.axhline(1.0, color="0.5", lw=0.6)
        ax.grid(True, color="0.9", lw=0.6)
    _mark_ignition(ax_t, ds)
    fig.suptitle(_case_title(ds), fontsize=ps.FONT_SIZE + 1)
    fig.legend(*ax_t.get_legend_handles_labels(), loc="outside lower center", ncols=len(view.metrics),
               frameon=False, fontsize=ps.FONT_SIZE - 1, title="metric", title_fontsize=ps.FONT_SIZE - 1)
    return fig


_PLOTTERS: dict[str, Callable] = {
    "entropy_production": plot_entropy_production,
    "affinity_rate": plot_affinity_rate,
    "sea_paths": plot_sea_paths,
    "alignment": plot_alignment,
}


def plot_case(path: str | Path, out_dir: str | Path, top: int = TOP_REACTIONS,
              log: Callable[[str], None] = print) -> list[Path]:
    """Every per-case figure this file supports, as PNG in ``out_dir``; returns the files written.

    A figure the file cannot support (a failed case, no SEA variables) is skipped with a note.
    """
    ds = open_case_file(path)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    if ds.attrs.get("status") == "failed" or ds.sizes.get("time", 0) < 3:
        log(f"{ds.attrs['case_id']}: no figures: case {ds.attrs.get('status', '?')} "
            f"({ds.attrs.get('reason', '') or 'too few samples'})")
        return []
    written = []
    for name, plotter in _PLOTTERS.items():
        try:
            fig = plotter(ds, top) if name in ("entropy_production", "affinity_rate") else plotter(ds)
        except Skipped as why:
            log(f"{ds.attrs['case_id']}: {name} skipped: {why}")
            continue
        target = ps.save(fig, out_dir / f"{name}.png", title=f"{CASE_FIGURES[name]}: {ds.attrs.get('label', '')}",
                         description=_case_title(ds))
        written.append(target)
        log(f"wrote {target}")
    return written
