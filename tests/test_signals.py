"""Reference checks for catalog.core.signals: ideal gas, water vapour pressure, molar masses."""

import numpy as np
import periodictable
import pytest
from iapws.iapws97 import (
    _PSat_T,  # GPL: used here as an outside reference only, never by catalog/
)
from scipy.constants import physical_constants

from catalog.core.signals import (
    amount_from_gas_volume,
    amount_from_mass_loss,
    amount_from_pressure,
    conversion,
    molar_mass,
    water_vapour_pressure,
)


def test_molar_volume_of_ideal_gas_at_stp():
    # Source: CODATA 2022 via scipy.constants.physical_constants, 'molar volume of ideal gas (273.15 K, 101.325 kPa)'
    # = 22.413969545 L/mol. One molar volume at those conditions must be exactly one mole (rel. 1e-12).
    v_m = physical_constants["molar volume of ideal gas (273.15 K, 101.325 kPa)"][0]
    assert amount_from_gas_volume(v_m, 101325.0, 273.15) == pytest.approx(1.0, rel=1e-12)


def test_molar_volume_at_100_kpa():
    # Source: CODATA 2022 via scipy.constants, 'molar volume of ideal gas (273.15 K, 100 kPa)' = 22.710954641 L/mol.
    v_m = physical_constants["molar volume of ideal gas (273.15 K, 100 kPa)"][0]
    assert amount_from_pressure(100e3, v_m, 273.15) == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("T", [293.15, 298.15, 303.15, 373.15, 500.0])
def test_water_vapour_pressure_matches_iapws_if97(T):
    # Source: iapws 1.5.5 (independent implementation of IAPWS-IF97 region 4). Same equation, so agreement to
    # 10 significant digits (rel. 1e-10).
    assert water_vapour_pressure(T) == pytest.approx(_PSat_T(T) * 1e6, rel=1e-10)


@pytest.mark.parametrize(
    ("T", "p_mpa"), [(300.0, 0.353658941e-2), (500.0, 0.263889776e1), (600.0, 0.123443146e2)]
)
def test_water_vapour_pressure_if97_verification_table(T, p_mpa):
    # Source: IAPWS-IF97 release, verification values for the saturation-pressure equation (Table 35; values from
    # memory, confirmed by iapws above). 9 significant digits printed, so rel. 5e-9.
    assert water_vapour_pressure(T) == pytest.approx(p_mpa * 1e6, rel=5e-9)


@pytest.mark.parametrize(("t_c", "p_pa"), [(20.0, 2339.3), (25.0, 3169.9), (30.0, 4247.0)])
def test_water_vapour_pressure_near_room_temperature_vs_iapws95(t_c, p_pa):
    # Source: IAPWS-95 saturation pressure from iapws 1.5.5 (IAPWS95(T=..., x=0)), 5 significant digits.
    # IF97 is an approximation of IAPWS-95 that differs by about 1e-4 relative near room temperature, so compare to
    # 4 significant digits (rel. 1.5e-4).
    assert water_vapour_pressure(t_c + 273.15) == pytest.approx(p_pa, rel=1.5e-4)


def test_water_vapour_pressure_rejects_out_of_range():
    with pytest.raises(ValueError):
        water_vapour_pressure(650.0)
    with pytest.raises(ValueError):
        water_vapour_pressure([300.0, 200.0])


def test_collection_over_water_subtracts_vapour_pressure():
    # Gas over water at 25 °C: the product's partial pressure is p − p_w (Dalton's law).
    T, p, V = 298.15, 101325.0, 50e-6
    wet = amount_from_gas_volume(V, p, T, over_water=True)
    dry = amount_from_gas_volume(V, p - _PSat_T(T) * 1e6, T)
    assert wet == pytest.approx(dry, rel=1e-12)


def test_collection_over_water_on_gathered_traces_matches_each_reading():
    # Readings of three trials (gas temperature gathered per reading, wet and dry mixed), as the analysis passes
    # them: each reading must get exactly what it gets on its own, and Dalton's law against iapws 1.5.5 (IF97).
    T = np.repeat([293.15, 308.15, 293.15], [4, 3, 5])
    wet = np.repeat([True, False, True], [4, 3, 5])
    V = np.linspace(1e-6, 60e-6, T.size)
    p = 100_000.0
    together = amount_from_gas_volume(V, p, T, wet)
    alone = np.array([amount_from_gas_volume(V[i:i + 1], p, T[i:i + 1], wet[i:i + 1])[0] for i in range(T.size)])
    assert np.array_equal(together, alone)
    expected = (p - wet * np.array([_PSat_T(x) * 1e6 for x in T])) * V / (physical_constants["molar gas constant"][0]
                                                                         * T)
    assert together == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(("formula", "grams_per_mol"), [("H2", 2.016), ("CO2", 44.009), ("O2", 31.998)])
def test_molar_mass_from_standard_atomic_weights(formula, grams_per_mol):
    # Source: IUPAC abridged standard atomic weights as tabulated by periodictable 2.1; 5 significant digits.
    assert molar_mass(formula) == pytest.approx(grams_per_mol * 1e-3, rel=5e-5)


@pytest.mark.parametrize(("metal", "grams_per_mol"), [("Pt", 195.084), ("Pd", 106.42), ("Ni", 58.6934)])
def test_molar_mass_of_an_element_symbol(metal, grams_per_mol):
    # Source: CIAAW standard atomic weights (from memory; periodictable 2.1 tabulates the same). The symbol is looked
    # up directly, so it must also give exactly what the formula parser gives.
    assert molar_mass(metal) == pytest.approx(grams_per_mol * 1e-3, rel=1e-6)
    assert molar_mass(metal) == periodictable.formula(metal).mass * 1e-3


def test_molar_mass_rejects_nonsense():
    with pytest.raises(ValueError):
        molar_mass("Xx")
    with pytest.raises(ValueError):
        molar_mass("n")  # the neutron is no element of a formula


def test_mass_loss_zeroes_on_first_reading():
    m = np.array([0.250000, 0.249956, 0.249912])
    n = amount_from_mass_loss(m, molar_mass("CO2"))
    assert n[0] == 0.0
    assert n[2] == pytest.approx(0.088e-3 / 0.044009, rel=1e-9)


def test_conversion_uses_product_ratio():
    # 2 mol of product per mol of limiting reactant: 1 mol of product from 1 mol of reactant is half converted.
    assert conversion(1.0, 1.0, product_ratio=2.0) == 0.5
