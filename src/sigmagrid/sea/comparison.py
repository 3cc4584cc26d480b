"""The entry point: compare an observed relaxation with SEA paths under each metric."""

from __future__ import annotations

import time

import numpy as np
import cantera as ct
import xarray as xr
from scipy import sparse

from ..diagnostics import evaluate
from ..mechanism import MechanismInfo
from ..units import KMOL, PER_KMOL
from .dynamics import _Mobility, _Path, _System, _sea_path, lagging_species
from .metrics import (alignment, fisher_rao_angle, fit_arrhenius, fit_quality, log_mean_mobility, path_weights,
                      progress_grid, trace_factors)
from .settings import N_SLOW_COMPARED, PROGRESS_LEVELS, SeaSettings
from .spectra import kinetics_spectrum, mode_carriers, sea_spectrum


def _empty(gas, relaxation, sample_index, settings, reason):
    """NaN-filled result with the reason in ``sea_status``/``sea_reason`` and a global attribute."""
    return _assemble(gas, relaxation, sample_index, settings, None, reason)


def _mole_fractions(y, mw):
    n = y / mw
    return n / n.sum(axis=-1, keepdims=True)


def _first_crossing(lam, values, levels):
    """Linear interpolation of ``values`` (n, ...) at the first sample where lam >= level."""
    out = np.full((levels.size,) + values.shape[1:], np.nan)
    for i, level in enumerate(levels):
        above = np.flatnonzero(lam >= level)
        if above.size == 0:
            continue
        k = int(above[0])
        if k == 0 or lam[k] == lam[k - 1]:
            out[i] = values[k]
            continue
        f = (level - lam[k - 1]) / (lam[k] - lam[k - 1])
        out[i] = values[k - 1] + f * (values[k] - values[k - 1])
    return out


def compare(gas: ct.Solution, info: MechanismInfo, relaxation, sample_index, settings: SeaSettings = SeaSettings()
            ) -> xr.Dataset:
    """Compare an observed relaxation with steepest-entropy-ascent paths under several metrics.

    Parameters
    ----------
    gas : Cantera Solution of the mechanism (its state is overwritten).
    info : :func:`sigmagrid.mechanism.describe` of the same mechanism.
    relaxation : :class:`sigmagrid.reactors.Relaxation`, the full-resolution observed path.
    sample_index : int array, indices of the stored samples in the full-resolution path.
    settings : :class:`SeaSettings`.

    Returns
    -------
    xarray.Dataset on coordinates ``metric``, ``reaction``, ``species``, ``time`` (the stored
    samples, s), ``sea_progress`` (1), ``mode`` and ``progress_level``; every variable has ``units`` and
    ``long_name``. Never raises for a numerical failure: ``sea_status``/``sea_reason`` say what
    happened per metric, and degenerate cases (start at equilibrium, a path too short) come back
    NaN-filled with the reason.
    """
    settings.check()
    started = time.perf_counter()
    sample_index = np.asarray(sample_index, dtype=int)
    try:
        ds = _compare(gas, info, relaxation, sample_index, settings)
    except _Degenerate as why:
        ds = _empty(gas, relaxation, sample_index, settings, str(why))
    except Exception as err:  # recorded with the case, never raised into the grid run
        detail = str(err).splitlines()[0][:300] if str(err) else ""
        ds = _empty(gas, relaxation, sample_index, settings, f"SEA comparison failed: {type(err).__name__}: {detail}")
    ds["sea_comparison_wall_time"] = ((), time.perf_counter() - started, {
        "units": "s", "long_name": "wall time of the whole steepest-entropy-ascent comparison of the case",
        "comment": "fits, alignment, every path and the near-equilibrium check; sea_wall_time is one path's"})
    return ds


class _Degenerate(Exception):
    pass


def _compare(gas, info, rel, sample_index, settings):
    if rel.reactor not in ("isolated", "constant-pressure", "isothermal"):
        raise _Degenerate(f"reactor type {rel.reactor!r} is not supported by the SEA comparison")
    if gas.thermo_model not in ("ideal-gas", "IdealGas"):
        # the SEA dynamics use ideal-gas chemical potentials, energies and Hessian
        raise _Degenerate(f"thermo model {gas.thermo_model!r}: the SEA comparison needs an ideal gas")
    if rel.equilibrium is None:
        raise _Degenerate(f"no equilibrium state (relaxation {rel.status}: {rel.reason})")
    if rel.at_equilibrium_start:
        raise _Degenerate("initial state is already at equilibrium: there is no path to compare")
    lam = rel.progress
    if rel.time.size < 3 or not np.isfinite(lam).all() or np.nanmax(lam) < settings.start_progress:
        raise _Degenerate(f"observed path too short for the comparison ({rel.time.size} samples, "
                          f"largest progress {np.nanmax(lam) if np.isfinite(lam).any() else float('nan'):.3g}; "
                          f"relaxation {rel.status}{': ' + rel.reason if rel.reason else ''})")

    ns = gas.n_species
    mw = gas.molecular_weights * PER_KMOL  # kg/mol
    grid = progress_grid(settings.n_progress, settings.start_progress, settings.end_progress)
    nu = gas.product_stoich_coeffs - gas.reactant_stoich_coeffs
    participates = (gas.product_stoich_coeffs + gas.reactant_stoich_coeffs) > 0  # (ns, nr)

    # which species and reactions take part in the SEA dynamics
    elements = np.array([[gas.n_atoms(k, e) for k in range(ns)] for e in range(gas.n_elements)], float)
    k_start = max(int(np.searchsorted(lam, settings.start_progress, side="right")) - 1, 0)
    y_start = np.clip(rel.mass_fractions[k_start], 0.0, None)
    n_start = rel.mass * y_start / mw  # mol
    present_elements = elements @ n_start > 1e-12 * (elements @ n_start).sum()
    formable = ~((elements[~present_elements] > 0).any(axis=0))
    reactive = np.abs(nu).sum(axis=1) > 0
    active_mask = formable & reactive
    involved_ok = ~(participates & ~active_mask[:, None] & reactive[:, None]).any(axis=0)
    included = involved_ok & (info.reversible | (settings.irreversible == "reversible"))
    rx = np.flatnonzero(included)
    active = np.flatnonzero(active_mask)
    floor = 1e-30 * n_start.sum()
    n_start[active] = np.maximum(n_start[active], floor)

    # observed path: affinities and rates at full resolution

    if rel.disequilibrium is not None and rel.net_rate is not None:
        x_all, q_all = rel.disequilibrium, rel.net_rate  # as the relaxation recorded them
    else:
        st = evaluate(gas, rel.temperature, rel.density, rel.mass_fractions)
        x_all, q_all = st.disequilibrium, st.net_rate
    present = rel.mass_fractions > 0
    valid = (sparse.csr_matrix((~present).astype(float)) @ sparse.csc_matrix(participates.astype(float))).toarray() == 0
    valid &= included[None, :]
    w = path_weights(settings.weight, rel.time, rel.potential, lam)
    if not (w > 0).any():
        raise _Degenerate(f"no {settings.weight} weight on the observed path")

    # equilibrium one-way rates (onsager)
    eq = rel.equilibrium
    gas.TPX = eq.temperature, eq.pressure, eq.mole_fractions
    r_eq = gas.forward_rates_of_progress * KMOL
    n_eq_all = rel.mass * gas.Y / mw  # mol

    # Fits and alignment work on physical reactions: the members of a duplicate group share x and
    # add their rates (a member with a negative pre-exponential factor alone has x q < 0)
    groups = _Groups(info.duplicate_group)
    xg, qg = x_all[:, groups.reps], groups.total(q_all)
    validg, includedg = valid[:, groups.reps], included[groups.reps]
    r_eq_g = groups.total(r_eq[None, :])[0]
    m_onsager = _floored(r_eq_g, includedg, settings.mobility_floor)  # the onsager metric as integrated
    temps = rel.temperature

    # The constant and Arrhenius metrics are m g(state): the trace factor g of the integrated
    # dynamics (``trace_factors``) along the observed path, so that what is fitted, aligned and
    # linearized is the metric the paths integrate
    # mol per active species: the trace level of the total amount. (The trace level of each
    # species' own equilibrium amount would leave the linearization Onsager's, but then the onsager
    # path of methane stalls at progress 0.02, as with no factor at all: species absent at the
    # start and nearly absent at equilibrium are the ones that need it.)
    eps = np.full(active.size, settings.trace_level * float(n_start.sum()))
    sides = (gas.reactant_stoich_coeffs[active][:, groups.reps] > 0,
             gas.product_stoich_coeffs[active][:, groups.reps] > 0)
    amounts = rel.mass * np.clip(rel.mass_fractions[:, active], 0.0, None) / mw[active]  # mol
    g_path = trace_factors(amounts, xg, *sides, eps)
    gx = g_path * xg  # the regressor of q under a metric m g

    # the alignment is taken over the reactions with detailed balance: an irreversible reaction's
    # observed rate is not of the form M x under any metric (its x q can be negative); its share
    # of the entropy production is reported separately
    aligned = includedg & info.reversible[groups.reps]
    xa, qa = np.where(aligned[None, :], xg, 0.0), np.where(aligned[None, :], qg, 0.0)
    xq_a = (xa * qa).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        q2_over_g = np.where(qa != 0, qa * qa / g_path, 0.0)  # inf where g = 0 and q != 0: infinite cost
    gx2_a = g_path * xa * xa
    # the fits' weighted sums, once for all metrics: q ~ m g x
    ww = w[:, None] * validg
    wq2 = float((ww * qg * qg).sum())
    sum_gxq = (ww * gx * qg).sum(axis=0)
    sum_gx2 = (ww * gx * gx).sum(axis=0)

    def quality_constant(m):  # 1 - sum w (q - m g x)^2 / sum w q^2, expanded in the sums above
        m = np.where(includedg, np.nan_to_num(m), 0.0)
        return 1.0 - (wq2 - 2.0 * (m @ sum_gxq) + (m * m) @ sum_gx2) / wq2 if wq2 > 0 else float("nan")

    def align_constant(m):  # the alignment along the path for a metric m g, m constant
        m = np.where(aligned, np.nan_to_num(m), 0.0)
        pos = m > 0
        cost = q2_over_g[:, pos] @ (1.0 / m[pos])
        cost = np.where((q2_over_g[:, ~pos] != 0).any(axis=1), np.inf, cost)  # rate without mobility
        with np.errstate(divide="ignore", invalid="ignore"):
            out = xq_a / (np.sqrt(cost) * np.sqrt(gx2_a @ m))
        return np.where(np.isinf(cost) & np.isfinite(xq_a), 0.0, out)

    mobility = {}  # per reaction (members of a group carry the group's value)
    mobility_g = {}  # per group, what the SEA dynamics uses
    notes = {m: [] for m in settings.metrics}
    params = {}
    quality = {}
    align_full = {}
    for metric in settings.metrics:
        if metric == "log-mean":
            # Lambda x is mass action's net rate: the log-mean metric aligns to 1 and fits exactly
            # wherever the reverse rates obey detailed balance, which its path checks
            mobility_g[metric] = np.full(groups.n, np.nan)
            st = evaluate(gas, rel.temperature, rel.density, rel.mass_fractions)  # the one-way rates
            lm = np.where(aligned[None, :], log_mean_mobility(groups.total(st.forward_rate),
                                                              groups.total(st.reverse_rate), xg), 0.0)
            align_full[metric] = alignment(xa, qa, lm)
            quality[metric] = fit_quality(qg, np.where(aligned[None, :], lm * xa, qg), w, validg)
            mobility[metric] = mobility_g[metric][groups.inverse]
            continue
        if metric == "onsager":
            m = m_onsager
        elif metric == "fitted-scalar":
            m = float(_clip_negative(np.array([sum_gxq.sum() / sum_gx2.sum()]), np.array([True]), metric, notes)[0])
            m = np.full(groups.n, m)
        elif metric == "fitted-diagonal":
            with np.errstate(invalid="ignore", divide="ignore"):
                m = np.where(sum_gx2 > 0, sum_gxq / np.where(sum_gx2 > 0, sum_gx2, 1.0), np.nan)
            m = _floored(np.nan_to_num(_clip_negative(m, includedg, metric, notes)), includedg,
                         settings.mobility_floor)
        else:
            m_ref, b = fit_arrhenius(gx, qg, w, validg, temps, eq.temperature)
            m_ref = _floored(np.nan_to_num(_clip_negative(m_ref, includedg, metric, notes)), includedg,
                             settings.mobility_floor)
            params["m_ref"] = np.where(includedg, m_ref, np.nan)
            params["b"] = np.where(includedg, b, np.nan)
            factor = np.exp(np.clip(-np.outer(1.0 / temps - 1.0 / eq.temperature, np.nan_to_num(params["b"])),
                                    -700, 700))
            Mc = np.where(includedg[None, :], np.nan_to_num(params["m_ref"]) * factor * g_path, 0.0)
            quality[metric] = fit_quality(qg, Mc * xg, w, validg)
            align_full[metric] = alignment(xa, qa, np.where(aligned[None, :], Mc, 0.0))
            mobility_g[metric] = np.full(groups.n, np.nan)
            mobility[metric] = mobility_g[metric][groups.inverse]
            continue
        mobility_g[metric] = np.where(includedg, m, np.nan)
        mobility[metric] = mobility_g[metric][groups.inverse]
        quality[metric] = quality_constant(m)
        align_full[metric] = align_constant(m)
    for key in ("m_ref", "b"):
        if key in params:
            params[key] = params[key][groups.inverse]

    # share of |entropy production| by irreversible reactions on the compared part of the path
    w_t = path_weights("time", rel.time, rel.potential, lam) * (lam >= settings.start_progress)
    sig = np.abs(xg * qg) * w_t[:, None]
    total_sig = float(sig.sum())
    irr_share = float(sig[:, ~info.reversible[groups.reps]].sum()) / total_sig if total_sig > 0 else float("nan")

    # entropy-production ratio observed / largest at equal cost, along the path (entropy-weighted)
    # over the compared part of the path (progress >= start_progress), where no species is absent
    w_s = path_weights("entropy", rel.time, rel.potential, lam)
    ep_ratio = {}
    for metric, a in align_full.items():
        use = (w_s > 0) & (lam >= settings.start_progress)
        with np.errstate(divide="ignore", invalid="ignore"):
            largest = np.where(a[use] > 0, w_s[use] / a[use], np.inf)
        ep_ratio[metric] = float(w_s[use].sum() / largest.sum()) if use.any() else float("nan")

    # observed path on the progress grid
    x_obs_full = _mole_fractions(np.clip(rel.mass_fractions, 0.0, None), mw)
    obs_time = _first_crossing(lam, rel.time, grid)
    obs_temp = _first_crossing(lam, rel.temperature, grid)
    obs_x = _first_crossing(lam, x_obs_full, grid)

    # SEA paths
    lam_start = float(lam[k_start])
    t_start = float(rel.time[k_start])
    if rel.reactor == "isolated":
        volume, pressure = float(rel.volume[k_start]), float("nan")
    else:
        volume, pressure = float("nan"), float(rel.pressure[k_start])
    paths = {}
    phi_eq_sea = None
    rx_g = groups.reps[includedg]  # one representative reaction per included physical reaction
    gi = np.flatnonzero(includedg)
    for metric in settings.metrics:
        if metric == "log-mean":
            mob, reactions = _Mobility("log-mean"), rx
        elif metric == "fitted-arrhenius":
            m_g = np.where(includedg, np.nan_to_num(params["m_ref"][groups.reps]), 0.0)
            mob = _Mobility("arrhenius", m_g[gi], np.nan_to_num(params["b"][groups.reps])[gi], eq.temperature)
            reactions = rx_g
        else:
            mob = _Mobility("constant", np.nan_to_num(np.clip(mobility_g[metric][gi], 0.0, None)))
            reactions = rx_g
        try:
            system = _System(gas, rel.reactor, rel.mass, n_start, active, reactions, info.reversible[reactions],
                             volume, pressure, float(rel.temperature[k_start]), mob,
                             eps if metric != "log-mean" else None)
            z0 = system.z_of(n_start)
            system.state(z0)
            phi_start = system.potential()
            if phi_eq_sea is None:
                phi_eq_sea = _equilibrium_potential(gas, rel.reactor, rel.mass)
            path = _sea_path(system, z0, lam_start, phi_start, phi_eq_sea, grid, elements, settings)
            path.trace_level = settings.trace_level if metric != "log-mean" else float("nan")
            reached = np.flatnonzero(np.isfinite(path.time))
            if path.status in ("incomplete", "budget") and mob.m is not None and reached.size:
                # name the species the metric cannot bring to equilibrium in the time or steps given
                held = lagging_species(path.mole_fractions[reached[-1]], eq.mole_fractions, gas.species_names,
                                       nu[:, reactions], mob.m)
                if held:
                    path.reason += f"; the disequilibrium left is held by {held}"
            if notes[metric]:
                path.reason = "; ".join(notes[metric] + ([path.reason] if path.reason else []))
            paths[metric] = path
        except Exception as err:
            paths[metric] = _Path("failed", f"{type(err).__name__}: {str(err).splitlines()[0][:300] if str(err) else ''}",
                                  np.full(grid.size, np.nan), np.full(grid.size, np.nan),
                                  np.full((grid.size, ns), np.nan), np.nan, np.nan, np.nan, np.nan, 0, 0.0)

    # near-equilibrium spectra
    spectra = {"sea": np.full(settings.n_modes, np.nan), "kinetics": np.full(settings.n_modes, np.nan)}
    slow_diff = {m: float("nan") for m in settings.metrics}
    spectrum_reason = spectrum_note = ""
    try:
        gas.TPX = eq.temperature, eq.pressure, eq.mole_fractions
        n_eq = rel.mass * gas.Y / mw
        n_eq[active] = np.maximum(n_eq[active], 1e-300)
        # a system at the equilibrium's own energy, one reaction per physical reaction
        ref_system = _System(gas, rel.reactor, rel.mass, n_eq, active, rx_g, info.reversible[rx_g],
                             eq.volume if rel.reactor == "isolated" else volume, pressure, eq.temperature,
                             _Mobility("constant", r_eq_g[gi]))
        # Onsager's linear theory: the metric diag(r_eq) itself. The paths' floor and trace factor
        # are left out here: at equilibrium they would give species far below the trace level
        # (C2 species of methane at 1e-28) modes of 1e18 s-1 or slow them by N_eq/eps, and
        # either wrecks the slow end of the spectrum (gri30: every slow mode 100 % off)
        sea_rates = sea_spectrum(ref_system, n_eq, r_eq_g[gi])
        rank = sea_rates.size
        kin_rates = kinetics_spectrum(gas, info, settings.irreversible, rel.reactor, eq.temperature, eq.pressure,
                                      eq.mole_fractions, eq.volume, rank,
                                      [gas.species_names[k] for k in active])
        k = min(settings.n_modes, rank)
        spectra["sea"][:k] = sea_rates[:k]
        spectra["kinetics"][:k] = kin_rates[:k]
        n_cmp = min(N_SLOW_COMPARED, rank)
        for metric in settings.metrics:
            if metric in ("log-mean", "onsager"):
                r_m = sea_rates  # the log-mean mobility tends to r_eq at equilibrium
            elif metric == "fitted-arrhenius":
                r_m = sea_spectrum(ref_system, n_eq, np.nan_to_num(params["m_ref"][groups.reps])[gi])
            else:
                r_m = sea_spectrum(ref_system, n_eq, np.nan_to_num(np.clip(mobility_g[metric][gi], 0, None)))
            if r_m.size >= n_cmp and n_cmp > 0:
                slow_diff[metric] = float(np.max(np.abs(r_m[:n_cmp] - kin_rates[:n_cmp]) / kin_rates[:n_cmp]))
        spectrum_note = _slow_mode_note(ref_system, n_eq, r_eq_g[gi], kin_rates, n_cmp, rx_g, info,
                                        settings.irreversible)
    except Exception as err:
        spectrum_reason = f"near-equilibrium check failed: {type(err).__name__}: {str(err)[:300]}"

    result = {
        "grid": grid, "mobility": mobility, "params": params, "quality": quality, "align_full": align_full,
        "ep_ratio": ep_ratio, "obs_time": obs_time, "obs_temp": obs_temp, "obs_x": obs_x, "paths": paths,
        "t_start": t_start, "lam_start": lam_start, "spectra": spectra, "slow_diff": slow_diff,
        "spectrum_reason": spectrum_reason, "spectrum_note": spectrum_note, "included": included, "eq_T": eq.temperature,
        "irr_share": irr_share,
    }
    return _assemble(gas, rel, sample_index, settings, result, "")


class _Groups:
    """Duplicate groups as physical reactions: representative indices and sums over members."""

    def __init__(self, duplicate_group):
        self.reps, self.inverse = np.unique(duplicate_group, return_inverse=True)
        self.n = self.reps.size
        nr = self.inverse.size
        self._sum = sparse.csr_matrix((np.ones(nr), (np.arange(nr), self.inverse)), shape=(nr, self.n))

    def total(self, a):
        """Sum over the members of each group, (n, nr) -> (n, n_groups)."""
        if self.n == self.inverse.size:
            return np.asarray(a)[:, self.reps]
        return np.asarray(self._sum.T @ np.asarray(a).T).T


def _clip_negative(m, included, metric, notes):
    """Set negative fitted mobilities to zero (a metric must be positive semi-definite) and say so."""
    bad = included & np.isfinite(m) & (m < 0)
    if bad.any():
        notes[metric].append(f"{int(bad.sum())} negative fitted mobilit{'y' if bad.sum() == 1 else 'ies'} "
                             "(reactions whose x q < 0 on the path, e.g. irreversible ones) set to zero")
        m = np.where(bad, 0.0, m)
    return m


def _floored(m, included, floor):
    """Mobilities (mol m-3 s-1) raised to at least ``floor`` times the largest included one.

    A reaction of zero or vanishing mobility leaves the metric semi-definite: its path then stops
    at an equilibrium of its own, or, where mobilities span more than about 1e16 (the onsager
    metric of methane: equilibrium one-way rates of the C2 reactions are 1e-20 of the fastest),
    the slow reactions' fluxes drown in the round-off of the fast ones' and the step size
    collapses. The floor is part of the metric: it is what is stored, fitted, aligned and
    linearized. Measured on gri30 methane-air (1300 K, 1 atm, isolated), onsager: floor 1e-18
    finishes in 6 200 steps (10.6 s), 1e-16 stalls at progress 0.999, 1e-14 finishes in 1 400
    steps (0.56 s) with the same largest path angle (0.668 rad) and time ratios 5 % shorter,
    1e-12 shortens them fivefold.
    """
    m = np.asarray(m, float)
    largest = float(np.max(np.where(included, m, 0.0), initial=0.0))
    return np.where(included, np.maximum(m, floor * largest), m)


#: a slow mode whose onsager rate is further than this (relative) from the kinetics' is explained
SLOW_MODE_TOLERANCE = 0.1


def _slow_mode_note(system, n_eq, mobility, kin_rates, n_cmp, reactions, info, treatment) -> str:
    """One statement on the slow modes where the onsager linearization and the kinetics disagree
    by more than ``SLOW_MODE_TOLERANCE``: which reactions carry each (share of the mode's rate,
    ``spectra.mode_carriers``), marking irreversible ones (given a thermodynamic reverse, or left
    out, in the SEA dynamics). "" where they agree."""
    rates, shares = mode_carriers(system, n_eq, mobility, n_cmp)
    k = min(rates.size, kin_rates.size, n_cmp)
    parts = []
    for i in range(k):
        off = abs(rates[i] - kin_rates[i]) / kin_rates[i]
        if not off > SLOW_MODE_TOLERANCE:
            continue
        order = np.argsort(-shares[i])
        carriers = []
        for j in order[:3]:
            if not shares[i, j] > 0.05:
                break
            r = reactions[j]
            tags = [f"irreversible, {'given a thermodynamic reverse' if treatment == 'reversible' else 'left out'}"
                    ] if not info.reversible[r] else []
            carriers.append(f"#{r} {info.equations[r]} ({shares[i, j]:.0%}{'; ' + ', '.join(tags) if tags else ''})")
        irreversible = any(not info.reversible[reactions[j]] for j in order[:3] if shares[i, j] > 0.05)
        why = ("irreversible reactions carry it, and their reverse in the SEA dynamics is thermodynamic, not the "
               "mechanism's" if irreversible else "no irreversible reaction carries it")
        parts.append(f"slow mode {i + 1} ({kin_rates[i]:.3g} s-1 in the kinetics) is {off:.0%} off in the onsager "
                     f"linearization; {why}; carried by {', '.join(carriers) or 'many reactions'}")
    return "; ".join(parts)


def _equilibrium_potential(gas, reactor, mass):
    """Phi at Cantera's equilibrium of the gas's current state with the reactor's pair held fixed, J/K."""
    pair = {"isolated": "UV", "constant-pressure": "HP", "isothermal": "TP"}[reactor]
    saved = gas.state
    try:
        gas.equilibrate(pair)
        s = mass * gas.entropy_mass
        return s - mass * gas.enthalpy_mass / gas.T if reactor == "isothermal" else s
    finally:
        gas.state = saved


def _assemble(gas, rel, sample_index, settings, res, reason) -> xr.Dataset:
    metrics = list(settings.metrics)
    nmet, nr, ns = len(metrics), gas.n_reactions, gas.n_species
    grid = progress_grid(settings.n_progress, settings.start_progress, settings.end_progress)
    ng = grid.size
    times = np.asarray(rel.time)[sample_index] if rel.time.size else np.zeros(0)
    nt = times.size
    levels = np.asarray(PROGRESS_LEVELS)
    nan = np.nan

    def full(*shape):
        return np.full(shape, nan)

    mob, align, quality = full(nmet, nr), full(nmet, nt), full(nmet)
    sea_t, sea_T, sea_x = full(nmet, ng), full(nmet, ng), full(nmet, ng, ns)
    angle, dT = full(nmet, ng), full(nmet, ng)
    largest, ratio, ep = full(nmet), full(nmet, levels.size), full(nmet)
    slow, wall, steps, trace = full(nmet), full(nmet), full(nmet), full(nmet)
    n_rhs, n_jac = full(nmet), full(nmet)
    e_err, e_raw, u_err, s_drop = full(nmet), full(nmet), full(nmet), full(nmet)
    m_ref, b_arr = full(nr), full(nr)
    obs_t, obs_T = full(ng), full(ng)
    rates_sea, rates_kin = full(settings.n_modes), full(settings.n_modes)
    status = np.array(["skipped"] * nmet, dtype=object)
    reasons = np.array([reason] * nmet, dtype=object)
    included = np.zeros(nr, dtype=np.int8)
    attrs_extra = {}
    irr_share = nan
    if res is not None:
        irr_share = res["irr_share"]
        included = res["included"].astype(np.int8)
        obs_t, obs_T = res["obs_time"], res["obs_temp"]
        rates_sea, rates_kin = res["spectra"]["sea"], res["spectra"]["kinetics"]
        if "m_ref" in res["params"]:
            m_ref, b_arr = res["params"]["m_ref"], res["params"]["b"]
        for i, metric in enumerate(metrics):
            mob[i] = res["mobility"][metric]
            quality[i] = res["quality"][metric]
            align[i] = res["align_full"][metric][sample_index]
            ep[i] = res["ep_ratio"][metric]
            slow[i] = res["slow_diff"][metric]
            p = res["paths"][metric]
            status[i], reasons[i] = p.status, p.reason
            wall[i], steps[i], trace[i] = p.wall, p.steps, p.trace_level
            n_rhs[i], n_jac[i] = p.rhs_evaluations, p.jacobian_evaluations
            e_err[i], e_raw[i], u_err[i], s_drop[i] = (p.element_error, p.element_drift_unprojected,
                                                       p.energy_error, p.entropy_decrease)
            sea_t[i] = res["t_start"] + p.time  # SEA clock starts at the observed start sample
            sea_T[i] = p.temperature
            sea_x[i] = p.mole_fractions
            angle[i] = fisher_rao_angle(p.mole_fractions, res["obs_x"])
            angle[i][~np.isfinite(p.temperature) | ~np.isfinite(res["obs_temp"])] = nan
            dT[i] = p.temperature - res["obs_temp"]
            if np.isfinite(angle[i]).any():
                largest[i] = np.nanmax(angle[i])
            for k, level in enumerate(levels):
                t_sea = _interp_finite(level, grid, sea_t[i])
                t_o = _interp_finite(level, grid, obs_t)
                if (t_o - obs_t[0]) > 0:  # both clocks from the first grid level (start_progress)
                    ratio[i, k] = (t_sea - sea_t[i][0]) / (t_o - obs_t[0])
        if res["spectrum_reason"]:
            attrs_extra["near_equilibrium_reason"] = res["spectrum_reason"]
        if res["spectrum_note"]:
            attrs_extra["near_equilibrium_note"] = res["spectrum_note"]

    def var(dims, data, units, long_name, **attrs):
        return (dims, data, {"units": units, "long_name": long_name, **attrs})

    ds = xr.Dataset(
        {
            "mobility": var(("metric", "reaction"), mob, "mol m-3 s-1",
                            "constant mobility of the steepest-entropy-ascent metric (NaN where not constant)",
                            comment="q = M x with x = A/(RT); members of a duplicate group carry the mobility "
                                    "of the group; NaN for log-mean and fitted-arrhenius (state dependent) and "
                                    "for reactions outside the SEA dynamics"),
            "fit_quality": var(("metric",), quality, "1",
                               "weighted coefficient of determination of q against M x on the observed path"),
            "alignment": var(("metric", "time"), align, "1",
                             "cosine of the angle between observed rates and steepest ascent under the metric",
                             comment="x.q / (sqrt(q.G.q) sqrt(x.M.x)), G = M^-1, over reactions with detailed "
                                     "balance (duplicate groups summed); also the observed entropy production "
                                     "over the largest at equal cost q.G.q"),
            "entropy_production_ratio": var(("metric",), ep, "1",
                                            "entropy produced on the observed path over the largest at equal cost"),
            "sea_time": var(("metric", "sea_progress"), sea_t, "s", "time of the steepest-entropy-ascent path",
                            comment="observed time of the SEA start sample plus the SEA clock"),
            "sea_temperature": var(("metric", "sea_progress"), sea_T, "K",
                                   "temperature of the steepest-entropy-ascent path"),
            "sea_mole_fraction": var(("metric", "sea_progress", "species"), sea_x, "1",
                                     "mole fractions of the steepest-entropy-ascent path"),
            "observed_time": var(("sea_progress",), obs_t, "s", "time at which the observed path reaches the progress"),
            "observed_temperature": var(("sea_progress",), obs_T, "K", "temperature of the observed path"),
            "path_angle": var(("metric", "sea_progress"), angle, "rad",
                              "Fisher-Rao angle between observed and steepest-ascent mole fractions",
                              comment="2 arccos(sum_k sqrt(X_k Y_k)) at equal entropy progress; 0 to pi"),
            "temperature_difference": var(("metric", "sea_progress"), dT, "K",
                                          "steepest-ascent minus observed temperature"),
            "largest_path_angle": var(("metric",), largest, "rad", "largest Fisher-Rao path angle"),
            "time_ratio": var(("metric", "progress_level"), ratio, "1",
                              "steepest-ascent over observed time from the start progress to the level",
                              comment="(t_sea(level) - t_sea(start)) / (t_obs(level) - t_obs(start))"),
            "slow_mode_difference": var(("metric",), slow, "1",
                                        f"largest relative difference of the {N_SLOW_COMPARED} slowest relaxation "
                                        "rates, metric linearised at equilibrium against the kinetics"),
            "relaxation_rates_sea": var(("mode",), rates_sea, "s-1",
                                        "slowest relaxation rates of the onsager steepest-ascent dynamics at equilibrium"),
            "relaxation_rates_kinetics": var(("mode",), rates_kin, "s-1",
                                             "slowest relaxation rates of the kinetics (Cantera reactor Jacobian) "
                                             "at equilibrium"),
            "arrhenius_reference_mobility": var(("reaction",), m_ref, "mol m-3 s-1",
                                                "fitted-arrhenius mobility at the reference temperature",
                                                reference_temperature_K=float(res["eq_T"]) if res else nan),
            "arrhenius_activation_temperature": var(("reaction",), b_arr, "K",
                                                    "fitted-arrhenius activation temperature b_j"),
            "irreversible_entropy_share": var((), irr_share, "1",
                                              "share of the entropy production of irreversible reactions, "
                                              "compared part of the observed path (left out of the alignment)"),
            "sea_reaction_included": var(("reaction",), included, "1",
                                         "1 where the reaction takes part in the steepest-ascent dynamics"),
            "sea_status": var(("metric",), status.astype(str), "1", "status of the steepest-ascent path"),
            "sea_reason": var(("metric",), reasons.astype(str), "1", "why a steepest-ascent path is missing or short"),
            "sea_wall_time": var(("metric",), wall, "s", "wall time of the steepest-ascent path"),
            "sea_steps": var(("metric",), steps, "1", "solver steps of the steepest-ascent path"),
            "sea_rhs_evaluations": var(("metric",), n_rhs, "1",
                                       "right-hand-side evaluations of the steepest-ascent path's integration"),
            "sea_jacobian_evaluations": var(("metric",), n_jac, "1",
                                            "Jacobian evaluations of the steepest-ascent path's integration"),
            "sea_trace_level": var(("metric",), trace, "1",
                                   "amount over total below which the constant mobility was scaled like mass action"),
            "sea_element_error": var(("metric",), e_err, "1", "largest relative element imbalance on the path"),
            "sea_element_drift_unprojected": var(("metric",), e_raw, "1",
                                                 "largest relative element imbalance before projection"),
            "sea_energy_error": var(("metric",), u_err, "1", "largest relative change of U or H on the path"),
            "sea_entropy_decrease": var(("metric",), s_drop, "1",
                                        "largest decrease of the potential between steps over its total rise"),
        },
        coords={
            "metric": ("metric", np.array(metrics, dtype=str), {"long_name": "steepest-entropy-ascent metric"}),
            # positions in this mechanism; the case file's writer maps them to source indices
            "reaction": ("reaction", np.arange(nr)),
            "species": ("species", np.array(gas.species_names, dtype=str)),
            "time": ("time", times, {"units": "s", "long_name": "time of the stored samples"}),
            # not "progress": that is the 0-1 grid of progress.nc; this one starts at start_progress
            "sea_progress": ("sea_progress", grid, {"units": "1", "long_name": "entropy progress lambda"}),
            "mode": ("mode", np.arange(settings.n_modes), {"units": "1", "long_name": "relaxation mode, slowest first"}),
            "progress_level": ("progress_level", levels, {"units": "1", "long_name": "progress level of the time ratios"}),
        },
        attrs={
            "sea_weight": settings.weight, "sea_start_progress": settings.start_progress,
            "sea_irreversible": settings.irreversible, "sea_rtol": settings.rtol, "sea_atol": settings.atol,
            "sea_metric_rtol": settings.metric_rtol, "sea_metric_atol": settings.metric_atol,
            "sea_trace_level": settings.trace_level, "sea_mobility_floor": settings.mobility_floor,
            "sea_skipped_reason": reason,
            **attrs_extra,
        },
    )
    return ds


def _interp_finite(level, grid, values):
    ok = np.isfinite(values)
    if not ok.any() or level < grid[ok][0] or level > grid[ok][-1]:
        return np.nan
    return float(np.interp(level, grid[ok], values[ok]))
