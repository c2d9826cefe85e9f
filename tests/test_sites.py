"""Checks for catalog.core.sites: site counts from standard atomic weights, TOF with propagated error, TON, rates."""

import numpy as np
import pytest

from catalog.core.sites import rate_per_area, rate_per_mass, site_amount, tof, ton


def test_site_count_from_loading_and_dispersion():
    # Source: IUPAC standard atomic weight of Pt, 195.084 g/mol (periodictable 2.1, read). 1 g of 1 wt% Pt at 50 %
    # dispersion: 1e-3 kg × 0.01 / 0.195084 kg/mol × 0.5 = 2.5630e-5 mol; rel. 1e-4 (5 digits).
    s = site_amount(1e-3, metal="Pt", metal_loading=0.01, dispersion=0.5)
    assert s.moles == pytest.approx(2.5630e-5, rel=1e-4)
    assert s.basis == "surface metal (dispersion)"
    assert s.note == ""


def test_site_count_without_dispersion_counts_all_metal_and_says_so():
    # Source: IUPAC standard atomic weight of Pd, 106.42 g/mol (periodictable 2.1, read).
    s = site_amount(2e-3, metal="Pd", metal_loading=0.05)
    assert s.moles == pytest.approx(2e-3 * 0.05 / 0.10642, rel=1e-6)
    assert s.basis == "total metal (no dispersion given)"
    assert "lower bound" in s.note


def test_measured_site_density_wins():
    s = site_amount(5e-4, metal="Pt", metal_loading=0.01, dispersion=0.5, site_density=0.03)
    assert s.moles == pytest.approx(1.5e-5, rel=1e-12)
    assert s.basis == "measured site density"


def test_unknown_sites_are_nan_with_a_reason():
    s = site_amount(1e-3)
    assert np.isnan(s.moles) and s.basis == "unknown" and s.note


def test_site_count_rejects_impossible_fractions():
    with pytest.raises(ValueError):
        site_amount(1e-3, metal="Pt", metal_loading=1.5)
    with pytest.raises(ValueError):
        site_amount(1e-3, metal="Pt", metal_loading=0.01, dispersion=0.0)
    with pytest.raises(ValueError):
        site_amount(1e-3, metal="Qq", metal_loading=0.01)


def test_tof_subtracts_blank_and_propagates_error():
    # Independent errors add in quadrature (GUM, JCGM 100:2008, eq. 10, uncorrelated inputs).
    result = tof(r0=4e-7, r0_se=3e-8, blank_rate=1e-7, blank_rate_se=4e-8, sites=1e-5)
    assert result.tof == pytest.approx(0.03, rel=1e-12)
    assert result.tof_se == pytest.approx(5e-8 / 1e-5, rel=1e-12)


def test_tof_broadcasts_over_trials():
    result = tof(np.array([2e-7, 3e-7]), np.array([1e-8, 1e-8]), 0.0, 0.0, np.array([1e-5, 2e-5]))
    assert np.allclose(result.tof, [0.02, 0.015])


def test_ton_and_normalised_rates():
    assert ton(1e-3, 1e-5) == pytest.approx(100.0)
    assert rate_per_mass(2e-6, 1e-3) == pytest.approx(2e-3)
    # 100 m²/g = 1e5 m²/kg: 1 mg of it is 0.1 m².
    assert rate_per_area(2e-6, 1e-6, 1e5) == pytest.approx(2e-5)
