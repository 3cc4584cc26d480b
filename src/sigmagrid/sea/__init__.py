"""Steepest-entropy-ascent (SEA) comparison of a relaxation.

In reaction-extent space the entropy gradient at fixed (U, V), (H, P) -- or the gradient of
S - H/T at fixed (T, P) -- is the affinity over temperature, so a symmetric positive mobility M
defines the steepest-ascent dynamics

    q = M x,   x_j = A_j / (R T),   dN/dt = V nu q,

with the reactor's constraint fixing T. Five metric families are compared with the observed
(mass-action) path:

==================  ==============================  =========================================
name                mobility M, mol m-3 s-1         what it shows
==================  ==============================  =========================================
log-mean            diag(Lambda_j(state))           mass action itself (an opt-in check)
onsager             diag(r_eq,j) at equilibrium     linear theory carried far from equilibrium
fitted-scalar       m I                             one isotropic mobility, fitted
fitted-diagonal     diag(m_j)                       best constant metric
fitted-arrhenius    diag(m_j exp(-b_j (1/T-1/T_r)))  a temperature-only metric
==================  ==============================  =========================================

Numerics: the SEA path is integrated in logarithmic amounts z_k = ln(N_k / N_0) (amounts stay
positive whatever the step), with an analytic Jacobian assembled from nu, the diagonal mobility and
a rank-one correction for the temperature constraint; T is solved by Newton's method at every
evaluation, so U (or H) holds to the Newton tolerance. Each accepted step is projected back onto
the element constraints by a multiplicative (element-potential) correction and handed back to the
solver, the projection method of Hairer, Lubich and Wanner, Geometric Numerical Integration
(2006), sec. IV.4.

Choices that shape the numbers (all stored with the result):

- Physical reactions: members of a duplicate group share x and add their rates; fits, alignment
  and the constant metrics work per group (a member with a negative pre-exponential factor alone
  has x q < 0). The log-mean path uses every member (it is mass action).
- Irreversible reactions get their thermodynamic reverse in the SEA dynamics (``irreversible =
  "reversible"``) or are left out (``"omit"``); they never enter the alignment, and their share of
  the entropy production is stored as ``irreversible_entropy_share``.
- A constant mobility relaxes a species of amount N at a rate ~ m/N; below ``trace_level`` times
  the total amount the mobility of its reactions is scaled like mass action's one-way rates, by
  factors N/(N + eps) of both sides near partial equilibrium and of the consumed side when driven
  hard (``metrics.trace_factors``). Every constant mobility is at least ``mobility_floor`` of the
  metric's largest. Both are part of the stored metric: fits and alignment use them; the
  near-equilibrium check is Onsager's diag(r_eq) without them.
- The clock: a metric's time scale is arbitrary, so the paths run on s = -ln(1 - lambda), which
  advances with the entropy (``_kernels.clock_rhs``); time is the integral of tau = dt/ds.
- Only ideal-gas phases are compared (chemical potentials, energies and Hessian assume one).

References
----------
Mielke, A. (2011), A gradient structure for reaction-diffusion systems and for
energy-drift-diffusion systems, Nonlinearity 24, 1329-1346 (log-mean mobility).
Onsager, L. (1931), Reciprocal relations in irreversible processes I, Phys. Rev. 37, 405.
de Groot, S. R. and Mazur, P. (1962), Non-Equilibrium Thermodynamics, North-Holland.
"""

import importlib

from .settings import (IRREVERSIBLE_TREATMENTS, METRICS, N_SLOW_COMPARED, PROGRESS_LEVELS, WEIGHTS,
                       SeaSettings)

# The numerics load on first use: they pull in scipy.integrate (0.3 s of every batch job's start,
# also where the comparison is switched off).
_LAZY = {"compare": "comparison", "kinetics_spectrum": "spectra", "sea_spectrum": "spectra",
         **{name: "metrics" for name in ("alignment", "fisher_rao_angle", "fit_arrhenius", "fit_diagonal",
                                        "fit_quality", "fit_scalar", "log_mean_mobility", "path_weights",
                                        "progress_grid")}}


def __getattr__(name):
    if name in _LAZY:
        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = ["compare", "SeaSettings", "METRICS", "WEIGHTS", "IRREVERSIBLE_TREATMENTS", "PROGRESS_LEVELS",
           "N_SLOW_COMPARED", "alignment", "fisher_rao_angle", "fit_arrhenius", "fit_diagonal", "fit_quality",
           "fit_scalar", "log_mean_mobility", "path_weights", "progress_grid", "kinetics_spectrum",
           "sea_spectrum"]
