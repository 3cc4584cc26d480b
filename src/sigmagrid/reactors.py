"""One relaxation to equilibrium in a Cantera reactor, at full solver resolution.

Reactor types:

========================  ==========  ==================================  =====================
name                      held fixed  Cantera reactor                     potential Phi, J/K
========================  ==========  ==================================  =====================
``isolated``              U, V        ``IdealGasReactor``                 S
``constant-pressure``     H, P        ``IdealGasConstPressureReactor``    S
``isothermal``            T, P        same, ``energy="off"``              S - H/T  (= -G/T)
========================  ==========  ==================================  =====================

In each, dPhi/dt = V sigma >= 0 and Phi reaches its largest value at the equilibrium that
``ct.Solution.equilibrate`` finds with the same pair held fixed; the progress is
lambda = (Phi - Phi_0) / (Phi_eq - Phi_0).

The reactor is stepped with ``ReactorNet.step()`` (every internal CVODE step), as in Cantera's
own examples; entropy production per reaction is integrated over those steps.
"""

from __future__ import annotations

import bisect
import time as _time
import warnings
from dataclasses import dataclass, field

import cantera as ct
import numpy as np

from .diagnostics import SignAudit, SignTracker
from .mechanism import MechanismInfo
from .units import GAS_CONSTANT, KMOL

REACTOR_TYPES = ("isolated", "constant-pressure", "isothermal")
_HELD_FIXED = {"isolated": "UV", "constant-pressure": "HP", "isothermal": "TP"}
PROGRESS_LEVELS = (0.5, 0.9, 0.99)
STATUSES = ("relaxed", "not-relaxed", "failed")


@dataclass(frozen=True)
class RelaxSettings:
    """End criteria and solver settings of one relaxation.

    max_time : s, the adiabatic reactors stop there with status ``not-relaxed``.
    isothermal_max_time : s, the same for the isothermal reactor. Without heat release the last
        traces of fuel recombine by second-order steps whose deficit falls as a power of time
        (H2-air at 1100 K, 1 atm: 2e-5 of the drive left at 100 s, 1e-8 at 2.8e4 s, in 4300
        solver steps), so it needs far more simulated time, though few steps.
    progress_tolerance : 1, stop once Phi_eq - Phi <= tolerance * (Phi_eq - Phi_0), Phi_eq the
        equilibrium of the energy (or enthalpy) the reactor actually holds.
    rtol, atol : CVODE relative and absolute tolerances.
    max_steps : budget of solver steps for the whole case.
    volume : m3, initial reactor volume (scales extensive results: entropy, entropy produced).
    ignition_rise : K, smallest temperature rise counted as an ignition.
    sparse_species : mechanisms with at least this many species use the mole-based reactors with
        Cantera's adaptive preconditioner (sparse, iterative linear algebra).
    """

    max_time: float = 10.0
    isothermal_max_time: float = 1e6
    progress_tolerance: float = 1e-8
    rtol: float = 1e-10
    atol: float = 1e-20
    max_steps: int = 200_000
    volume: float = 1e-3
    ignition_rise: float = 50.0
    sparse_species: int = 300

    def time_limit(self, reactor_type: str) -> float:
        """s, the maximum time of this reactor type."""
        return self.isothermal_max_time if reactor_type == "isothermal" else self.max_time


@dataclass
class EquilibriumState:
    temperature: float  # K
    pressure: float  # Pa
    volume: float  # m3
    mole_fractions: np.ndarray
    entropy: float  # J/K
    potential: float  # J/K


@dataclass
class Relaxation:
    """The observed path at full resolution and what was measured on it."""

    reactor: str
    status: str
    reason: str
    mass: float  # kg
    time: np.ndarray  # s
    temperature: np.ndarray  # K
    pressure: np.ndarray  # Pa
    density: np.ndarray  # kg/m3
    mass_fractions: np.ndarray  # (n, n_species)
    entropy: np.ndarray  # J/K, total entropy of the contents
    potential: np.ndarray  # J/K, S (adiabatic) or S - H/T (isothermal)
    entropy_production_total: np.ndarray  # W/(m3 K) at each step
    entropy_produced: np.ndarray  # J/K per reaction, integral of V sigma_j dt
    equilibrium: EquilibriumState | None
    audit: SignAudit | None
    molecular_weights: np.ndarray | None = None  # kg/kmol, for the size of "negligible"
    ignition_rise: float = 50.0  # K
    energy_drift: float = float("nan")  # relative change of the held U (isolated) or H (constant-pressure)
    wall_seconds: float = 0.0
    notes: list[str] = field(default_factory=list)
    # with keep_rates: x = A/(RT) (1) and q (mol m-3 s-1) of every reaction at every step, as
    # recorded (the SEA comparison's fits need them at full resolution; recomputing them from the
    # states cost it a tenth of a second on gri30)
    disequilibrium: np.ndarray | None = None
    net_rate: np.ndarray | None = None

    @property
    def volume(self) -> np.ndarray:
        return self.mass / self.density

    @property
    def n_steps(self) -> int:
        return max(self.time.size - 1, 0)

    @property
    def driving_potential(self) -> float:
        """Phi_eq - Phi_0, J/K: what the relaxation has to produce; 0 for a mixture at equilibrium."""
        if self.equilibrium is None:
            return float("nan")
        return self.equilibrium.potential - self.potential[0]

    @property
    def at_equilibrium_start(self) -> bool:
        return self.equilibrium is not None and self._negligible(self.driving_potential)

    def _negligible(self, value: float) -> bool:
        kmol = self.mass * np.sum(self.mass_fractions[0] / self.molecular_weights)
        return negligible_potential(value, kmol)

    @property
    def progress(self) -> np.ndarray:
        """lambda = (Phi - Phi_0)/(Phi_eq - Phi_0), 1; NaN where undefined (start at equilibrium)."""
        drive = self.driving_potential
        if not np.isfinite(drive) or self.at_equilibrium_start:
            return np.full(self.time.shape, np.nan)
        return (self.potential - self.potential[0]) / drive

    @property
    def balance_residual(self) -> float:
        """|Delta Phi - sum_j I_j| / Delta Phi from the full-resolution path (1)."""
        change = self.potential[-1] - self.potential[0]
        produced = float(self.entropy_produced.sum())
        if self._negligible(change):
            return float("nan")
        return abs(change - produced) / abs(change)

    @property
    def ignition_delay(self) -> float:
        """Time of the largest dT/dt, s; NaN where T rises by less than the ignition threshold."""
        return _ignition_delay(self.time, self.temperature, self.ignition_rise)

    def progress_time(self, level: float) -> float:
        """First time the progress reaches ``level``, s (linear interpolation); NaN if never."""
        lam = self.progress
        if lam.size == 0 or not np.isfinite(lam).any():
            return float("nan")
        above = np.flatnonzero(lam >= level)
        if above.size == 0:
            return float("nan")
        i = int(above[0])
        if i == 0:
            return float(self.time[0])
        l0, l1 = lam[i - 1], lam[i]
        t0, t1 = self.time[i - 1], self.time[i]
        return float(t0 + (level - l0) * (t1 - t0) / (l1 - l0)) if l1 != l0 else float(t1)


def negligible_potential(value: float, kmol: float) -> bool:
    """Is a change of Phi (J/K) negligible for ``kmol`` of mixture? Below 1e-10 R per mole: far
    below any chemistry, far above round-off."""
    return abs(value) <= 1e-10 * kmol * 1e3 * GAS_CONSTANT


def _ignition_delay(t: np.ndarray, temperature: np.ndarray, rise: float) -> float:
    if t.size < 3 or temperature.max() - temperature[0] < rise:
        return float("nan")
    dTdt = np.diff(temperature) / np.diff(t)
    i = int(np.argmax(dTdt))
    return float(0.5 * (t[i] + t[i + 1]))


def _make_reactor(reactor_type: str, gas: ct.Solution, volume: float, sparse: bool = False):
    """The Cantera reactor for a reactor type; ``sparse`` picks the mole-based reactors, whose
    Jacobian Cantera can approximate sparsely for its adaptive preconditioner."""
    kwargs = {"volume": volume}
    if reactor_type == "isothermal":
        kwargs["energy"] = "off"
    if sparse:
        cls = ct.IdealGasMoleReactor if reactor_type == "isolated" else ct.IdealGasConstPressureMoleReactor
    else:
        cls = ct.IdealGasReactor if reactor_type == "isolated" else ct.IdealGasConstPressureReactor
    try:
        return cls(gas, clone=False, **kwargs)
    except TypeError:  # Cantera 3.1 has no clone argument and always shares the phase
        return cls(gas, **kwargs)


def make_network(reactor_type: str, gas: ct.Solution, settings: "RelaxSettings"):
    """Reactor and ReactorNet with the settings' tolerances; large mechanisms get Cantera's
    sparse, preconditioned GMRES solver (dense Newton on a 1000-species system is far slower)."""
    sparse = gas.n_species >= settings.sparse_species
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        reactor = _make_reactor(reactor_type, gas, settings.volume, sparse=sparse)
        net = ct.ReactorNet([reactor])
    if sparse:
        net.preconditioner = ct.AdaptivePreconditioner()
        # the preconditioner only needs an approximate Jacobian (Cantera's own recommendation)
        net.derivative_settings = {"skip-third-bodies": True, "skip-falloff": True}
    net.rtol = settings.rtol
    net.atol = settings.atol
    return reactor, net


def _held_energy(reactor_type: str, gas: ct.Solution) -> float:
    """Specific energy the reactor holds fixed, J/kg (NaN for the isothermal reactor)."""
    if reactor_type == "isolated":
        return gas.int_energy_mass
    if reactor_type == "constant-pressure":
        return gas.enthalpy_mass
    return float("nan")


def _potential(reactor_type: str, mass: float, gas: ct.Solution) -> tuple[float, float]:
    entropy = mass * gas.entropy_mass
    if reactor_type == "isothermal":
        return entropy, entropy - mass * gas.enthalpy_mass / gas.T
    return entropy, entropy


#: species count from which the equilibrium is computed with Cantera's VCS solver first
LARGE_EQUILIBRIUM_SPECIES = 300


def equilibrium_of(gas: ct.Solution, reactor_type: str, mass: float, guess=None) -> EquilibriumState:
    """Cantera's equilibrium with the reactor's pair held fixed, from the gas's current state.

    ``guess``: mole fractions of the same element amounts to start the solver from, with the held
    pair of the current state kept (a state near equilibrium makes VCS on a large mechanism 10 to
    100 times faster). The gas state is restored afterwards.
    """
    saved = gas.state
    try:
        pair = _HELD_FIXED[reactor_type]
        if guess is not None:
            first, second = getattr(gas, pair)
            setattr(gas, pair + "X", (first, second, guess))
        if gas.n_species >= LARGE_EQUILIBRIUM_SPECIES:
            # Cantera's "auto" first tries the element-potential solver, which fails on large
            # mechanisms after about 0.2 s (of 0.8 s on 1268 species) before it falls back to VCS
            started = gas.state
            try:
                gas.equilibrate(pair, solver="vcs")
            except ct.CanteraError:
                gas.state = started
                gas.equilibrate(pair)
        else:
            gas.equilibrate(pair)
        s, phi = _potential(reactor_type, mass, gas)
        return EquilibriumState(gas.T, gas.P, mass / gas.density, gas.X.copy(), s, phi)
    finally:
        gas.state = saved


#: largest |A_j / RT| of a state treated as near equilibrium: a large mechanism's equilibrium is
#: then computed at once (cheap from there), otherwise deferred (see :func:`relax`)
NEAR_EQUILIBRIUM_AFFINITY = 1e-2

#: the deferred equilibrium is computed once the potential rises at this fraction of its fastest
#: rise so far: past the main heat release, where the state is close to equilibrium
DEFER_UNTIL_RATE_FRACTION = 1e-3


def _far_from_equilibrium(gas: ct.Solution) -> bool:
    x = gas.delta_gibbs / (ct.gas_constant * gas.T)
    return bool(x.size) and float(np.max(np.abs(x))) > NEAR_EQUILIBRIUM_AFFINITY


def relax(
    gas: ct.Solution,
    info: MechanismInfo,
    reactor_type: str,
    temperature: float,
    pressure: float,
    mole_fractions,
    settings: RelaxSettings = RelaxSettings(),
    keep_rates: bool = False,
) -> Relaxation:
    """Relax one initial state to equilibrium and integrate the entropy production of each reaction.

    Parameters
    ----------
    gas : Cantera Solution of the mechanism (its state is overwritten).
    info : :func:`sigmagrid.mechanism.describe` of the same mechanism.
    reactor_type : one of :data:`REACTOR_TYPES`.
    temperature : K; pressure : Pa; mole_fractions : dict or array.
    keep_rates : keep x and q of every reaction at every step (``Relaxation.disequilibrium``,
        ``net_rate``), n_steps x n_reactions x 16 bytes.

    Returns
    -------
    Relaxation with status ``relaxed``, ``not-relaxed`` (maximum time or step budget reached, or
    the path stalled short of equilibrium: reason "stalled: ...", see :func:`_stalled`) or
    ``failed`` (the solver's or equilibrium solver's message in ``reason``). Never raises for a
    solver failure: the path computed so far is kept.
    """
    if reactor_type not in REACTOR_TYPES:
        raise ValueError(f"reactor type must be one of {REACTOR_TYPES}, not {reactor_type!r}")
    started = _time.perf_counter()
    gas.TPX = temperature, pressure, mole_fractions
    mass = gas.density * settings.volume
    energy0 = _held_energy(reactor_type, gas)
    tracker = SignTracker(info)

    path = _PathRecorder(gas, reactor_type, mass, tracker, keep_rates)
    potentials = path.potentials
    record = path.record

    def result(status: str, reason: str, equilibrium) -> Relaxation:
        relaxation = Relaxation(
            reactor=reactor_type, status=status, reason=reason, mass=mass,
            **path.finish(),
            equilibrium=equilibrium, audit=tracker.audit(path.produced),
            molecular_weights=gas.molecular_weights, ignition_rise=settings.ignition_rise,
            energy_drift=(_held_energy(reactor_type, gas) - energy0) / abs(energy0) if energy0 else float("nan"),
            wall_seconds=_time.perf_counter() - started,
        )
        return relaxation

    # On a large mechanism the equilibrium from a cold start is the dearest part of a case (VCS:
    # 0.5 s at H,P and 2.7 s at U,V on 1268 species, 20 ms from near equilibrium). Far from
    # equilibrium it is deferred until the path has released most of its heat, and computed then
    # for the initial held pair and element amounts, from the current composition as the guess.
    start_state = gas.state
    deferred = gas.n_species >= LARGE_EQUILIBRIUM_SPECIES and _far_from_equilibrium(gas)

    def deferred_equilibrium():
        saved = gas.state
        guess = np.clip(gas.X, 0.0, None)  # CVODE leaves round-off negative amounts
        try:
            gas.state = start_state
            return equilibrium_of(gas, reactor_type, mass, guess=guess)
        finally:
            gas.state = saved

    def checked(equilibrium):
        """None if the relaxation can go on, else the (status, reason) to stop with."""
        drive = equilibrium.potential - potentials[0]
        if negligible_potential(drive, mass / gas.mean_molecular_weight):
            return "relaxed", "initial state is already at equilibrium: no entropy to produce, progress undefined"
        if drive < 0:
            # Cannot happen for a consistent thermo set; say so rather than integrate nonsense.
            return "failed", (f"equilibrium potential below the initial one by {-drive:.3e} J/K "
                              "(inconsistent thermodynamic data?)")
        return None

    equilibrium = None
    try:
        if not deferred:
            equilibrium = equilibrium_of(gas, reactor_type, mass)
    except ct.CanteraError as err:
        record(0.0, settings.volume)
        return result("failed", f"equilibrium solver: {_first_line(err)}", None)

    record(0.0, settings.volume)
    if equilibrium is not None and (stop := checked(equilibrium)):
        return result(*stop, equilibrium)

    reactor, net = make_network(reactor_type, gas, settings)
    max_time = settings.time_limit(reactor_type)
    target = settings.progress_tolerance * (equilibrium.potential - potentials[0]) if equilibrium else np.nan
    held = _HeldEquilibrium(gas, reactor_type, mass, equilibrium, energy0)
    t_prev = 0.0
    fastest, fastest_at = 0.0, 0.0  # J/(K s) and s: fastest rise of the potential so far, and when
    status, reason = "not-relaxed", f"maximum time {max_time:g} s reached before equilibrium"
    try:
        for _ in range(settings.max_steps):
            t = net.step()  # the last step may end past max_time by one solver step
            record(t, reactor.volume)
            rate = (potentials[-1] - potentials[-2]) / (t - t_prev) if t > t_prev else 0.0
            if rate > fastest:
                fastest, fastest_at = rate, t
            t_prev = t
            if equilibrium is None:
                if not (fastest > 0 and rate <= DEFER_UNTIL_RATE_FRACTION * fastest) and t < max_time:
                    continue
                try:
                    equilibrium = deferred_equilibrium()
                except ct.CanteraError as err:
                    status, reason = "failed", f"equilibrium solver at t = {t:.4g} s: {_first_line(err)}"
                    break
                if stop := checked(equilibrium):
                    status, reason = stop
                    break
                target = settings.progress_tolerance * (equilibrium.potential - potentials[0])
                held = _HeldEquilibrium(gas, reactor_type, mass, equilibrium, energy0)
            deficit = held.deficit(potentials[-1], target)
            if deficit <= target:
                status, reason = "relaxed", ""
                break
            progress = 1.0 - deficit / (held.state.potential - potentials[0])
            if progress >= STALL_MIN_PROGRESS and _stalled(path.times, potentials, rate, fastest, fastest_at,
                                                           deficit - target, max_time):
                status, reason = "not-relaxed", stall_reason(gas, info, reactor_type, mass, held.state,
                                                             deficit, path.times, potentials)
                break
            if t >= max_time:
                break
        else:
            reason = f"step budget of {settings.max_steps} solver steps used before equilibrium"
    except ct.CanteraError as err:
        status, reason = "failed", f"reactor integration at t = {t_prev:.4g} s: {_first_line(err)}"
    if equilibrium is None:  # deferred and not reached: the equilibrium from where the path ended
        try:
            equilibrium = deferred_equilibrium()
        except ct.CanteraError as err:
            status, reason = "failed", f"equilibrium solver: {_first_line(err)}"
    elif status != "failed":
        equilibrium = held.settle(target)  # the equilibrium of the energy held at the end
    return result(status, reason, equilibrium)


class _PathRecorder:
    """Collects the full-resolution path step by step and integrates V sigma_j over it.

    Per step only Cantera's arrays are copied into preallocated chunk buffers (the state vector
    T, rho, Y in one call, then the affinities and net rates). Entropy production, its integral
    and the sign audit are computed in vectorized chunks, so that the per-step cost stays close
    to that of appending a state to a SolutionArray and memory stays bounded for large mechanisms.
    """

    CHUNK = 256

    def __init__(self, gas: ct.Solution, reactor_type: str, mass: float, tracker: SignTracker,
                 keep_rates: bool = False):
        self.gas, self.reactor_type, self.mass, self.tracker = gas, reactor_type, mass, tracker
        self._kept = ([], []) if keep_rates else None  # chunks of x and q
        self.times, self.potentials = [], []
        self._states, self._S, self._V, self._P = [], [], [], []
        ns, nr = gas.n_species, gas.n_reactions
        self._state_buf = np.empty((self.CHUNK, ns + 2))
        self._dg_buf = np.empty((self.CHUNK, nr))  # J/kmol, delta Gibbs (minus the affinity)
        self._q_buf = np.empty((self.CHUNK, nr))  # kmol/(m3 s)
        self._fill = 0
        self._sigma_total: list[np.ndarray] = []
        self.produced = np.zeros(nr)
        self._last = None  # (t, V sigma_j) of the last processed step

    def record(self, t: float, volume: float) -> None:
        gas = self.gas
        i = self._fill
        self._state_buf[i] = gas.state  # T, rho, Y
        self._dg_buf[i] = gas.delta_gibbs
        self._q_buf[i] = gas.net_rates_of_progress
        self.times.append(t)
        self._V.append(volume)
        self._P.append(gas.P)  # one call; an equation of state other than the ideal gas is possible
        s, phi = _potential(self.reactor_type, self.mass, gas)
        self._S.append(s)
        self.potentials.append(phi)
        self._fill = i + 1
        if self._fill == self.CHUNK:
            self._flush()

    def _flush(self) -> None:
        n = self._fill
        if not n:
            return
        self._fill = 0
        states = self._state_buf[:n].copy()
        self._states.append(states)
        T = states[:, 0]
        t = np.asarray(self.times[-n:])
        V = np.asarray(self._V[-n:])
        # J/kmol * kmol/(m3 s) = J/(m3 s): the kmol factors cancel in A q; A = -delta G
        sigma = -self._dg_buf[:n] * self._q_buf[:n] / T[:, None]
        if self._kept is not None:
            self._kept[0].append(-self._dg_buf[:n] / (ct.gas_constant * T[:, None]))
            self._kept[1].append(self._q_buf[:n] * KMOL)
        total = sigma.sum(axis=1)
        self.tracker.update(sigma, total)
        self._sigma_total.append(total)
        vs = sigma * V[:, None]
        if self._last is not None:
            t = np.concatenate([[self._last[0]], t])
            vs = np.vstack([self._last[1], vs])
        if t.size > 1:
            self.produced += 0.5 * np.diff(t) @ (vs[1:] + vs[:-1])
        self._last = (t[-1], vs[-1].copy())

    def finish(self) -> dict:
        self._flush()
        ns = self.gas.n_species
        states = np.concatenate(self._states) if self._states else np.zeros((0, ns + 2))
        return dict(time=np.asarray(self.times), temperature=states[:, 0], pressure=np.asarray(self._P),
                    density=states[:, 1], mass_fractions=states[:, 2:],
                    entropy=np.asarray(self._S), potential=np.asarray(self.potentials),
                    entropy_production_total=np.concatenate(self._sigma_total) if self._sigma_total else np.zeros(0),
                    entropy_produced=self.produced,
                    **({} if self._kept is None else
                       {"disequilibrium": np.concatenate(self._kept[0]) if self._kept[0] else None,
                        "net_rate": np.concatenate(self._kept[1]) if self._kept[1] else None}))


class _HeldEquilibrium:
    """The equilibrium of the energy (U at V, or H at P) the reactor actually holds.

    NASA7 polynomials whose two ranges disagree at the midpoint make the reactor's U or H jump
    when the path crosses it, either way. The equilibrium of the initial energy is then the wrong
    reference. Between solves the held one is extrapolated to first order with the identities
    (dS/dU)_V = (dS/dH)_P = 1/T; the stop rule confirms with an exact solve.
    """

    def __init__(self, gas, reactor_type: str, mass: float, state: EquilibriumState | None, energy: float):
        self.gas, self.reactor_type, self.mass = gas, reactor_type, mass
        self.state, self.energy = state, energy

    def deficit(self, potential: float, target: float) -> float:
        """Phi_eq(held energy) - Phi, J/K; solved exactly where the extrapolation matters."""
        if self.reactor_type == "isothermal" or self.state is None:
            return self.state.potential - potential if self.state else float("inf")
        energy = _held_energy(self.reactor_type, self.gas)
        shift = self.mass * (energy - self.energy) / self.state.temperature
        deficit = self.state.potential + shift - potential
        # a shift below a tenth of the tolerance cannot change the verdict (round-off is far below)
        if abs(shift) > 0.1 * target and (deficit <= target or abs(shift) > 1e3 * target):
            try:
                self.state = _equilibrium_here(self.gas, self.reactor_type, self.mass)
                self.energy = energy
                deficit = self.state.potential - potential
            except ct.CanteraError:
                pass  # keep the extrapolation; the next step tries again
        return deficit

    def settle(self, target: float) -> EquilibriumState | None:
        """The equilibrium of the energy held now, solved again if it moved by more than a tenth
        of the tolerance (the stored reference of a case)."""
        if self.reactor_type != "isothermal" and self.state is not None:
            energy = _held_energy(self.reactor_type, self.gas)
            if abs(self.mass * (energy - self.energy) / self.state.temperature) > 0.1 * target:
                try:
                    self.state = _equilibrium_here(self.gas, self.reactor_type, self.mass)
                    self.energy = energy
                except ct.CanteraError:
                    pass
        return self.state


def _equilibrium_here(gas: ct.Solution, reactor_type: str, mass: float) -> EquilibriumState:
    """Equilibrium from the gas's current state (held pair and element amounts as they are now)."""
    saved = gas.state
    try:
        # CVODE leaves round-off negative mass fractions that upset the equilibrium solver
        gas.TDY = gas.T, gas.density, np.clip(gas.Y, 0.0, None)
        return equilibrium_of(gas, reactor_type, mass, guess=gas.X)
    finally:
        gas.state = saved


#: the stall rule looks at the potential once its rise has fallen below this fraction of its peak
#: (past the main heat release; as :data:`DEFER_UNTIL_RATE_FRACTION`)
STALL_RATE_FRACTION = 1e-3

#: progress a path must have made before it can be called stalled: before half of the entropy is
#: produced the main release has not happened, and an induction period (H2-air at 650 K: the
#: potential flat to round-off for 0.2 s) looks like a stall; such paths end at max_time as before
STALL_MIN_PROGRESS = 0.5

#: fraction of the elapsed time over which the recent mean rate of rise is taken
STALL_WINDOW = 0.1

#: the stall rule waits until the path has run this many times as long as it took to its fastest
#: rise: a decade of time for the tail, also where irreversible steps briefly lower the potential
STALL_AFTER_PEAK = 10.0


def _stalled(times: list, potentials: list, rate: float, fastest: float, fastest_at: float,
             remaining: float, max_time: float) -> bool:
    """Has the rise of the potential slowed so far that equilibrium is out of reach by max_time?

    After its peak, past the main heat release, the potential of a closed reactor rises ever more
    slowly (near equilibrium dPhi/dt is a positive quadratic form of the affinities, which shrink).
    The mean rate over the last tenth of the elapsed time then bounds the rate ahead from above, so
    if the remaining deficit (less the tolerance) would take longer than max_time even at that
    rate, no later step can relax the case. Paths that merely slow down stop here too, but they
    would have ended at max_time anyway: no case that could relax is stopped, and a stalled one
    (kinetics that cannot reach equilibrium) ends long before max_time with its reason.
    """
    t = times[-1]
    if fastest <= 0 or t < STALL_AFTER_PEAK * fastest_at or len(times) < 20:
        return False
    k = bisect.bisect_right(times, (1 - STALL_WINDOW) * t) - 1
    if k < 0 or times[k] >= t:
        return False
    recent = (potentials[-1] - potentials[k]) / (t - times[k])
    if recent > STALL_RATE_FRACTION * fastest:
        return False  # not yet past the main release
    if recent <= 0:
        return True  # irreversible steps drive it away from equilibrium over the whole window
    if rate > recent:
        return False  # speeding up again (a second stage)
    return t + remaining / recent > max_time


#: how many species the stall reason names
STALL_SPECIES_NAMED = 3


def stall_reason(gas: ct.Solution, info: MechanismInfo, reactor_type: str, mass: float,
                 equilibrium: EquilibriumState | None, deficit: float, times: list, potentials: list) -> str:
    """Reason of a stalled path: how slow, and which species hold the remaining disequilibrium.

    A species' share is its term of the relative entropy sum_k n_k ln(n_k/n_k,eq) - n_k + n_k,eq
    (>= 0, zero only at equilibrium; for an ideal gas at T, P it sums to (G - G_eq)/RT). For each
    named species the reactions that could move it towards equilibrium are looked up: a species
    above its equilibrium amount needs a reversible reaction or an irreversible one consuming it.
    """
    t = times[-1]
    k = max(bisect.bisect_right(times, (1 - STALL_WINDOW) * t) - 1, 0)
    recent = (potentials[-1] - potentials[k]) / (t - times[k]) if t > times[k] else 0.0
    head = (f"stalled: at t = {t:.3g} s the potential changes at {recent:.2e} J/(K s), "
            f"{deficit:.2e} J/K short of equilibrium")
    if equilibrium is None:
        return head
    n = np.clip(gas.X, 0.0, None)
    n_eq = np.asarray(equilibrium.mole_fractions)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(n > 0, n * np.log(n / np.where(n_eq > 0, n_eq, 1e-300)), 0.0) - n + n_eq
    nu = np.asarray(gas.product_stoich_coeffs - gas.reactant_stoich_coeffs)  # (species, reactions)
    rates = gas.forward_rates_of_progress  # kmol/(m3 s); an irreversible reaction runs forward only
    named = []
    for i in np.argsort(share)[::-1][:STALL_SPECIES_NAMED]:
        if not share[i] > 0.1 * share.max():  # name the few that matter
            break
        excess = n[i] > n_eq[i]
        involved = nu[i] != 0
        reversible = involved & info.reversible
        one_way_towards = involved & ~info.reversible & ((nu[i] < 0) if excess else (nu[i] > 0))
        one_way_away = involved & ~info.reversible & ((nu[i] > 0) if excess else (nu[i] < 0))
        verb, opposite = ("consumes", "form") if excess else ("forms", "consume")
        pulling = np.flatnonzero(one_way_away & (rates > 0))
        if not (reversible.any() or one_way_towards.any()):
            why = f"no reaction {verb} it"
            if one_way_away.any():
                why += f"; only irreversible reactions {opposite} it"
        elif pulling.size:
            j = int(pulling[np.argmax(rates[pulling])])
            why = f"the irreversible reaction {info.equations[j]} keeps {'forming' if excess else 'consuming'} it"
        else:
            why = "the reactions that could bring it to equilibrium have all but stopped"
        named.append(f"{gas.species_names[i]} (mole fraction {n[i]:.2e}, {n_eq[i]:.2e} at equilibrium: {why})")
    return head + ("; furthest from equilibrium: " + "; ".join(named) if named else "")


def _first_line(err: Exception) -> str:
    lines = [ln.strip() for ln in str(err).splitlines() if ln.strip() and not set(ln.strip()) <= set("*-")]
    return " ".join(lines)[:500] or type(err).__name__
