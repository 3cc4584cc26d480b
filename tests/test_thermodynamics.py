"""Checks of the thermodynamics against handbook values and Cantera as a reference library."""

import cantera as ct
import numpy as np
import pytest

from sigmagrid import mechanism, reactors
from sigmagrid.units import GAS_CONSTANT

# NIST-JANAF Thermochemical Tables / CODATA key values, S deg(298.15 K), J/(mol K); from memory.
JANAF_S298 = {"H2": 130.68, "O2": 205.15, "N2": 191.61, "H2O": 188.83, "CO": 197.66, "CO2": 213.79, "OH": 183.7}


@pytest.mark.parametrize("species,expected", sorted(JANAF_S298.items()))
def test_standard_entropy_matches_janaf(species, expected):
    gas = ct.Solution("gri30.yaml")
    gas.TP = 298.15, gas.reference_pressure
    s = gas.standard_entropies_R[gas.species_index(species)] * GAS_CONSTANT
    # 0.5 J/(mol K) covers the 1 atm / 1 bar standard-state difference (R ln 1.01325 = 0.11)
    assert s == pytest.approx(expected, abs=0.5)


# Adiabatic flame temperatures, stoichiometric fuel-air, 298 K, 1 atm, constant pressure;
# handbook values from memory (e.g. Turns, An Introduction to Combustion, table of flame temperatures).
@pytest.mark.parametrize("fuel,expected", [("CH4:1", 2225.0), ("H2:1", 2390.0)])
def test_adiabatic_flame_temperature_matches_handbook(fuel, expected):
    gas = mechanism.load(mechanism.resolve("gri30.yaml"))
    gas.set_equivalence_ratio(1.0, fuel, "O2:1, N2:3.76")
    gas.TP = 298.15, ct.one_atm
    eq = reactors.equilibrium_of(gas, "constant-pressure", mass=1.0)
    assert eq.temperature == pytest.approx(expected, abs=30.0)


def test_closed_vessel_pressure_ratio_is_in_the_usual_range():
    # Stoichiometric hydrocarbon-air in a closed adiabatic vessel: P_eq/P_0 about 8 to 10 (common practice).
    gas = mechanism.load(mechanism.resolve("gri30.yaml"))
    gas.set_equivalence_ratio(1.0, "CH4:1", "O2:1, N2:3.76")
    gas.TP = 298.15, ct.one_atm
    eq = reactors.equilibrium_of(gas, "isolated", mass=1.0)
    assert 8.0 <= eq.pressure / ct.one_atm <= 10.0


def test_affinity_is_minus_reaction_gibbs_energy(h2o2):
    # A_j = -sum_k nu_kj mu_k (de Donder), computed independently from the chemical potentials.
    gas, _ = h2o2
    gas.TPX = 1500.0, ct.one_atm, "H2:2, O2:1, H2O:0.1, OH:0.01, H:0.01, O:0.01, N2:3.76"
    nu = gas.product_stoich_coeffs - gas.reactant_stoich_coeffs
    expected = -(nu.T @ gas.chemical_potentials) / 1000.0
    from sigmagrid import diagnostics

    assert np.allclose(diagnostics.affinity(gas), expected, rtol=1e-10, atol=1e-6)


def test_mass_action_affinity_rate_relation(h2o2):
    # For reversible mass-action kinetics with reverse rates from K_c: r+/r- = exp(A/RT),
    # so q = r+ (1 - exp(-x)) exactly (de Groot and Mazur 1962, ch. X).
    gas, info = h2o2
    gas.TPX = 1500.0, ct.one_atm, "H2:2, O2:1, H2O:0.1, OH:0.01, H:0.01, O:0.01, HO2:1e-4, H2O2:1e-5, N2:3.76"
    from sigmagrid import diagnostics

    state = diagnostics.evaluate(gas, [gas.T], [gas.density], [gas.Y])
    x = state.disequilibrium[0]
    rf, q = state.forward_rate[0], state.net_rate[0]
    assert np.allclose(q, rf * -np.expm1(-x), rtol=1e-6)
    assert (state.entropy_production[0] >= 0).all()

