"""DRG and DRGEP coefficients and path importances against hand computation and Cantera.

References: Lu and Law, Proc. Combust. Inst. 30 (2005) 1333 (DRG, eq. 2 and the graph search);
Pepiot-Desjardins and Pitsch, Combust. Flame 154 (2008) 67 (DRGEP, eqs. 2-4 and the path product).
"""

import cantera as ct
import numpy as np
import pytest

from sigmagrid import graph_criteria as gc

# a toy of four species A, B, C, D and three reactions, solved by hand below:
# R1: A => B (w 2), R2: B => C (w 1.5), R3: A + D => C (w 1)
NU = np.array([[-1, 0, -1],   # A
               [1, -1, 0],    # B
               [0, 1, 1],     # C
               [0, 0, -1]], float)  # D
REACTANTS = np.array([[1, 0, 1], [0, 1, 0], [0, 0, 0], [0, 0, 1]], float)
PRODUCTS = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 1], [0, 0, 0]], float)
W = np.array([2.0, 1.5, 1.0])


def test_drg_by_hand():
    delta = gc.involvement(REACTANTS, PRODUCTS)
    r = gc.drg_coefficients(NU, delta, W)
    # A: |nu w| = 2 (R1), 1 (R3); B: 2 (R1), 1.5 (R2)
    assert r[0, 1] == pytest.approx(2 / 3) and r[0, 2] == pytest.approx(1 / 3) and r[0, 3] == pytest.approx(1 / 3)
    assert r[1, 0] == pytest.approx(2 / 3.5) and r[1, 2] == pytest.approx(1.5 / 3.5)
    importance = gc.path_importance(r, [0], "min")
    # C: direct 1/3, or A -> B -> C with min(2/3, 1.5/3.5) = 0.4286: the wider path wins;
    # D: direct 1/3, or on through C, where r_CD = 1/2.5 (C formed 1.5 by R2, 1 by R3): min 0.4
    assert r[2, 3] == pytest.approx(1 / 2.5)
    assert importance == pytest.approx([1.0, 2 / 3, 1.5 / 3.5, 0.4])


def test_drgep_by_hand():
    delta = gc.involvement(REACTANTS, PRODUCTS)
    r = gc.drgep_coefficients(NU, delta, W)
    # A: consumed 3, produced 0; B: produced 2, consumed 1.5 -> scale 2
    assert r[0, 1] == pytest.approx(2 / 3) and r[0, 2] == pytest.approx(1 / 3)
    assert r[1, 2] == pytest.approx(1.5 / 2) and r[1, 0] == pytest.approx(2 / 2)
    importance = gc.path_importance(r, [0], "product")
    # C: direct 1/3, or A -> B -> C with 2/3 * 3/4 = 1/2; D: direct 1/3 beats 1/2 * 1/2.5 = 0.2
    assert importance == pytest.approx([1.0, 2 / 3, 0.5, 1 / 3])
    assert gc.kept_species(importance, 0.4).tolist() == [True, True, True, False]


def test_drg_on_h2o2_against_cantera_loops():
    """Every r_AB of a hydrogen-air state from Cantera's own rates and stoichiometry, summed
    reaction by reaction (the paper's eq. 2 as written)."""
    gas = ct.Solution("h2o2.yaml")
    gas.TPX = 1500.0, ct.one_atm, "H2:2, O2:1, N2:3.76, OH:0.01, H:0.01, O:0.005, HO2:1e-4, H2O:0.1"
    w = gas.net_rates_of_progress
    nu = gas.product_stoich_coeffs - gas.reactant_stoich_coeffs
    delta = gc.involvement(gas.reactant_stoich_coeffs, gas.product_stoich_coeffs)
    r = gc.drg_coefficients(nu, delta, w)
    for a in range(gas.n_species):
        for b in range(gas.n_species):
            if a == b:
                continue
            num = den = 0.0
            for i, reaction in enumerate(gas.reactions()):
                term = abs(nu[a, i] * w[i])
                den += term
                involved = gas.species_name(b) in reaction.reactants or gas.species_name(b) in reaction.products
                num += term if involved else 0.0
            expected = num / den if den > 0 else 0.0
            assert r[a, b] == pytest.approx(expected, rel=1e-12, abs=1e-300)
    # nitrogen takes part in no reaction of h2o2.yaml (third body only): no path reaches it
    importance = gc.species_importance(nu, delta, w, [gas.species_index("H2"), gas.species_index("O2")], "drg")
    assert importance[gas.species_index("N2")] == 0.0 and importance[gas.species_index("AR")] == 0.0
    assert importance[gas.species_index("OH")] > 0.1
