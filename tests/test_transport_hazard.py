"""Checks for catalog.core.transport (Weisz-Prater, Mears, Thiele) and catalog.core.hazard (adiabatic rise, pressure)."""

import mpmath
import numpy as np
import pytest
from scipy.constants import R, physical_constants

from catalog.core.arrhenius import fit_arrhenius
from catalog.core.hazard import CAUTION, adiabatic_temperature_rise, pressure_rise
from catalog.core.transport import (
    MEARS_LIMIT,
    WEISZ_PRATER_LIMIT,
    effectiveness_sphere,
    mears,
    thiele_modulus_sphere,
    weisz_prater,
)

# Levenspiel, Chemical Reaction Engineering 3rd ed., Example 18.1 inputs (read). Levenspiel's rates are per volume of
# catalyst and his time unit is the hour; every number below uses hours consistently, which cancel in the moduli.
D_P = 2.4e-3  # m, particle diameter
D_E = 5e-5  # m³/(h·m cat), effective diffusivity
K_G = 300.0  # m³/(h·m² cat), film mass-transfer coefficient
C_AG = 20.0  # mol/m³, bulk gas concentration
R_OBS = 1e5  # mol/(h·m³ cat), observed rate


def test_levenspiel_18_1_weisz_prater_with_radius():
    # Length convention: R = d_p/2. N_WP = 1e5 × (1.2e-3)² / (20 × 5e-5) = 144 (computed from Levenspiel's inputs);
    # far above 0.3, so strong pore resistance. rel. 1e-12.
    n = weisz_prater(R_OBS, D_P / 2, C_AG, D_E)
    assert n == pytest.approx(144.0, rel=1e-12)
    assert n > WEISZ_PRATER_LIMIT


def test_levenspiel_18_1_wagner_modulus_with_volume_to_surface_length():
    # Length convention: L = d_p/6 (volume / external surface), as Levenspiel uses; the same formula with L gives his
    # Wagner-Weisz-Wheeler modulus 16 (computed from Levenspiel's inputs; > 4 means strong pore resistance).
    assert weisz_prater(R_OBS, D_P / 6, C_AG, D_E) == pytest.approx(16.0, rel=1e-12)


def test_levenspiel_18_1_mears():
    # Length convention: R = d_p/2, first order. Levenspiel's rate is per catalyst volume, so it enters as
    # rate_per_mass × bulk_density with bulk_density = 1 (volume basis). 1e5 × 1.2e-3 / (300 × 20) = 0.020
    # (computed); below 0.15, so no film limitation. rel. 1e-12.
    m = mears(R_OBS, 1.0, D_P / 2, 1.0, K_G, C_AG)
    assert m == pytest.approx(0.020, rel=1e-12)
    assert m < MEARS_LIMIT


def test_effectiveness_factor_limits():
    # Limits of η = (3/φ²)(φ coth φ − 1) (Thiele, Ind. Eng. Chem. 31, 916 (1939); from memory): η → 1 − φ²/15 as
    # φ → 0 and η → 3/φ − 3/φ² as φ → ∞. rel. 1e-12 and 1e-9.
    assert effectiveness_sphere(0.0) == 1.0
    assert effectiveness_sphere(1e-4) == pytest.approx(1 - 1e-8 / 15, rel=1e-12)
    assert effectiveness_sphere(1e3) == pytest.approx(3e-3 - 3e-6, rel=1e-9)
    # Continuity where the series hands over to the closed form.
    assert effectiveness_sphere(0.05 - 1e-12) == pytest.approx(effectiveness_sphere(0.05), rel=1e-12)


@pytest.mark.parametrize("phi", [1e-6, 1e-3, 0.049, 0.05, 0.2, 3.0, 40.0, 1e5])
def test_effectiveness_factor_against_arbitrary_precision(phi):
    # Source: mpmath (general-purpose arbitrary-precision library) evaluating the same closed form at 40 digits,
    # so cancellation near φ = 0 is checked; rel. 1e-12.
    with mpmath.workdps(40):
        p = mpmath.mpf(phi)
        exact = float(3 / p**2 * (p * mpmath.coth(p) - 1))
    assert effectiveness_sphere(phi) == pytest.approx(exact, rel=1e-12)


def test_effectiveness_factor_at_phi_one():
    # Direct evaluation of the closed form with the hyperbolic cotangent: η(1) = 3(coth 1 − 1) = 0.939105856
    # (computed, 9 digits); rel. 1e-9.
    assert effectiveness_sphere(1.0) == pytest.approx(3.0 * (1.0 / np.tanh(1.0) - 1.0), rel=1e-12)
    assert effectiveness_sphere(1.0) == pytest.approx(0.939105856, rel=1e-9)


def test_observable_modulus_equals_eta_phi_squared():
    # For a first-order sphere, r_obs = η k C_s, so N_WP = η φ² (Weisz and Prater 1954; relation from memory).
    radius, k_v, d_eff, c_s = 1e-3, 50.0, 1e-8, 10.0
    phi = thiele_modulus_sphere(radius, k_v, d_eff)
    eta = effectiveness_sphere(phi)
    assert weisz_prater(eta * k_v * c_s, radius, c_s, d_eff) == pytest.approx(eta * phi**2, rel=1e-12)


def test_strong_pore_diffusion_halves_apparent_activation_energy():
    # Thiele 1939 (from memory) and computed: intrinsic Ea 100 kJ/mol, first-order sphere, φ from 300 to 1100 over
    # five temperatures evenly spaced in 1/T, rate ∝ η k: fitted apparent Ea ≈ 50.1 kJ/mol (computed). rel. 2e-3.
    ea = 100e3
    inv_t = np.linspace(1 / 300.0, 1 / 300.0 - R * np.log((1100.0 / 300.0) ** 2) / ea, 5)
    T = 1.0 / inv_t
    k_rel = np.exp(-ea / (R * T)) / np.exp(-ea / (R * 300.0))
    phi = 300.0 * np.sqrt(k_rel)
    assert phi[-1] == pytest.approx(1100.0, rel=1e-9)
    fit = fit_arrhenius(T, effectiveness_sphere(phi) * k_rel)
    assert fit.ea == pytest.approx(50.1e3, rel=2e-3)


def test_adiabatic_rise_bands():
    # Bands < 50 K low, 50-200 K medium, > 200 K high (Stoessel, Thermal Safety of Chemical Processes, 2008;
    # from memory). Water-like contents: 0.1 kg × 4184 J/(kg K).
    cp = 0.1 * 4184.0
    low = adiabatic_temperature_rise(-100e3, 0.1, cp)
    assert low.delta_t_ad == pytest.approx(100e3 * 0.1 / cp, rel=1e-12)
    assert low.band == "low"
    assert adiabatic_temperature_rise(-100e3, 0.5, cp).band == "medium"
    assert adiabatic_temperature_rise(-300e3, 1.0, cp).band == "high"
    bands = adiabatic_temperature_rise(np.array([20e3, -100e3, -500e3]), 1.0, 1000.0).band
    assert bands.tolist() == ["low", "medium", "high"]
    assert low.caution == CAUTION


def test_caution_covers_hydrogen_pressure_and_site_review():
    text = CAUTION.lower()
    for word in ("screening", "hydrogen", "pressure", "flammable", "process-safety review", "local codes"):
        assert word in text


def test_pressure_rise_in_closed_headspace():
    # Source: CODATA molar volume via scipy.constants — 1 mol in 22.413969545 L at 273.15 K is 101.325 kPa.
    v_m = physical_constants["molar volume of ideal gas (273.15 K, 101.325 kPa)"][0]
    rise = pressure_rise(1.0, v_m, 273.15)
    assert rise.delta_p == pytest.approx(101325.0, rel=1e-12)
    assert rise.caution == CAUTION
