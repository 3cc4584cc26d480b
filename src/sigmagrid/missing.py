"""Why a number of a case is missing.

A value that cannot be computed is stored as NaN (the netCDF ``_FillValue``), never as a made-up
number; this module says why, in words a user can act on. The store puts the reason in the
variable's CF ``comment`` attribute, in the file's ``missing_values`` attribute and in the
``missing`` column of ``cases.csv``.
"""

from __future__ import annotations

import math

import numpy as np

#: Names of the per-case values explained here besides the scalars: the times to progress levels.
PROGRESS_TIMES = {0.5: "time_to_50pct", 0.9: "time_to_90pct", 0.99: "time_to_99pct"}


def _failed(r) -> str:
    return f"case failed ({r.reason})" if r.reason else "case failed"


def _ignition(r) -> str:
    if r.time.size < 3:
        return f"only {r.time.size} state(s) computed"
    rise = float(np.nanmax(r.temperature) - r.temperature[0])
    return (f"no ignition: temperature rose by {rise:.3g} K within {r.time[-1]:.3g} s, less than "
            f"stop.ignition_rise = {r.ignition_rise:g} K")


def _balance(r) -> str:
    if r.at_equilibrium_start:
        return "initial state is at equilibrium: no entropy change to compare with"
    return (f"entropy change over the {r.time[-1]:.3g} s computed is negligible "
            "(the mixture hardly reacted): a relative residual is meaningless")


def _progress_time(r, level: float) -> str:
    if r.status == "failed":
        return _failed(r)
    if r.at_equilibrium_start:
        return "progress undefined: the initial state is already at equilibrium"
    lam = r.progress
    reached = float(np.nanmax(lam)) if np.isfinite(lam).any() else float("nan")
    end = f"{r.time[-1]:.3g} s" if r.time.size else "the start"
    return (f"progress reached only {reached:.3g} of {level:g} by {end}"
            + (f" ({r.reason})" if r.reason else ""))


def reasons(r, values: dict[str, float], progress_times: dict[float, float]) -> dict[str, str]:
    """A reason for each NaN among ``values`` (scalar name -> value) and ``progress_times``.

    ``r`` is the :class:`sigmagrid.reactors.Relaxation` the values come from. Names without NaN are
    left out, so an empty result means nothing is missing.
    """
    out: dict[str, str] = {}
    for name, value in values.items():
        if value is not None and math.isfinite(value):
            continue
        if name in ("ignition_delay", "energy_drift") and r.reactor == "isothermal":
            why = ("not applicable: the isothermal reactor holds the temperature fixed" if name == "ignition_delay"
                   else "not applicable: the isothermal reactor holds no energy fixed")
        elif name == "closed_vessel_pressure_ratio" and r.reactor != "isolated":
            why = "not applicable: defined for the isolated (closed-vessel) reactor only"
        elif r.status == "failed":
            why = _failed(r)
        elif name == "ignition_delay":
            why = _ignition(r)
        elif name == "balance_residual":
            why = _balance(r)
        elif name == "energy_drift":
            why = "the held energy is zero: a relative drift is undefined"
        elif name in ("negative_entropy_share", "worst_reversible_ratio", "worst_duplicate_group_ratio") \
                and r.audit is None:
            why = "no entropy-production audit: nothing was integrated"
        else:
            why = "could not be computed"
        out[name] = why
    for level, value in progress_times.items():
        if not math.isfinite(value):
            out[PROGRESS_TIMES.get(level, f"time_to_{level:g}")] = _progress_time(r, level)
    return out


def as_text(found: dict[str, str]) -> str:
    """One line for a table cell or a global attribute: 'name: reason; name: reason'."""
    return "; ".join(f"{name}: {why}" for name, why in found.items())
