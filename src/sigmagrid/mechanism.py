"""Finding, hashing and loading a reaction mechanism, and what the audit needs to know of it."""

from __future__ import annotations

import contextlib
import hashlib
import io
import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import cantera as ct
import numpy as np
import yaml

from .errors import InputError


def resolve(name: str, field_name: str = "mechanism", root: str | Path | None = None) -> Path:
    """Path of a mechanism given as a file path or as a name Cantera ships (``gri30.yaml``).

    A path that exists (relative to the working directory) wins over a shipped name. With
    ``root`` (the workflow passes its project folder) a file path must lie inside that folder, as
    written: a run is then reproducible from the project folder alone.
    """
    if not isinstance(name, str) or not name.strip():
        raise InputError(field_name, "must be a mechanism file path or a name Cantera ships, e.g. 'h2o2.yaml'")
    candidate = Path(name).expanduser()
    if candidate.exists() and not candidate.is_file():
        raise InputError(field_name, f"'{name}' is not a regular file (a folder or a device?)")
    if candidate.is_file():
        if root is not None:
            inside = Path(os.path.abspath(candidate))
            if not inside.is_relative_to(Path(os.path.abspath(root))):
                raise InputError(field_name, f"'{name}' lies outside the project folder '{root}'; copy the "
                                 "mechanism into the project (so the run can be reproduced from it) or use a "
                                 "name Cantera ships")
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


#: first keywords of a mechanism in the keyword text format (Kee et al., CHEMKIN-III, Sandia
#: report SAND96-8216, 1996), which may be abbreviated to four letters
_KEYWORDS = ("ELEMENTS", "ELEM", "SPECIES", "SPEC", "THERMO", "REACTIONS", "REAC")


def is_keyword_format(path: Path) -> bool:
    """Whether a mechanism file is in the keyword text format rather than Cantera's YAML: its
    first line that is neither blank nor a comment (``!``) starts with one of its keywords."""
    path = Path(path)
    if path.suffix.lower() in (".yaml", ".yml") or not path.is_file():
        return False
    with open(path, encoding="utf-8", errors="replace") as handle:
        for line in handle:
            text = line.split("!", 1)[0].strip()
            if text:
                return text.split()[0].upper() in _KEYWORDS
    return False


def convert_keyword_format(config: dict, folder: str | Path, report=None, root: str | Path | None = None) -> dict:
    """The config with a keyword-format mechanism replaced by its YAML conversion.

    Cantera's own converter (``cantera.ck2yaml``) writes ``folder/<name>-<sha12>.yaml``, the
    hash over the source files (mechanism, ``thermo`` and ``transport`` of the config), so a
    conversion is done once and a changed source gets a new file. The converted file is then
    hashed and loaded like any YAML mechanism. ``report`` receives the converter's messages
    (notes on the input, as "converter: ..."). A config whose mechanism is YAML is returned as it
    is; a ``thermo`` or ``transport`` without a keyword-format mechanism is refused. ``root``: as
    for :func:`resolve`.
    """
    from cantera import ck2yaml

    source = resolve(config["mechanism"], root=root)
    extra = {key: config.get(key) for key in ("thermo", "transport")}
    if not is_keyword_format(source):
        given = [key for key, value in extra.items() if value]
        if given:
            raise InputError(given[0], f"applies only to a mechanism in the keyword text format; "
                             f"'{source.name}' is YAML (its thermo is inside it)")
        return config
    files = {key: resolve(value, key, root=root) for key, value in extra.items() if value}
    digest = hashlib.sha256()
    for path in (source, *files.values()):
        digest.update(Path(path).read_bytes())
    folder = Path(folder)
    target = folder / f"{source.stem}-{digest.hexdigest()[:12]}.yaml"
    if not target.is_file():
        folder.mkdir(parents=True, exist_ok=True)
        partial = target.with_name(f".{target.name}.{os.getpid()}.tmp")
        # the converter prints its messages to stdout through its own log handler: they are
        # captured and come back through ``report`` or the error
        printed = io.StringIO()
        try:
            with contextlib.redirect_stdout(printed):
                ck2yaml.Parser.convert_mech(
                    str(source), thermo_file=str(files["thermo"]) if "thermo" in files else None,
                    transport_file=str(files["transport"]) if "transport" in files else None,
                    out_name=str(partial), quiet=True)
            os.replace(partial, target)
        except Exception as err:  # the converter's InputError, or its parser's own exceptions
            partial.unlink(missing_ok=True)
            lines = _converter_lines(printed.getvalue()) or _converter_lines(str(err))
            said = "; ".join(lines[:3]) + (f"; and {len(lines) - 3} more" if len(lines) > 3 else "")
            hint = "" if "thermo" in files else " (thermo data in a separate file? name it in 'thermo')"
            raise InputError("mechanism", f"'{source.name}' (keyword text format) does not convert with "
                             f"Cantera's ck2yaml: {said[:500]}{hint}") from None
        if report is not None:
            for line in _converter_lines(printed.getvalue()):
                report(f"converter: {line}")
    converted = dict(config)
    converted["mechanism"] = str(target)
    for key in ("thermo", "transport"):
        converted.pop(key, None)
    return converted


def _converter_lines(text: str) -> list[str]:
    """The converter's messages, one per line, without its rules of asterisks and its pointer to
    the tutorial."""
    lines = [" ".join(line.split()) for line in text.splitlines() if line.strip("* \t")]
    return [line for line in lines if not line.startswith(("Please check", "https://", "for the correct"))]


def file_sha256(path: Path) -> str:
    """sha256 of the mechanism file's bytes: the content, not the name, identifies it."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


#: Largest accepted mechanism file, bytes: guards against pointing the config at a device or a dump.
MAX_FILE_BYTES = 200 * 1024 * 1024

#: Jumps of cp/R, h/RT or s/R between the two NASA7 ranges at the midpoint temperature.
#: h2o2.yaml and gri30.yaml stay below 2e-5, n-hexane-NUIG-2015 (shipped) reaches 0.16; above NOTE the case files carry a
#: warning, above REFUSE the data are taken to be wrong (a typo in a coefficient) and refused.
THERMO_GAP_NOTE = 1e-4
THERMO_GAP_REFUSE = 1.0  # a jump of RT in h: shipped mechanisms reach 0.16 (n-hexane-NUIG-2015, CHV)


def check_file(path: Path, field_name: str = "mechanism") -> None:
    """Refuse what is not a regular, readable file of sensible size, before Cantera opens it."""
    path = Path(path)
    if not path.is_file():
        raise InputError(field_name, f"'{path}' is not a regular file")
    size = path.stat().st_size
    if size == 0:
        raise InputError(field_name, f"'{path}' is empty")
    if size > MAX_FILE_BYTES:
        raise InputError(field_name, f"'{path}' is {size / 2**20:.0f} MiB, more than a mechanism file can be "
                         f"({MAX_FILE_BYTES / 2**20:.0f} MiB)")


def thermo_gaps(gas: ct.Solution) -> list[tuple[str, float, float]]:
    """Species whose NASA7 ranges disagree at the midpoint: (name, T_mid in K, largest jump).

    The jump is the largest of |Delta cp/R|, |Delta h/(R T_mid)| and |Delta s/R| between the
    low- and high-temperature polynomials at T_mid (all dimensionless). Other thermo types are
    not checked.
    """
    out = []
    for sp in gas.species():
        thermo = sp.thermo
        coeffs = np.asarray(getattr(thermo, "coeffs", ()), dtype=float)
        if type(thermo).__name__ != "NasaPoly2" or coeffs.size != 15:
            continue
        t_mid = float(coeffs[0])
        below, above = t_mid * (1 - 1e-12), t_mid * (1 + 1e-12)
        jumps = ((thermo.cp(above) - thermo.cp(below)) / ct.gas_constant,
                 (thermo.h(above) - thermo.h(below)) / (ct.gas_constant * t_mid),
                 (thermo.s(above) - thermo.s(below)) / ct.gas_constant)
        worst = float(np.max(np.abs(jumps)))
        if not np.isfinite(worst) or worst > THERMO_GAP_NOTE:
            out.append((sp.name, t_mid, worst))
    return out


#: the only equation of state the reactors accept (Cantera's ideal-gas reactors)
IDEAL_GAS = "ideal-gas"


def phases_of(path: Path) -> list[tuple[str, str]]:
    """(name, thermo model) of every phase a YAML mechanism file defines, in file order; empty
    if the file cannot be read as such."""
    try:
        with open(path, encoding="utf-8") as handle:
            data = yaml.load(handle, Loader=getattr(yaml, "CSafeLoader", yaml.SafeLoader))  # noqa: S506
        return [(str(ph.get("name", "")), str(ph.get("thermo", ""))) for ph in data.get("phases", [])
                if isinstance(ph, dict)]
    except Exception:  # noqa: BLE001 - only used to word a message
        return []


def _ideal_gas_phases(path: Path) -> str:
    names = [name for name, thermo in phases_of(path) if thermo == IDEAL_GAS]
    return ", ".join(names) if names else "none (the file offers no ideal-gas phase)"


def load(path: Path, field_name: str = "mechanism", phase: str | None = None) -> ct.Solution:
    """A new ``ct.Solution`` for the mechanism file; parse errors become an :class:`InputError`.

    ``phase``: the name of the phase to use in a file that defines several (default: the first).
    A phase that is not an ideal gas is refused (field ``phase``), naming the ideal-gas phases
    the file offers: the reactors are Cantera's ideal-gas reactors.

    Thermo data whose NASA7 ranges jump by more than :data:`THERMO_GAP_REFUSE` at the midpoint are
    refused, naming the species; smaller jumps above :data:`THERMO_GAP_NOTE` are noted by
    :func:`describe`.
    """
    check_file(path, field_name)
    if phase is not None:
        names = [name for name, _ in phases_of(path)]
        if names and phase not in names:
            raise InputError("phase", f"{phase!r} is not a phase of '{path}'; its phases: {', '.join(names)} "
                             f"(ideal gas: {_ideal_gas_phases(path)})")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            gas = ct.Solution(str(path), phase or "")
    except Exception as err:  # CanteraError, YAML errors
        lines = [ln.strip() for ln in str(err).splitlines() if ln.strip() and not set(ln.strip()) <= set("*-")]
        detail = " ".join(lines)[:500]
        raise InputError(field_name, f"'{path}' does not load in Cantera: {detail}") from None
    if gas.thermo_model != IDEAL_GAS:
        raise InputError("phase", f"phase '{gas.name}' of '{path}' is {gas.thermo_model}, not an ideal gas, "
                         f"which the reactors need; allowed values (its ideal-gas phases): {_ideal_gas_phases(path)}")
    if gas.n_reactions == 0:
        raise InputError(field_name, f"'{path}' has no reactions: there is nothing to relax")
    gross = [(name, t_mid, jump) for name, t_mid, jump in thermo_gaps(gas) if not jump <= THERMO_GAP_REFUSE]
    if gross:
        listed = "; ".join(f"{name} at {t_mid:g} K (jump {jump:.3g})" for name, t_mid, jump in gross[:5])
        raise InputError(field_name, f"'{path}': thermo data of {len(gross)} species disagree between their "
                         f"two NASA7 ranges at the midpoint temperature by more than {THERMO_GAP_REFUSE:g} "
                         f"in cp/R, h/RT or s/R: {listed}; fix the coefficients")
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
    source_index : int array (n_reactions,)
        Index of each reaction in the source mechanism: its position in this file, or the
        :data:`SOURCE_INDEX_FIELD` a cut recorded (see :func:`source_indices`).
    """

    equations: tuple[str, ...]
    reversible: np.ndarray
    duplicate_group: np.ndarray
    negative_prefactor: np.ndarray
    species: tuple[str, ...]
    elements: tuple[str, ...]
    notes: tuple[str, ...] = field(default_factory=tuple)
    source_index: np.ndarray | None = None

    @property
    def reaction_index(self) -> np.ndarray:
        """The reaction coordinate of the files: :attr:`source_index`, or the positions."""
        if self.source_index is None:
            return np.arange(len(self.equations))
        return np.asarray(self.source_index, dtype=np.int64)

    @property
    def n_irreversible(self) -> int:
        return int((~self.reversible).sum())


def _prefactor(rate) -> float:
    for attr in ("pre_exponential_factor",):
        if hasattr(rate, attr):
            return float(getattr(rate, attr))
    # PLOG: one Arrhenius expression per pressure; a negative one is the fitting device
    plog = getattr(rate, "rates", None)
    if plog:
        return min(float(arrhenius.pre_exponential_factor) for _, arrhenius in plog)
    # falloff / chemically activated: the high-pressure limit is the physical one
    high = getattr(rate, "high_rate", None)
    if high is not None and hasattr(high, "pre_exponential_factor"):
        return float(high.pre_exponential_factor)
    return float("nan")


#: Field of a reaction in a mechanism YAML file that sigmagrid's cuts write: the reaction's index in
#: the full mechanism, so the files of a cut use the full mechanism's reaction indices.
SOURCE_INDEX_FIELD = "source-reaction-index"


def source_indices(gas: ct.Solution) -> np.ndarray:
    """Index of each reaction of ``gas`` in its source mechanism (int64): the
    :data:`SOURCE_INDEX_FIELD` of a cut's reactions, else the reaction's position. A file whose
    recorded indices are incomplete, repeated or not whole numbers falls back to the positions."""
    positions = np.arange(gas.n_reactions, dtype=np.int64)
    recorded = []
    for j in range(gas.n_reactions):
        value = gas.reaction(j).input_data.get(SOURCE_INDEX_FIELD)
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
            return positions
        recorded.append(int(value))
    out = np.array(recorded, dtype=np.int64)
    return out if np.unique(out).size == out.size else positions


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
    in_reactions = np.zeros(gas.n_species, dtype=bool)
    nu = gas.product_stoich_coeffs + gas.reactant_stoich_coeffs
    in_reactions |= np.asarray(nu != 0).any(axis=1).ravel()
    idle = [name for name, used in zip(gas.species_names, in_reactions) if not used]
    if idle:
        notes.append(f"species in no reaction's stoichiometry (diluents or third bodies only): {', '.join(idle)}")
    for name, t_mid, jump in thermo_gaps(gas):
        notes.append(f"thermo data of {name} jump by {jump:.2g} (cp/R, h/RT or s/R) between the NASA7 "
                     f"ranges at {t_mid:g} K: energy is not conserved exactly across that temperature "
                     "(see energy_drift)")
    return MechanismInfo(
        equations=tuple(gas.reaction_equations()),
        reversible=reversible,
        duplicate_group=groups,
        negative_prefactor=negative,
        species=tuple(gas.species_names),
        elements=tuple(gas.element_names),
        notes=tuple(notes),
        source_index=source_indices(gas),
    )
