"""Affinities, rates of progress and entropy production of every reaction.

Sign conventions: nu[k, j] = products minus reactants; the affinity A_j = -sum_k nu[k, j] mu_k is
positive when reaction j runs forward on its way to equilibrium. Rates of progress are mol/(m3 s),
affinities J/mol, entropy production W/(m3 K). Cantera's kmol-based values are converted here.

References
----------
de Groot, S. R. and Mazur, P. (1962), Non-Equilibrium Thermodynamics, North-Holland, ch. X.
de Donder, Th. (1927), L'Affinité, Gauthier-Villars.
"""

from __future__ import annotations

from dataclasses import dataclass

import cantera as ct
import numpy as np

from .mechanism import MechanismInfo
from .units import GAS_CONSTANT, KMOL, PER_KMOL


@dataclass
class ReactionState:
    """Per-reaction quantities at one or more states; arrays are (..., n_reactions)."""

    affinity: np.ndarray  # J/mol
    forward_rate: np.ndarray  # mol/(m3 s)
    reverse_rate: np.ndarray  # mol/(m3 s)
    net_rate: np.ndarray  # mol/(m3 s)
    temperature: np.ndarray  # K, shape (...,)

    @property
    def disequilibrium(self) -> np.ndarray:
        """x_j = A_j / (R T), dimensionless."""
        return self.affinity / (GAS_CONSTANT * self.temperature[..., None])

    @property
    def entropy_production(self) -> np.ndarray:
        """sigma_j = A_j q_j / T in W/(m3 K)."""
        return entropy_production(self.affinity, self.net_rate, self.temperature)


def affinity(gas: ct.Solution) -> np.ndarray:
    """A_j = -Delta_r G_j of the gas's current state, J/mol."""
    return -gas.delta_gibbs * PER_KMOL


def net_rate(gas: ct.Solution) -> np.ndarray:
    """Net rate of progress q_j of the gas's current state, mol/(m3 s)."""
    return gas.net_rates_of_progress * KMOL


def entropy_production(affinity_j: np.ndarray, net_rate_j: np.ndarray, temperature) -> np.ndarray:
    """sigma_j = A_j q_j / T, W/(m3 K) (de Groot and Mazur 1962, eq. X.20)."""
    temperature = np.asarray(temperature, dtype=float)
    return affinity_j * net_rate_j / (temperature[..., None] if temperature.ndim else temperature)


def evaluate(gas: ct.Solution, temperature, density, mass_fractions) -> ReactionState:
    """Reaction state at each of a sequence of (T, rho, Y) states, restoring nothing.

    Parameters
    ----------
    temperature : (n,) K
    density : (n,) kg/m3
    mass_fractions : (n, n_species)
    """
    temperature = np.atleast_1d(np.asarray(temperature, dtype=float))
    density = np.atleast_1d(np.asarray(density, dtype=float))
    mass_fractions = np.atleast_2d(mass_fractions)
    n, nr = temperature.size, gas.n_reactions
    out = {name: np.empty((n, nr)) for name in ("A", "rf", "rr", "q")}
    for i in range(n):
        gas.TDY = temperature[i], density[i], mass_fractions[i]
        out["A"][i] = -gas.delta_gibbs * PER_KMOL
        out["rf"][i] = gas.forward_rates_of_progress * KMOL
        out["rr"][i] = gas.reverse_rates_of_progress * KMOL
        out["q"][i] = gas.net_rates_of_progress * KMOL
    return ReactionState(out["A"], out["rf"], out["rr"], out["q"], temperature)


@dataclass
class SignAudit:
    """Which reactions produce negative entropy, and how much."""

    n_irreversible: int
    negative_share: float  # -sum(I_j < 0) / sum |I_j|, dimensionless
    worst_reversible_ratio: float  # min_t,j sigma_j / max_t sigma, over reversible non-duplicate reactions
    worst_group_ratio: float  # same over duplicate groups (the physical reactions)
    negative_members: tuple[int, ...]  # reversible duplicate members with negative entropy production

    def passes(self, threshold: float = 1e-9) -> bool:
        return self.worst_reversible_ratio >= -threshold and self.worst_group_ratio >= -threshold


class SignTracker:
    """Accumulates, block of steps by block, the minima needed for :class:`SignAudit`."""

    def __init__(self, info: MechanismInfo):
        self.info = info
        _, group_index = np.unique(info.duplicate_group, return_inverse=True)
        member_count = np.bincount(group_index)
        self.in_group = member_count[group_index] > 1
        self.singles = info.reversible & ~self.in_group
        reversible_group = np.bincount(group_index, weights=(~info.reversible).astype(float)) == 0
        checked = np.flatnonzero((member_count > 1) & reversible_group)
        # sigma @ groups sums each reversible duplicate group: the physical reaction is what must
        # obey de Donder's inequality, not its members
        self.groups = (group_index[:, None] == checked[None, :]).astype(float) if checked.size else None
        self.min_single = 0.0
        self.min_group = 0.0
        self.peak_total = 0.0
        self.member_min = np.zeros(info.reversible.size)

    def update(self, sigma: np.ndarray, total: np.ndarray | None = None) -> None:
        """Take in sigma_j (W m-3 K-1) of a block of steps, shape (n_steps, n_reactions), and
        optionally its row sums ``total`` if the caller has them."""
        if sigma.size == 0:
            return
        total = sigma.sum(axis=1) if total is None else total
        self.peak_total = max(self.peak_total, float(total.max()))
        lowest = sigma.min(axis=0)  # per reaction: one pass serves the singles and the members
        if self.singles.any():
            self.min_single = min(self.min_single, float(lowest[self.singles].min()))
        if self.groups is not None:
            self.min_group = min(self.min_group, float((sigma @ self.groups).min()))
        if self.in_group.any():
            np.minimum(self.member_min, lowest, out=self.member_min)

    def audit(self, produced: np.ndarray) -> SignAudit:
        peak = self.peak_total if self.peak_total > 0 else 1.0
        total_abs = float(np.abs(produced).sum())
        negative = float(-produced[produced < 0].sum()) + 0.0  # + 0.0 turns -0.0 into 0.0
        members = np.flatnonzero(self.in_group & self.info.reversible & (self.member_min < -1e-12 * peak))
        return SignAudit(
            n_irreversible=self.info.n_irreversible,
            negative_share=negative / total_abs if total_abs > 0 else 0.0,
            worst_reversible_ratio=self.min_single / peak,
            worst_group_ratio=self.min_group / peak,
            negative_members=tuple(int(j) for j in members),
        )
