"""The SEA dynamics q = M x in logarithmic amounts, its Jacobian, and one integrated path.

References
----------
Hairer, E., Lubich, C. and Wanner, G. (2006), Geometric Numerical Integration, 2nd ed., Springer,
sec. IV.4 (projection onto invariants after each step).
Mielke, A. (2011), Nonlinearity 24, 1329 (log-mean mobility = mass action).
"""

from __future__ import annotations

import time as _time
from dataclasses import dataclass

import cantera as ct
import numpy as np
from scipy.integrate import BDF
from scipy.integrate._ivp import bdf as _bdf
from scipy.linalg import lapack

from ..units import GAS_CONSTANT, KMOL, PER_KMOL
from . import compiled
from .metrics import log_mean_mobility

_R = GAS_CONSTANT  # J/(mol K)


#: the constant and Arrhenius metrics' right-hand side, Jacobian and projection through :mod:`.compiled`
#: where it can be used (False: always the Cantera route, e.g. to time it)
_USE_COMPILED = True

#: the constant and Arrhenius metrics' whole path (BDF steps, Newton, projection) in the compiled
#: loop of ``_kernels.bdf_path`` where their right-hand side is compiled (False: scipy's BDF, e.g. to time it)
_COMPILED_STEPPER = True

#: the globalized Newton iteration of ``_GlobalNewton`` when BDF's own fails (False: plain BDF;
#: then the onsager path of gri30 stalls)
_GLOBAL_NEWTON = True
#: its settings, in both routes: accepted steps on which the full iteration goes first after a
#: failure, its iteration limit, its largest step in ln N
_HARD_STEPS, _FULL_NEWTON_ITERATIONS, _MAX_LOG_STEP = 3, 10, 1.0
#: a fresh Jacobian at every accepted step of the constant and Arrhenius metrics (False: BDF's own
#: rule, a new one when its Newton iteration fails). On the progress clock BDF's rule gives the
#: same paths (angles within 4e-6 rad) at a fifth less cost: methane check grid, 24 cases, all
#: paths ok either way, path time 32.3 s with a fresh Jacobian per step and 10 hard steps, 27.0 s
#: with BDF's rule and 3 (``sigmagrid run config/methane-grid.yaml``, sum of ``sea_wall_time``
#: over the four default metrics).
_FRESH_JACOBIAN = False

#: The compiled loop starts a step's simplified Newton iteration from the last accepted state,
#: not from BDF's predictor, where the two lie within this many tolerances of each other (scaled
#: RMS norm). Late on an onsager path the state barely moves while the solver chatters at
#: tolerance level; extrapolated from that history, the predictor carries the chatter, and the
#: iteration from it failed or landed on a solution far enough off to reject the step. The
#: converged solution solves the same BDF equations either way. Methane check grid, onsager
#: paths, sum over 24 cases: 76 800 -> 60 900 steps, 18.0 -> 13.7 s; the fitted paths' cost
#: unchanged (always starting from the last state made them 25 % dearer); 0 gives scipy's rule.
_STILL_START = 30.0

#: a path stops as stalled once its clock s = -ln(1 - lambda) has run this far past the stop
#: progress's without the potential getting there: e^-10 of the distance left, so the path is
#: approaching an equilibrium of its own metric short of the true one (see ``_sea_path``)
_STALL_MARGIN = 10.0

#: an accepted step whose potential falls by more than this share of the drive is taken again at
#: half the step, at most ``_DROP_RETRIES`` times (see ``_sea_path``)
_DROP_TOLERANCE = 1e-5
_DROP_RETRIES = 8


def _onsets(x):
    """(a(x), a(-x)) with a(u) = exp(-1/u) for u > 0, else 0: a switch-on that is smooth
    (C-infinity) at u = 0; one exponential for both."""
    u = np.abs(x)
    e = np.exp(-1.0 / np.where(u > 0, u, 1.0))
    return np.where(x > 0, e, 0.0), np.where(x < 0, e, 0.0)


def _onset_slope(u, a):
    """d/du of a(u) = exp(-1/u) (see :func:`_onsets`), given its value a."""
    pos = u > 0
    return np.where(pos, a / np.where(pos, u, 1.0) ** 2, 0.0)


def _clock_transform():
    """``_kernels.clock_transform``, compiled where numba can, else its plain Python."""
    kernels = compiled.kernel()
    if kernels is not None:
        return kernels.clock_transform
    from . import _kernels
    return _kernels.clock_transform.py_func


class _WeightedProduct:
    """A diag(w) B^T for fixed sparse A (p x r) and B (q x r), in one ``np.bincount``.

    The nonzeros of A and B in each column j pair up into (row, column, a_ij b_kj) triples once;
    each product is then a weighted sum over about r x 16 triples, instead of dense (r x q)
    temporaries and a sparse-dense product (the SEA Jacobian: 0.35 ms -> 0.18 ms on gri30).
    """

    def __init__(self, A: np.ndarray, B: np.ndarray):
        self.shape = (A.shape[0], B.shape[0])
        self.size = self.shape[0] * self.shape[1]
        # nonzeros of each, ordered by column
        ja, ia = np.nonzero(A.T)
        jb, ib = np.nonzero(B.T)
        per_col_b = np.bincount(jb, minlength=A.shape[1])
        first_b = np.cumsum(per_col_b) - per_col_b
        # every nonzero of A pairs with the nonzeros of B in its column
        repeat = per_col_b[ja]
        a_k = np.repeat(np.arange(ja.size), repeat)
        within = np.arange(repeat.sum()) - np.repeat(np.cumsum(repeat) - repeat, repeat)
        b_k = first_b[ja[a_k]] + within
        self.j = ja[a_k]
        self.index = ia[a_k] * self.shape[1] + ib[b_k]
        self.coef = A[ia[a_k], self.j] * B[ib[b_k], self.j]

    def __call__(self, w: np.ndarray) -> np.ndarray:
        out = np.bincount(self.index, weights=self.coef * w[self.j], minlength=self.size)
        return out.astype(float, copy=False).reshape(self.shape)  # float also when there is no pair


class _OffConstraint(RuntimeError):
    """No temperature satisfies the energy constraint at a trial state of the solver."""


@dataclass
class _Mobility:
    kind: str  # "log-mean", "constant", "arrhenius"
    m: np.ndarray | None = None  # (nr_in,) mol m-3 s-1 (reference value for arrhenius)
    b: np.ndarray | None = None  # (nr_in,) K
    t_ref: float = float("nan")  # K


class _System:
    """SEA right-hand side and Jacobian in z = ln(N_active / N_ref) for one reactor type.

    Units: N mol, V m3, T K, rates mol m-3 s-1, time s.
    """

    def __init__(self, gas, reactor, mass, n_start, active, reactions, reversible_in, volume, pressure,
                 temperature, mobility: _Mobility, trace_amounts=None):
        self.gas = gas
        self.reactor = reactor
        self.mass = mass  # kg
        self.mw = gas.molecular_weights * PER_KMOL  # kg/mol
        self.n_full = n_start.copy()  # mol
        self.active = active
        self.rx = reactions
        self.reversible_in = reversible_in  # Cantera reverse rate is thermodynamic for these
        nu = (gas.product_stoich_coeffs - gas.reactant_stoich_coeffs)
        self.nu_a = nu[np.ix_(active, reactions)]  # (na, nr_in)
        self.nu_rx = nu[:, reactions]  # (ns, nr_in)
        self.nu_sum = nu[:, reactions].sum(axis=0)  # (nr_in,)
        self.orders = gas.reactant_stoich_coeffs[np.ix_(active, reactions)].T  # (nr_in, na)
        self.order_sum = gas.reactant_stoich_coeffs[:, reactions].sum(axis=0)
        self.n_ref = float(n_start.sum())
        self.volume = volume  # m3 (isolated)
        self.pressure = pressure  # Pa (constant-pressure, isothermal)
        self.temperature = temperature  # K, Newton guess (isothermal: fixed)
        self.mob = mobility
        # which active species each reaction consumes when it runs forward (reac) or backward (prod)
        self.reac_a = (gas.reactant_stoich_coeffs[np.ix_(active, reactions)] > 0).astype(float)  # (na, nr_in)
        self.prod_a = (gas.product_stoich_coeffs[np.ix_(active, reactions)] > 0).astype(float)
        # both sides' (reaction, species) pairs, for the trace factors as one gathered sum
        self._side_rows, self._side_cols = np.nonzero(np.vstack([self.reac_a.T, self.prod_a.T]))  # (2 nr_in, na)
        # the Jacobian's products nu diag(w) B^T with B = nu, the reactant orders, or the sides:
        # gathered sums, cheaper than dense products and free of BLAS threading (which, on a
        # loaded machine, made a 53 x 325 x 53 product a thousand times slower)
        self._nu_nu = _WeightedProduct(self.nu_a, self.nu_a)
        if mobility.kind == "log-mean":
            self._nu_orders = _WeightedProduct(self.nu_a, self.orders.T)
        else:
            self._nu_reac = _WeightedProduct(self.nu_a, self.reac_a)
            self._nu_prod = _WeightedProduct(self.nu_a, self.prod_a)
        self._nr_in = len(reactions)
        # mol, per active species: the amounts below which the state factor scales a constant mobility
        self.eps = np.zeros(len(active)) if trace_amounts is None else np.asarray(trace_amounts, float)
        self._trace_on = bool(self.eps.max(initial=0.0) > 0)
        self._cache = None  # species energies and heat capacities at the last temperature
        self.phi_eq = float("nan")  # J/K, the potential the progress clock runs towards (set by _sea_path)
        self.tau = float("nan")  # s, (Phi_eq - Phi)/(dPhi/dt) at the last clock_rhs state
        self._last_clock_jac = None  # the last Jacobian the Cantera route could form
        self.n_rhs = 0
        self.n_jac = 0
        self._set(n_start, newton=False)
        self.energy0 = self._energy_sum(n_start)  # J, U or H from the species properties
        self._compiled = None
        if mobility.kind != "log-mean" and _USE_COMPILED:
            table = compiled.nasa7_table(gas)
            if table is not None and compiled.kernel() is not None:
                self._compiled = compiled.CompiledRates(
                    gas, reactor, self.n_full, active, self.n_ref, reactions, self.nu_rx, self._side_rows,
                    self._side_cols, volume, pressure, self.energy0, self.eps, mobility.kind, mobility.m,
                    mobility.b, mobility.t_ref, table)

    # state --------------------------------------------------------------------------------
    def amounts(self, z: np.ndarray) -> np.ndarray:
        if not z.max() < 50.0:  # a trial state of the solver, far off (False for NaN too)
            raise _OffConstraint("amounts out of range")
        n = self.n_full.copy()
        # at least 1e-300 mol: ln N of a drained species can pass -745 on a long path, and an exact
        # zero would turn N/(N + eps) and dz/dt = V nu q / N into 0/0
        n[self.active] = np.maximum(self.n_ref * np.exp(z), 1e-300)
        return n

    def z_of(self, n: np.ndarray) -> np.ndarray:
        return np.log(n[self.active] / self.n_ref)

    def _energy_sum(self, n):
        g = self.gas
        if self.reactor == "isolated":
            return float(n @ g.standard_int_energies_RT) * _R * g.T
        return float(n @ g.standard_enthalpies_RT) * _R * g.T

    def _set_T(self, T, y, first):
        g = self.gas
        if self.reactor == "isolated":
            # density of the actual amounts, so that concentrations are N/V also off the element
            # manifold (where the BDF Newton iteration probes the right-hand side)
            if first:
                g.TDY = T, self._mass_n / self.volume, y
            else:
                g.TD = T, self._mass_n / self.volume
        else:
            if first:
                g.TPY = T, self.pressure, y
            else:
                g.TP = T, self.pressure

    def _set(self, n, newton=True):
        """Set the gas to amounts n (mol) and the constrained temperature; returns T (K)."""
        y = n * self.mw
        self._mass_n = float(y.sum())  # kg, mass of the amounts n
        y = y / self._mass_n
        T = self.temperature
        if newton and self.reactor != "isothermal" and self._cache is not None:
            # Newton predictor from the species energies at the last temperature: usually the only
            # Cantera update needed, the residual check below then confirms it
            e_rt, c_r = self._cache
            dT = -(float(n @ e_rt) * _R * T - self.energy0) / (float(n @ c_r) * _R)
            T = min(max(T + max(min(dT, 0.5 * T), -0.5 * T), 100.0), 2e4)
        self._set_T(T, y, True)
        if newton and self.reactor != "isothermal":
            g = self.gas
            # to round-off, not to a tolerance: the BDF Newton iteration resolves the amounts to
            # about 1e-10 and sees the temperature through every rate; a temperature resolved only
            # to 1e-11 left a noise floor on which that iteration stalled (one more step here is
            # cheap: the convergence is quadratic)
            for _ in range(50):
                if self.reactor == "isolated":
                    e_rt, c_r = g.standard_int_energies_RT, g.standard_cp_R - 1.0
                else:
                    e_rt, c_r = g.standard_enthalpies_RT, g.standard_cp_R
                dT = -(float(n @ e_rt) * _R * T - self.energy0) / (float(n @ c_r) * _R)
                if abs(dT) < 1e-14 * T:
                    break
                T = min(max(T + max(min(dT, 0.5 * T), -0.5 * T), 100.0), 2e4)
                self._set_T(T, y, False)
                if abs(dT) < 1e-10 * T:  # quadratic convergence: this step took T to round-off
                    break
            else:
                raise _OffConstraint("temperature Newton iteration did not converge")
            self._cache = (e_rt, c_r)
        self.temperature = T
        return T

    def state(self, z):
        """Amounts (mol), T (K), V (m3) of z, with the gas set there."""
        n = self.amounts(z)
        T = self._set(n)
        if self.mob.kind != "log-mean":
            self._trace(n)
        V = self.volume if self.reactor == "isolated" else self._mass_n / self.gas.density
        return n, T, V

    # dynamics -----------------------------------------------------------------------------
    def _kinetics(self, T):
        g = self.gas
        x = g.delta_gibbs[self.rx] * (-PER_KMOL / (_R * T))
        # only mass action needs Cantera's rate evaluation; a metric needs the thermodynamics only
        rf = g.forward_rates_of_progress[self.rx] * KMOL if self.mob.kind == "log-mean" else None
        return x, rf

    def _rates(self, T, x, rf):
        """Net rates q (mol m-3 s-1) of the SEA dynamics, reverse one-way rates, mobility."""
        mob = self.mob
        if mob.kind == "log-mean":
            # the gradient form formed from the path's own state: Lambda of its one-way rates,
            # x of its thermodynamics, q = Lambda x (Mielke 2011). It equals mass action's net
            # rate only where the reverse rate obeys detailed balance, which is what this path checks.
            rr = np.where(self.reversible_in, self.gas.reverse_rates_of_progress[self.rx] * KMOL,
                          rf * np.exp(np.clip(-x, -745.0, 700.0)))
            return log_mean_mobility(rf, rr, x) * x, rr, None
        m = mob.m if mob.kind == "constant" else mob.m * np.exp(-mob.b * (1.0 / T - 1.0 / mob.t_ref))
        if self._trace_on:
            # g = g_r g_p + g_r (1 - g_p) a(x) + g_p (1 - g_r) a(-x), of which one a is zero
            gr, gp = self._g_reac, self._g_prod
            both = gr * gp
            g = both + (np.where(x > 0, gr, gp) - both) * np.exp(-1.0 / np.maximum(np.abs(x), 1e-300))
            self._g_mix = g
            return m * g * x, None, m
        return m * x, None, m

    def _trace(self, n):
        """Trace factors prod_k N_k/(N_k + eps) (1) of each reaction's reactants and products.

        A constant mobility relaxes a species of amount N at a relative rate ~ m/N, without bound
        as N -> 0 (collapses of ln N far below the solver's resolution). Below the trace level eps
        the mobility is scaled like mass action's, by
        g = g_r g_p + g_r (1 - g_p) a(x) + g_p (1 - g_r) a(-x), a(u) = exp(-1/u) for u > 0, else 0:
        near its partial equilibrium (x -> 0) a reaction is scaled by both sides, as the one-way
        rates of mass action are; driven hard (|x| >> 1) only by the side it consumes (reactants
        running forward), so a species absent at the start is still formed. q = m g x is smooth
        and monotone in x, x q >= 0, and nothing changes where the species are well above eps.
        """
        if not self._trace_on:
            return
        ratio = self.eps / n[self.active]
        # both sides in one product, summed over the few species of each side (a dense
        # (2 nr x na) product multiplied mostly zeros)
        logs = np.bincount(self._side_rows, weights=np.log1p(ratio)[self._side_cols], minlength=2 * self._nr_in)
        g = np.exp(-logs)
        self._g_reac, self._g_prod = g[:self._nr_in], g[self._nr_in:]

    def rhs(self, t, z):
        self.n_rhs += 1
        if self._compiled is not None:
            if not z.max() < 50.0:  # as in amounts(): a trial state far off
                return np.full(z.size, np.nan)
            out, T = self._compiled(z, self.temperature)
            if not T > 0:
                return np.full(z.size, np.nan)  # no temperature meets the constraint: a shorter step
            self.temperature = T
            return out
        try:
            n, T, V = self.state(z)
        except (_OffConstraint, ct.CanteraError):
            return np.full(z.size, np.nan)  # the solver rejects the trial step and tries a shorter one
        x, rf = self._kinetics(T)
        q, _, _ = self._rates(T, x, rf)
        return V * (self.nu_a @ q) / n[self.active]

    def clock_rhs(self, s, z):
        """dz/ds on the progress clock s = -ln(1 - lambda): tau dz/dt with tau = (Phi_eq - Phi)/(dPhi/dt)
        (s, left in ``self.tau``); NaN where the state has no value (see ``_kernels.clock_rhs``)."""
        self.n_rhs += 1
        if self._compiled is not None:
            if not z.max() < 50.0:
                return np.full(z.size, np.nan)
            out, T, tau = self._compiled.clock(z, self.temperature, self.phi_eq)
            if not T > 0:
                return np.full(z.size, np.nan)
            self.temperature, self.tau = T, tau
            return out
        try:
            n, T, V = self.state(z)
        except (_OffConstraint, ct.CanteraError):
            return np.full(z.size, np.nan)
        x, rf = self._kinetics(T)
        q, _, _ = self._rates(T, x, rf)
        deficit, rate = self.phi_eq - self.potential(), _R * V * float(x @ q)
        if not (deficit > 0 and rate > 0):
            return np.full(z.size, np.nan)
        self.tau = deficit / rate
        return self.tau * V * (self.nu_a @ q) / n[self.active]

    def clock_jac(self, s, z):
        """d(dz/ds)/dz from the time Jacobian (``_kernels.clock_transform``)."""
        if self._compiled is not None:
            self.n_jac += 1
            if not z.max() < 50.0:
                raise _OffConstraint("amounts out of range")
            J, T = self._compiled.clock_jacobian(z, self.temperature, self.phi_eq)
            if not T > 0:  # a trial state past the end: as below
                if self._last_clock_jac is None:
                    raise _OffConstraint("no value of the progress clock here")
                return self._last_clock_jac
            self.temperature = T
            self._last_clock_jac = J
            return J
        try:
            J = self.jac(s, z)
        except (_OffConstraint, ct.CanteraError):
            J = None
        n, T, V = self.state(z) if J is not None else (None, None, None)
        x, rf = self._kinetics(T) if J is not None else (None, None)
        q = self._rates(T, x, rf)[0] if J is not None else None
        deficit, rate = (self.phi_eq - self.potential(), _R * V * float(x @ q)) if J is not None else (0.0, 0.0)
        if not (deficit > 0 and rate > 0):
            # a trial state of BDF's past the end (no entropy left to produce): its Newton
            # iteration only needs a Jacobian near this one, and scipy's BDF cannot take "none"
            if self._last_clock_jac is None:
                raise _OffConstraint("no value of the progress clock here")
            return self._last_clock_jac
        g = self.gas
        na = n[self.active]
        dT, _ = self._constraint_derivatives(n, T, V)
        w = na * g.chemical_potentials[self.active] * PER_KMOL / (_R * T)
        out = np.empty_like(J)
        _clock_transform()(V * (self.nu_a @ q) / na, J, na, w, g.standard_enthalpies_RT[self.active], dT, T,
                           float(n.sum()), compiled.REACTOR_CODES[self.reactor], deficit, rate, out)
        self._last_clock_jac = out
        return out

    def _constraint_derivatives(self, n, T, V):
        """dT/dz_i (K) and d ln V/dz_i (1) for the active species."""
        g = self.gas
        na = n[self.active]
        if self.reactor == "isolated":
            e = g.standard_int_energies_RT[self.active] * _R * T
            c = float(n @ (g.standard_cp_R - 1.0)) * _R
            dT = -na * e / c
            dlnv = np.zeros_like(dT)
        elif self.reactor == "constant-pressure":
            e = g.standard_enthalpies_RT[self.active] * _R * T
            c = float(n @ g.standard_cp_R) * _R
            dT = -na * e / c
            dlnv = na / n.sum() + dT / T
        else:
            dT = np.zeros(na.size)
            dlnv = na / n.sum()
        return dT, dlnv

    def jac(self, t, z):
        """Analytic Jacobian d(dz/dt)/dz: nu, the diagonal mobility and rank-one constraint terms.

        Third-body and falloff dependence of the one-way rates on composition is left out of the
        log-mean Jacobian (it only steers Newton's iteration, not the solution).
        """
        self.n_jac += 1
        if self._compiled is not None:
            if not z.max() < 50.0:
                raise _OffConstraint("amounts out of range")
            J, T = self._compiled.jacobian(z, self.temperature)
            if T > 0:
                self.temperature = T
                return J
        n, T, V = self.state(z)
        g = self.gas
        x, rf = self._kinetics(T)
        q, rr, m = self._rates(T, x, rf)
        dT, dlnv = self._constraint_derivatives(n, T, V)
        du_T = (g.standard_int_energies_RT @ self.nu_rx) / T  # dx_j/dT at fixed concentrations, 1/K
        nu = self.nu_a
        # core = nu dq/dz, with dx/dz = -nu^T + nu_sum dlnv^T + (du/T) dT^T
        if self.mob.kind == "log-mean":
            kf = g.forward_rate_constants[self.rx]
            with np.errstate(invalid="ignore", divide="ignore"):
                dlnk = np.where(kf != 0, g.forward_rate_constants_ddT[self.rx] / np.where(kf != 0, kf, 1.0), 0.0)
            # dq = q dln r+ + r- dx, dln r+/dz = orders - order_sum dlnv^T + dlnk dT^T
            core = self._nu_orders(q) - self._nu_nu(rr)
            core += np.outer(nu @ (rr * self.nu_sum - q * self.order_sum), dlnv)
            core += np.outer(nu @ (q * dlnk + rr * du_T), dT)
        else:
            if self._trace_on:
                gmix = self._g_mix
                af, ab = _onsets(x)
                gr, gp = self._g_reac, self._g_prod
                ratio = self.eps / n[self.active]
                slope = ratio / (1.0 + ratio)  # d ln(N/(N + eps)) / d z
                dg_dx = gr * (1.0 - gp) * _onset_slope(x, af) - gp * (1.0 - gr) * _onset_slope(-x, ab)
                dg_dlr = gr * (gp + (1.0 - gp) * af - gp * ab)  # d g / d ln g_r
                dg_dlp = gp * (gr - gr * af + (1.0 - gr) * ab)  # d g / d ln g_p
                a = m * (gmix + x * dg_dx)  # dq/dx
                core = (self._nu_reac(m * x * dg_dlr) + self._nu_prod(m * x * dg_dlp)) * slope[None, :]
                core -= self._nu_nu(a)
            else:
                gmix = 1.0
                a = m
                core = -self._nu_nu(a)
            dq_dT = a * du_T
            if self.mob.kind == "arrhenius":
                dq_dT = dq_dT + x * m * gmix * self.mob.b / T**2
            core += np.outer(nu @ (a * self.nu_sum), dlnv) + np.outer(nu @ dq_dT, dT)
        na = n[self.active]
        flux = nu @ q
        f = V * flux / na
        J = (V * core + np.outer(flux, V * dlnv)) / na[:, None]
        J.flat[::J.shape[0] + 1] -= f  # the diagonal (diag_indices_from cost 5 us)
        return J

    # observables --------------------------------------------------------------------------
    def potential(self):
        """Phi of the current gas state, J/K: S (adiabatic) or S - H/T (isothermal)."""
        g = self.gas
        s = self._mass_n * g.entropy_mass
        return s - self._mass_n * g.enthalpy_mass / g.T if self.reactor == "isothermal" else s

    def held_energy(self):
        """U or H of the current gas state from Cantera's mixture properties, J."""
        g = self.gas
        return self._mass_n * (g.int_energy_mass if self.reactor == "isolated" else g.enthalpy_mass)


class _Projector:
    """Multiplicative projection onto the element constraints E n = target (mol).

    n_k -> n_k exp(sum_e a_ek lam_e) over the active species, Newton on lam: keeps amounts positive
    and moves trace species in proportion to their amount (an element-potential correction).
    """

    def __init__(self, elements, target, active, n_template):
        fixed = np.ones(n_template.size, bool)
        fixed[active] = False
        E = elements[:, active]
        keep = np.abs(E).sum(axis=1) > 0
        self.E = E[keep]
        self.target = target[keep] - elements[keep][:, fixed] @ n_template[fixed]
        self.active = active

    def __call__(self, n):
        na = n[self.active].copy()
        E, tgt = self.E, self.target
        for _ in range(20):
            res = E @ na - tgt
            if np.all(np.abs(res) <= 4e-16 * np.abs(tgt)):
                break
            # a direct LAPACK call: numpy's solve costs 10 us of checks on this 5 x 5 system
            _, _, lam, info = lapack.dgesv((E * na) @ E.T, -res)
            if info != 0:  # dependent element rows
                lam = np.linalg.lstsq((E * na) @ E.T, -res, rcond=None)[0]
            na = na * np.exp(E.T @ lam)
        out = n.copy()
        out[self.active] = na
        return out


# --------------------------------------------------------------------------------------------
# one SEA path


@dataclass
class _Path:
    status: str
    reason: str
    time: np.ndarray  # (n_grid,) s since the SEA start
    temperature: np.ndarray
    mole_fractions: np.ndarray
    element_error: float
    element_drift_unprojected: float
    energy_error: float
    entropy_decrease: float
    steps: int
    wall: float
    trace_level: float = float("nan")
    rhs_evaluations: int = 0  # right-hand sides and Jacobians the integration took: unlike the
    jacobian_evaluations: int = 0  # wall time, these do not move with machine noise


def _lean_lu(solver: BDF) -> BDF:
    """BDF's dense LU factorization and solve as direct LAPACK calls (getrf, getrs).

    scipy's ``lu_factor`` and ``lu_solve`` check and convert their arguments on every call: on
    a 53-species path that was 25 us of each 28 us solve, a sixth of the path's time. The
    arithmetic is the same LAPACK routines'; a singular matrix gives non-finite corrections,
    which BDF treats as a failed Newton iteration (a shorter step).
    """
    def lu(A):
        solver.nlu += 1
        factors, pivots, _ = lapack.dgetrf(A, overwrite_a=True)
        return factors, pivots

    def solve_lu(LU, b):
        x, _ = lapack.dgetrs(LU[0], LU[1], b)
        return x

    solver.lu, solver.solve_lu = lu, solve_lu
    return solver


def _replace_state(solver: BDF, y: np.ndarray) -> None:
    """Replace BDF's newest state by y (here: the state projected onto the element constraints).

    Each backward difference in BDF's history D holds the newest state with weight one, so all of
    them shift by the change; the interpolating polynomial then passes through y at the current
    time and through the same earlier states as before. Shifting only D[0] (as this code did until
    2026-12-02) left the drift just removed in the first difference: the next predictor
    extrapolated it, and on the onsager path of methane the projection then corrected N2 by 30
    times its error scale at every step (6 000 steps at h = 1e-6 t).
    """
    delta = y - solver.y
    solver.D[:solver.order + 3] += delta  # the two above the order carry the error estimates' differences
    solver.y = y


def _solver_state(solver: BDF) -> tuple:
    """What BDF's step changes, to take the step again (see :func:`_restore_halved`)."""
    return solver.t, solver.t_old, solver.y, solver.D.copy(), solver.h_abs, solver.order, solver.J


def _restore_halved(solver: BDF, state: tuple) -> None:
    """BDF back at ``state`` (from :func:`_solver_state`) with half its next step, as after its own
    failed Newton iteration (its ``change_D`` rescales the history to the new step)."""
    solver.t, solver.t_old, solver.y, D, solver.h_abs, solver.order, solver.J = state
    solver.D[:] = D
    _bdf.change_D(solver.D, solver.order, 0.5)
    solver.h_abs *= 0.5
    solver.n_equal_steps = 0
    solver.LU = None


class _GlobalNewton:
    """A globalized Newton iteration for BDF's implicit system, for the steps where BDF's own fails.

    scipy's BDF solves d - c f(y_pred + d) + psi = 0 by at most four simplified-Newton iterations
    on one Jacobian and halves the step when they fail even with a fresh one. On a constant
    metric's path the right-hand side is strongly nonlinear where fast partial equilibria meet
    slow reactions (the onsager path of methane: two of every three steps failed there, and the
    path crept on at h = 1e-5 t). Here, once BDF's iteration has failed with a Jacobian just
    evaluated, a full Newton iteration (Jacobian at every iterate), with steps capped to
    ``max_log_step`` in ln N and a backtracking (Armijo) line search on the scaled residual,
    tries again (Dennis and Schnabel (1996), Numerical Methods for Unconstrained Optimization and
    Nonlinear Equations, SIAM, sec. 6.3; section from memory), and it goes first (before BDF's own
    iteration) on the next ``hard_steps`` accepted steps: failures come in stretches, and on them
    the simplified iteration only costs a Jacobian at the predictor and a halving. Its last
    Jacobian then serves as BDF's next one.

    Measured on the bench case (gri30 methane-air, 1300 K, 1 atm, isolated; 2026-12-03), onsager
    path: rescue only 5 396-5 754 steps, 8 963 Jacobians; hard_steps = 10: 2 107 steps, 5 168
    Jacobians, about half the time; the full iteration always first: 1 577 steps but 7 691
    Jacobians. Fitted paths change by a few percent. It is installed in scipy's BDF module only
    while a step runs (``with``); with a scipy whose ``solve_bdf_system`` has another signature it
    stays out and plain BDF runs.
    """

    ARGS = ("fun", "t_new", "y_predict", "c", "psi", "LU", "solve_lu", "scale", "tol")

    def __init__(self, system: "_System", max_iter: int = _FULL_NEWTON_ITERATIONS,
                 max_log_step: float = _MAX_LOG_STEP, hard_steps: int = _HARD_STEPS, fun=None, jac=None):
        self.system = system
        self.fun = fun or system.clock_rhs  # the right-hand side BDF integrates, and its Jacobian
        self.jac = jac or system.clock_jac
        self.max_iter = max_iter
        self.max_log_step = max_log_step
        self.hard_steps = hard_steps
        self.solver = None
        self._seen_njev = None  # BDF's Jacobian count at the last call: a change means a fresh one
        self._plain = None
        self.last_jac = None  # the Jacobian of the last _iterate's last iteration (None: none this step)
        self.hard = 0  # accepted steps left on which the full iteration goes first

    _available = None

    @classmethod
    def available(cls) -> bool:
        if cls._available is None:
            import inspect
            try:
                cls._available = tuple(inspect.signature(_bdf.solve_bdf_system).parameters) == cls.ARGS
            except (AttributeError, TypeError, ValueError):
                cls._available = False
        return cls._available

    def __enter__(self):
        if self.available() and _GLOBAL_NEWTON:
            self._plain = _bdf.solve_bdf_system
            _bdf.solve_bdf_system = self._solve
        return self

    def __exit__(self, *exc):
        if self._plain is not None:
            _bdf.solve_bdf_system = self._plain
            self._plain = None
        return False

    def _solve(self, fun, t_new, y_predict, c, psi, LU, solve_lu, scale, tol):
        njev = self.solver.njev if self.solver is not None else None
        fresh, self._seen_njev = njev != self._seen_njev, njev
        if self.solver is None:
            return self._plain(fun, t_new, y_predict, c, psi, LU, solve_lu, scale, tol)
        if self.hard > 0 and not fresh:  # a hard stretch: the full iteration first
            result = self._iterate(t_new, y_predict, c, psi, scale, tol)
            if result is not None:
                return True, result[2], result[0], result[1]
        converged, n_iter, y, d = self._plain(fun, t_new, y_predict, c, psi, LU, solve_lu, scale, tol)
        if converged or not fresh:
            return converged, n_iter, y, d
        self.hard = self.hard_steps  # failed on a fresh Jacobian: full iterations first for a while
        result = self._iterate(t_new, y_predict, c, psi, scale, tol)
        if result is None:
            return converged, n_iter, y, d
        return True, result[2], result[0], result[1]

    @staticmethod
    def _norm(r, scale):
        return float(np.sqrt(np.mean((r / scale) ** 2)))

    def _iterate(self, t, y_predict, c, psi, scale, tol):
        system = self.system
        self.last_jac = None
        y = y_predict.copy()
        d = np.zeros_like(y)
        f = self.fun(t, y)
        if not np.all(np.isfinite(f)):
            return None
        r = c * f - psi - d
        rn = self._norm(r, scale)
        eye = np.eye(y.size)
        for k in range(self.max_iter):
            try:
                J = self.jac(t, y)
            except (_OffConstraint, ct.CanteraError):
                return None
            self.last_jac = J
            factors, pivots, info = lapack.dgetrf(eye - c * J, overwrite_a=True)
            if info != 0:
                return None
            dy, _ = lapack.dgetrs(factors, pivots, r)
            big = float(np.max(np.abs(dy)))  # the state is ln N
            if not np.isfinite(big):
                return None
            alpha = min(1.0, self.max_log_step / big) if big > 0 else 1.0
            while True:
                y_try = y + alpha * dy
                f_try = self.fun(t, y_try)
                if np.all(np.isfinite(f_try)):
                    d_try = d + alpha * dy
                    r_try = c * f_try - psi - d_try
                    rn_try = self._norm(r_try, scale)
                    if rn_try <= (1.0 - 1e-4 * alpha) * rn:
                        break
                alpha *= 0.5
                if alpha < 1e-4:
                    return None
            y, d, r, rn = y_try, d_try, r_try, rn_try
            if (alpha == 1.0 and self._norm(dy, scale) < 0.1 * tol) or rn < 1e-3 * tol:
                # reported to BDF as at most its own iteration limit: it then chooses the next
                # step as after a slowly converged iteration
                return y, d, min(k + 1, _bdf.NEWTON_MAXITER)
        return None


@dataclass(frozen=True)
class _Progress:
    """SEA progress of a potential phi (J/K): start + (1 - start)(phi - phi_start)/drive, 1.
    The compiled loop computes it from the same three numbers."""

    start: float
    phi_start: float  # J/K
    drive: float  # J/K, Phi_eq - Phi_start

    def __call__(self, phi):
        return self.start + (1.0 - self.start) * (phi - self.phi_start) / self.drive


@dataclass(frozen=True)
class _Balance:
    """The element totals a path holds: all species' element matrix and totals (mol) with their
    scale, and the active species' rows with the totals they carry (what the projection solves)."""

    elements: np.ndarray
    target: np.ndarray
    e_scale: np.ndarray
    E_active: np.ndarray
    E_target: np.ndarray


def _sea_path(system: _System, z0, lam_start, phi_start, phi_eq, grid, elements, settings):
    """Integrate one SEA path and sample it at the progress grid (NaN where it is not reached).

    The SEA progress is lambda_start + (1 - lambda_start)(Phi - Phi_start)/(Phi_eq - Phi_start), with
    Phi_eq the equilibrium of the start state's own energy and elements, so the path ends at 1 even
    where the observed path's held energy drifted. Stops at ``end_progress``, where it stalls, or
    at the step or wall budget (status and reason say which).

    The clock is s = -ln(1 - lambda), not time: a metric's own time scale is arbitrary (an onsager
    path whose fuel reactions have tiny equilibrium one-way rates takes ages longer than the
    kinetics, with fast events late on), while s advances with the entropy produced. The time is
    recovered as the integral of tau ds over the accepted steps (tau = dt/ds), exact for tau
    exponential in s between steps. A path whose potential stops short of Phi_eq (an equilibrium of
    its metric's own, where some mobility vanishes) runs its clock on without progress and stops
    ``incomplete`` once s has passed the stop progress's by ``_STALL_MARGIN``.

    An accepted step whose potential falls by more than ``_DROP_TOLERANCE`` of the drive is
    undone and taken again at half the size (at most ``_DROP_RETRIES`` times in a row): the full
    Newton iteration of ``_GlobalNewton`` can converge, on a large step, to a solution of BDF's
    equations that lowers the entropy.
    """
    started = _time.perf_counter()
    ng, ns = grid.size, system.gas.n_species
    times = np.full(ng, np.nan)
    temps = np.full(ng, np.nan)
    xs = np.full((ng, ns), np.nan)
    n0 = system.amounts(z0)
    target = elements @ n0
    e_scale = np.where(target > 0, target, 1.0)
    drive = phi_eq - phi_start
    lam_stop = settings.end_progress
    log_mean = system.mob.kind == "log-mean"
    rtol = settings.rtol if log_mean else settings.metric_rtol
    atol = settings.atol if log_mean else settings.metric_atol

    lam_of = _Progress(lam_start, phi_start, drive)

    project = _Projector(elements, target, system.active, n0)

    compiled = system._compiled
    E_active = np.ascontiguousarray(project.E, float)

    def project_state(z):
        """Projected amounts (mol), T (K), drift before projection (1), potential (J/K), held energy (J)."""
        n = system.amounts(z)
        raw = float(np.max(np.abs(elements @ n - target) / e_scale))
        if compiled is not None:
            settled = compiled.settle(n, E_active, project.target, system.temperature)
            if settled is not None:
                n, T, phi, energy = settled
                system.temperature = T
                return n, T, raw, phi, energy
        n = project(n)
        T = system._set(n)  # the gas at the projected state, for the potential (no trace factors needed)
        return n, T, raw, system.potential(), system.held_energy()

    system.state(z0)
    u0 = system.held_energy()
    phi_start_path = system.potential()
    system.phi_eq = phi_eq
    rhs_before, jac_before = system.n_rhs, system.n_jac
    if not np.isfinite(system.clock_rhs(0.0, z0)).all():
        return _Path("failed", "no entropy production at the SEA start state under this metric",
                     times, temps, xs, np.nan, np.nan, np.nan, np.nan, 0, _time.perf_counter() - started)
    tau0 = system.tau
    # the clock from the start: s - s_start; a path still short of the stop progress this far on stalls
    s_limit = np.log1p(-lam_start) - np.log1p(-lam_stop) + _STALL_MARGIN
    run = _run_compiled if (compiled is not None and _COMPILED_STEPPER) else _run_scipy
    status, reason, ts, lams, taus, dens, steps, u_err, raw_err, worst_drop = run(
        system, z0, lam_of, phi_start_path, settings, rtol, atol, s_limit, started, project_state, u0,
        _Balance(elements, target, e_scale, E_active, project.target))
    elapsed = _elapsed_time(np.asarray(ts), np.concatenate([[tau0], np.asarray(taus, float)]))
    e_err = 0.0

    ts_a, lams_a = np.asarray(ts), np.maximum.accumulate(np.asarray(lams))

    def z_at(t, k):
        return dens[k][1](t - dens[k][0])

    def lam_at(t, k):
        return lam_of(project_state(z_at(t, k))[3])

    phi_grid_prev, grid_drop = np.nan, 0.0
    for i, level in enumerate(grid):
        if level < lams_a[0] or level > lams_a[-1]:
            continue
        k = int(np.searchsorted(lams_a, level))  # step k brackets the level: (ts[k-1], ts[k]]
        if k == 0:
            t = 0.0
            n = n0
            system.state(z0)
            T, phi, energy = system.temperature, system.potential(), system.held_energy()
        else:
            t = _level_time(lambda s: lam_at(s, k - 1), ts_a[k - 1], ts_a[k], lams[k - 1], lams[k], level)
            n, T, _, phi, energy = project_state(z_at(t, k - 1))
        e_err = max(e_err, float(np.max(np.abs(elements @ n - target) / e_scale)))
        u_err = max(u_err, abs(energy - u0) / max(abs(u0), 1e-300))
        if system.reactor == "isothermal":
            u_err = np.nan  # nothing energetic is held fixed at (T, P)
        if i > 0 and np.isfinite(phi_grid_prev):
            grid_drop = max(grid_drop, (phi_grid_prev - phi) / drive)
        phi_grid_prev = phi
        times[i], temps[i] = np.interp(t, ts_a, elapsed), T
        xs[i] = n / n.sum()
    return _Path(status, reason, times, temps, xs, e_err, raw_err, u_err, max(worst_drop, grid_drop, 0.0), steps,
                 _time.perf_counter() - started, rhs_evaluations=system.n_rhs - rhs_before,
                 jacobian_evaluations=system.n_jac - jac_before)


def _elapsed_time(clock: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Time (s) at each accepted step of a path on the progress clock: the integral of tau ds,
    tau = dt/ds (s), with tau exponential in s over each step (the log-mean of its ends), exact
    near equilibrium, where a single mode leaves tau constant, and wherever tau grows or decays
    at one rate over a step. Simpson's rule, with a third evaluation of the right-hand side in
    the middle of each step, gave path times within 4e-3 relative of these (median 3e-4 on the
    onsager path, 1e-7 on the fitted ones; gri30 benchmark case) for a sixth more evaluations."""
    ds = np.diff(clock)
    a, b = tau[:-1], tau[1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.log(b / a)
        log_mean = np.where(np.abs(ratio) > 1e-8, (b - a) / ratio, 0.5 * (a + b))
    return np.concatenate([[0.0], np.cumsum(ds * log_mean)])


def _run_scipy(system, z0, lam_of, phi_start, settings, rtol, atol, s_limit, started, project_state, u0, balance):
    """The steps of one SEA path on the progress clock through scipy's BDF with ``_GlobalNewton``
    (the log-mean metric, and the others where the compiled route cannot run). Returns (status,
    reason, clock s, progress, tau s of each accepted step, dense outputs as (clock offset,
    interpolant), steps, largest energy error, largest element drift before projection, largest
    entropy decrease)."""
    log_mean = system.mob.kind == "log-mean"
    lam_stop = settings.end_progress
    status, reason = "ok", ""
    raw_err = u_err = 0.0
    worst_drop = 0.0
    phi_prev = phi_start
    ts, lams, taus, dens = [0.0], [lam_of(phi_prev)], [], []  # dens: (clock offset, dense output)
    newton = _GlobalNewton(system)
    retries = 0
    try:
        solver = _lean_lu(BDF(system.clock_rhs, 0.0, z0, t_bound=np.inf, rtol=rtol, atol=atol,
                              jac=system.clock_jac))
        newton.solver = solver
        steps = 0
        while True:
            newton.last_jac = None
            before = _solver_state(solver)
            with newton, np.errstate(over="ignore", invalid="ignore"):  # a diverging Newton iterate is rejected by BDF
                msg = solver.step()
            steps += 1
            if solver.status == "failed":
                status, reason = _stalled_or_failed(lams[-1], solver.t, str(msg))
                break
            # project the accepted step back onto the element constraints and hand it to the
            # solver (its whole history shifts with it, see _replace_state), so drift cannot pile up
            n, T, raw, phi, energy = project_state(solver.y)
            if (phi_prev - phi) / lam_of.drive > _DROP_TOLERANCE and retries < _DROP_RETRIES:
                # the step's iteration converged to a state of lower entropy, which the exact
                # SEA path never reaches: take the step again at half the size
                retries += 1
                _restore_halved(solver, before)
                continue
            retries = 0
            z_p = system.z_of(n)
            _replace_state(solver, z_p)
            newton.hard -= 1
            if newton.last_jac is not None:
                # the full iteration's last Jacobian, from its last iterate: as fresh as a new one
                solver.J, solver.LU = newton.last_jac, None
            elif _FRESH_JACOBIAN and not log_mean:
                # BDF keeps a Jacobian until its Newton iteration fails; with an old one the
                # iteration stops on small corrections while the residual still holds stiff
                # components, which break the element balance and cost the projection a kick
                try:
                    solver.J = system.clock_jac(solver.t, z_p)
                    solver.LU = None
                except (_OffConstraint, ct.CanteraError):
                    pass  # BDF keeps its last Jacobian
            if not np.isfinite(system.clock_rhs(solver.t, z_p)).all():  # tau at the accepted state
                status, reason = _stalled_or_failed(lams[-1], solver.t, "no entropy production left")
                break
            tau_end = system.tau
            dense = solver.dense_output()
            u_err = max(u_err, abs(energy - u0) / max(abs(u0), 1e-300))
            raw_err = max(raw_err, raw)
            worst_drop = max(worst_drop, (phi_prev - phi) / lam_of.drive)
            phi_prev = phi
            ts.append(solver.t)
            lams.append(lam_of(phi))
            taus.append(tau_end)
            dens.append((0.0, dense))
            status, reason = _stop(lams[-1], ts[-1], steps, started, lam_stop, s_limit, settings)
            if status is not None:
                break
        status = status or "ok"
    except Exception as err:  # Cantera or linear-algebra failure: record, do not raise
        status, reason = "failed", f"{type(err).__name__}: {str(err).splitlines()[0][:300] if str(err) else ''}"
        steps = len(ts) - 1
    return status, reason, ts, lams, taus, dens, steps, u_err, raw_err, worst_drop


#: accepted steps per call of the compiled loop; between calls Python checks the wall budget
_CHUNK = 256


def _run_compiled(system, z0, lam_of, phi_start, settings, rtol, atol, s_limit, started, project_state, u0,
                  balance):
    """The steps of one SEA path in the compiled loop (``_kernels.bdf_path``): the same BDF, Newton
    iterations, projection and entropy guard as :func:`_run_scipy`, without its Python cost per
    step (about 0.25 ms). Returns what :func:`_run_scipy` returns.

    Two differences: the wall budget is checked every ``_CHUNK`` accepted steps, and a state the
    compiled projection cannot settle (no temperature, a singular element system), after the
    halvings of the entropy guard, fails the path where the scipy route would try Cantera's.
    """
    k = system._compiled.kernels
    H, L, active_pos, nu_sum = system._compiled.path_args()
    na = z0.size
    max_order = k.MAX_ORDER
    kappa = np.array([0, -0.1850, -1 / 9, -0.0823, -0.0415, 0])  # scipy's BDF (NDF) coefficients
    gamma = np.hstack((0, np.cumsum(1 / np.arange(1, max_order + 1))))
    alpha = (1 - kappa) * gamma
    error_const = kappa * gamma + 1 / np.arange(1, max_order + 2)
    newton_tol = max(10 * np.finfo(float).eps / rtol, min(0.03, rtol ** 0.5))
    fs = np.zeros(k.N_FLOAT_STATE)
    fs[k.F_TGUESS] = system.temperature
    fs[k.F_PHI] = phi_start
    fs[k.F_PHI_EQ] = system.phi_eq
    istate = np.zeros(11, np.int64)
    D = np.zeros((max_order + 3, na))
    yv = np.empty(na)
    J = np.empty((na, na))
    LU = np.empty((na, na))
    piv = np.empty(na, np.int64)
    rec = (np.empty(_CHUNK), np.empty(_CHUNK), np.empty(_CHUNK), np.empty(_CHUNK, np.int64),
           np.empty((_CHUNK, max_order + 1, na)), np.empty(_CHUNK), np.empty(_CHUNK))
    elements = np.ascontiguousarray(balance.elements, float)
    ts, lams, taus, dens = [0.0], [lam_of(phi_start)], [], []
    status, reason = None, ""
    lam_stop = settings.end_progress
    if not k.bdf_start(z0, H, L, active_pos, nu_sum, rtol, atol, fs, istate, D, J, yv):
        return ("failed", "no right-hand side or Jacobian at the SEA start state", ts, lams, taus, dens, 0, 0.0, 0.0,
                0.0)
    while status is None:
        code, nrec = k.bdf_path(
            H, L, active_pos, nu_sum, balance.E_active, balance.E_target, elements, balance.target, balance.e_scale,
            alpha, gamma, error_const, rtol, atol, newton_tol, lam_of.start, lam_of.phi_start, lam_of.drive,
            lam_stop, 0.0, s_limit, settings.max_steps, u0,
            _DROP_TOLERANCE, _DROP_RETRIES, _HARD_STEPS, _FULL_NEWTON_ITERATIONS, _MAX_LOG_STEP, _GLOBAL_NEWTON,
            _FRESH_JACOBIAN, _STILL_START,
            fs, istate, D, yv, J, LU, piv, *rec)
        for i in range(nrec):
            order = int(rec[3][i])
            ts.append(float(rec[0][i]))
            lams.append(float(rec[5][i]))
            taus.append(float(rec[6][i]))
            dens.append((0.0, (float(rec[1][i]), float(rec[0][i]), float(rec[2][i]), order,
                               rec[4][i, :order + 1].copy())))
        steps = int(istate[k.I_STEPS])
        if code == k.STEP_TOO_SMALL:
            status, reason = _stalled_or_failed(lams[-1], fs[k.F_T], "Required step size is less than spacing "
                                                "between numbers.")
        elif code == k.STEP_FAILED:
            status, reason = "failed", (f"at progress {lams[-1]:.6g}: a step's state could not be projected onto "
                                        "the element totals")
        elif code == k.STEP_CHUNK:  # the kernel checks progress, clock and steps itself: the wall budget here
            if _time.perf_counter() - started > settings.max_wall_seconds:
                status, reason = "budget", (f"wall budget {settings.max_wall_seconds:g} s used at progress "
                                            f"{lams[-1]:.6g}")
        else:
            status, reason = _stop(lams[-1], ts[-1], steps, started, lam_stop, s_limit, settings)
    system.n_rhs += int(istate[k.I_RHS])
    system.n_jac += int(istate[k.I_JAC])
    system.temperature = float(fs[k.F_TGUESS])

    return (status, reason, ts, lams, taus, _LazyDense(dens), steps, float(fs[k.F_UERR]), float(fs[k.F_RAW]),
            float(fs[k.F_DROP]))


def _stalled_or_failed(lam, clock, message):
    """A solver that cannot go on: where the step it needs vanishes the path is approaching an
    equilibrium of its own metric (``incomplete``), otherwise it ``failed``."""
    if "spacing between numbers" in message or "no entropy production" in message:
        return "incomplete", (f"stalled at progress {lam:.6g} (clock s = {clock:.4g}): the metric's path approaches "
                              "an equilibrium of its own short of the true one")
    return "failed", f"BDF at progress {lam:.6g}: {message}"


class _LazyDense(list):
    """(clock offset s, dense output) of each step, the interpolant built on first use from the
    recorded (t_old, t, h, order, differences): most steps are never sampled."""

    def __getitem__(self, i):
        offset, dense = list.__getitem__(self, i)
        if isinstance(dense, tuple):
            dense = _bdf.BdfDenseOutput(*dense)
            list.__setitem__(self, i, (offset, dense))
        return offset, dense


def _stop(lam, s, steps, started, lam_stop, s_limit, settings):
    """(status, reason) where a path stops after an accepted step: ``ok`` at the stop progress,
    ``incomplete`` where its clock ran past the stop without the progress (stalled), ``budget``
    for steps or wall time; (None, "") to go on."""
    if lam >= lam_stop:
        return "ok", ""
    if s > s_limit:
        return "incomplete", (f"stalled at progress {lam:.6g}: the clock s = -ln(1 - lambda) ran {_STALL_MARGIN:g} past "
                              "the stop progress's without the potential getting there; the metric's path "
                              "approaches an equilibrium of its own short of the true one")
    if steps >= settings.max_steps:
        return "budget", f"step budget {settings.max_steps} used at progress {lam:.6g}"
    if _time.perf_counter() - started > settings.max_wall_seconds:
        return "budget", f"wall budget {settings.max_wall_seconds:g} s used at progress {lam:.6g}"
    return None, ""


def lagging_species(x_path, x_eq, names, nu, mobility, top=3) -> str:
    """Which species hold the disequilibrium left at the end of a path that did not finish.

    Ranks the species by their term x_k ln(x_k / x_k,eq) of the relative entropy of the last
    reached composition against equilibrium (Kullback-Leibler divergence: the share of the
    remaining potential that sits in each species, for an ideal gas at fixed T and P), and gives
    the largest mobility of the reactions that can change each one.

    Parameters
    ----------
    x_path, x_eq : (ns,) mole fractions (1) at the last reached progress level and at equilibrium.
    names : species names.
    nu : (ns, nr) net stoichiometric coefficients of the reactions in the SEA dynamics.
    mobility : (nr,) mol m-3 s-1, the metric's (reference) mobility of each.

    Returns
    -------
    str, e.g. ``"C2H6 (x = 2.4e-04 against 2.8e-28 at equilibrium; fastest reaction mobility
    2.2e-15 mol m-3 s-1)"``, or ``""`` if nothing is finite.
    """
    x = np.asarray(x_path, float)
    xe = np.asarray(x_eq, float)
    if not (np.isfinite(x).all() and np.isfinite(xe).all()):
        return ""
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(x > 0, x * np.log(x / np.maximum(xe, 1e-300)), 0.0)
    parts = []
    for k in np.argsort(-term)[:top]:
        if not term[k] > 0:
            break
        touching = np.abs(nu[k]) > 0
        fastest = float(np.max(mobility[touching])) if touching.any() else 0.0
        parts.append(f"{names[k]} (x = {x[k]:.2g} against {xe[k]:.2g} at equilibrium; fastest reaction "
                     f"mobility {fastest:.2g} mol m-3 s-1)")
    return ", ".join(parts)


def _level_time(lam_at, a, b, la, lb, level, tol=1e-10, max_iter=8):
    """Clock in [a, b] where the progress reaches ``level`` (Illinois regula falsi on the dense output).

    ``la``, ``lb`` are the progress at the step ends; lambda is smooth and monotone inside a step.
    The iteration runs on -ln(1 - lambda), which the clock s follows exactly on the exact path
    (ds = d(-ln(1 - lambda))), so the first secant point is already close: about 2.1 evaluations
    per level instead of 3.7 on lambda itself (gri30 benchmark case). Stops at |lambda - level| < tol.
    """
    def gap(lam):
        return np.log1p(-level) - np.log1p(-min(lam, 1.0 - 1e-16))

    fa, fb = gap(la), gap(lb)
    if fb == fa or fa * fb > 0:
        return b if abs(fb) <= abs(fa) else a
    side = 0
    t = b
    for _ in range(max_iter):
        t = b - fb * (b - a) / (fb - fa)
        lam = lam_at(t)
        if abs(lam - level) <= tol:
            break
        ft = gap(lam)
        if ft * fb > 0:
            b, fb = t, ft
            if side == -1:
                fa *= 0.5
            side = -1
        else:
            a, fa = t, ft
            if side == 1:
                fb *= 0.5
            side = 1
    return t
