"""From a validated config to the list of cases, each with a stable id and a readable label."""

from __future__ import annotations

import hashlib
import itertools
import json
import math
import re
import warnings
from dataclasses import asdict, dataclass, field
from pathlib import Path

import cantera as ct
import numpy as np

from . import mechanism
from .errors import InputError


@dataclass(frozen=True)
class Case:
    """One initial state in one reactor type."""

    case_id: str
    label: str
    reactor: str
    temperature: float  # K
    pressure: float  # Pa
    equivalence_ratio: float  # 1 (element-based for explicit compositions; NaN without fuel or oxidizer)
    composition_name: str
    composition: str  # normalized mole fractions, "S1:x1,S2:x2", 12 significant digits

    def mole_fractions(self) -> dict[str, float]:
        return parse_composition(self.composition, "composition")

    def as_row(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Grid:
    mechanism_path: Path
    mechanism_sha256: str
    cases: tuple[Case, ...]
    #: the mechanism as parsed for the expansion, so that a batch does not parse it twice
    gas: ct.Solution | None = field(default=None, compare=False, repr=False)

    def batches(self, cases_per_job: int) -> list[tuple[Case, ...]]:
        """Cases in fixed-size batches, in id order so a batch's members do not depend on dict order."""
        ordered = sorted(self.cases, key=lambda c: c.case_id)
        return [tuple(ordered[i:i + cases_per_job]) for i in range(0, len(ordered), cases_per_job)]


_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_ITEM = re.compile(rf"^\s*([A-Za-z][A-Za-z0-9_()*+\-,']*?)\s*:\s*({_NUMBER})\s*$")


def parse_composition(text: str, field: str) -> dict[str, float]:
    """Parse 'H2:2, O2:1, N2:3.76' into {species: amount}; amounts must be finite and >= 0."""
    if not isinstance(text, str) or not text.strip():
        raise InputError(field, "must be a composition like 'H2:2,O2:1,N2:3.76'")
    out: dict[str, float] = {}
    for part in text.split(","):
        match = _ITEM.match(part)
        if not match:
            raise InputError(field, f"cannot read {part.strip()!r} in {text!r}: write SPECIES:AMOUNT pairs "
                             "separated by commas, e.g. 'H2:2,O2:1,N2:3.76'")
        name, value = match.group(1), float(match.group(2))
        if not math.isfinite(value) or value < 0:
            raise InputError(field, f"amount of {name} must be a finite number >= 0, got {match.group(2)}")
        if name in out:
            raise InputError(field, f"species {name} is listed twice in {text!r}")
        out[name] = value
    if sum(out.values()) <= 0:
        raise InputError(field, f"amounts in {text!r} add up to zero")
    return out


def check_species(amounts: dict[str, float], gas: ct.Solution, field: str) -> None:
    known = set(gas.species_names)
    unknown = [s for s in amounts if s not in known]
    if unknown:
        sample = ", ".join(gas.species_names[:12]) + (", ..." if gas.n_species > 12 else "")
        raise InputError(field, f"unknown species {', '.join(unknown)} for this mechanism; "
                         f"its species are: {sample}")


def _normalized(gas: ct.Solution) -> str:
    return ",".join(f"{name}:{x:.12g}" for name, x in zip(gas.species_names, gas.X) if x > 0)


def case_id(mechanism_sha256: str, reactor: str, temperature: float, pressure: float, composition: str,
            phase: str | None = None) -> str:
    """16 hex digits of sha256 over the physical definition and the mechanism's content (and the
    phase, where the config picks one: two phases of one file are two mechanisms)."""
    fields = {"mechanism": mechanism_sha256, "reactor": reactor, "T": f"{temperature:.10g}",
              "P": f"{pressure:.10g}", "X": composition}
    if phase is not None:
        fields["phase"] = phase
    key = json.dumps(fields, sort_keys=True)
    return hashlib.sha256(key.encode()).hexdigest()[:16]


def _label(reactor: str, name: str, temperature: float, pressure: float) -> str:
    return f"{reactor}_{name}_T{temperature:g}K_P{pressure / 1e5:g}bar"


def expand(config: dict, project_root: str | Path | None = None) -> Grid:
    """All cases of a validated config (see :func:`sigmagrid.config.validate`). Raises InputError.

    ``project_root``: if given, a mechanism file must lie inside it (see :func:`mechanism.resolve`).
    """
    # Count before building anything: a typo such as a 10^6-long axis must fail at once.
    n_mixtures = len(config.get("feed", {}).get("equivalence_ratio", [])) + len(config.get("compositions", []))
    n_cases = len(config["reactors"]) * n_mixtures * len(config["temperature"]) * len(config["pressure"])
    limit = config["batch"]["max_cases"]
    if n_cases > limit:
        raise InputError("batch.max_cases", f"the grid has {n_cases} cases, more than the limit {limit}; "
                         "raise batch.max_cases if this is intended")
    path = mechanism.resolve(config["mechanism"], root=project_root)
    gas = mechanism.load(path, phase=config.get("phase"))
    sha = mechanism.file_sha256(path)
    mixtures: list[tuple[str, float, str]] = []  # (name, phi, normalized composition)

    feed = config.get("feed")
    if feed:
        fuel = parse_composition(feed["fuel"], "feed.fuel")
        oxidizer = parse_composition(feed["oxidizer"], "feed.oxidizer")
        check_species(fuel, gas, "feed.fuel")
        check_species(oxidizer, gas, "feed.oxidizer")
        for i, phi in enumerate(feed["equivalence_ratio"]):
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    gas.set_equivalence_ratio(phi, fuel, oxidizer)
            except ct.CanteraError as err:
                raise InputError(f"feed.equivalence_ratio[{i}]",
                                 f"cannot mix fuel {feed['fuel']!r} with oxidizer {feed['oxidizer']!r} at "
                                 f"{phi:g}: {str(err).strip().splitlines()[-1][:200]}") from None
            if not np.all(np.isfinite(gas.X)):
                raise InputError("feed", f"fuel {feed['fuel']!r} and oxidizer {feed['oxidizer']!r} do not define "
                                 "an equivalence ratio (does the oxidizer contain oxygen and the fuel burn?)")
            mixtures.append((f"phi{phi:g}", float(phi), _normalized(gas)))

    for i, entry in enumerate(config.get("compositions", [])):
        field = f"compositions[{i}].composition"
        amounts = parse_composition(entry["composition"], field)
        check_species(amounts, gas, field)
        gas.TPX = 300.0, ct.one_atm, amounts
        try:
            phi = float(gas.equivalence_ratio())
        except ct.CanteraError:
            phi = float("nan")
        mixtures.append((entry["name"], phi if math.isfinite(phi) else float("nan"), _normalized(gas)))

    names = [m[0] for m in mixtures]
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise InputError("compositions", f"mixture name {dup!r} is used twice")

    cases = []
    for reactor, (name, phi, comp), temperature, pressure in itertools.product(
            config["reactors"], mixtures, config["temperature"], config["pressure"]):
        cases.append(Case(
            case_id=case_id(sha, reactor, float(temperature), float(pressure), comp, config.get("phase")),
            label=_label(reactor, name, float(temperature), float(pressure)),
            reactor=reactor, temperature=float(temperature), pressure=float(pressure),
            equivalence_ratio=phi, composition_name=name, composition=comp,
        ))
    if not cases:
        raise InputError("grid", "the config expands to no cases")
    limit = config["batch"]["max_cases"]
    if len(cases) > limit:
        raise InputError("batch.max_cases", f"the grid has {len(cases)} cases, more than the limit {limit}; "
                         "raise batch.max_cases if this is intended")
    ids = [c.case_id for c in cases]
    if len(set(ids)) != len(ids):
        raise InputError("grid", "two grid points describe the same physical case (same composition, "
                         "temperature, pressure and reactor); remove the duplicate")
    return Grid(mechanism_path=path, mechanism_sha256=sha, cases=tuple(cases), gas=gas)


def select_cases(cases, spec) -> list:
    """The cases that get per-case figures, from the config's ``figures.cases``.

    ``"all"``; a number N (N cases spread evenly over the grid ordered by reactor, pressure,
    mixture, equivalence ratio and temperature, so the corners are included); or a list of case
    ids or labels. Raises InputError naming the entry that matches no case.
    """
    ordered = sorted(cases, key=lambda c: (c.reactor, c.pressure, c.composition_name, c.equivalence_ratio,
                                           c.temperature, c.case_id))
    if spec == "all":
        return ordered
    if isinstance(spec, bool) or not isinstance(spec, (int, list)):
        raise InputError("figures.cases", f"must be 'all', a number of cases or a list of case ids or labels, got {spec!r}")
    if isinstance(spec, int):
        if spec < 0:
            raise InputError("figures.cases", f"must be >= 0, got {spec}")
        if spec >= len(ordered):
            return ordered
        picks = np.unique(np.linspace(0, len(ordered) - 1, spec).round().astype(int)) if spec else []
        return [ordered[i] for i in picks]
    by_name = {c.case_id: c for c in ordered} | {c.label: c for c in ordered}
    chosen = []
    for i, name in enumerate(spec):
        if name not in by_name:
            raise InputError(f"figures.cases[{i}]", f"'{name}' is neither a case id nor a case label of this grid "
                             "(list them with 'sigmagrid cases CONFIG')")
        if by_name[name] not in chosen:
            chosen.append(by_name[name])
    return chosen
