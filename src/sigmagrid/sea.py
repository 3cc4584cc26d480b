"""Steepest-entropy-ascent (SEA) comparison of a relaxation (DESIGN section 3).

In reaction-extent space the entropy gradient at fixed (U, V), (H, P) -- or the gradient of
S - H/T at fixed (T, P) -- is the affinity over temperature, so a symmetric positive mobility M
defines the steepest-ascent dynamics

    q = M x,   x_j = A_j / (R T),   dN/dt = V nu q,

with the reactor's constraint fixing T. Five metric families are compared with the observed
(mass-action) path:

==================  ==============================  =========================================
name                mobility M, mol m-3 s-1         what it shows
==================  ==============================  =========================================
log-mean            diag(Lambda_j(state))           mass action itself (a built-in check)
onsager             diag(r_eq,j) at equilibrium     linear theory carried far from equilibrium
fitted-scalar       m I                             one isotropic mobility, fitted
fitted-diagonal     diag(m_j)                       best constant metric
fitted-arrhenius    diag(m_j exp(-b_j (1/T-1/T_r)))  a temperature-only metric
==================  ==============================  =========================================

Numerics: the SEA path is integrated in logarithmic amounts z_k = ln(N_k / N_0) (amounts stay
positive whatever the step), with an analytic Jacobian assembled from nu, the diagonal mobility and
a rank-one correction for the temperature constraint; T is solved by Newton's method at every
evaluation, so U (or H) holds to the Newton tolerance. Each stored state is projected back onto
the element constraints by a multiplicative (element-potential) correction, the projection method
of Hairer, Lubich and Wanner, Geometric Numerical Integration (2006), sec. IV.4.

References
----------
Mielke, A. (2011), A gradient structure for reaction-diffusion systems and for
energy-drift-diffusion systems, Nonlinearity 24, 1329-1346 (log-mean mobility).
Onsager, L. (1931), Reciprocal relations in irreversible processes I, Phys. Rev. 37, 405.
de Groot, S. R. and Mazur, P. (1962), Non-Equilibrium Thermodynamics, North-Holland.
"""

from __future__ import annotations

import time as _time
import warnings
from dataclasses import dataclass

import cantera as ct
import numpy as np
import xarray as xr
from scipy import sparse
from scipy.integrate import BDF

from .mechanism import MechanismInfo
from .units import GAS_CONSTANT, KMOL, PER_KMOL

METRICS = ("log-mean", "onsager", "fitted-scalar", "fitted-diagonal", "fitted-arrhenius")
WEIGHTS = ("entropy", "time", "progress")
IRREVERSIBLE_TREATMENTS = ("reversible", "omit")
PROGRESS_LEVELS = (0.5, 0.9, 0.99)
N_SLOW_COMPARED = 5  # slow modes compared in the near-equilibrium check

_R = GAS_CONSTANT  # J/(mol K)


@dataclass(frozen=True)
class SeaSettings:
    """What the SEA comparison computes and how.

    metrics : subset of :data:`METRICS`.
    start_progress : 1, progress lambda_0 of the observed state the SEA paths start from.
    weight : weight of the fits, ``entropy`` (entropy produced per interval), ``time`` (uniform in
        time) or ``progress`` (uniform in progress; since the progress is affine in the potential
        this is the entropy weight again, kept as a name users look for).
    n_progress : size of the shared progress grid, from ``start_progress`` to ``end_progress``,
        Chebyshev-spaced (dense at both ends).
    end_progress : 1, last grid point (the relaxation only approaches lambda = 1).
    irreversible : ``reversible`` (irreversible reactions get their thermodynamic reverse in the SEA
        dynamics) or ``omit`` (left out of the SEA dynamics and fits).
    rtol, atol : tolerances of the BDF integration of the log-mean path in ln(N) (atol is an
        absolute error of ln N, i.e. a relative error of the amount); tight, since that path must
        reproduce the observed one.
    metric_rtol, metric_atol : the same for the other metrics, whose paths differ from the observed
        one by far more than the integration error (1e-5 gives about 1e-4 rad on gri30).
    max_steps : step budget of one SEA path.
    max_wall_seconds : s, wall-clock budget of one SEA path.
    n_modes : number of slowest relaxation rates stored.
    time_factor : 1, an SEA path stops (status ``incomplete``) after this multiple of the observed
        relaxation time.
    trace_level : 1, amount (over the total) below which a constant or arrhenius mobility is scaled
        down like mass action (see ``_System._trace``); 0 switches it off.
    """

    metrics: tuple[str, ...] = METRICS
    start_progress: float = 0.01
    weight: str = "entropy"
    n_progress: int = 101
    end_progress: float = 1.0 - 1e-6
    irreversible: str = "reversible"
    rtol: float = 1e-6
    atol: float = 1e-8
    metric_rtol: float = 1e-5
    metric_atol: float = 1e-7
    max_steps: int = 20_000
    max_wall_seconds: float = 120.0
    n_modes: int = 10
    trace_level: float = 1e-14
    time_factor: float = 1e3

    @classmethod
    def from_mapping(cls, mapping: dict | None) -> "SeaSettings":
        """Settings from a config section (keys as the field names, ``-`` or ``_``); checked.

        Raises ``ValueError`` naming an unknown key.
        """
        mapping = dict(mapping or {})
        fields = cls.__dataclass_fields__
        kwargs = {}
        for key, value in mapping.items():
            name = key.replace("-", "_")
            if name not in fields:
                raise ValueError(f"sea.{key}: unknown setting; allowed: {sorted(fields)}")
            kwargs[name] = tuple(value) if name == "metrics" else value
        settings = cls(**kwargs)
        settings.check()
        return settings

    def check(self) -> None:
        """Raise ``ValueError`` naming the bad field."""
        bad = [m for m in self.metrics if m not in METRICS]
        if bad or not self.metrics:
            raise ValueError(f"sea.metrics: {bad or 'empty'}; allowed: {METRICS}")
        if self.weight not in WEIGHTS:
            raise ValueError(f"sea.weight must be one of {WEIGHTS}, not {self.weight!r}")
        if self.irreversible not in IRREVERSIBLE_TREATMENTS:
            raise ValueError(f"sea.irreversible must be one of {IRREVERSIBLE_TREATMENTS}")
        if not 0.0 <= self.start_progress < self.end_progress < 1.0:
            raise ValueError("sea: need 0 <= start_progress < end_progress < 1")
        if self.n_progress < 2 or self.n_modes < 1:
            raise ValueError("sea: n_progress >= 2 and n_modes >= 1")
        if not (self.rtol > 0 and self.atol > 0 and self.metric_rtol > 0 and self.metric_atol > 0):
            raise ValueError("sea: rtol and atol must be positive")


# --------------------------------------------------------------------------------------------
# small documented pieces


def progress_grid(n: int, start: float, end: float) -> np.ndarray:
    """Shared progress grid, 1: Chebyshev-spaced between ``start`` and ``end`` (dense at both ends)."""
    s = 0.5 * (1.0 - np.cos(np.pi * np.arange(n) / (n - 1)))
    grid = start + (end - start) * s
    grid[0], grid[-1] = start, end
    return grid


def fisher_rao_angle(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Fisher-Rao angle 2 arccos(sum_k sqrt(x_k y_k)) between mole-fraction vectors, rad.

    Computed as 4 arcsin(|sqrt x - sqrt y| / 2), the same angle without the loss of precision of
    arccos near 1 (Amari and Nagaoka, Methods of Information Geometry, 2000, sec. 2.5).
    Negative round-off entries are clipped to zero; rows are renormalised.
    """
    x = np.clip(np.asarray(x, float), 0.0, None)
    y = np.clip(np.asarray(y, float), 0.0, None)
    a = np.sqrt(x / x.sum(axis=-1, keepdims=True))
    b = np.sqrt(y / y.sum(axis=-1, keepdims=True))
    chord = np.linalg.norm(a - b, axis=-1)
    return 4.0 * np.arcsin(np.clip(chord / 2.0, 0.0, 1.0))


def log_mean_mobility(forward: np.ndarray, reverse: np.ndarray, disequilibrium: np.ndarray) -> np.ndarray:
    """Lambda_j = (r+ - r-)/(ln r+ - ln r-) with the smaller one-way rate taken from thermodynamics.

    The larger one-way rate rho = max(r+, r-) (mol m-3 s-1) is kept and the other is rho e^-|x|,
    so Lambda = rho (1 - e^-|x|) / |x| and Lambda x equals the mass-action net rate also where a
    trace species is absent and one of Cantera's one-way rates is exactly zero (Mielke 2011).
    """
    rho = np.maximum(forward, reverse)
    u = np.abs(disequilibrium)
    small = u < 1e-8
    phi = np.where(small, 1.0 - u / 2.0 + u * u / 6.0, -np.expm1(-u) / np.where(small, 1.0, u))
    return rho * phi


def alignment(x: np.ndarray, q: np.ndarray, mobility: np.ndarray) -> np.ndarray:
    """cos theta_G = x.q / (sqrt(q.G.q) sqrt(x.M.x)) for diagonal M = G^-1, 1 (in [-1, 1]).

    x : (..., nr) disequilibrium, 1; q : (..., nr) net rates, mol m-3 s-1; mobility : (..., nr).
    A reaction with zero mobility but a nonzero rate has infinite cost: cos theta = 0 there.
    NaN where there is neither rate nor affinity.
    """
    m = np.broadcast_to(mobility, np.broadcast(x, q).shape)
    pos = m > 0
    cost = np.where(pos, q * q / np.where(pos, m, 1.0), np.where(q != 0, np.inf, 0.0)).sum(axis=-1)
    drive = (m * x * x).sum(axis=-1)
    num = (x * q).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / (np.sqrt(cost) * np.sqrt(drive))
    out = np.where(np.isinf(cost) & np.isfinite(num), 0.0, out)
    return np.clip(out, -1.0, 1.0)


def path_weights(kind: str, time: np.ndarray, potential: np.ndarray, progress: np.ndarray) -> np.ndarray:
    """Per-sample trapezoid weights of the fits (DESIGN section 3).

    ``entropy``: entropy produced around each sample, J/K (increments of the potential);
    ``time``: s; ``progress``: 1. Negative increments (round-off near the end) count as zero.
    """
    coordinate = {"entropy": potential, "time": time, "progress": progress}[kind]
    inc = np.clip(np.diff(coordinate), 0.0, None)
    w = np.zeros(coordinate.size)
    w[:-1] += 0.5 * inc
    w[1:] += 0.5 * inc
    return w


def fit_scalar(x: np.ndarray, q: np.ndarray, w: np.ndarray, valid: np.ndarray) -> float:
    """m = sum_ij w_i x_ij q_ij / sum_ij w_i x_ij^2 (weighted least squares of q on m x), mol m-3 s-1."""
    ww = w[:, None] * valid
    den = float((ww * x * x).sum())
    return float((ww * x * q).sum()) / den if den > 0 else float("nan")


def fit_diagonal(x: np.ndarray, q: np.ndarray, w: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """m_j = sum_i w_i x_ij q_ij / sum_i w_i x_ij^2, mol m-3 s-1 (>= 0 where x_j q_j >= 0).

    NaN for a reaction with no weighted affinity on the path.
    """
    ww = w[:, None] * valid
    den = (ww * x * x).sum(axis=0)
    num = (ww * x * q).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


def fit_arrhenius(x, q, w, valid, temperature, reference_temperature):
    """Per-reaction fit of m_j(T) = m_ref,j exp(-b_j (1/T - 1/T_ref)) to q_j ~ m_j(T) x_j.

    For fixed b_j the best m_ref,j is closed-form; b_j (K) maximises the explained weighted sum of
    squares, found by a coarse scan and golden-section refinement within |b| (1/T_min - 1/T_max) <= 40.
    Returns (m_ref mol m-3 s-1, b K). With no temperature span (isothermal) b = 0.
    """
    rows = w > 1e-12 * w.max()  # rows without weight change nothing
    x, q, w, valid, temperature = x[rows], q[rows], w[rows], valid[rows], temperature[rows]
    ww = w[:, None] * valid
    u = 1.0 / temperature - 1.0 / reference_temperature  # 1/K
    span = float(u.max() - u.min()) if u.size else 0.0
    nr = x.shape[1]
    if span < 1e-9:
        m = fit_diagonal(x, q, w, valid)
        return m, np.zeros(nr)

    def score(b):  # explained sum of squares per reaction, and m_ref
        g = np.exp(np.clip(-np.outer(u, b), -700.0, 700.0))
        gx = g * x
        num = (ww * gx * q).sum(axis=0)
        den = (ww * gx * gx).sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            m = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
            s = np.where(den > 0, num * num / np.where(den > 0, den, 1.0), -np.inf)
        return s, m

    bmax = 40.0 / span
    scan = np.linspace(-bmax, bmax, 17)
    scores = np.array([score(np.full(nr, b))[0] for b in scan])  # (17, nr)
    best = np.argmax(scores, axis=0)
    lo = scan[np.clip(best - 1, 0, scan.size - 1)]
    hi = scan[np.clip(best + 1, 0, scan.size - 1)]
    golden = 0.5 * (np.sqrt(5.0) - 1.0)
    c = hi - golden * (hi - lo)
    d = lo + golden * (hi - lo)
    sc, sd = score(c)[0], score(d)[0]
    for _ in range(24):  # interval shrinks to 0.618^24 ~ 1e-5 of a scan cell
        left = sc > sd  # maximum in [lo, d]
        hi = np.where(left, d, hi)
        lo = np.where(left, lo, c)
        c_new = hi - golden * (hi - lo)
        d_new = lo + golden * (hi - lo)
        c, d = c_new, d_new
        sc, sd = score(c)[0], score(d)[0]
    b = 0.5 * (lo + hi)
    s_b, m = score(b)
    s_scan = scores[best, np.arange(nr)]
    b = np.where(s_scan > s_b, scan[best], b)  # keep the scan point if refinement did worse
    m = score(b)[1]
    return m, b


def fit_quality(q: np.ndarray, predicted: np.ndarray, w: np.ndarray, valid: np.ndarray) -> float:
    """Weighted coefficient of determination 1 - sum w |q - M x|^2 / sum w |q|^2, 1 (<= 1)."""
    ww = w[:, None] * valid
    total = float((ww * q * q).sum())
    if not total > 0:
        return float("nan")
    resid = np.where(valid, q - predicted, 0.0)
    return 1.0 - float((ww * resid * resid).sum()) / total


# --------------------------------------------------------------------------------------------
# the SEA dynamics


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
                 temperature, mobility: _Mobility, trace_level: float = 0.0):
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
        # sparse products: cheaper, and free of BLAS threading (which, on a loaded machine, makes a
        # 53 x 325 x 53 product a thousand times slower)
        self.nu_sp = sparse.csr_matrix(self.nu_a)
        self.nu_sum = nu[:, reactions].sum(axis=0)  # (nr_in,)
        self.orders = gas.reactant_stoich_coeffs[np.ix_(active, reactions)].T  # (nr_in, na)
        self.order_sum = gas.reactant_stoich_coeffs[:, reactions].sum(axis=0)
        self.n_ref = float(n_start.sum())
        self.volume = volume  # m3 (isolated)
        self.pressure = pressure  # Pa (constant-pressure, isothermal)
        self.temperature = temperature  # K, Newton guess (isothermal: fixed)
        self.mob = mobility
        part = (gas.product_stoich_coeffs + gas.reactant_stoich_coeffs) > 0
        self.part_a = part[np.ix_(active, reactions)].astype(float)  # (na, nr_in)
        self.eps = trace_level * self.n_ref  # mol
        self._trace_factor = 1.0
        self._cache = None  # species energies and heat capacities at the last temperature
        self.n_rhs = 0
        self.n_jac = 0
        self._set(n_start, newton=False)
        self.energy0 = self._energy_sum(n_start)  # J, U or H from the species properties

    # state --------------------------------------------------------------------------------
    def amounts(self, z: np.ndarray) -> np.ndarray:
        n = self.n_full.copy()
        n[self.active] = self.n_ref * np.exp(z)
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
            for _ in range(50):
                if self.reactor == "isolated":
                    e_rt, c_r = g.standard_int_energies_RT, g.standard_cp_R - 1.0
                else:
                    e_rt, c_r = g.standard_enthalpies_RT, g.standard_cp_R
                dT = -(float(n @ e_rt) * _R * T - self.energy0) / (float(n @ c_r) * _R)
                if abs(dT) < 1e-11 * T:
                    break
                T = min(max(T + max(min(dT, 0.5 * T), -0.5 * T), 100.0), 2e4)
                self._set_T(T, y, False)
            else:
                raise RuntimeError("temperature Newton iteration did not converge")
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
        x = -g.delta_gibbs[self.rx] * PER_KMOL / (_R * T)
        # only mass action needs Cantera's rate evaluation; a metric needs the thermodynamics only
        rf = g.forward_rates_of_progress[self.rx] * KMOL if self.mob.kind == "log-mean" else None
        return x, rf

    def _rates(self, T, x, rf):
        """Net rates q (mol m-3 s-1) of the SEA dynamics, reverse one-way rates, mobility."""
        mob = self.mob
        if mob.kind == "log-mean":
            rr = np.where(self.reversible_in, self.gas.reverse_rates_of_progress[self.rx] * KMOL,
                          rf * np.exp(np.clip(-x, -745.0, 700.0)))
            q = np.where(self.reversible_in, self.gas.net_rates_of_progress[self.rx] * KMOL, rf - rr)
            return q, rr, None
        m = mob.m if mob.kind == "constant" else mob.m * np.exp(-mob.b * (1.0 / T - 1.0 / mob.t_ref))
        return m * self._trace_factor * x, None, m * self._trace_factor

    def _trace(self, n):
        """g_j = prod_k N_k/(N_k + eps) over the active species of reaction j (1), and eps/(N+eps).

        A constant mobility would relax a species of amount N at a rate ~ m/N, without bound as
        N -> 0; below the trace level eps the mobility is scaled like mass action instead. It
        changes nothing where every species of the reaction is well above eps.
        """
        na = n[self.active]
        ratio = self.eps / na
        self._trace_factor = np.exp(-(self.part_a.T @ np.log1p(ratio))) if self.eps > 0 else 1.0
        self._trace_slope = ratio / (1.0 + ratio) if self.eps > 0 else np.zeros(na.size)

    def rhs(self, t, z):
        self.n_rhs += 1
        n, T, V = self.state(z)
        x, rf = self._kinetics(T)
        q, _, _ = self._rates(T, x, rf)
        return V * (self.nu_a @ q) / n[self.active]

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

    def _dx(self, n, T, dT, dlnv):
        """d x_j / d z_i, (nr_in, na)."""
        du = self.gas.standard_int_energies_RT @ self.nu_rx  # Delta u_j / (R T)
        return -self.nu_a.T + np.outer(self.nu_sum, dlnv) + np.outer(du / T, dT)

    def jac(self, t, z):
        """Analytic Jacobian d(dz/dt)/dz: nu, the diagonal mobility and rank-one constraint terms.

        Third-body and falloff dependence of the one-way rates on composition is left out of the
        log-mean Jacobian (it only steers Newton's iteration, not the solution).
        """
        self.n_jac += 1
        n, T, V = self.state(z)
        g = self.gas
        x, rf = self._kinetics(T)
        q, rr, m = self._rates(T, x, rf)
        dT, dlnv = self._constraint_derivatives(n, T, V)
        dx = self._dx(n, T, dT, dlnv)
        if self.mob.kind == "log-mean":
            kf = g.forward_rate_constants[self.rx]
            with np.errstate(invalid="ignore", divide="ignore"):
                dlnk = np.where(kf != 0, g.forward_rate_constants_ddT[self.rx] / np.where(kf != 0, kf, 1.0), 0.0)
            dlnr = self.orders - np.outer(self.order_sum, dlnv) + np.outer(dlnk, dT)
            dq = q[:, None] * dlnr + rr[:, None] * dx
        else:
            dq = m[:, None] * (dx + x[:, None] * self.part_a.T * self._trace_slope[None, :])
            if self.mob.kind == "arrhenius":
                dq += np.outer(x * m * self.mob.b / T**2, dT)
        na = n[self.active]
        flux = self.nu_a @ q
        f = V * flux / na
        J = (V * (self.nu_sp @ dq) + np.outer(flux, V * dlnv)) / na[:, None]
        J[np.diag_indices_from(J)] -= f
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
            try:
                lam = np.linalg.solve((E * na) @ E.T, -res)
            except np.linalg.LinAlgError:  # dependent element rows
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


def _sea_path(system: _System, z0, lam_start, phi_start, phi_eq, grid, elements, settings, t_scale):
    """Integrate one SEA path and sample it at the progress grid (NaN before the start)."""
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

    def lam_of(phi):
        return lam_start + (1.0 - lam_start) * (phi - phi_start) / drive

    project = _Projector(elements, target, system.active, n0)

    def project_state(z):
        n = system.amounts(z)
        raw = float(np.max(np.abs(elements @ n - target) / e_scale))
        n = project(n)
        _, T, _ = system.state(system.z_of(n))
        return n, T, raw

    status, reason = "ok", ""
    e_err = raw_err = u_err = 0.0
    worst_drop = 0.0
    u0 = None
    system.state(z0)
    u0 = system.held_energy()
    phi_prev = system.potential()
    ts, lams, dens = [0.0], [lam_of(phi_prev)], []
    solver = None
    try:
        solver = BDF(system.rhs, 0.0, z0, t_bound=settings.time_factor * t_scale, rtol=rtol, atol=atol,
                     jac=system.jac)
        steps = 0
        while True:
            msg = solver.step()
            steps += 1
            if solver.status == "failed":
                status, reason = "failed", f"BDF at t = {solver.t:.4g} s, progress {lams[-1]:.6g}: {msg}"
                break
            # project the accepted step back onto the element constraints and hand it to the
            # solver (its newest history entry D[0] is the current state), so drift cannot pile up
            n, T, raw = project_state(solver.y)
            z_p = system.z_of(n)
            solver.y = z_p
            solver.D[0] = z_p
            phi = system.potential()
            u_err = max(u_err, abs(system.held_energy() - u0) / max(abs(u0), 1e-300))
            raw_err = max(raw_err, raw)
            worst_drop = max(worst_drop, (phi_prev - phi) / drive)
            phi_prev = phi
            ts.append(solver.t)
            lams.append(lam_of(phi))
            dens.append(solver.dense_output())
            if lams[-1] >= lam_stop:
                break
            if solver.status == "finished":
                status, reason = "incomplete", (f"time limit {solver.t:.3g} s ({settings.time_factor:g} x the observed "
                                                f"relaxation) reached at progress {lams[-1]:.6g}: the metric relaxes "
                                                "far more slowly than the kinetics, or towards a constrained equilibrium")
                break
            if steps >= settings.max_steps:
                status, reason = "budget", f"step budget {settings.max_steps} used at progress {lams[-1]:.6g}"
                break
            if _time.perf_counter() - started > settings.max_wall_seconds:
                status, reason = "budget", f"wall budget {settings.max_wall_seconds:g} s used at progress {lams[-1]:.6g}"
                break
    except Exception as err:  # Cantera or linear-algebra failure: record, do not raise
        status, reason = "failed", f"{type(err).__name__}: {str(err).splitlines()[0][:300] if str(err) else ''}"
        steps = len(ts) - 1

    ts_a, lams_a = np.asarray(ts), np.maximum.accumulate(np.asarray(lams))

    def lam_at(t, k):
        n, T, _ = project_state(dens[k](t))
        return lam_of(system.potential())

    phi_grid_prev, grid_drop = np.nan, 0.0
    for i, level in enumerate(grid):
        if level < lams_a[0] or level > lams_a[-1]:
            continue
        k = int(np.searchsorted(lams_a, level))  # step k brackets the level: (ts[k-1], ts[k]]
        if k == 0:
            t = 0.0
            n = n0
            system.state(z0)
            T = system.temperature
        else:
            t = _level_time(lambda s: lam_at(s, k - 1), ts_a[k - 1], ts_a[k], lams[k - 1], lams[k], level)
            n, T, _ = project_state(dens[k - 1](t))
        e_err = max(e_err, float(np.max(np.abs(elements @ n - target) / e_scale)))
        u_err = max(u_err, abs(system.held_energy() - u0) / max(abs(u0), 1e-300))
        phi = system.potential()
        if system.reactor == "isothermal":
            u_err = np.nan  # nothing energetic is held fixed at (T, P)
        if i > 0 and np.isfinite(phi_grid_prev):
            grid_drop = max(grid_drop, (phi_grid_prev - phi) / drive)
        phi_grid_prev = phi
        times[i], temps[i] = t, T
        xs[i] = n / n.sum()
    return _Path(status, reason, times, temps, xs, e_err, raw_err, u_err, max(worst_drop, grid_drop, 0.0), steps,
                 _time.perf_counter() - started)


def _level_time(lam_at, a, b, la, lb, level, tol=1e-10, max_iter=8):
    """Time in [a, b] where the progress reaches ``level`` (Illinois regula falsi on the dense output).

    ``la``, ``lb`` are the progress at the step ends; lambda is smooth and monotone inside a step,
    so a few iterations reach |lambda - level| < tol.
    """
    fa, fb = la - level, lb - level
    if fb == fa or fa * fb > 0:
        return b if abs(fb) <= abs(fa) else a
    side = 0
    t = b
    for _ in range(max_iter):
        t = b - fb * (b - a) / (fb - fa)
        ft = lam_at(t) - level
        if abs(ft) <= tol:
            break
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


# --------------------------------------------------------------------------------------------
# near-equilibrium spectra


def _hessian_z(system: _System, n, T, V):
    """H_z[k, i] = d(mu_k/RT)/dz_i on the reactor constraint, active species, (na, na)."""
    dT, dlnv = system._constraint_derivatives(n, T, V)
    ubar = system.gas.standard_int_energies_RT[system.active]  # u_k / (R T)
    return np.eye(dT.size) - dlnv[None, :] - np.outer(ubar / T, dT)


def sea_spectrum(system: _System, n_eq, mobility: np.ndarray) -> np.ndarray:
    """Nonzero relaxation rates (s-1, ascending) of q = M x linearised at equilibrium.

    The linearisation is dN/dt = -L H dN with L = V nu M nu^T and H the Hessian of -Phi/R in
    amounts on the reactor constraint (both symmetric positive semi-definite), so the rates are
    the eigenvalues of L H (Onsager 1931; de Groot and Mazur 1962, ch. VI). They are computed
    as those of the symmetric G^1/2 P G^1/2 in species space, with G = N^1/2 H N^1/2 (of order one)
    and P = N^-1/2 L N^-1/2; the number of nonzero modes is the rank of nu on the support of M.
    """
    n, T, V = system.state(system.z_of(n_eq))
    Hz = _hessian_z(system, n, T, V)  # H diag(N)
    root = np.sqrt(n[system.active])
    G = Hz * root[:, None] / root[None, :]
    G = 0.5 * (G + G.T)
    w, Q = np.linalg.eigh(G)
    Gh = (Q * np.sqrt(np.clip(w, 0.0, None))) @ Q.T
    m = np.where(np.isfinite(mobility) & (mobility > 0), mobility, 0.0)
    B = system.nu_a / root[:, None]
    P = V * ((B * m[None, :]) @ B.T)
    S = Gh @ P @ Gh
    gram = np.linalg.eigvalsh((system.nu_a * (m > 0)[None, :]) @ system.nu_a.T)
    rank = int((gram > 1e-9 * max(gram.max(), 1.0)).sum())
    rates = np.linalg.eigvalsh(0.5 * (S + S.T))
    return np.sort(np.sort(rates)[::-1][:rank])


def _reference_solution(gas: ct.Solution, info: MechanismInfo, treatment: str) -> ct.Solution:
    """The mechanism as the SEA dynamics sees it: irreversible reactions made reversible or dropped."""
    reactions = []
    for j, r in enumerate(gas.reactions()):
        if info.reversible[j]:
            reactions.append(r)
        elif treatment == "reversible":
            data = dict(r.input_data)
            data["equation"] = data["equation"].replace("=>", "<=>")
            reactions.append(ct.Reaction.from_dict(data, gas))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ct.Solution(thermo="ideal-gas", kinetics="gas", species=gas.species(), reactions=reactions)


def kinetics_spectrum(gas, info, treatment, reactor, T, P, X, volume, rank) -> np.ndarray:
    """Relaxation rates (s-1, ascending) from Cantera's reactor Jacobian at the equilibrium state.

    ``IdealGasMoleReactor`` (isolated) or ``IdealGasConstPressureMoleReactor`` (constant pressure,
    isothermal with energy off), Jacobian of Cantera's own governing equations; the
    ``rank`` fastest-decaying eigenvalues are the chemical modes, the rest are conserved quantities.
    """
    ref = gas if info.n_irreversible == 0 else _reference_solution(gas, info, treatment)
    ref.TPX = T, P, X
    kwargs = {"clone": True}
    if reactor == "isolated":
        r = ct.IdealGasMoleReactor(ref, volume=volume, **kwargs)
    else:
        r = ct.IdealGasConstPressureMoleReactor(ref, volume=volume, energy="off" if reactor == "isothermal" else "on",
                                                **kwargs)
    net = ct.ReactorNet([r])
    net.initialize()
    # Cantera's finite-difference Jacobian of its own governing equations: the analytic
    # ``jacobian`` of the constant-pressure mole reactor leaves out terms (0.5 % on a slow mode of
    # gri30 at 1 atm), the finite-difference one agrees with it elsewhere to 1e-7
    J = np.asarray(r.finite_difference_jacobian)
    rates = -np.linalg.eigvals(J).real
    return np.sort(np.sort(rates)[::-1][:rank])


# --------------------------------------------------------------------------------------------
# the entry point


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
    samples, s), ``progress`` (1), ``mode`` and ``progress_level``; every variable has ``units`` and
    ``long_name``. Never raises for a numerical failure: ``sea_status``/``sea_reason`` say what
    happened per metric, and degenerate cases (start at equilibrium, a path too short) come back
    NaN-filled with the reason.
    """
    settings.check()
    sample_index = np.asarray(sample_index, dtype=int)
    try:
        return _compare(gas, info, relaxation, sample_index, settings)
    except _Degenerate as why:
        return _empty(gas, relaxation, sample_index, settings, str(why))
    except Exception as err:  # recorded with the case, never raised into the grid run
        detail = str(err).splitlines()[0][:300] if str(err) else ""
        return _empty(gas, relaxation, sample_index, settings, f"SEA comparison failed: {type(err).__name__}: {detail}")


class _Degenerate(Exception):
    pass


def _compare(gas, info, rel, sample_index, settings):
    if rel.reactor not in ("isolated", "constant-pressure", "isothermal"):
        raise _Degenerate(f"reactor type {rel.reactor!r} is not supported by the SEA comparison")
    if rel.equilibrium is None:
        raise _Degenerate(f"no equilibrium state (relaxation {rel.status}: {rel.reason})")
    if rel.at_equilibrium_start:
        raise _Degenerate("initial state is already at equilibrium: there is no path to compare")
    lam = rel.progress
    if rel.time.size < 3 or not np.isfinite(lam).all() or np.nanmax(lam) < settings.start_progress:
        raise _Degenerate(f"observed path too short for the comparison ({rel.time.size} samples, "
                          f"largest progress {np.nanmax(lam) if np.isfinite(lam).any() else float('nan'):.3g}; "
                          f"relaxation {rel.status}{': ' + rel.reason if rel.reason else ''})")

    nr, ns = gas.n_reactions, gas.n_species
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
    from .diagnostics import evaluate

    st = evaluate(gas, rel.temperature, rel.density, rel.mass_fractions)
    x_all = st.disequilibrium
    q_all = st.net_rate.copy()
    rf_all, rr_all = st.forward_rate, st.reverse_rate
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
    lm_all = log_mean_mobility(rf_all, rr_all, x_all)

    mobility = {}
    notes = {m: [] for m in settings.metrics}
    params = {}
    quality = {}
    align_full = {}
    for metric in settings.metrics:
        if metric == "log-mean":
            M_path = lm_all
            mobility[metric] = np.full(nr, np.nan)
        elif metric == "onsager":
            M_path = np.broadcast_to(np.where(included, r_eq, np.nan), x_all.shape)
            mobility[metric] = np.where(included, r_eq, np.nan)
        elif metric == "fitted-scalar":
            m = float(_clip_negative(np.array([fit_scalar(x_all, q_all, w, valid)]), np.array([True]), metric,
                                     notes)[0])
            mobility[metric] = np.where(included, m, np.nan)
            M_path = np.broadcast_to(mobility[metric], x_all.shape)
        elif metric == "fitted-diagonal":
            m = fit_diagonal(x_all, q_all, w, valid)
            m = _clip_negative(m, included, metric, notes)
            mobility[metric] = np.where(included, m, np.nan)
            M_path = np.broadcast_to(mobility[metric], x_all.shape)
        else:
            m_ref, b = fit_arrhenius(x_all, q_all, w, valid, rel.temperature, eq.temperature)
            m_ref = _clip_negative(m_ref, included, metric, notes)
            params["m_ref"] = np.where(included, m_ref, np.nan)
            params["b"] = np.where(included, b, np.nan)
            mobility[metric] = np.full(nr, np.nan)
            M_path = params["m_ref"][None, :] * np.exp(np.clip(-np.outer(1.0 / rel.temperature - 1.0 / eq.temperature,
                                                                         params["b"]), -700, 700))
        Mc = np.where(included[None, :] & np.isfinite(M_path), M_path, 0.0)
        quality[metric] = fit_quality(q_all, Mc * x_all, w, valid)
        # the alignment is taken over the reactions with detailed balance: an irreversible reaction's
        # observed rate is not of the form M x under any metric (its x q can be negative); its share
        # of the entropy production is reported separately
        aligned = included & info.reversible
        xi = np.where(aligned[None, :], x_all, 0.0)
        qi = np.where(aligned[None, :], q_all, 0.0)
        align_full[metric] = alignment(xi, qi, np.where(aligned[None, :], Mc, 0.0))

    # share of |entropy production| by irreversible reactions on the compared part of the path
    w_t = path_weights("time", rel.time, rel.potential, lam) * (lam >= settings.start_progress)
    sig = np.abs(x_all * q_all) * w_t[:, None]
    total_sig = float(sig.sum())
    irr_share = float(sig[:, ~info.reversible].sum()) / total_sig if total_sig > 0 else float("nan")

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
    reversible_in = info.reversible[rx]
    if rel.reactor == "isolated":
        volume, pressure = float(rel.volume[k_start]), float("nan")
    else:
        volume, pressure = float("nan"), float(rel.pressure[k_start])
    t_scale = max(float(rel.time[-1] - t_start), 1e-12)
    paths = {}
    systems = {}
    phi_eq_sea = None
    for metric in settings.metrics:
        if metric == "log-mean":
            mob = _Mobility("log-mean")
        elif metric == "fitted-arrhenius":
            mob = _Mobility("arrhenius", np.nan_to_num(params["m_ref"][rx]), np.nan_to_num(params["b"][rx]),
                            eq.temperature)
        else:
            mob = _Mobility("constant", np.nan_to_num(np.clip(mobility[metric][rx], 0.0, None)))
        try:
            system = _System(gas, rel.reactor, rel.mass, n_start, active, rx, reversible_in, volume, pressure,
                             float(rel.temperature[k_start]), mob, settings.trace_level)
            systems[metric] = system
            z0 = system.z_of(n_start)
            system.state(z0)
            phi_start = system.potential()
            if phi_eq_sea is None:
                phi_eq_sea = _equilibrium_potential(gas, rel.reactor, rel.mass)
            path = _sea_path(system, z0, lam_start, phi_start, phi_eq_sea, grid, elements, settings, t_scale)
            level = settings.trace_level
            while path.status == "failed" and metric != "log-mean" and 0 < level < 1e-8:
                # a failed constant-metric path is retried with a higher trace level
                level *= 1e3
                system.eps = level * system.n_ref
                retry = _sea_path(system, z0, lam_start, phi_start, phi_eq_sea, grid, elements, settings, t_scale)
                retry.wall += path.wall
                retry.reason = (f"retried with trace level {level:.0e} after: {path.reason}"
                                + (f"; {retry.reason}" if retry.reason else ""))
                path = retry
            path.trace_level = level if metric != "log-mean" else float("nan")
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
    spectrum_reason = ""
    try:
        ref_system = next(iter(systems.values())) if systems else None
        if ref_system is None:
            raise RuntimeError("no SEA system could be built")
        gas.TPX = eq.temperature, eq.pressure, eq.mole_fractions
        n_eq = rel.mass * gas.Y / mw
        n_eq[active] = np.maximum(n_eq[active], 1e-300)
        ref_system.temperature = eq.temperature
        # reuse the constraint at the equilibrium's own energy
        ref_system.energy0 = ref_system._energy_sum(n_eq) if rel.reactor != "isothermal" else ref_system.energy0
        m_ons = np.where(included, r_eq, 0.0)[rx]
        sea_rates = sea_spectrum(ref_system, n_eq, m_ons)
        rank = sea_rates.size
        kin_rates = kinetics_spectrum(gas, info, settings.irreversible, rel.reactor, eq.temperature, eq.pressure,
                                      eq.mole_fractions, eq.volume, rank)
        k = min(settings.n_modes, rank)
        spectra["sea"][:k] = sea_rates[:k]
        spectra["kinetics"][:k] = kin_rates[:k]
        n_cmp = min(N_SLOW_COMPARED, rank)
        for metric in settings.metrics:
            if metric in ("log-mean", "onsager"):
                r_m = sea_rates  # the log-mean mobility tends to r_eq at equilibrium
            elif metric == "fitted-arrhenius":
                r_m = sea_spectrum(ref_system, n_eq, np.nan_to_num(params["m_ref"][rx]))
            else:
                r_m = sea_spectrum(ref_system, n_eq, np.nan_to_num(np.clip(mobility[metric][rx], 0, None)))
            if r_m.size >= n_cmp and n_cmp > 0:
                slow_diff[metric] = float(np.max(np.abs(r_m[:n_cmp] - kin_rates[:n_cmp]) / kin_rates[:n_cmp]))
    except Exception as err:
        spectrum_reason = f"near-equilibrium check failed: {type(err).__name__}: {str(err)[:300]}"

    result = {
        "grid": grid, "mobility": mobility, "params": params, "quality": quality, "align_full": align_full,
        "ep_ratio": ep_ratio, "obs_time": obs_time, "obs_temp": obs_temp, "obs_x": obs_x, "paths": paths,
        "t_start": t_start, "lam_start": lam_start, "spectra": spectra, "slow_diff": slow_diff,
        "spectrum_reason": spectrum_reason, "included": included, "eq_T": eq.temperature,
        "irr_share": irr_share,
    }
    return _assemble(gas, rel, sample_index, settings, result, "")


def _clip_negative(m, included, metric, notes):
    """Set negative fitted mobilities to zero (a metric must be positive semi-definite) and say so."""
    bad = included & np.isfinite(m) & (m < 0)
    if bad.any():
        notes[metric].append(f"{int(bad.sum())} negative fitted mobilit{'y' if bad.sum() == 1 else 'ies'} "
                             "(reactions whose x q < 0 on the path, e.g. irreversible ones) set to zero")
        m = np.where(bad, 0.0, m)
    return m


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

    def var(dims, data, units, long_name, **attrs):
        return (dims, data, {"units": units, "long_name": long_name, **attrs})

    ds = xr.Dataset(
        {
            "mobility": var(("metric", "reaction"), mob, "mol m-3 s-1",
                            "constant mobility of the steepest-entropy-ascent metric (NaN where not constant)"),
            "fit_quality": var(("metric",), quality, "1",
                               "weighted coefficient of determination of q against M x on the observed path"),
            "alignment": var(("metric", "time"), align, "1",
                             "cosine of the angle between observed rates and steepest ascent under the metric"),
            "entropy_production_ratio": var(("metric",), ep, "1",
                                            "entropy produced on the observed path over the largest at equal cost"),
            "sea_time": var(("metric", "progress"), sea_t, "s", "time of the steepest-entropy-ascent path"),
            "sea_temperature": var(("metric", "progress"), sea_T, "K",
                                   "temperature of the steepest-entropy-ascent path"),
            "sea_mole_fraction": var(("metric", "progress", "species"), sea_x, "1",
                                     "mole fractions of the steepest-entropy-ascent path"),
            "observed_time": var(("progress",), obs_t, "s", "time at which the observed path reaches the progress"),
            "observed_temperature": var(("progress",), obs_T, "K", "temperature of the observed path"),
            "path_angle": var(("metric", "progress"), angle, "rad",
                              "Fisher-Rao angle between observed and steepest-ascent mole fractions"),
            "temperature_difference": var(("metric", "progress"), dT, "K",
                                          "steepest-ascent minus observed temperature"),
            "largest_path_angle": var(("metric",), largest, "rad", "largest Fisher-Rao path angle"),
            "time_ratio": var(("metric", "progress_level"), ratio, "1",
                              "steepest-ascent over observed time from the start progress to the level"),
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
            "metric": ("metric", np.array(metrics, dtype=str)),
            "reaction": ("reaction", np.array(gas.reaction_equations(), dtype=str)),
            "species": ("species", np.array(gas.species_names, dtype=str)),
            "time": ("time", times, {"units": "s", "long_name": "time of the stored samples"}),
            "progress": ("progress", grid, {"units": "1", "long_name": "entropy progress lambda"}),
            "mode": ("mode", np.arange(settings.n_modes), {"units": "1", "long_name": "relaxation mode, slowest first"}),
            "progress_level": ("progress_level", levels, {"units": "1", "long_name": "progress level of the time ratios"}),
        },
        attrs={
            "sea_weight": settings.weight, "sea_start_progress": settings.start_progress,
            "sea_irreversible": settings.irreversible, "sea_rtol": settings.rtol, "sea_atol": settings.atol,
            "sea_metric_rtol": settings.metric_rtol, "sea_metric_atol": settings.metric_atol,
            "sea_trace_level": settings.trace_level, "sea_time_factor": settings.time_factor,
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
