"""Physical constants in SI: the exact defining constants of the 2019 SI and the gas constant they fix.

The same values as ``scipy.constants`` (CODATA 2018), held here so that a command which only reads the store and
converts units does not import scipy to get them (measured ~0.1 s of start-up: scipy.constants pulls in scipy's
array-API layer). ``tests/test_constants.py`` checks each value against scipy.constants.
"""

from __future__ import annotations

__all__ = ["N_A", "R", "c", "h", "k_B"]

h = 6.62607015e-34  # J s, Planck constant (exact by definition)
k_B = 1.380649e-23  # J/K, Boltzmann constant (exact by definition)
N_A = 6.02214076e23  # 1/mol, Avogadro constant (exact by definition)
c = 299_792_458.0  # m/s, speed of light in vacuum (exact by definition)
R = N_A * k_B  # J/(mol K), molar gas constant R = N_A k_B, exact: 8.31446261815324 as a double
