"""The measurement registry: dispatch to the converters of catalog.core.signals, and one entry per kind."""

import numpy as np
import pytest

from catalog.core.measurements import MEASUREMENTS, to_amount
from catalog.core.signals import (
    amount_from_concentration,
    amount_from_gas_volume,
    amount_from_mass_loss,
    amount_from_pressure,
)
from catalog.units import si_converter


def test_to_amount_dispatches_each_measurement():
    v = np.array([0.0, 1e-6, 2e-6])
    assert np.allclose(
        to_amount("gas_volume", v, gas_pressure=1e5, gas_temperature=300.0),
        amount_from_gas_volume(v, 1e5, 300.0),
    )
    assert np.allclose(
        to_amount("pressure", [1e5, 1.1e5], headspace_volume=1e-4, temperature=300.0, liquid_volume=1e-5),
        amount_from_pressure(np.array([1e5, 1.1e5]), 1e-4, 300.0),
    )
    assert to_amount("concentration", 2.0, liquid_volume=1e-3) == pytest.approx(amount_from_concentration(2.0, 1e-3))
    assert np.allclose(
        to_amount("mass_loss", [1.0, 0.999], gas_molar_mass=0.002016), amount_from_mass_loss([1.0, 0.999], 0.002016)
    )


def test_to_amount_reports_bad_requests():
    with pytest.raises(ValueError, match="needs"):
        to_amount("pressure", [1e5], temperature=300.0)
    with pytest.raises(ValueError, match="unknown measurement"):
        to_amount("colour", [1.0])
    with pytest.raises(TypeError, match="unknown condition"):
        to_amount("concentration", [1.0], liquid_volum=1e-3)


def test_gas_volume_defaults_to_laboratory_conditions():
    # 101.325 kPa and 298.15 K are the defaults the registry documents; the converter gets them when a trial is silent.
    v = np.array([0.0, 1e-6])
    assert np.allclose(to_amount("gas_volume", v), amount_from_gas_volume(v, 101_325.0, 298.15))


@pytest.mark.parametrize("kind", list(MEASUREMENTS))
def test_every_entry_is_complete_and_its_units_convert_to_its_si_unit(kind):
    entry = MEASUREMENTS[kind]
    assert entry.key == kind and entry.label and entry.units
    for unit in entry.units:
        scale, _, _ = si_converter(unit, entry.reference_unit)
        assert scale > 0
    # The reference unit must itself reach the SI unit the store holds.
    si_converter(entry.si_unit.replace("³", "^3"), entry.reference_unit)
    assert callable(entry.convert)
