"""numba kernels of :mod:`sigmagrid.sea.compiled` (imported only from there, on first use).

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
def evaluate(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
             nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref):
    """The state of log amounts z and the SEA rates there.

    nu_ptr, nu_species, nu_coef: the net stoichiometry of the SEA reactions by reaction (CSR,
    full species index); side_rows/side_cols: (reaction, active species) pairs of the reactants
    (rows < nr) and of the products (rows >= nr). kind: 0 constant, 1 Arrhenius mobility.

    Returns (T K or -1 where no temperature meets the constraint, V m3, n mol, h/RT, cp/R,
    x = A/RT, q mol m-3 s-1, mobility mol m-3 s-1, trace factor g, both sides' factors).
    """
    ns = n_full.size
    na = active.size
    n = n_full.copy()
    for i in range(na):
        v = n_ref * np.exp(z[i])
        n[active[i]] = v if v > 1e-300 else 1e-300
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
    T = temperature(n, coef, reactor, T_guess, energy0, h_rt, s_r, cp_r)
    if T < 0:
        return -1.0, 0.0, n, h_rt, cp_r, x, q, mob, g, sides
    V = volume if reactor == 0 else total * R * T / pressure
    P = total * R * T / V
    # mu_k / RT as Cantera's ideal gas: mole fractions clipped at 1e-300 in the logarithm
    mu = np.empty(ns)
    lnp = np.log(P / p_ref)
    for k in range(ns):
        xk = n[k] / total
        mu[k] = h_rt[k] - s_r[k] + lnp + np.log(xk if xk > 1e-300 else 1e-300)
    # trace factors of each side, prod N/(N + eps): products, not sums of logarithms (a
    # logarithm per (reaction, species) pair was most of this function's time)
    if eps > 0:
        ratio = np.empty(na)
        for i in range(na):
            v = n[active[i]]
            ratio[i] = v / (v + eps)
        for p in range(side_rows.size):
            sides[side_rows[p]] *= ratio[side_cols[p]]
    for j in range(nr):
        xj = 0.0
        for p in range(nu_ptr[j], nu_ptr[j + 1]):
            xj -= nu_coef[p] * mu[nu_species[p]]
        x[j] = xj
        mob[j] = m[j] if kind == 0 else m[j] * np.exp(-b[j] * (1.0 / T - 1.0 / t_ref))
        if eps > 0:
            gr = sides[j]
            gp = sides[nr + j]
            both = gr * gp
            u = abs(xj)
            onset = np.exp(-1.0 / (u if u > 1e-300 else 1e-300))
            g[j] = both + ((gr if xj > 0 else gp) - both) * onset
        q[j] = mob[j] * g[j] * xj
    return T, V, n, h_rt, cp_r, x, q, mob, g, sides


@numba.njit(cache=True)
def rhs(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref, out):
    """dz/dt = V nu q / N (1/s) into ``out``; returns T (K), or -1 where no temperature meets the
    constraint. Arguments as :func:`evaluate`."""
    T, V, n, h_rt, cp_r, x, q, mob, g, sides = evaluate(
        z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref)
    if T < 0:
        return -1.0
    flux = np.zeros(n.size)
    for j in range(nr):
        for p in range(nu_ptr[j], nu_ptr[j + 1]):
            flux[nu_species[p]] += nu_coef[p] * q[j]
    for i in range(active.size):
        k = active[i]
        out[i] = V * flux[k] / n[k]
    return T


@numba.njit(cache=True)
def jacobian(z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
             nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref,
             active_pos, nu_sum, J):
    """d(dz/dt)/dz into J (na x na), the terms of ``_System.jac`` for the constant and Arrhenius
    metrics; returns T (K), or -1. active_pos: index of each species among the active ones (-1 if
    not); nu_sum: sum of each reaction's net coefficients. Other arguments as :func:`evaluate`."""
    T, V, n, h_rt, cp_r, x, q, mob, g, sides = evaluate(
        z, n_full, active, n_ref, coef, p_ref, reactor, volume, pressure, T_guess, energy0,
        nu_ptr, nu_species, nu_coef, side_rows, side_cols, nr, eps, kind, m, b, t_ref)
    if T < 0:
        return -1.0
    ns = n.size
    na = active.size
    total = 0.0
    for k in range(ns):
        total += n[k]
    # constraint derivatives dT/dz_i (K) and d ln V/dz_i (1), as _System._constraint_derivatives
    dT = np.zeros(na)
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
        if eps > 0:
            gr = sides[j]
            gp = sides[nr + j]
            af = np.exp(-1.0 / xj) if xj > 0 else 0.0
            ab = np.exp(1.0 / xj) if xj < 0 else 0.0
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
    if eps > 0:
        # nu diag(m x dg/dln g_r) reac^T + nu diag(m x dg/dln g_p) prod^T, each column k scaled by
        # d ln(N_k/(N_k + eps))/dz_k, one (reaction, species) side pair at a time
        for p in range(side_rows.size):
            row = side_rows[p]
            j = row if row < nr else row - nr
            kcol = side_cols[p]
            xj = x[j]
            gr = sides[j]
            gp = sides[nr + j]
            af = af_all[j]
            ab = ab_all[j]
            if row < nr:
                w = mob[j] * xj * gr * (gp + (1.0 - gp) * af - gp * ab)
            else:
                w = mob[j] * xj * gp * (gr - gr * af + (1.0 - gr) * ab)
            r = eps / n[active[kcol]]
            w *= r / (1.0 + r)
            for p2 in range(nu_ptr[j], nu_ptr[j + 1]):
                i = active_pos[nu_species[p2]]
                if i >= 0:
                    J[i, kcol] += nu_coef[p2] * w
    for i in range(na):
        n_i = n[active[i]]
        for k in range(na):
            J[i, k] = V * (J[i, k] + col_v[i] * dlnv[k] + col_t[i] * dT[k] + flux[i] * dlnv[k]) / n_i
        J[i, i] -= V * flux[i] / n_i
    return T
