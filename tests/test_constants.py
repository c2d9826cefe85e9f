"""catalog.core.constants against scipy.constants (CODATA 2018; the 2019 SI defining constants are exact)."""

import scipy.constants

from catalog.core import constants


def test_defining_constants_are_the_exact_si_values():
    # Source: scipy.constants (CODATA 2018). Exact by definition, so equal to the last bit.
    assert constants.h == scipy.constants.h
    assert constants.k_B == scipy.constants.k
    assert constants.N_A == scipy.constants.N_A
    assert constants.c == scipy.constants.c


def test_gas_constant_is_avogadro_times_boltzmann():
    # Source: scipy.constants.R and CODATA 2018 "molar gas constant" 8.314462618... J/(mol K), exact; equal bits.
    assert constants.R == scipy.constants.R == scipy.constants.physical_constants["molar gas constant"][0]
