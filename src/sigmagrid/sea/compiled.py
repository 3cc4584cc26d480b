"""The SEA dynamics of the constant and Arrhenius metrics, compiled: right-hand side, Jacobian,
the per-step projection, and the stepping loop itself (``_kernels.bdf_path``, driven by
``dynamics._run_compiled``).

The right-hand side dz/dt = V nu q / N (z = ln N) of a fitted or onsager path needs only the
thermodynamics: the constrained temperature, the species' chemical potentials and the affinities.
Through Cantera and numpy that was about 30 calls of 1-2 us each, and 40 % of a path's time,
called about four times a step. Here each piece is one function compiled with numba
(:mod:`._kernels`), on the NASA 7-coefficient polynomials Cantera itself evaluates (McBride, Gordon and Reno (1993), NASA TM-4513,
eqs. 1-3), with Cantera's conventions (mole fractions clipped at 1e-300 in the logarithm, the
polynomial's low range up to and including T_mid). ``tests/test_sea.py`` checks it against the
Cantera path to round-off, and the loop against the same steps through scipy's BDF.

Used only where every species has NASA 7-coefficient thermodynamics and numba imports; otherwise
the SEA dynamics evaluate through Cantera as before. numba is imported on first use, so runs
without SEA paths do not pay its import time.

References
----------
McBride, B. J., Gordon, S. and Reno, M. A. (1993), Coefficients for calculating thermodynamic and
transport properties of individual species, NASA TM-4513.
"""

from __future__ import annotations

import time

import numpy as np

REACTOR_CODES = {"isolated": 0, "constant-pressure": 1, "isothermal": 2}
_kernel = None


def nasa7_table(gas) -> np.ndarray | None:
    """(ns, 15) NASA7 coefficients of ``gas``: T_mid (K), then the high-range and the low-range seven.

    None if a species has another parameterization or the reference pressures differ.
    """
    rows, p_ref = [], set()
    for species in gas.species():
        thermo = species.thermo
        if type(thermo).__name__ != "NasaPoly2":
            return None
        rows.append(np.asarray(thermo.coeffs, float))
        p_ref.add(float(thermo.reference_pressure))
    if len(p_ref) != 1:
        return None
    return np.ascontiguousarray(np.array(rows))


def kernel():
    """The compiled kernels (module :mod:`._kernels`), or None if numba cannot be imported or
    compile here. Compiled once per process, or loaded from numba's disk cache where it can write."""
    global _kernel
    if _kernel is None:
        try:
            _kernel = _compile()
        except Exception:  # no numba, or numba cannot compile or cache here: the Cantera path
            _kernel = False
    return _kernel or None


def load_seconds() -> float:
    """Load the compiled kernels in this process (see :func:`kernel`) and return how long it took, s:
    the once-per-process cost that the benchmark and the cost estimate report (about 0 once loaded)."""
    started = time.perf_counter()
    kernel()
    return time.perf_counter() - started


def _cached(module) -> bool:
    """Whether numba's disk cache holds compiled kernels of ``module`` (its index files, beside
    the module, in NUMBA_CACHE_DIR or in numba's user-wide cache)."""
    import os
    from pathlib import Path

    places = [Path(module.__file__).parent / "__pycache__"]
    if os.environ.get("NUMBA_CACHE_DIR"):
        places.append(Path(os.environ["NUMBA_CACHE_DIR"]))
    try:  # where numba caches when the package folder is read-only
        from numba.misc.appdirs import user_cache_dir

        places.append(Path(user_cache_dir(appname="numba")))
    except ImportError:
        pass
    return any(any(place.rglob("_kernels.*.nbi")) for place in places if place.is_dir())


def _compile():
    from . import _kernels
    from ..messages import say

    if not _cached(_kernels):
        say("note: compiling the SEA kernels with numba, once for this installation (about 20 s)")

    # compile (or load from numba's disk cache) now, on a one-species dummy, so that the first path
    # does not pay for it inside its own time
    one_f, one_i = np.ones(1), np.zeros(1, np.int64)
    coef = np.zeros((1, 15))
    coef[:, 0], coef[:, 1], coef[:, 8] = 1000.0, 2.5, 2.5
    _kernels.rhs(np.zeros(1), one_f.copy(), one_i, 1.0, coef, 101325.0, 2, 0.0, 101325.0, 300.0, 0.0,
                 np.zeros(2, np.int64), one_i, one_f, one_i, one_i, 1, np.zeros(1), 0, np.zeros(1), np.zeros(1), 1.0,
                 np.empty(1))
    _kernels.jacobian(np.zeros(1), one_f.copy(), one_i, 1.0, coef, 101325.0, 2, 0.0, 101325.0, 300.0, 0.0,
                      np.zeros(2, np.int64), one_i, one_f, one_i, one_i, 1, np.zeros(1), 0, np.zeros(1), np.zeros(1), 1.0,
                      one_i, np.zeros(1), np.empty((1, 1)))
    _kernels.settle(one_f.copy(), one_i, np.ones((1, 1)), one_f, coef, 101325.0, 2, 0.0, 101325.0, 300.0, 0.0,
                    np.empty(3))
    # the path loop, with the argument types dynamics._run_compiled gives it (numba compiles per type)
    head = (one_f.copy(), one_i, 1.0, coef, 101325.0, 2, 0.0, 101325.0)
    tail = (0.0, np.zeros(2, np.int64), one_i, one_f, one_i, one_i, 1, np.zeros(1), 0, np.zeros(1), np.zeros(1), 1.0)
    fs, istate = np.zeros(_kernels.N_FLOAT_STATE), np.zeros(11, np.int64)
    D, y, J, LU, piv = np.zeros((8, 1)), np.zeros(1), np.zeros((1, 1)), np.zeros((1, 1)), np.zeros(1, np.int64)
    fs[_kernels.F_TGUESS] = 300.0
    _kernels.bdf_start(np.zeros(1), head, tail, one_i, np.zeros(1), 1e-5, 1e-7, fs, istate, D, J, y)
    coefficients = np.ones(6)
    fs[_kernels.F_H] = 1e-3  # the dummy has no entropy production, so bdf_start left no step
    _kernels.bdf_path(head, tail, one_i, np.zeros(1), np.ones((1, 1)), one_f, np.ones((1, 1)), one_f, one_f,
                      coefficients, coefficients, coefficients, 1e-5, 1e-7, 0.03, 0.0, 0.0, 1.0, 0.0, 0.0, 1.0, 1,
                      0.0, 1e-5, 8, 10, 10, 1.0, True, True, 30.0, fs, istate, D, y, J, LU, piv, np.empty(1), np.empty(1),
                      np.empty(1), np.empty(1, np.int64), np.empty((1, 6, 1)), np.empty(1), np.empty(1))
    # the progress clock as the Python route calls it
    _kernels.clock_rhs(np.zeros(1), *head, 300.0, *tail, 1.0, np.empty(1))
    _kernels.clock_jacobian(np.zeros(1), *head, 300.0, *tail, one_i, np.zeros(1), 1.0, np.empty((1, 1)))
    _kernels.clock_transform(one_f, np.ones((1, 1)), one_f, one_f, one_f, one_f, 300.0, 1.0, 0, 1.0, 1.0,
                             np.empty((1, 1)))
    return _kernels


class CompiledRates:
    """The compiled kernels bound to one SEA system: its arguments prepared once."""

    def __init__(self, gas, reactor, n_full, active, n_ref, reactions, nu_rx, side_rows, side_cols,
                 volume, pressure, energy0, eps, kind, m, b, t_ref, table):
        self.kernels = kernel()
        nu = np.asarray(nu_rx, float)  # (ns, nr)
        cols, rows = np.nonzero(nu.T)  # by reaction
        self.args_fixed = dict(
            n_full=np.ascontiguousarray(n_full, float), active=np.ascontiguousarray(active, np.int64),
            n_ref=float(n_ref), coef=table, p_ref=float(gas.reference_pressure),
            reactor=REACTOR_CODES[reactor], volume=float(volume) if np.isfinite(volume) else 0.0,
            pressure=float(pressure) if np.isfinite(pressure) else 0.0, energy0=float(energy0),
            nu_ptr=np.concatenate([[0], np.cumsum(np.bincount(cols, minlength=nu.shape[1]))]).astype(np.int64),
            nu_species=rows.astype(np.int64), nu_coef=nu[rows, cols].copy(),
            side_rows=np.ascontiguousarray(side_rows, np.int64), side_cols=np.ascontiguousarray(side_cols, np.int64),
            nr=int(nu.shape[1]), eps=np.ascontiguousarray(eps, float), kind=0 if kind == "constant" else 1,
            m=np.ascontiguousarray(m, float), b=np.ascontiguousarray(b if b is not None else np.zeros(len(m)), float),
            t_ref=float(t_ref) if np.isfinite(t_ref) else 1.0)
        a = self.args_fixed
        self._active_pos = np.full(nu.shape[0], -1, np.int64)
        self._active_pos[a["active"]] = np.arange(a["active"].size)
        self._nu_sum = np.ascontiguousarray(nu.sum(axis=0))
        self._head = (a["n_full"], a["active"], a["n_ref"], a["coef"], a["p_ref"], a["reactor"], a["volume"],
                      a["pressure"])
        self._tail = (a["energy0"], a["nu_ptr"], a["nu_species"], a["nu_coef"], a["side_rows"], a["side_cols"],
                      a["nr"], a["eps"], a["kind"], a["m"], a["b"], a["t_ref"])

    def settle(self, n, E, target, T_guess):
        """Amounts n (mol, full) projected onto the element constraints E n[active] = target, with
        (T K, potential J/K, held energy J) there; None where the compiled path cannot do it."""
        a = self.args_fixed
        out = np.array(n, float)
        props = np.empty(3)
        ok = self.kernels.settle(out, a["active"], E, target, a["coef"], a["p_ref"], a["reactor"], a["volume"],
                                 a["pressure"], float(T_guess), a["energy0"], props)
        if not ok > 0:
            return None
        return out, float(props[0]), float(props[1]), float(props[2])

    def jacobian(self, z, T_guess):
        """(d(dz/dt)/dz, T); T < 0 where the energy constraint has no solution."""
        J = np.empty((z.size, z.size))
        T = self.kernels.jacobian(z, *self._head, float(T_guess), *self._tail, self._active_pos,
                                  self._nu_sum, J)
        return J, T

    def __call__(self, z, T_guess):
        """(dz/dt, T); T < 0 where the energy constraint has no solution."""
        out = np.empty(z.size)
        T = self.kernels.rhs(z, *self._head, float(T_guess), *self._tail, out)
        return out, T

    def clock(self, z, T_guess, phi_eq):
        """(dz/ds, T, tau s) on the progress clock (``_kernels.clock_rhs``); T < 0 where the state
        has no value."""
        out = np.empty(z.size)
        T, tau = self.kernels.clock_rhs(z, *self._head, float(T_guess), *self._tail, float(phi_eq), out)
        return out, T, tau

    def clock_jacobian(self, z, T_guess, phi_eq):
        """(d(dz/ds)/dz, T); T < 0 where the state has no value."""
        J = np.empty((z.size, z.size))
        T = self.kernels.clock_jacobian(z, *self._head, float(T_guess), *self._tail, self._active_pos,
                                        self._nu_sum, float(phi_eq), J)
        return J, T

    def path_args(self):
        """(head, tail, active_pos, nu_sum): the arguments of the compiled path loop (``_kernels.bdf_path``)."""
        return self._head, self._tail, self._active_pos, self._nu_sum
