"""Checks for catalog.core.orders (initial-rate orders) and catalog.core.photons (photon flux, apparent quantum yield)."""

import numpy as np
import pytest
from scipy.constants import N_A, c, e, h

from catalog.core.orders import reaction_order
from catalog.core.photons import apparent_quantum_yield, photon_flux

# 2 NO + O2 -> 2 NO2 at 25 °C, initial-rate table (textbook exercise, original source unknown: medium confidence).
# Concentrations in mol/L and rates in mol/(L s), converted to SI (×1000) below; the order does not depend on units.
NO = np.array([0.00920, 0.0184, 0.00920, 0.0184]) * 1e3
O2 = np.array([0.00272, 0.00272, 0.00544, 0.00544]) * 1e3
RATE = np.array([0.00193, 0.00774, 0.00387, 0.0155]) * 1e3


@pytest.mark.parametrize("rows", [[0, 1], [2, 3]])
def test_order_in_no_is_two(rows):
    # Expected: second order in NO at fixed O2 (textbook exercise, source unknown). Read to ±0.01.
    fit = reaction_order(NO[rows], RATE[rows])
    assert fit.order == pytest.approx(2.0, abs=0.01)
    assert fit.n_points == 2
    assert np.isnan(fit.order_se)  # two points, no stated errors: no interval


@pytest.mark.parametrize("rows", [[0, 2], [1, 3]])
def test_order_in_o2_is_one(rows):
    # Expected: first order in O2 at fixed NO (textbook exercise, source unknown). Read to ±0.01.
    assert reaction_order(O2[rows], RATE[rows]).order == pytest.approx(1.0, abs=0.01)


def test_order_with_replicates_has_an_interval_containing_the_truth():
    rng = np.random.default_rng(3)
    conc = np.repeat([50.0, 100.0, 200.0, 400.0], 3)
    r0 = 1e-6 * conc**1.5 * np.exp(rng.normal(0.0, 0.03, conc.size))
    fit = reaction_order(conc, r0, r0_se=0.03 * r0)
    assert fit.low < 1.5 < fit.high
    assert fit.low < fit.order < fit.high


def test_order_needs_two_concentrations():
    with pytest.raises(ValueError, match="two or more"):
        reaction_order([100.0, 100.0, -5.0], [1e-3, 1.1e-3, 1e-3])


def test_photon_flux_100_mw_at_420_nm():
    # Source: CODATA constants via scipy.constants; q = P λ/(h c N_A) = 3.5109e-7 mol/s (computed), 5 digits.
    assert photon_flux(0.100, 420e-9) == pytest.approx(3.5109e-7, rel=5e-5)


def test_photon_energy_matches_codata_electronvolt_conversion():
    # Source: CODATA via scipy.constants: one photon of 1 eV has λ = h c / e = 1.23984198 µm. A 1 W beam at that
    # wavelength carries 1/e photons per second, i.e. 1/(e N_A) mol/s (rel. 1e-12).
    wavelength = h * c / e
    assert photon_flux(1.0, wavelength) == pytest.approx(1.0 / (e * N_A), rel=1e-12)


def test_apparent_quantum_yield_counts_electrons():
    # Definition (IUPAC photonic efficiency × electrons per molecule): 2 electrons per H2. 1e-8 mol/s of H2 under
    # 1e-6 mol photons/s is 2 %.
    assert apparent_quantum_yield(1e-8, 1e-6, electrons_per_molecule=2) == pytest.approx(0.02, rel=1e-12)
    q = photon_flux(np.array([0.05, 0.1]), 420e-9)
    assert np.allclose(apparent_quantum_yield(1e-9, q), 1e-9 / q)
