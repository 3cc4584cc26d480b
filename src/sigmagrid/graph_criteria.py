"""Graph-based species criteria of mechanism reduction: DRG and DRGEP.

Both build a directed graph over the species from the net rates of progress at sampled states:
an edge A -> B says how much the production or consumption of A needs B. A species' importance
is its strongest connection to a target species (fuel, oxidizer, the species a validation reads):

- DRG (Lu and Law 2005): r_AB = sum_i |nu_Ai w_i| delta_Bi / sum_i |nu_Ai w_i|, delta_Bi = 1 where
  reaction i involves B. A species is kept at threshold eps when a path of edges r > eps leads
  to it from a target, so its importance is the widest path: the largest over paths of the
  smallest edge on the path.
- DRGEP (Pepiot-Desjardins and Pitsch 2008): r_AB = |sum_i nu_Ai w_i delta_Bi| / max(P_A, C_A), with
  P_A and C_A the production and consumption of A; a path's weight is the product of its edges,
  and the importance R_TB is the largest product over paths from a target T.

Over many states (and cases) a species' importance is its largest over them. Targets have 1.

nu: (species, reactions) net stoichiometric coefficients (products minus reactants); w: net
rates of progress (any consistent unit: the coefficients are ratios).

References
----------
Lu, T. and Law, C. K. (2005), A directed relation graph method for mechanism reduction, Proc.
Combust. Inst. 30, 1333-1341.
Pepiot-Desjardins, P. and Pitsch, H. (2008), An efficient error-propagation-based reduction method
for large chemical kinetic mechanisms, Combust. Flame 154, 67-81.
"""

from __future__ import annotations

import heapq

import numpy as np

METHODS = ("drg", "drgep")


def involvement(reactant_coeffs: np.ndarray, product_coeffs: np.ndarray) -> np.ndarray:
    """delta (species, reactions): 1 where the species is a reactant or product of the reaction.

    Third-body efficiencies do not count, as in the published DRG (the species must appear in
    the reaction's stoichiometry)."""
    return ((np.asarray(reactant_coeffs) != 0) | (np.asarray(product_coeffs) != 0)).astype(float)


def drg_coefficients(nu: np.ndarray, delta: np.ndarray, rates: np.ndarray) -> np.ndarray:
    """r_AB (species x species, 1) of DRG at one state; 0 where A takes part in no active reaction."""
    flux = np.abs(nu * rates[None, :])  # |nu_Ai w_i|
    total = flux.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = (flux @ delta.T) / total[:, None]
    r[~np.isfinite(r)] = 0.0
    np.fill_diagonal(r, 0.0)
    return r


def drgep_coefficients(nu: np.ndarray, delta: np.ndarray, rates: np.ndarray) -> np.ndarray:
    """r_AB (species x species, 1) of DRGEP at one state: |sum_i nu_Ai w_i delta_Bi| / max(P_A, C_A)."""
    term = nu * rates[None, :]  # nu_Ai w_i
    production = np.clip(term, 0.0, None).sum(axis=1)
    consumption = np.clip(-term, 0.0, None).sum(axis=1)
    scale = np.maximum(production, consumption)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.abs(term @ delta.T) / scale[:, None]
    r[~np.isfinite(r)] = 0.0
    np.fill_diagonal(r, 0.0)
    return r


def path_importance(r: np.ndarray, targets: list[int], combine: str) -> np.ndarray:
    """The strongest path from any target to each species (species,), targets 1.

    combine ``"min"``: a path is as strong as its weakest edge (DRG's graph search);
    ``"product"``: the product of its edges (DRGEP). Both keep the best-first order of Dijkstra's
    algorithm: edge weights lie in [0, 1], so a path never gains strength by growing.
    """
    n = r.shape[0]
    best = np.zeros(n)
    heap = []
    for t in targets:
        best[t] = 1.0
        heap.append((-1.0, t))
    heapq.heapify(heap)
    done = np.zeros(n, bool)
    while heap:
        neg, a = heapq.heappop(heap)
        if done[a]:
            continue
        done[a] = True
        strength = -neg
        for b in np.nonzero(r[a] > 0.0)[0]:
            value = min(strength, r[a, b]) if combine == "min" else strength * r[a, b]
            if value > best[b]:
                best[b] = value
                heapq.heappush(heap, (-value, b))
    return best


def species_importance(nu: np.ndarray, delta: np.ndarray, rates: np.ndarray, targets: list[int],
                       method: str) -> np.ndarray:
    """Importance (species,) in [0, 1] by ``method`` (``"drg"`` or ``"drgep"``): the largest over the
    states (rows of ``rates``, states x reactions) of the strongest path from a target."""
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}, not {method!r}")
    coefficients = drg_coefficients if method == "drg" else drgep_coefficients
    combine = "min" if method == "drg" else "product"
    rates = np.atleast_2d(np.asarray(rates, float))
    importance = np.zeros(nu.shape[0])
    for row in rates:
        if not np.isfinite(row).all() or not row.any():
            continue
        importance = np.maximum(importance, path_importance(coefficients(nu, delta, row), targets, combine))
    return importance


def kept_species(importance: np.ndarray, threshold: float, always: list[int] = ()) -> np.ndarray:
    """Boolean mask of the species whose importance exceeds ``threshold`` (1), plus ``always``
    (inert diluents and the like that the reactor needs whatever the graph says)."""
    keep = np.asarray(importance) > threshold
    keep[list(always)] = True
    return keep
