"""What each reduction criterion keeps: the species side (DRG, DRGEP on the grid's sampled states)
and the combined criterion ``drgep-sieve``.

The entropy criteria (``local``, ``integrated-*``) rank reactions and live in :mod:`sigmagrid.rank`;
the graph criteria rank species with :mod:`sigmagrid.graph_criteria` (Lu and Law, Proc. Combust.
Inst. 30 (2005) 1333; Pepiot-Desjardins and Pitsch, Combust. Flame 154 (2008) 67) from the same
stored states the ranking reads (``net_rate``, mol m-3 s-1, of every case file). A species' importance
is its largest over the states of every usable case where the total entropy production is not
negligible (at least ``reduction.negligible`` x its peak in the case, the cut-off of the local
share): near equilibrium every net rate vanishes, the coefficients become ratios of vanishing
numbers, and the slowest remaining chemistry (thermal NO in methane-air) would look essential.

A species cut keeps the species whose importance exceeds the threshold plus the species every
cut keeps (:func:`always_kept`) and removes each reaction that involves a removed species as
reactant, product or named collider ("(+AR)").

``drgep-sieve`` (ours): the species DRGEP keeps at the threshold, then among the reactions left
only those whose largest local entropy-production share (the ``local`` criterion's group score)
reaches ``reduction.sieve_share``. Why: DRGEP decides which species the targets need, and keeps
every reaction among them, including many that never carry a measurable part of the
dissipation; the local share, taken along every path, removes exactly those, while the species
graph protects the low-entropy initiation and branching steps through their species (a species
needed by the targets keeps the reactions with a share at or above the sieve). One parameter
(the species threshold) orders the cuts, so they stay nested for a fixed sieve share.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import cantera as ct
import numpy as np
import xarray as xr

from . import fileformat, graph_criteria
from .errors import InputError
from .config import SPECIES_CRITERIA  # noqa: F401 - re-exported: the kinds of criteria live together

GRAPH_METHODS = graph_criteria.METHODS  # ("drg", "drgep")
COMBINED = "drgep-sieve"
#: Products the validation reads: a species reaching this mole fraction (1) at the end of some case.
PRODUCT_FRACTION = 1e-2


def stoichiometry(gas: ct.Solution) -> tuple[np.ndarray, np.ndarray]:
    """Net stoichiometric coefficients nu (species x reactions, products minus reactants) and the
    involvement delta (1 where the species is a reactant or product)."""
    reactants, products = np.asarray(gas.reactant_stoich_coeffs), np.asarray(gas.product_stoich_coeffs)
    return products - reactants, graph_criteria.involvement(reactants, products)


def reaction_species(reaction: ct.Reaction) -> set[str]:
    """Species a reaction involves: reactants, products and a named collider ("(+AR)")."""
    names = set(reaction.reactants) | set(reaction.products)
    tb = getattr(reaction, "third_body", None)
    if tb is not None and tb.name not in ("M", ""):
        names.add(tb.name)
    return names


def third_body_only(gas: ct.Solution) -> set[str]:
    """Species that take part in no reaction but act as colliders (efficiencies): the reactor needs
    them for the pressure dependence, the graph never reaches them."""
    involved = set().union(*(reaction_species(r) for r in gas.reactions())) if gas.n_reactions else set()
    return set(gas.species_names) - involved


def automatic_targets(species: list[str], feed: set[str], inert: set[str], final_x: np.ndarray) -> list[str]:
    """Default targets: the feed's species that are not inert (fuel and oxidizer) and the products
    the validation depends on, those reaching ``PRODUCT_FRACTION`` at the end of some case
    (``final_x``: cases x species mole fractions, 1). Inert species are kept by every cut anyway."""
    final_x = np.atleast_2d(np.asarray(final_x, float))
    major = set()
    if final_x.size:
        with np.errstate(invalid="ignore"):
            major = {species[k] for k in np.flatnonzero(np.nanmax(np.where(np.isfinite(final_x), final_x, 0.0),
                                                                   axis=0) >= PRODUCT_FRACTION)}
    wanted = (set(feed) | major) - set(inert)
    return [s for s in species if s in wanted]


def importance_over_cases(gas: ct.Solution, case_files: list[Path], usable: list[bool], targets: list[str] | None,
                          feed: set[str], inert: set[str], negligible: float = 1e-3,
                          report: Callable[[str], None] | None = None) -> tuple[np.ndarray, list[str]]:
    """(method, species) importance (1) under DRG and DRGEP over every stored state of the usable
    cases (states with sigma >= ``negligible`` x its peak), and the targets used (``targets``, or :func:`automatic_targets` when None or empty)."""
    nu, delta = stoichiometry(gas)
    species = list(gas.species_names)
    unknown = [t for t in targets or [] if t not in species]
    if unknown:
        raise InputError("reduction.targets", f"unknown species {', '.join(unknown)} for this mechanism; "
                                              "allowed: species of the mechanism")
    rates, finals = [], []
    for path, ok in zip(case_files, usable):
        if not ok:
            continue
        try:
            with xr.open_dataset(path) as whole:
                fileformat.check(whole.attrs, path, "case")
                ds = whole[["net_rate", "mole_fraction", "entropy_production_total"]].load()
        except Exception:  # noqa: BLE001 - a damaged case is left out here as in the ranking
            continue
        if list(ds["species"].values.astype(str)) != species or ds.sizes["reaction"] != gas.n_reactions:
            continue
        sigma = ds["entropy_production_total"].values.astype(float)
        active = np.isfinite(sigma) & (sigma >= negligible * np.nanmax(sigma)) & (sigma > 0) \
            if np.isfinite(sigma).any() else np.zeros(sigma.size, bool)
        rates.append(ds["net_rate"].values.astype(float)[active])
        finals.append(ds["mole_fraction"].values[-1].astype(float))
    if not targets:
        targets = automatic_targets(species, feed, inert, np.array(finals) if finals else np.zeros((0, len(species))))
    index = [species.index(t) for t in targets]
    importance = np.zeros((len(GRAPH_METHODS), len(species)))
    for n, w in enumerate(rates, 1):
        for m, method in enumerate(GRAPH_METHODS):
            importance[m] = np.maximum(importance[m],
                                       graph_criteria.species_importance(nu, delta, w, index, method))
        if report and (n % 50 == 0 or n == len(rates)):
            report(f"graph importance from {n}/{len(rates)} cases")
    importance[:, index] = 1.0  # a target is its own reason to stay, with or without states
    return importance, list(targets)


def reactions_among(gas: ct.Solution, kept_species: set[str]) -> np.ndarray:
    """Boolean mask of the reactions whose species (:func:`reaction_species`) are all kept."""
    return np.array([reaction_species(r) <= kept_species for r in gas.reactions()], dtype=bool)


def species_cut(gas: ct.Solution, importance: np.ndarray, threshold: float, always: set[str]) -> np.ndarray:
    """Reactions kept by a species criterion: species with importance above ``threshold`` (1) or
    in ``always``, then every reaction among them."""
    names = np.array(gas.species_names)
    always_index = [k for k, s in enumerate(names) if s in always]
    keep = graph_criteria.kept_species(importance, threshold, always_index)
    return reactions_among(gas, set(names[keep]))
