"""Near-equilibrium check: relaxation rates of a metric's SEA dynamics and of Cantera's kinetics.

References
----------
Onsager, L. (1931), Phys. Rev. 37, 405; de Groot, S. R. and Mazur, P. (1962), Non-Equilibrium
Thermodynamics, ch. VI (linear regime, relaxation rates as eigenvalues of L H).
"""

from __future__ import annotations

import warnings

import cantera as ct
import numpy as np

from ..mechanism import MechanismInfo
from .dynamics import _System


def _hessian_z(system: _System, n, T, V):
    """H_z[k, i] = d(mu_k/RT)/dz_i on the reactor constraint, active species, (na, na)."""
    dT, dlnv = system._constraint_derivatives(n, T, V)
    ubar = system.gas.standard_int_energies_RT[system.active]  # u_k / (R T)
    return np.eye(dT.size) - dlnv[None, :] - np.outer(ubar / T, dT)


def _symmetric_parts(system: _System, n_eq, mobility: np.ndarray):
    """(G^1/2, B, m): the metric root G^1/2 with G = N^1/2 H N^1/2 (symmetrized), the scaled
    stoichiometry B = V^1/2 N^-1/2 nu and the usable mobilities m (non-finite or negative: 0),
    so that the linearized rates are the eigenvalues of G^1/2 B diag(m) B^T G^1/2."""
    n, T, V = system.state(system.z_of(n_eq))
    Hz = _hessian_z(system, n, T, V)  # H diag(N)
    root = np.sqrt(n[system.active])
    G = Hz * root[:, None] / root[None, :]
    w, Q = np.linalg.eigh(0.5 * (G + G.T))
    Gh = (Q * np.sqrt(np.clip(w, 0.0, None))) @ Q.T
    m = np.where(np.isfinite(mobility) & (mobility > 0), mobility, 0.0)
    return Gh, system.nu_a / root[:, None] * np.sqrt(V), m


def sea_spectrum(system: _System, n_eq, mobility: np.ndarray) -> np.ndarray:
    """Nonzero relaxation rates (s-1, ascending) of q = M x linearised at equilibrium.

    The linearisation is dN/dt = -L H dN with L = V nu M nu^T and H the Hessian of -Phi/R in
    amounts on the reactor constraint (both symmetric positive semi-definite), so the rates are
    the eigenvalues of L H (Onsager 1931; de Groot and Mazur 1962, ch. VI). They are computed
    as those of the symmetric G^1/2 P G^1/2 in species space, with G = N^1/2 H N^1/2 (of order one)
    and P = N^-1/2 L N^-1/2; the number of nonzero modes is the rank of nu on the support of M.
    """
    Gh, B, m = _symmetric_parts(system, n_eq, mobility)
    S = Gh @ ((B * m[None, :]) @ B.T) @ Gh
    gram = np.linalg.eigvalsh((system.nu_a * (m > 0)[None, :]) @ system.nu_a.T)
    rank = int((gram > 1e-9 * max(gram.max(), 1.0)).sum())
    rates = np.linalg.eigvalsh(0.5 * (S + S.T))
    return np.sort(np.sort(rates)[::-1][:rank])


def mode_carriers(system: _System, n_eq, mobility: np.ndarray, n_modes: int) -> tuple[np.ndarray, np.ndarray]:
    """The slowest ``n_modes`` relaxation rates of :func:`sea_spectrum` (s-1, ascending) and the
    share of each reaction in each, (n_modes, reactions of ``system``), rows summing to 1.

    With S = G^1/2 P G^1/2 and P = sum_j m_j b_j b_j^T, a unit eigenvector u of rate k splits as
    k = sum_j m_j (b_j . G^1/2 u)^2: reaction j's share of the mode (Rayleigh quotient by terms).
    """
    Gh, B, m = _symmetric_parts(system, n_eq, mobility)
    S = Gh @ (B * m[None, :]) @ B.T @ Gh
    rates, U = np.linalg.eigh(0.5 * (S + S.T))
    keep = np.flatnonzero(rates > 1e-12 * max(rates.max(), 1e-300))[:n_modes]
    proj = (B.T @ Gh @ U[:, keep]) ** 2 * m[:, None]  # (reactions, modes)
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = (proj / proj.sum(axis=0, keepdims=True)).T
    return rates[keep], shares


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


def kinetics_spectrum(gas, info, treatment, reactor, T, P, X, volume, rank, species=None) -> np.ndarray:
    """Relaxation rates (s-1, ascending) from Cantera's reactor Jacobian at the equilibrium state.

    ``IdealGasMoleReactor`` (isolated) or ``IdealGasConstPressureMoleReactor`` (constant pressure,
    isothermal with energy off), Jacobian of Cantera's own governing equations; the
    ``rank`` fastest-decaying eigenvalues are the chemical modes, the rest are conserved quantities.
    ``species`` (names) restricts the Jacobian to those species plus temperature and volume: a
    species of zero amount (its element absent) only decays, in a block of its own, and is not
    part of the relaxation compared.
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
    if species is not None:
        keep = [i for i in range(J.shape[0]) if r.component_name(i) in ("temperature", "volume")]
        keep += [r.component_index(name) for name in species]
        J = J[np.ix_(keep, keep)]
    rates = -np.linalg.eigvals(J).real
    return np.sort(np.sort(rates)[::-1][:rank])
