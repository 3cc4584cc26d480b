"""Flammability and closed-vessel flags for an initial mixture.

These are screening flags for people handling the mixtures, not a hazard assessment: the results
of this program are model outputs and no basis for vessel design, venting or hazard
classification. Defer to local codes, recognised standards (for example NFPA 68/69, EN 1127-1)
and licensed practice.
"""

from __future__ import annotations

from dataclasses import dataclass

#: Flammability limits in air at ambient conditions, vol % fuel (lower, upper).
#: Zabetakis, US Bureau of Mines Bulletin 627 (1965); values from memory.
FLAMMABILITY_LIMITS_AIR = {
    "H2": (4.0, 75.0),
    "CH4": (5.0, 15.0),
    "C3H8": (2.1, 9.5),
    "CO": (12.5, 74.0),
    "NH3": (15.0, 28.0),
}

#: Species that are neither fuel nor part of air for this screen.
_AIR = {"O2", "N2", "AR", "Ar", "HE", "He", "CO2", "H2O"}
_FUEL_ELEMENTS = ("H", "C")


@dataclass(frozen=True)
class FlammabilityScreen:
    verdict: str  # "inside", "outside" or "unknown"
    fuel_percent: float  # vol % of the fuel species in the mixture
    lower: float  # vol %, Le Chatelier's rule over the fuel species
    upper: float
    reason: str


def le_chatelier(fractions: dict[str, float], limits: dict[str, tuple[float, float]]) -> tuple[float, float]:
    """Blend limits by Le Chatelier's rule: L_mix = 1 / sum(y_i / L_i), y_i = share in the fuel blend."""
    total = sum(fractions.values())
    lower = 1.0 / sum((x / total) / limits[s][0] for s, x in fractions.items())
    upper = 1.0 / sum((x / total) / limits[s][1] for s, x in fractions.items())
    return lower, upper


def screen_flammability(mole_fractions: dict[str, float]) -> FlammabilityScreen:
    """Is the mixture, at ambient conditions, inside the flammable range of its fuel in air?

    The screen applies only to fuel-in-air mixtures: the limits are for air at ambient temperature
    and pressure, and they widen with temperature, pressure and oxygen enrichment.
    """
    total = sum(mole_fractions.values())
    x = {s: v / total for s, v in mole_fractions.items() if v > 0}
    fuels = {s: v for s, v in x.items() if s not in _AIR}
    nan = float("nan")
    if not fuels:
        return FlammabilityScreen("outside", 0.0, nan, nan, "no fuel species")
    unknown = [s for s in fuels if s not in FLAMMABILITY_LIMITS_AIR]
    fuel_percent = 100.0 * sum(fuels.values())
    if unknown:
        return FlammabilityScreen("unknown", fuel_percent, nan, nan,
                                  f"no tabulated limits for {', '.join(sorted(unknown))}")
    rest = 1.0 - sum(fuels.values())
    o2_share = x.get("O2", 0.0) / rest if rest > 0 else 0.0
    if x.get("O2", 0.0) == 0.0:
        return FlammabilityScreen("outside", fuel_percent, nan, nan, "no oxygen")
    if not 0.19 <= o2_share <= 0.23:
        return FlammabilityScreen("unknown", fuel_percent, nan, nan,
                                  f"oxidizer is not air (O2 is {100 * o2_share:.1f} % of the non-fuel part); "
                                  "the tabulated limits are for air")
    lower, upper = le_chatelier(fuels, FLAMMABILITY_LIMITS_AIR)
    verdict = "inside" if lower <= fuel_percent <= upper else "outside"
    return FlammabilityScreen(verdict, fuel_percent, lower, upper,
                              f"{fuel_percent:.2f} vol % fuel against {lower:.2f}-{upper:.2f} vol % in air "
                              "(Zabetakis 1965, Le Chatelier blend)")


CAUTION = (
    "Model output only. Reactive mixtures can ignite, deflagrate or detonate; closed-vessel "
    "explosion pressures reach about 8-10 times the initial pressure for stoichiometric "
    "hydrocarbon-air (common practice) and detonations exceed that. Not a basis for vessel design, "
    "venting or hazard classification: follow local codes, recognised standards (e.g. NFPA 68/69, "
    "EN 1127-1) and licensed practice."
)
