"""numba kernels of :mod:`sigmagrid.sea.compiled` (imported only from there, on first use): the
SEA right-hand side, its Jacobian, the projection onto the element totals, and the BDF loop that
integrates a whole path with them.

Module-level functions with module-level constants, so that numba can cache them on disk. numba
freezes globals into its cache and checks only this file for changes, so the gas constant is
spelled out here rather than imported (``tests/test_sea.py`` checks that it equals
``units.GAS_CONSTANT``).
"""

import numba
import numpy as np

R = 6.02214076e23 * 1.380649e-23  # J/(mol K), N_A k (exact), as units.GAS_CONSTANT


@numba.njit(cache=True)
def species_thermo(T, coef, h_rt, s_r, cp_r):
    """h/RT, s/R and cp/R of every species at T (K), from the NASA7 polynomials."""
    lnT = np.log(T)
    for k in range(coef.shape[0]):
        o = 8 if T <= coef[k, 0] else 1
        a0, a1, a2, a3, a4, a5, a6 = (coef[k, o], coef[k, o + 1], coef[k, o + 2], coef[k, o + 3],
                                      coef[k, o + 4], coef[k, o + 5], coef[k, o + 6])
        cp_r[k] = a0 + T * (a1 + T * (a2 + T * (a3 + T * a4)))
        h_rt[k] = a0 + T * (a1 / 2 + T * (a2 / 3 + T * (a3 / 4 + T * a4 / 5))) + a5 / T
        s_r[k] = a0 * lnT + T * (a1 + T * (a2 / 2 + T * (a3 / 3 + T * a4 / 4))) + a6


@numba.njit(cache=True)
def temperature(n, coef, reactor, T_guess, energy0, h_rt, s_r, cp_r):
    """T (K) at which amounts n (mol) hold the energy energy0 (J: U isolated, H at constant
    pressure), by Newton's iteration as ``_System._set``; species properties at T left in h_rt,
    s_r, cp_r. -1 if it does not converge. Isothermal (reactor 2): T_guess."""
    T = T_guess
    if reactor == 2:
        species_thermo(T, coef, h_rt, s_r, cp_r)
        return T
    for _ in range(50):
        species_thermo(T, coef, h_rt, s_r, cp_r)
        e = 0.0
        c = 0.0
        for k in range(n.size):
            if reactor == 0:
                e += n[k] * (h_rt[k] - 1.0)
                c += n[k] * (cp_r[k] - 1.0)
            else:
                e += n[k] * h_rt[k]
                c += n[k] * cp_r[k]
        dT = -(e * R * T - energy0) / (c * R)
        if abs(dT) < 1e-14 * T:
            return T
        T = min(max(T + max(min(dT, 0.5 * T), -0.5 * T), 100.0), 2e4)
        if abs(dT) < 1e-10 * T:  # quadratic convergence: this step took T to round-off
            species_thermo(T, coef, h_rt, s_r, cp_r)
            return T
    return -1.0


@numba.njit(cache=True)
def settle(n, active, E, target, coef, p_ref, reactor, volume, pressure, T_guess, energy0, props):
    """Project amounts n (mol, in place) onto E n[active] = target, solve the temperature, and
    write [T (K), potential (J/K), held energy (J)] into props. Returns 1, or -1 where the
    projection's linear system is singular or no temperature meets the constraint.

    The projection is ``_Projector``'s: n_k -> n_k exp(sum_e a_ek lam_e), Newton on lam.
    The potential and the held energy are Cantera's ideal-gas mixture formulas: S = sum n_k
    (s_k - R ln(max(X_k, 1e-300)) - R ln(P/p_ref)), U = sum n_k (h_k - RT), H = sum n_k h_k.
    """
    ne, na = E.shape
    x = np.empty(na)
    for i in range(na):
        x[i] = n[active[i]]
    A = np.empty((ne, ne))
    rhs_ = np.empty(ne)
    for _ in range(20):
        done = True
        for e in range(ne):
            r = -target[e]
            for i in range(na):
                r += E[e, i] * x[i]
            rhs_[e] = -r
            if abs(r) > 4e-16 * abs(target[e]):
                done = False
        if done:
            break
        for e in range(ne):
            for f in range(ne):
                a = 0.0
                for i in range(na):
                    a += E[e, i] * x[i] * E[f, i]
                A[e, f] = a
        # Gaussian elimination with partial pivoting on the small (elements x elements) system
        for c in range(ne):
            p = c
            for r in range(c + 1, ne):
                if abs(A[r, c]) > abs(A[p, c]):
                    p = r
            if not abs(A[p, c]) > 0.0:
                return -1.0
            if p != c:
                for f in range(ne):
                    A[c, f], A[p, f] = A[p, f], A[c, f]
                rhs_[c], rhs_[p] = rhs_[p], rhs_[c]
            for r in range(c + 1, ne):
                w = A[r, c] / A[c, c]
                for f in range(c, ne):
                    A[r, f] -= w * A[c, f]
                rhs_[r] -= w * rhs_[c]
        lam = np.empty(ne)
        for c in range(ne - 1, -1, -1):
            v = rhs_[c]
            for f in range(c + 1, ne):
                v -= A[c, f] * lam[f]
            lam[c] = v / A[c, c]
        for i in range(na):
            d = 0.0
            for e in range(ne):
                d += E[e, i] * lam[e]
            x[i] *= np.exp(d)
    for i in range(na):
        n[active[i]] = x[i]
    ns = n.size
    h_rt = np.empty(ns)
    s_r = np.empty(ns)
    cp_r = np.empty(ns)
    T = temperature(n, coef, reactor, T_guess, energy0, h_rt, s_r, cp_r)
    if T < 0:
        return -1.0
    total = 0.0
    for k in range(ns):
        total += n[k]
    V = volume if reactor == 0 else total * R * T / pressure
    lnp = np.log(total * R * T / V / p_ref)
    S = 0.0
    H = 0.0
    for k in range(ns):
        xk = n[k] / total
        S += n[k] * (s_r[k] - np.log(xk if xk > 1e-300 else 1e-300) - lnp)
        H += n[k] * h_rt[k]
    S *= R
    H *= R * T
    props[0] = T
    props[1] = S - H / T if reactor == 2 else S
    props[2] = H - total * R * T if reactor == 0 else H
    return 1.0


@numba.njit(cache=True)
def fill_amounts(z, n_full, active, n_ref, n):
    """Amounts n (mol, all species) of the log amounts z of the active ones, at least 1e-300 mol
    (as dynamics._System.amounts: an exact zero would make N/(N + eps) and V nu q / N 0/0)."""
    for k in range(n_full.size):
        n[k] = n_full[k]
    for i in range(active.size):
        v = n_ref * np.exp(z[i])
        n[active[i]] = v if v > 1e-300 else 1e-300


@numba.njit(cache=True)
def evaluate(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
             nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref):
    """The state of log amounts z and the SEA rates there.

    eps: (active species,) mol, the trace amounts of the state factor (all 0: none).
    nu_ptr, nu_species, nu_coef: the net stoichiometry of the SEA reactions by reaction (CSR,
    full species index); side_rows/side_cols: (reaction, active species) pairs of the reactants
    (rows < nr) and of the products (rows >= nr). kind: 0 constant, 1 Arrhenius mobility.

    Returns (T K or -1 where no temperature meets the constraint, V m3, n mol, h/RT, cp/R,
    x = A/RT, q mol m-3 s-1, mobility mol m-3 s-1, trace factor g, both sides' factors, the
    onsets, mu/RT of every species).
    """
    ns = n_full.size
    na = active.size
    n = np.empty(ns)
    fill_amounts(z, n_full, active, n_ref, n)
    total = 0.0
    for k in range(ns):
        total += n[k]
    h_rt = np.empty(ns)
    s_r = np.empty(ns)
    cp_r = np.empty(ns)
    x = np.zeros(nr)
    q = np.zeros(nr)
    mob = np.zeros(nr)
    g = np.ones(nr)
    sides = np.ones(2 * nr)
    onset = np.zeros(nr)
    mu = np.zeros(ns)
    T = temperature(n, coef, reactor, T_guess, energy0, h_rt, s_r, cp_r)
    if T < 0:
        return -1.0, 0.0, n, h_rt, cp_r, x, q, mob, g, sides, onset, mu
    V = volume if reactor == 0 else total * R * T / pressure
    P = total * R * T / V
    # mu_k / RT as Cantera's ideal gas: mole fractions clipped at 1e-300 in the logarithm
    lnp = np.log(P / p_ref)
    for k in range(ns):
        xk = n[k] / total
        mu[k] = h_rt[k] - s_r[k] + lnp + np.log(xk if xk > 1e-300 else 1e-300)
    # trace factors of each side, prod N/(N + eps): products, not sums of logarithms (a
    # logarithm per (reaction, species) pair was most of this function's time)
    trace = eps.max() > 0.0
    if trace:
        ratio = np.empty(na)
        for i in range(na):
            v = n[active[i]]
            ratio[i] = v / (v + eps[i])
        for p in range(side_rows.size):
            sides[side_rows[p]] *= ratio[side_cols[p]]
    for j in range(nr):
        xj = 0.0
        for p in range(nu_ptr[j], nu_ptr[j + 1]):
            xj -= nu_coef[p] * mu[nu_species[p]]
        x[j] = xj
        mob[j] = m[j] if kind == 0 else m[j] * np.exp(-b[j] * (1.0 / T - 1.0 / t_ref))
        if trace:
            gr = sides[j]
            gp = sides[nr + j]
            both = gr * gp
            u = abs(xj)
            # exp(-1/u) is exactly 0 below u = 1/746 (IEEE exp underflows there): skip it
            a_j = np.exp(-1.0 / u) if u > 1.0 / 746.0 else 0.0
            onset[j] = a_j
            g[j] = both + ((gr if xj > 0 else gp) - both) * a_j
        q[j] = mob[j] * g[j] * xj
    return T, V, n, h_rt, cp_r, x, q, mob, g, sides, onset, mu


@numba.njit(cache=True)
def _log_rates(n, active, V, q, nu_ptr, nu_species, nu_coef, factor, out):
    """factor V nu q / N of the active species into ``out``: dz/dt (factor 1) or dz/ds (tau)."""
    flux = np.zeros(n.size)
    for j in range(nu_ptr.size - 1):
        for p in range(nu_ptr[j], nu_ptr[j + 1]):
            flux[nu_species[p]] += nu_coef[p] * q[j]
    for i in range(active.size):
        k = active[i]
        out[i] = factor * V * flux[k] / n[k]


@numba.njit(cache=True)
def rhs(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref, out):
    """dz/dt = V nu q / N (1/s) into ``out``; returns T (K), or -1 where no temperature meets the
    constraint. Arguments as :func:`evaluate`."""
    T, V, n, h_rt, cp_r, x, q, mob, g, sides, onset, mu = evaluate(
        z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref)
    if T < 0:
        return -1.0
    _log_rates(n, active, V, q, nu_ptr, nu_species, nu_coef, 1.0, out)
    return T


@numba.njit(cache=True)
def jacobian(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
             nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref,
             active_pos, nu_sum, J):
    """d(dz/dt)/dz into J (na x na), the terms of ``_System.jac`` for the constant and Arrhenius
    metrics; returns T (K), or -1. active_pos: index of each species among the active ones (-1 if
    not); nu_sum: sum of each reaction's net coefficients. Other arguments as :func:`evaluate`."""
    return _time_jacobian(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
                          nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref,
                          active_pos, nu_sum, J)[0]


@numba.njit(cache=True)
def _time_jacobian(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
                   nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref,
                   active_pos, nu_sum, J):
    """:func:`jacobian`, returning with T (K, or -1) what the progress clock needs besides:
    V (m3), n (mol), h/RT, mu/RT, x, q (mol m-3 s-1), dT/dz (K) and dz/dt (1/s)."""
    T, V, n, h_rt, cp_r, x, q, mob, g, sides, onset, mu = evaluate(
        z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref)
    dT = np.zeros(active.size)
    f = np.zeros(active.size)
    if T < 0:
        return -1.0, V, n, h_rt, mu, x, q, dT, f
    trace = eps.max() > 0.0
    ns = n.size
    na = active.size
    total = 0.0
    for k in range(ns):
        total += n[k]
    # constraint derivatives dT/dz_i (K) and d ln V/dz_i (1), as _System._constraint_derivatives
    dlnv = np.zeros(na)
    if reactor != 2:
        c = 0.0
        for k in range(ns):
            c += n[k] * (cp_r[k] - 1.0 if reactor == 0 else cp_r[k])
        c *= R
        for i in range(na):
            k = active[i]
            dT[i] = -n[k] * (h_rt[k] - 1.0 if reactor == 0 else h_rt[k]) * R * T / c
    if reactor != 0:
        for i in range(na):
            dlnv[i] = n[active[i]] / total + dT[i] / T
    for i in range(na):
        for k in range(na):
            J[i, k] = 0.0
    af_all = np.zeros(nr)  # the onsets a(x), a(-x) of each reaction, for the side terms below
    ab_all = np.zeros(nr)
    col_v = np.zeros(na)  # nu (a nu_sum): the coefficient of dlnv^T
    col_t = np.zeros(na)  # nu dq/dT: the coefficient of dT^T
    flux = np.zeros(na)
    for j in range(nr):
        xj = x[j]
        mj = mob[j]
        du = 0.0  # dx_j/dT at fixed concentrations: sum nu u/RT, over T (1/K)
        for p in range(nu_ptr[j], nu_ptr[j + 1]):
            du += nu_coef[p] * (h_rt[nu_species[p]] - 1.0)
        du /= T
        if trace:
            gr = sides[j]
            gp = sides[nr + j]
            af = onset[j] if xj > 0 else 0.0  # a(x) and a(-x) as evaluate() computed them
            ab = onset[j] if xj < 0 else 0.0
            af_all[j] = af
            ab_all[j] = ab
            slope_f = af / (xj * xj) if xj > 0 else 0.0
            slope_b = ab / (xj * xj) if xj < 0 else 0.0
            a = mj * (g[j] + xj * (gr * (1.0 - gp) * slope_f - gp * (1.0 - gr) * slope_b))  # dq/dx
        else:
            a = mj
        dq_dT = a * du
        if kind == 1:
            dq_dT += xj * mj * g[j] * b[j] / (T * T)
        for p in range(nu_ptr[j], nu_ptr[j + 1]):
            i = active_pos[nu_species[p]]
            if i < 0:
                continue
            nij = nu_coef[p]
            flux[i] += nij * q[j]
            col_v[i] += nij * a * nu_sum[j]
            col_t[i] += nij * dq_dT
            for p2 in range(nu_ptr[j], nu_ptr[j + 1]):  # -nu diag(a) nu^T
                k = active_pos[nu_species[p2]]
                if k >= 0:
                    J[i, k] -= nij * a * nu_coef[p2]
    if trace:
        # nu diag(m x dg/dln g_r) reac^T + nu diag(m x dg/dln g_p) prod^T, each column k scaled by
        # d ln(N_k/(N_k + eps))/dz_k, one (reaction, species) side pair at a time
        slope = np.empty(na)  # d ln(N_k/(N_k + eps)) / d z_k
        for kcol in range(na):
            r = eps[kcol] / n[active[kcol]]
            slope[kcol] = r / (1.0 + r)
        w_side = np.empty(2 * nr)  # m x dg/dln g_r (reactant rows) and m x dg/dln g_p (product rows)
        for j in range(nr):
            xj = x[j]
            gr = sides[j]
            gp = sides[nr + j]
            af = af_all[j]
            ab = ab_all[j]
            w_side[j] = mob[j] * xj * gr * (gp + (1.0 - gp) * af - gp * ab)
            w_side[nr + j] = mob[j] * xj * gp * (gr - gr * af + (1.0 - gr) * ab)
        for p in range(side_rows.size):
            row = side_rows[p]
            j = row if row < nr else row - nr
            kcol = side_cols[p]
            w = w_side[row] * slope[kcol]
            for p2 in range(nu_ptr[j], nu_ptr[j + 1]):
                i = active_pos[nu_species[p2]]
                if i >= 0:
                    J[i, kcol] += nu_coef[p2] * w
    for i in range(na):
        n_i = n[active[i]]
        for k in range(na):
            J[i, k] = V * (J[i, k] + col_v[i] * dlnv[k] + col_t[i] * dT[k] + flux[i] * dlnv[k]) / n_i
        f[i] = V * flux[i] / n_i
        J[i, i] -= f[i]
    return T, V, n, h_rt, mu, x, q, dT, f


# ----------------------------------------------------------------------------------------------
# The progress clock. A metric's own time scale is arbitrary (an onsager path of methane takes
# ages longer than the kinetics), so the paths are integrated in s = -ln(1 - lambda) instead of
# time: dz/ds = tau dz/dt with tau = (Phi_eq - Phi)/(dPhi/dt) (s), the entropy still to be
# produced over the rate it is produced at. Far from equilibrium s ~ lambda; near it the path
# relaxes along its slowest mode, Phi_eq - Phi ~ exp(-2 k t), so s ~ 2 k t and dz/ds stays smooth.
# Time is recovered as the integral of tau ds.


@numba.njit(cache=True)
def potential(n, h_rt, mu, reactor):
    """Phi (J/K) of amounts n (mol): S = R sum n (h/RT - mu/RT) in the adiabatic reactors (the
    ideal-gas entropy of ``settle``), S - H/T = -R sum n mu/RT in the isothermal one."""
    phi = 0.0
    for k in range(n.size):
        phi += n[k] * (-mu[k] if reactor == 2 else h_rt[k] - mu[k])
    return R * phi


@numba.njit(cache=True)
def entropy_rate(V, x, q):
    """dPhi/dt = V sum_j A_j q_j / T = R V sum_j x_j q_j (W/K)."""
    s = 0.0
    for j in range(x.size):
        s += x[j] * q[j]
    return R * V * s


@numba.njit(cache=True)
def clock_rhs(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
              nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref, phi_eq, out):
    """dz/ds = tau dz/dt into ``out``; returns (T K, tau s), T = -1 where the state has no value
    (no temperature meets the constraint, or no entropy left to produce or none produced)."""
    T, V, n, h_rt, cp_r, x, q, mob, g, sides, onset, mu = evaluate(
        z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref)
    if T < 0:
        return -1.0, 0.0
    deficit = phi_eq - potential(n, h_rt, mu, reactor)
    rate = entropy_rate(V, x, q)
    if not (deficit > 0.0 and rate > 0.0):
        return -1.0, 0.0
    tau = deficit / rate
    _log_rates(n, active, V, q, nu_ptr, nu_species, nu_coef, tau, out)
    return T, tau


@numba.njit(cache=True)
def clock_transform(f, J, n, w, h_rt, dT, T, n_total, reactor, deficit, rate, JF):
    """Jacobian of dz/ds = tau f from the time Jacobian J = df/dz, into JF; returns tau (s).

    f : (na,) dz/dt (1/s); n, w, h_rt : (na,) amounts (mol), n mu/RT (mol) and h/RT of the
    active species; dT : (na,) dT/dz (K); deficit = Phi_eq - Phi (J/K); rate = dPhi/dt (W/K).
    With grad Phi = -R w (dPhi/dN_k = -mu_k/T on every reactor's constraint, N_k d/dN_k = d/dz_k),
    rate = grad Phi . f, so grad rate = -R (Hess f + J^T w), where (Hess f)_k = sum_i f_i d w_i/dz_k
    on the constraint: w_k f_k + n_k f_k, plus (1 - h_i) dT_k/T terms at fixed volume and
    -n_k/N and -h_i dT_k/T terms at fixed pressure (d ln P, d ln X and d(g/RT)/dT = -h/(RT^2)).
    Then JF = tau J + f grad(tau)^T with grad tau = (R w - tau grad rate)/rate.
    """
    na = f.size
    tau = deficit / rate
    s_n = 0.0  # sum n f
    s_h = 0.0  # sum n f h/RT
    for i in range(na):
        s_n += n[i] * f[i]
        s_h += n[i] * f[i] * h_rt[i]
    grad = np.empty(na)
    for k in range(na):
        hess = (w[k] + n[k]) * f[k]
        if reactor == 0:
            hess += (s_n - s_h) * dT[k] / T
        else:
            hess += -s_n * n[k] / n_total - s_h * dT[k] / T
        wj = 0.0
        for i in range(na):
            wj += w[i] * J[i, k]
        grad_rate = -R * (hess + wj)
        grad[k] = (R * w[k] - tau * grad_rate) / rate
    for i in range(na):
        for k in range(na):
            JF[i, k] = tau * J[i, k] + f[i] * grad[k]
    return tau


@numba.njit(cache=True)
def clock_jacobian(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
                   nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref,
                   active_pos, nu_sum, phi_eq, J):
    """d(dz/ds)/dz into J (see :func:`clock_transform`); returns T (K), or -1."""
    na = active.size
    Jt = np.empty((na, na))
    T, V, n, h_rt, mu, x, q, dT, f = _time_jacobian(
        z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref, active_pos, nu_sum, Jt)
    if T < 0:
        return -1.0
    deficit = phi_eq - potential(n, h_rt, mu, reactor)
    rate = entropy_rate(V, x, q)
    if not (deficit > 0.0 and rate > 0.0):
        return -1.0
    total = 0.0
    for k in range(n.size):
        total += n[k]
    na_n = np.empty(na)
    w = np.empty(na)
    h_a = np.empty(na)
    for i in range(na):
        k = active[i]
        na_n[i] = n[k]
        w[i] = n[k] * mu[k]
        h_a[i] = h_rt[k]
    clock_transform(f, Jt, na_n, w, h_a, dT, T, total, reactor, deficit, rate, J)
    return T


# ----------------------------------------------------------------------------------------------
# The whole SEA path of a constant or Arrhenius metric, compiled: scipy's BDF (variable order, NDF
# formulas, quasi-constant step) with the changes of ``dynamics._sea_path`` (the globalized
# Newton iteration, a fresh Jacobian per accepted step, the projection onto the element totals
# with the history shifted, the halving of steps that lower the entropy). Through scipy each step
# cost about 0.25 ms of Python on top of the kernels above; here the kernels are what is left.
# Kept in this file, not a module of its own: numba checks only the file of a cached function
# for changes, so a caller in another file would keep a stale copy of these kernels.

MAX_ORDER = 5
NEWTON_MAXITER = 4
MIN_FACTOR = 0.2
MAX_FACTOR = 10.0

# returned codes of ``bdf_path``
STEP_CHUNK = 0  # the chunk of steps is done: Python checks the wall budget and calls again
STEP_DONE = 1  # the progress reached its stop level
STEP_TIME = 2  # the time limit was passed
STEP_BUDGET = 3  # the step budget is used
STEP_TOO_SMALL = 4  # the step fell below the resolution of the clock (Python restarts the clock)
STEP_FAILED = 5  # a step's state could not be projected onto the element totals (or left the range)

# indices into the integer and float state arrays of ``bdf_path``
I_ORDER, I_EQUAL, I_HARD, I_LU, I_NJEV, I_SEEN, I_RETRIES, I_RHS, I_JAC, I_STEPS, I_HAVE_LAST = range(11)
F_T, F_TOLD, F_H, F_TGUESS, F_PHI, F_UERR, F_RAW, F_DROP, F_PHI_EQ, F_TAU = range(10)
N_FLOAT_STATE = 10


@numba.njit(cache=True)
def _rhs(z, H, L, fs, out):
    """clock_rhs() with the kernel arguments packed: H the head, L the tail of ``CompiledRates``;
    the temperature guess in fs[F_TGUESS] and tau in fs[F_TAU] are updated. False where the state
    has no value."""
    if not z.max() < 50.0:  # as dynamics._System.amounts: a trial state far off
        return False
    T, tau = clock_rhs(z, H[0], H[1], H[2], H[3], H[4], H[5], H[6], H[7], fs[F_TGUESS], L[0], L[1], L[2], L[3],
                       L[4], L[5], L[6], L[7], L[8], L[9], L[10], L[11], fs[F_PHI_EQ], out)
    if not T > 0:
        return False
    fs[F_TGUESS] = T
    fs[F_TAU] = tau
    for i in range(out.size):
        if not np.isfinite(out[i]):
            return False
    return True


@numba.njit(cache=True)
def _jac(z, H, L, active_pos, nu_sum, fs, J):
    if not z.max() < 50.0:
        return False
    T = clock_jacobian(z, H[0], H[1], H[2], H[3], H[4], H[5], H[6], H[7], fs[F_TGUESS], L[0], L[1], L[2], L[3],
                       L[4], L[5], L[6], L[7], L[8], L[9], L[10], L[11], active_pos, nu_sum, fs[F_PHI_EQ], J)
    if not T > 0:
        return False
    fs[F_TGUESS] = T
    return True


@numba.njit(cache=True)
def lu_factor(A, piv):
    """LU factorization with partial pivoting of A in place (LAPACK getrf's layout: unit lower
    triangle below the diagonal, rows swapped whole). False if a pivot is zero or not finite.

    The pivot row is copied to a buffer before the elimination: read from A itself, the update
    loop could alias its own target and LLVM left it scalar. The update indexes A directly: a row
    view (``A[r]``) per row costs numba an atomic reference-count increment and decrement each
    time, which made a 52 x 52 factorization 21 us instead of 9 us (2026-12-03; the same results
    to the bit)."""
    n = A.shape[0]
    pivot_row = np.empty(n)
    for c in range(n):
        p = c
        big = abs(A[c, c])
        for r in range(c + 1, n):
            v = abs(A[r, c])
            if v > big:
                big = v
                p = r
        piv[c] = p
        if not (big > 0.0 and big < np.inf):
            return False
        if p != c:
            for f in range(n):
                A[c, f], A[p, f] = A[p, f], A[c, f]
        inv = 1.0 / A[c, c]
        m = n - c - 1
        for f in range(m):
            pivot_row[f] = A[c, c + 1 + f]
        for r in range(c + 1, n):
            w = A[r, c] * inv
            A[r, c] = w
            if w != 0.0:
                for f in range(m):
                    A[r, c + 1 + f] -= w * pivot_row[f]
    return True


@numba.njit(cache=True)
def lu_solve(A, piv, b, x):
    """Solve with the factors of :func:`lu_factor`: x = A^-1 b."""
    n = b.size
    for i in range(n):
        x[i] = b[i]
    for c in range(n):
        p = piv[c]
        if p != c:
            x[c], x[p] = x[p], x[c]
    for r in range(n):
        v = x[r]
        for c in range(r):
            v -= A[r, c] * x[c]
        x[r] = v
    for r in range(n - 1, -1, -1):
        v = x[r]
        for c in range(r + 1, n):
            v -= A[r, c] * x[c]
        x[r] = v / A[r, r]


@numba.njit(cache=True)
def _rms(v, scale):
    s = 0.0
    for i in range(v.size):
        w = v[i] / scale[i]
        s += w * w
    return np.sqrt(s / v.size)


@numba.njit(cache=True)
def change_D(D, order, factor):
    """scipy's ``change_D``: the differences array for a step changed by ``factor``."""
    k = order + 1
    R = np.zeros((k, k))
    U = np.zeros((k, k))
    for which in range(2):
        f = factor if which == 0 else 1.0
        M = np.zeros((k, k))
        for j in range(k):
            M[0, j] = 1.0
        for i in range(1, k):
            for j in range(1, k):
                M[i, j] = (i - 1 - f * j) / i
        for j in range(k):  # cumulative product down each column
            for i in range(1, k):
                M[i, j] *= M[i - 1, j]
        if which == 0:
            R[:, :] = M
        else:
            U[:, :] = M
    RU = R @ U
    n = D.shape[1]
    new = np.zeros((k, n))
    for i in range(k):
        for j in range(k):
            w = RU[j, i]
            if w != 0.0:
                for c in range(n):
                    new[i, c] += w * D[j, c]
    D[:k] = new


@numba.njit(cache=True)
def _simplified_newton(H, L, fs, y_predict, c, psi, LU, piv, scale, tol, y, d, f, dy, work, y_start):
    """scipy's ``solve_bdf_system``, started from y_start (scipy: the predictor): at most
    NEWTON_MAXITER iterations on one LU. Returns the iteration count, negative if it did not
    converge; y and d (y - y_predict) hold the result."""
    n = y.size
    for i in range(n):
        y[i] = y_start[i]
        d[i] = y_start[i] - y_predict[i]
    dy_norm_old = -1.0
    for k in range(NEWTON_MAXITER):
        if not _rhs(y, H, L, fs, f):
            return -(k + 1)
        for i in range(n):
            work[i] = c * f[i] - psi[i] - d[i]
        lu_solve(LU, piv, work, dy)
        dy_norm = _rms(dy, scale)
        if not np.isfinite(dy_norm):
            return -(k + 1)
        rate = -1.0
        if dy_norm_old >= 0.0:
            rate = dy_norm / dy_norm_old
            if rate >= 1.0 or rate ** (NEWTON_MAXITER - k) / (1.0 - rate) * dy_norm > tol:
                return -(k + 1)
        for i in range(n):
            y[i] += dy[i]
            d[i] += dy[i]
        if dy_norm == 0.0 or (rate >= 0.0 and rate / (1.0 - rate) * dy_norm < tol):
            return k + 1
        dy_norm_old = dy_norm
    return -NEWTON_MAXITER


@numba.njit(cache=True)
def _full_newton(H, L, active_pos, nu_sum, fs, istate, y_predict, c, psi, scale, tol, max_iter, max_log_step,
                 y, d, last_J, A, piv, f, r, dy, y_try, d_try, f_try):
    """``dynamics._GlobalNewton._iterate``: full Newton iterations with steps capped to
    max_log_step in ln N and an Armijo line search on the scaled residual. Returns the iteration
    count reported to BDF, or -1; last_J holds the Jacobian of its last iteration, and
    istate[I_HAVE_LAST] says whether it computed one (as ``_GlobalNewton.last_jac``)."""
    n = y.size
    istate[I_HAVE_LAST] = 0
    for i in range(n):
        y[i] = y_predict[i]
        d[i] = 0.0
    istate[I_RHS] += 1
    if not _rhs(y, H, L, fs, f):
        return -1
    for i in range(n):
        r[i] = c * f[i] - psi[i] - d[i]
    rn = _rms(r, scale)
    for k in range(max_iter):
        if not _jac(y, H, L, active_pos, nu_sum, fs, last_J):
            return -1
        istate[I_JAC] += 1
        istate[I_HAVE_LAST] = 1
        for i in range(n):
            for j in range(n):
                A[i, j] = -c * last_J[i, j]
            A[i, i] += 1.0
        if not lu_factor(A, piv):
            return -1
        lu_solve(A, piv, r, dy)
        big = 0.0
        for i in range(n):
            v = abs(dy[i])
            if not np.isfinite(v):
                return -1
            if v > big:
                big = v
        alpha = min(1.0, max_log_step / big) if big > 0 else 1.0
        while True:
            for i in range(n):
                y_try[i] = y[i] + alpha * dy[i]
            ok = _rhs(y_try, H, L, fs, f_try)
            istate[I_RHS] += 1
            if ok:
                for i in range(n):
                    d_try[i] = d[i] + alpha * dy[i]
                    r[i] = c * f_try[i] - psi[i] - d_try[i]  # r is overwritten only if accepted below
                rn_try = _rms(r, scale)
                if rn_try <= (1.0 - 1e-4 * alpha) * rn:
                    break
            alpha *= 0.5
            if alpha < 1e-4:
                return -1
        for i in range(n):
            y[i] = y_try[i]
            d[i] = d_try[i]
        rn = rn_try
        if (alpha == 1.0 and _rms(dy, scale) < 0.1 * tol) or rn < 1e-3 * tol:
            return min(k + 1, NEWTON_MAXITER)
    return -1


@numba.njit(cache=True)
def bdf_start(z, H, L, active_pos, nu_sum, rtol, atol, fs, istate, D, J, yv):
    """A fresh BDF at clock zero from z, as scipy's ``BDF.__init__`` (initial step by
    ``select_initial_step``: Hairer, Norsett and Wanner, Solving ODEs I, sec. II.4). False where
    the start state has no right-hand side or Jacobian."""
    n = z.size
    f0 = np.empty(n)
    if not _rhs(z, H, L, fs, f0):
        return False
    scale = np.empty(n)
    for i in range(n):
        scale[i] = atol + abs(z[i]) * rtol
    d0 = _rms(z, scale)
    d1 = _rms(f0, scale)
    h0 = 1e-6 if (d0 < 1e-5 or d1 < 1e-5) else 0.01 * d0 / d1
    y1 = z + h0 * f0
    f1 = np.empty(n)
    if not _rhs(y1, H, L, fs, f1):
        return False
    d2 = _rms(f1 - f0, scale) / h0
    if d1 <= 1e-15 and d2 <= 1e-15:
        h1 = max(1e-6, h0 * 1e-3)
    else:
        h1 = (0.01 / max(d1, d2)) ** 0.5
    h_abs = min(100 * h0, h1)
    if not _jac(z, H, L, active_pos, nu_sum, fs, J):
        return False
    D[:, :] = 0.0
    D[0] = z
    D[1] = f0 * h_abs
    yv[:] = z
    fs[F_T] = 0.0
    fs[F_TOLD] = np.nan
    fs[F_H] = h_abs
    istate[I_ORDER] = 1
    istate[I_EQUAL] = 0
    istate[I_LU] = 0
    istate[I_NJEV] = 1
    istate[I_SEEN] = -1  # the first solve after a start counts as on a fresh Jacobian
    istate[I_RHS] += 2
    istate[I_JAC] += 1
    return True


@numba.njit(cache=True)
def bdf_path(H, L, active_pos, nu_sum, E, target, elements, target_full, e_scale, alpha, gamma, error_const,
             rtol, atol, newton_tol, lam_start, phi_start, drive, lam_stop, offset, t_end, max_steps, u0,
             drop_tol, drop_retries, hard_steps, max_iter, max_log_step, global_newton, fresh_jacobian, still_start,
             fs, istate, D, yv, J, LU, piv, rec_t, rec_told, rec_h, rec_order, rec_D, rec_lam, rec_tau):
    """Steps of one SEA path until a stop (the codes STEP_*), at most rec_t.size accepted steps per
    call. The clock is s = -ln(1 - lambda) from the start (see :func:`clock_rhs`). The state (fs,
    istate, D, yv, J, LU, piv) carries over between calls; each accepted step is recorded (clock,
    its start, BDF's step and order and differences, the progress, tau s at the step's end) for
    the dense output and the time. ``dynamics._sea_path`` documents the choices; this mirrors it
    line by line."""
    n = yv.size
    active = H[1]
    n_full = H[0]
    n_ref = H[2]
    coef, p_ref, reactor, volume, pressure, energy0 = H[3], H[4], H[5], H[6], H[7], L[0]
    y_predict = np.empty(n)
    scale = np.empty(n)
    psi = np.empty(n)
    y_new = np.empty(n)
    d = np.empty(n)
    f = np.empty(n)
    dy = np.empty(n)
    work = np.empty(n)
    y_try = np.empty(n)
    d_try = np.empty(n)
    f_try = np.empty(n)
    last_J = np.empty((n, n))
    A = np.empty((n, n))
    piv2 = np.empty(n, np.int64)
    b_D = np.empty_like(D)
    b_y = np.empty(n)
    b_J = np.empty((n, n))
    props = np.empty(3)
    nf = n_full.size
    amounts = np.empty(nf)
    nrec = 0
    while nrec < rec_t.size:
        # what the step changes, to take it again at half the size (dynamics._solver_state)
        b_t, b_told, b_h, b_order = fs[F_T], fs[F_TOLD], fs[F_H], istate[I_ORDER]
        b_D[:, :] = D
        b_y[:] = yv
        b_J[:, :] = J
        istate[I_HAVE_LAST] = 0
        # ---- scipy's BDF._step_impl, with dynamics._GlobalNewton._solve as its Newton solver
        t = fs[F_T]
        order = istate[I_ORDER]
        min_step = 10.0 * abs(np.nextafter(t, np.inf) - t)
        h_abs = fs[F_H]
        if h_abs < min_step:
            change_D(D, order, min_step / h_abs)
            h_abs = min_step
            istate[I_EQUAL] = 0
        current_jac = False
        accepted = False
        n_iter = 0
        t_new = t
        while not accepted:
            if h_abs < min_step:
                istate[I_STEPS] += 1
                return STEP_TOO_SMALL, nrec
            t_new = t + h_abs
            h = t_new - t
            h_abs = abs(h)
            for i in range(n):
                s = 0.0
                for j in range(order + 1):
                    s += D[j, i]
                y_predict[i] = s
                scale[i] = atol + rtol * abs(s)
                p = 0.0
                for j in range(1, order + 1):
                    p += D[j, i] * gamma[j]
                psi[i] = p / alpha[order]
            c = h / alpha[order]
            converged = False
            while not converged:
                if istate[I_LU] == 0:
                    for i in range(n):
                        for j in range(n):
                            LU[i, j] = -c * J[i, j]
                        LU[i, i] += 1.0
                    istate[I_LU] = 1 if lu_factor(LU, piv) else -1
                fresh = istate[I_NJEV] != istate[I_SEEN]
                istate[I_SEEN] = istate[I_NJEV]
                done = False
                if global_newton and istate[I_HARD] > 0 and not fresh:  # a hard stretch: full iteration first
                    k = _full_newton(H, L, active_pos, nu_sum, fs, istate, y_predict, c, psi, scale, newton_tol,
                                     max_iter, max_log_step, y_new, d, last_J, A, piv2, f, work, dy, y_try,
                                     d_try, f_try)
                    if k > 0:
                        converged, n_iter, done = True, k, True
                if not done:
                    # where the predictor lies within still_start tolerances of the last state, the
                    # iteration starts from that state (dynamics._STILL_START says why)
                    for i in range(n):
                        work[i] = y_predict[i] - yv[i]
                    start = yv if _rms(work, scale) < still_start else y_predict
                    k = _simplified_newton(H, L, fs, y_predict, c, psi, LU, piv, scale, newton_tol, y_new, d, f, dy,
                                           work, start) if istate[I_LU] == 1 else -1
                    istate[I_RHS] += abs(k)
                    if k > 0:
                        converged, n_iter = True, k
                    elif fresh and global_newton:
                        istate[I_HARD] = hard_steps  # failed on a fresh Jacobian: full iterations first for a while
                        k = _full_newton(H, L, active_pos, nu_sum, fs, istate, y_predict, c, psi, scale,
                                         newton_tol, max_iter, max_log_step, y_new, d, last_J, A, piv2, f, work,
                                         dy, y_try, d_try, f_try)
                        if k > 0:
                            converged, n_iter = True, k
                if not converged:
                    if current_jac:
                        break
                    if not _jac(y_predict, H, L, active_pos, nu_sum, fs, J):
                        break
                    istate[I_JAC] += 1
                    istate[I_NJEV] += 1
                    istate[I_LU] = 0
                    current_jac = True
            if not converged:
                h_abs *= 0.5
                change_D(D, order, 0.5)
                istate[I_EQUAL] = 0
                istate[I_LU] = 0
                continue
            safety = 0.9 * (2 * NEWTON_MAXITER + 1) / (2 * NEWTON_MAXITER + n_iter)
            for i in range(n):
                scale[i] = atol + rtol * abs(y_new[i])
                work[i] = error_const[order] * d[i]
            error_norm = _rms(work, scale)
            if error_norm > 1.0:
                factor = max(MIN_FACTOR, safety * error_norm ** (-1.0 / (order + 1)))
                h_abs *= factor
                change_D(D, order, factor)
                istate[I_EQUAL] = 0
            else:
                accepted = True
        istate[I_EQUAL] += 1
        fs[F_TOLD] = t
        fs[F_T] = t_new
        yv[:] = y_new
        fs[F_H] = h_abs
        D[order + 2] = d - D[order + 1]
        D[order + 1] = d
        for i in range(order, -1, -1):
            D[i] += D[i + 1]
        if istate[I_EQUAL] >= order + 1:
            err_m = np.inf
            if order > 1:
                for i in range(n):
                    work[i] = error_const[order - 1] * D[order, i]
                err_m = _rms(work, scale)
            err_p = np.inf
            if order < MAX_ORDER:
                for i in range(n):
                    work[i] = error_const[order + 1] * D[order + 2, i]
                err_p = _rms(work, scale)
            best = -1.0
            delta = 0
            for which in range(3):
                e = err_m if which == 0 else (error_norm if which == 1 else err_p)
                fac = np.inf if e == 0.0 else e ** (-1.0 / (order + which))
                if fac > best:
                    best = fac
                    delta = which - 1
            order += delta
            istate[I_ORDER] = order
            factor = min(MAX_FACTOR, safety * best)
            fs[F_H] *= factor
            change_D(D, order, factor)
            istate[I_EQUAL] = 0
            istate[I_LU] = 0
        istate[I_STEPS] += 1
        # ---- dynamics._sea_path: project onto the element totals, guard the entropy, hand back
        if not yv.max() < 50.0:  # as dynamics._System.amounts: out of range
            return STEP_FAILED, nrec
        fill_amounts(yv, n_full, active, n_ref, amounts)
        raw = 0.0
        for e in range(elements.shape[0]):
            s = -target_full[e]
            for k in range(nf):
                s += elements[e, k] * amounts[k]
            raw = max(raw, abs(s) / e_scale[e])
        settled = settle(amounts, active, E, target, coef, p_ref, reactor, volume, pressure, fs[F_TGUESS], energy0,
                         props) > 0
        phi = props[1]
        if settled:
            fs[F_TGUESS] = props[0]
        if (not settled or (fs[F_PHI] - phi) / drive > drop_tol) and istate[I_RETRIES] < drop_retries:
            istate[I_RETRIES] += 1
            fs[F_T], fs[F_TOLD], fs[F_H] = b_t, b_told, b_h
            istate[I_ORDER] = b_order
            D[:, :] = b_D
            yv[:] = b_y
            J[:, :] = b_J
            change_D(D, b_order, 0.5)
            fs[F_H] *= 0.5
            istate[I_EQUAL] = 0
            istate[I_LU] = 0
            continue
        if not settled:
            return STEP_FAILED, nrec
        istate[I_RETRIES] = 0
        for i in range(n):
            zp = np.log(amounts[active[i]] / n_ref)
            delta_i = zp - yv[i]
            for j in range(order + 3):
                D[j, i] += delta_i
            yv[i] = zp
        istate[I_HARD] -= 1
        if istate[I_HAVE_LAST] == 1:
            J[:, :] = last_J
            istate[I_LU] = 0
        elif fresh_jacobian:
            if _jac(yv, H, L, active_pos, nu_sum, fs, J):
                istate[I_JAC] += 1
                istate[I_LU] = 0
        # tau at the accepted (projected) state, for the time: dt = tau ds
        istate[I_RHS] += 1
        if not _rhs(yv, H, L, fs, work):
            return STEP_FAILED, nrec
        fs[F_UERR] = max(fs[F_UERR], abs(props[2] - u0) / max(abs(u0), 1e-300))
        fs[F_RAW] = max(fs[F_RAW], raw)
        fs[F_DROP] = max(fs[F_DROP], (fs[F_PHI] - phi) / drive)
        fs[F_PHI] = phi
        lam = lam_start + (1.0 - lam_start) * (phi - phi_start) / drive
        rec_t[nrec] = fs[F_T]
        rec_told[nrec] = fs[F_TOLD]
        rec_h[nrec] = fs[F_H]
        rec_order[nrec] = order
        rec_D[nrec, :order + 1] = D[:order + 1]
        rec_lam[nrec] = lam
        rec_tau[nrec] = fs[F_TAU]
        nrec += 1
        if lam >= lam_stop:
            return STEP_DONE, nrec
        if offset + fs[F_T] > t_end:
            return STEP_TIME, nrec
        if istate[I_STEPS] >= max_steps:
            return STEP_BUDGET, nrec
    return STEP_CHUNK, nrec
