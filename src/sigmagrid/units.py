"""Physical constants and unit conversions at the Cantera boundary.

Cantera works in kmol; sigmagrid reports mol-based SI values.
Unit strings are UDUNITS-2 spellings so that the netCDF files pass the CF checks.
"""

#: Molar gas constant, J/(mol K): N_A k of the 2019 SI, exact (CODATA 2018), and Cantera's value.
#: (8.314462618, its ten-digit rounding, left a 2e-11 offset against Cantera's entropies.)
GAS_CONSTANT = 6.02214076e23 * 1.380649e-23

#: kmol -> mol
PER_KMOL = 1.0e-3  # J/kmol -> J/mol
KMOL = 1.0e3  # kmol/(m3 s) -> mol/(m3 s)
