"""Physical constants and unit conversions at the Cantera boundary.

Cantera works in kmol; sigmagrid reports mol-based SI values (DESIGN section 2).
Unit strings are UDUNITS-2 spellings so that the netCDF files pass the CF checks.
"""

#: Molar gas constant, J/(mol K) (CODATA 2018, exact).
GAS_CONSTANT = 8.314462618

#: kmol -> mol
PER_KMOL = 1.0e-3  # J/kmol -> J/mol
KMOL = 1.0e3  # kmol/(m3 s) -> mol/(m3 s)
