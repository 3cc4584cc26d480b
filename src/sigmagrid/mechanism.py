"""Finding, hashing and loading a reaction mechanism, and what the audit needs to know of it."""

from __future__ import annotations

import hashlib
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import cantera as ct
import numpy as np

from .errors import InputError


def resolve(name: str, field_name: str = "mechanism") -> Path:
    """Path of a mechanism given as a file path or as a name Cantera ships (``gri30.yaml``).

    A path that exists (relative to the working directory) wins over a shipped name.
    """
    if not isinstance(name, str) or not name.strip():
        raise InputError(field_name, "must be a mechanism file path or a name Cantera ships, e.g. 'h2o2.yaml'")
    candidate = Path(name).expanduser()
    if candidate.is_file():
        return candidate.resolve()
    if not candidate.is_absolute():
        for folder in ct.get_data_directories():
            shipped = Path(folder) / name
            if shipped.is_file():
                return shipped.resolve()
    raise InputError(
        field_name,
        f"no mechanism file '{name}': give an existing path or a name Cantera ships "
        "(for example 'h2o2.yaml' or 'gri30.yaml')",
    )


def file_sha256(path: Path) -> str:
    """sha256 of the mechanism file's bytes: the content, not the name, identifies it."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def load(path: Path, field_name: str = "mechanism") -> ct.Solution:
    """A new ``ct.Solution`` for the mechanism file; parse errors become an :class:`InputError`."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            gas = ct.Solution(str(path))
    except Exception as err:  # CanteraError, YAML errors
        lines = [ln.strip() for ln in str(err).splitlines() if ln.strip() and not set(ln.strip()) <= set("*-")]
        detail = " ".join(lines)[:500]
        raise InputError(field_name, f"'{path}' does not load in Cantera: {detail}") from None
    if gas.n_reactions == 0:
        raise InputError(field_name, f"'{path}' has no reactions: there is nothing to relax")
    return gas


@dataclass(frozen=True)
class MechanismInfo:
    """Static facts about a mechanism that the diagnostics and the audit use.

    Attributes
    ----------
    reversible : bool array (n_reactions,)
    duplicate_group : int array (n_reactions,)
        Reactions with the same group number form one physical reaction (Cantera ``duplicate``
        members with the same reactants and products); singletons have a group of their own.
    negative_prefactor : bool array (n_reactions,)
        Arrhenius pre-exponential factor below zero (a fitting device inside duplicate groups).
    """

    equations: tuple[str, ...]
    reversible: np.ndarray
    duplicate_group: np.ndarray
    negative_prefactor: np.ndarray
    species: tuple[str, ...]
    elements: tuple[str, ...]
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def n_irreversible(self) -> int:
        return int((~self.reversible).sum())


def _prefactor(rate) -> float:
    for attr in ("pre_exponential_factor",):
        if hasattr(rate, attr):
            return float(getattr(rate, attr))
    # falloff / chemically activated: the high-pressure limit is the physical one
    high = getattr(rate, "high_rate", None)
    if high is not None and hasattr(high, "pre_exponential_factor"):
        return float(high.pre_exponential_factor)
    return float("nan")


def describe(gas: ct.Solution) -> MechanismInfo:
    """Reversibility, duplicate groups and negative pre-exponential factors of every reaction."""
    reactions = gas.reactions()
    n = len(reactions)
    reversible = np.array([r.reversible for r in reactions], dtype=bool)
    negative = np.array([_prefactor(r.rate) < 0 for r in reactions], dtype=bool)
    groups = np.arange(n)
    keys: dict[tuple, int] = {}
    for j, r in enumerate(reactions):
        if not r.duplicate:
            continue
        key = (tuple(sorted(r.reactants.items())), tuple(sorted(r.products.items())), r.reversible)
        groups[j] = keys.setdefault(key, j)
    notes = []
    if (~reversible).any():
        notes.append(f"{int((~reversible).sum())} irreversible reaction(s): their entropy production can be negative")
    if negative.any():
        notes.append(f"{int(negative.sum())} reaction(s) with a negative pre-exponential factor")
    return MechanismInfo(
        equations=tuple(gas.reaction_equations()),
        reversible=reversible,
        duplicate_group=groups,
        negative_prefactor=negative,
        species=tuple(gas.species_names),
        elements=tuple(gas.element_names),
        notes=tuple(notes),
    )
