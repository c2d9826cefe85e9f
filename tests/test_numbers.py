"""Number and unit formatting: digits that match the uncertainty, typeset units, no float noise in files."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from catalog.present import numbers


def _parse(text: str) -> float:
    return float(text.replace("−", "-"))


def test_gum_worked_example_value_rounded_to_its_uncertainty():
    # JCGM 100:2008 (GUM) 7.2.6: y = 10.057 62 ohm with u_c(y) = 27 mohm is reported as 10.058 ohm.
    assert numbers.format_pm(10.05762, 0.027) == "10.058 ± 0.027"
    # GUM 7.2.6: u = 28.05 kHz is quoted as 28 kHz (two significant digits).
    assert numbers.format_pm(1000.0, 28.05) == "1000 ± 28"


def test_interval_rounded_together_to_the_interval_precision():
    # The shorter half-width 3.97 to two significant digits is 4.0: one decimal for all three numbers (GUM 7.2.6).
    assert numbers.format_interval(51.0112, 47.0375, 54.985, "kJ/mol") == "51.0 [47.0, 55.0] kJ/mol"
    # An asymmetric interval takes its precision from the shorter side.
    assert numbers.format_interval(1.0, 0.5, 2.0) == "1.00 [0.50, 2.00]"
    # Wide intervals round to tens without a spurious decimal.
    assert numbers.format_interval(512.3, 61.0, 5021.0) == "510 [60, 5020]"


def test_small_values_share_one_power_of_ten():
    assert numbers.format_interval(1.2e-4, 1.0e-4, 1.4e-4, "1/s") == "1.20 [1.00, 1.40] × 10⁻⁴ s⁻¹"
    assert numbers.format_pm(1.2e-4, 1.5e-5, "1/s") == "(1.20 ± 0.15) × 10⁻⁴ s⁻¹"
    assert numbers.format_number(1.234e-5, "1/s") == "1.23 × 10⁻⁵ s⁻¹"
    assert numbers.format_number(123456.0) == "1.23 × 10⁵"


def test_pm_style_and_missing_values():
    assert numbers.format_pm(0.99, 0.00093, "1/s") == "0.99000 ± 0.00093 s⁻¹"
    assert numbers.format_number(float("nan")) == numbers.MISSING
    assert numbers.format_number(None) == numbers.MISSING
    assert numbers.format_interval(2.5, float("nan"), 3.0) == "2.50"  # no interval: three significant digits
    assert numbers.format_number(-0.0004) == "−4.00 × 10⁻⁴"
    assert numbers.format_number(36.85000000000002, "degC") == "36.9 °C"


@pytest.mark.parametrize("unit,label", [
    ("1/s", "s⁻¹"), ("degC", "°C"), ("umol/min", "µmol/min"), ("kJ/mol", "kJ/mol"), ("J/(mol K)", "J mol⁻¹ K⁻¹"),
    ("J/(mol*K)", "J mol⁻¹ K⁻¹"), ("mmol/(g h)", "mmol g⁻¹ h⁻¹"), ("mmol/(m2 h)", "mmol m⁻² h⁻¹"), ("m2", "m²"),
    ("mol/(m² s)", "mol m⁻² s⁻¹"), ("-", ""), ("K", "K"), ("mL", "mL"), ("kPa", "kPa"),
])
def test_units_as_people_write_them(unit, label):
    assert numbers.unit_label(unit) == label


def test_currency_replaces_the_neutral_money_unit():
    assert numbers.unit_label("money/g", currency="EUR") == "EUR/g"
    assert numbers.unit_label("mol/(s money)", currency="USD") == "mol s⁻¹ USD⁻¹"


def test_decimals_for():
    assert numbers.decimals_for(0.00093) == 5
    assert numbers.decimals_for(3.97) == 1
    assert numbers.decimals_for(450.0) == -1
    assert numbers.decimals_for(0.0) is None and numbers.decimals_for(float("inf")) is None


@given(value=st.floats(-1e6, 1e6, allow_nan=False), u=st.floats(1e-6, 1e5, allow_nan=False))
def test_shown_value_is_within_half_a_unit_of_its_last_digit(value, u):
    text = numbers.format_pm(value, u)
    if "×" in text:
        return  # powers of ten are checked by the examples above
    shown_value, shown_u = (_parse(p) for p in text.split(" ± "))
    d = numbers.decimals_for(u)
    assert abs(shown_value - value) <= 0.5 * 10.0 ** -d * (1 + 1e-9) + 1e-12 * abs(value)
    # The uncertainty keeps at most two significant digits (GUM 7.2.6).
    if shown_u:
        mantissa = shown_u / 10.0 ** math.floor(math.log10(shown_u))
        assert round(mantissa * 10, 6) == int(round(mantissa * 10, 6))


def test_round_for_file_removes_float_noise():
    frame = pd.DataFrame({
        "t [degC]": [36.85000000000002, 24.999999999999996],
        "tof": [0.99123456, 1.2e-4], "tof_low": [0.98, 1.0e-4], "tof_high": [1.00377, 1.4e-4],
        "p": [0.33349999, 1.0], "ton": [1234.5678, np.nan], "n": pd.array([1, 2], dtype="Int64"), "id": ["a", "b"]})
    out = numbers.round_for_file(frame, intervals={"tof": ("tof_low", "tof_high")}, decimals={"t [degC]": 2, "p": 3})
    assert list(out["t [degC]"]) == [36.85, 25.0]
    # Row 1: shorter half-width 0.0112 -> 0.011, three decimals for the value and both ends.
    assert list(out["tof"]) == [0.991, 1.2e-4] and list(out["tof_high"]) == [1.004, 1.4e-4]
    assert list(out["p"]) == [0.333, 1.0]
    assert out["ton"].iloc[0] == 1235.0 and np.isnan(out["ton"].iloc[1])
    assert out["n"].dtype == "Int64" and list(out["id"]) == ["a", "b"]
    assert "36.85," in out.to_csv(index=False)
