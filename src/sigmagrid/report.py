"""Readable text about a case file, for ``sigmagrid show``."""

from __future__ import annotations

import numpy as np

from . import safety, store
from .errors import TABLE_ROWS


def _cost(ds, i: int) -> str:
    """'  steps (rhs, Jacobians)' of path i; the counts are missing in files made before 2026-12-03."""
    def count(name):
        value = float(ds[name].values[i]) if name in ds else float("nan")
        return f"{value:.0f}" if np.isfinite(value) else "-"
    return f"  {count('sea_steps'):>5} ({count('sea_rhs_evaluations')}, {count('sea_jacobian_evaluations')})"


def _fmt(value: float, unit: str, spec: str = ".4g") -> str:
    return "missing" if not np.isfinite(value) else f"{value:{spec}} {unit}"


def describe_case(path, top: int = TABLE_ROWS) -> str:
    """Status, checks, headline numbers, the reactions that produce the most entropy, provenance."""
    ds = store.open_case(path)
    a = ds.attrs
    lines = [f"case {a['case_id']}  {a['label']}",
             f"  status            {a['status']}" + (f": {a['reason']}" if a.get("reason") else ""),
             f"  reactor           {a['reactor']}; T0 {a['initial_temperature']:g} K, P0 {a['initial_pressure']:g} Pa, "
             f"phi {a['equivalence_ratio']:.4g}",
             f"  composition       {a['composition']}",
             f"  balance residual  {_fmt(float(ds['balance_residual']), '', '.2e')}(|dS - sum I_j| / dS)",
             f"  ignition delay    {_fmt(float(ds['ignition_delay']), 's')}",
             f"  T at equilibrium  {_fmt(float(ds['equilibrium_temperature']), 'K', '.2f')}"
             f"  (end of run {_fmt(float(ds['final_temperature']), 'K', '.2f')})",
             "  time to progress  " + ", ".join(
                 f"{int(100 * lv)} %: {_fmt(float(t), 's')}" for lv, t in
                 zip(ds["progress_level"].values, ds["time_to_progress"].values)),
             f"  entropy produced  {_fmt(float(ds['entropy_produced_total']), 'J/K')}",
             f"  irreversible      {a.get('n_irreversible_reactions', '?')} reaction(s); negative share "
             f"{_fmt(float(ds['negative_entropy_share']), '', '.2e')}"]
    if a.get("missing_values"):
        lines.append("  missing values (stored as NaN):")
        lines += [f"    {item}" for item in a["missing_values"].split("; ")]
    if a.get("audit_notes"):
        lines.append("  audit notes:")
        lines += [f"    {item}" for item in a["audit_notes"].split("; ")]
    if a.get("negative_duplicate_members"):
        lines.append(f"  duplicate members with negative entropy production: {a['negative_duplicate_members']}")
    produced = ds["entropy_produced"].values
    total = np.nansum(produced)
    if np.isfinite(produced).any() and total != 0:
        order = np.argsort(-np.nan_to_num(produced, nan=-np.inf))[:top]
        lines.append(f"  top {len(order)} reactions by entropy produced:")
        for j in order:
            lines.append(f"    {produced[j] / total:8.2%}  {produced[j]:10.3e} J/K  "
                         f"R{int(ds['reaction'].values[j])} {ds['equation'].values[j]}")
    lines += _sea_lines(ds)
    ratio = float(ds["closed_vessel_pressure_ratio"])
    lines += ["  safety:",
              f"    flammable range at ambient: {a.get('flammability_at_ambient', 'unknown')} "
              f"({a.get('flammability_note', '')})"]
    if np.isfinite(ratio):
        lines.append(f"    closed-vessel pressure ratio P_eq/P0: {ratio:.2f}")
    lines.append("    caution: " + safety.CAUTION)
    lines += ["  provenance:",
              f"    mechanism {a.get('mechanism', '?')} sha256 {a.get('mechanism_sha256', '?')}",
              f"    config sha256 {a.get('config_sha256', '') or '(none)'}",
              f"    case settings sha256 {a.get('settings_sha256', '') or '(none)'}",
              f"    sigmagrid {a.get('sigmagrid_version', '?')}, Cantera {a.get('cantera_version', '?')}, "
              f"Python {a.get('python_version', '?')}, numpy {a.get('numpy_version', '?')}"]
    return "\n".join(lines)


def _sea_lines(ds) -> list[str]:
    """The steepest-entropy-ascent comparison per metric, if the case file has one."""
    if "sea_status" not in ds:
        return []
    a = ds.attrs
    if a.get("sea_skipped_reason"):
        return [f"  steepest-entropy-ascent comparison: skipped ({a['sea_skipped_reason']})"]
    grid = ds["sea_progress"].values
    settings = []  # files written before the settings were kept have none
    if "sea_start_progress" in a:
        settings.append(f"from progress {a['sea_start_progress']:g}")
    if "sea_weight" in a:
        settings.append(f"fits weighted by {a['sea_weight']}")
    share = _fmt(float(ds["irreversible_entropy_share"]), "", ".2e")
    treatment = {"reversible": " given their thermodynamic reverse", "omit": " left out"}.get(
        a.get("sea_irreversible", ""), "")
    settings.append(f"irreversible reactions{treatment}, {share}of the entropy production")
    lines = [f"  steepest-entropy-ascent comparison ({'; '.join(settings)}):",
             "    metric            status      R^2     reached  largest angle  time ratio 50/90/99 %   "
             "slow modes  wall    steps (right-hand sides, Jacobians)"]
    for i, metric in enumerate(ds["metric"].values):
        t = ds["sea_time"].values[i]
        reached = grid[np.isfinite(t)].max() if np.isfinite(t).any() else float("nan")
        ratios = "/".join("-" if not np.isfinite(r) else f"{r:.3g}" for r in ds["time_ratio"].values[i])
        lines.append(f"    {str(metric):<17} {str(ds['sea_status'].values[i]):<10} "
                     f"{float(ds['fit_quality'].values[i]):8.3g} {reached:8.6g}  "
                     f"{float(ds['largest_path_angle'].values[i]):9.3g} rad  {ratios:<22} "
                     f"{float(ds['slow_mode_difference'].values[i]):9.2e}  {float(ds['sea_wall_time'].values[i]):.2f} s"
                     + _cost(ds, i))
    for i, metric in enumerate(ds["metric"].values):
        reason = str(ds["sea_reason"].values[i])
        if reason:
            lines.append(f"    {metric}: {reason[:240]}")
    rates = ds["relaxation_rates_kinetics"].values
    if np.isfinite(rates).any():
        lines.append("    slowest relaxation rates at equilibrium, kinetics (Cantera Jacobian) / onsager: "
                     + ", ".join(f"{k:.4g}/{s:.4g}" for k, s in
                                 zip(rates[:5], ds["relaxation_rates_sea"].values[:5])) + " s-1")
    if a.get("near_equilibrium_note"):
        lines.append(f"    near equilibrium: {a['near_equilibrium_note'][:400]}")
    if "sea_comparison_wall_time" in ds:
        lines.append(f"    the whole comparison took {float(ds['sea_comparison_wall_time']):.2f} s")
    return lines


def case_record(path, top: int = TABLE_ROWS) -> dict:
    """What :func:`describe_case` prints, for scripts (``sigmagrid show --json``): every number
    as {"value", "units"}, NaN as null with the reason the file gives."""
    ds = store.open_case(path)
    a = ds.attrs

    def quantity(name):
        value = float(ds[name])
        return {"value": value if np.isfinite(value) else None, "units": ds[name].attrs.get("units", "")}

    record = {key: a.get(key) for key in ("case_id", "label", "status", "reason", "reactor", "composition",
                                          "mechanism", "mechanism_sha256", "config_sha256", "settings_sha256",
                                          "sigmagrid_version", "cantera_version")}
    record["initial_temperature"] = {"value": float(a["initial_temperature"]), "units": "K"}
    record["initial_pressure"] = {"value": float(a["initial_pressure"]), "units": "Pa"}
    record["equivalence_ratio"] = {"value": float(a["equivalence_ratio"]), "units": "1"}
    for name in ("balance_residual", "ignition_delay", "equilibrium_temperature", "final_temperature",
                 "entropy_produced_total", "negative_entropy_share", "closed_vessel_pressure_ratio"):
        if name in ds:
            record[name] = quantity(name)
    record["time_to_progress"] = [{"progress": float(level), "value": float(t) if np.isfinite(t) else None,
                                   "units": ds["time_to_progress"].attrs.get("units", "s")}
                                  for level, t in zip(ds["progress_level"].values, ds["time_to_progress"].values)]
    record["missing_values"] = a.get("missing_values", "").split("; ") if a.get("missing_values") else []
    record["audit_notes"] = a.get("audit_notes", "").split("; ") if a.get("audit_notes") else []
    produced = ds["entropy_produced"].values
    total = np.nansum(produced)
    equations = ds["equation"].values if "equation" in ds.coords else ds["reaction"].values
    top_rows = []
    if np.isfinite(produced).any() and total != 0:
        for j in np.argsort(-np.nan_to_num(produced, nan=-np.inf))[:top]:
            top_rows.append({"reaction": ds["reaction"].values[j].item(), "equation": str(equations[j]),
                             "entropy_produced": {"value": float(produced[j]), "units": "J K-1"},
                             "share_of_total": float(produced[j] / total)})
    record["top_reactions"] = top_rows
    if "sea_status" in ds:
        metrics = [str(m) for m in ds["metric"].values]
        record["sea"] = {m: {"status": str(ds["sea_status"].values[i]), "reason": str(ds["sea_reason"].values[i]),
                             "largest_path_angle": {"value": float(ds["largest_path_angle"].values[i]), "units": "rad"}}
                         for i, m in enumerate(metrics)}
    record["caution"] = safety.CAUTION
    return record
