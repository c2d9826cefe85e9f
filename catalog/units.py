"""Units at the edges: the one pint registry, `name [unit]` headers, and conversion to and from SI.

Everything inside the package is SI (K, Pa, m³, kg, mol, s, J/mol). This module is the only place that knows a
unit spelling. Each column accepts units of one dimension only and, within it, only units whose size is plausible
for the column, because pint happily reads some lab spellings as something else (``C`` is the coulomb, ``Ml`` the
megalitre, ``bar(g)`` bar times gram).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cache, lru_cache
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pint


@cache
def registry() -> pint.UnitRegistry:
    """The one pint registry of the package, built on first use.

    Deferred: importing pint and building its registry costs ~0.1-0.25 s, which commands that never read a unit
    spelling (listing trials, a bare ``--temperature 35``) should not pay.
    """
    import pint

    try:
        # pint's own cache of its parsed definitions (in the user's cache folder, keyed by their content) cuts the
        # build from ~0.12 s to ~0.02 s for every command after the first.
        units = pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=":auto:")
    except Exception:  # an unwritable or half-written cache: build from the definition files instead
        units = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    # pint 0.25 cannot parse "wt%" or "wt. %"; a mass fraction in percent is what the lab means by it.
    units.define("wt_percent = 0.01 = wtpct")
    return units


def __getattr__(name: str):
    # ``units.REGISTRY`` stays available as before; it is built when first asked for.
    if name == "REGISTRY":
        return registry()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

_HEADER = re.compile(r"^\s*(?P<name>[^\[\]]*?)\s*(?:\[(?P<unit>[^\[\]]*)\])?\s*$")

# Lab spellings rewritten before pint sees them. Order matters: "wt. %" before "%".
_SPELLINGS = (
    (re.compile(r"wt\.?\s*%"), "wt_percent"),
    (re.compile(r"%"), "percent"),
    (re.compile(r"℃"), "degC"),
    (re.compile(r"µ|μ"), "u"),
)

# A unit whose size differs from the column's reference unit by more than this factor is almost surely a
# misreading (Ml for mL is 1e9) rather than a real choice (min for s is 60, kg for mg is 1e6).
_PLAUSIBLE_FACTOR = 1e7


class UnitProblem(ValueError):
    """A unit spelling that cannot be used for a column; the message says why."""


@dataclass(frozen=True)
class Header:
    """A parsed column header ``name [unit]``; ``unit`` is ``None`` when the header has no brackets."""

    name: str
    unit: str | None


def parse_header(text: str) -> Header:
    """Split ``"time [min]"`` into ``Header("time", "min")``; a header without brackets has no unit."""
    match = _HEADER.match(text.replace("\ufeff", ""))
    if match is None:
        return Header(text.strip(), None)
    unit = match.group("unit")
    return Header(match.group("name").strip(), unit.strip() if unit is not None else None)


def _normalise(spelling: str) -> str:
    out = spelling.strip()
    for pattern, replacement in _SPELLINGS:
        out = pattern.sub(replacement, out)
    return out


@lru_cache(maxsize=512)
def parse_unit(spelling: str) -> pint.Unit:
    """Parse a unit spelling with the project registry; raise :class:`UnitProblem` if pint cannot."""
    try:
        unit = registry().Unit(_normalise(spelling))
    except Exception as exc:  # pint raises several unrelated types for bad spellings
        raise UnitProblem(f"'{spelling}' is not a unit pint can read") from exc
    return unit


#: pint's answers for the spellings of the column and measurement reference units (and a time in min or h), so an
#: import whose headers use only these never imports pint or builds its registry (0.15-0.3 s). The numbers are
#: pint 0.25's floats to the last bit (``mL`` is 1.0000000000000002e-06 m³, not 1e-6), so a value converted here
#: is stored exactly as pint would have converted it; tests/test_import.py checks every entry against pint.
KNOWN_CONVERTERS: dict[tuple[str, str], tuple[float, float, str]] = {
    ("wt%", "wt%"): (0.01, 0.0, "wt_percent"),
    ("%", "%"): (0.01, 0.0, "percent"),
    ("umol/g", "umol/g"): (0.001, 0.0, "micromole / gram"),
    ("m^2/g", "m^2/g"): (1000.0, 0.0, "meter ** 2 / gram"),
    ("dimensionless", "dimensionless"): (1.0, 0.0, "dimensionless"),
    ("degC", "degC"): (1.0, 273.15, "degree_Celsius"),
    ("mg", "mg"): (1e-06, 0.0, "milligram"),
    ("mmol", "mmol"): (0.001, 0.0, "millimole"),
    ("kPa", "kPa"): (1000.0, 0.0, "kilopascal"),
    ("g/mol", "g/mol"): (0.001, 0.0, "gram / mole"),
    ("mL", "mL"): (1.0000000000000002e-06, 0.0, "milliliter"),
    ("mol/L", "mol/L"): (999.9999999999999, 0.0, "mole / liter"),
    ("um", "um"): (1e-06, 0.0, "micrometer"),
    ("nm", "nm"): (1e-09, 0.0, "nanometer"),
    ("mW", "mW"): (0.001, 0.0, "milliwatt"),
    ("m^2/s", "m^2/s"): (1.0, 0.0, "meter ** 2 / second"),
    ("g/cm^3", "g/cm^3"): (999.9999999999999, 0.0, "gram / centimeter ** 3"),
    ("m/s", "m/s"): (1.0, 0.0, "meter / second"),
    ("kJ/mol", "kJ/mol"): (1000.0, 0.0, "kilojoule / mole"),
    ("J/K", "J/K"): (1.0, 0.0, "joule / kelvin"),
    ("s", "s"): (1.0, 0.0, "second"),
    ("min", "s"): (60.0, 0.0, "minute"),
    ("h", "s"): (3600.0, 0.0, "hour"),
    ("L", "mL"): (0.0010000000000000002, 0.0, "liter"),
    ("g", "g"): (0.001, 0.0, "gram"),
    ("mg", "g"): (1e-06, 0.0, "milligram"),
    ("bar", "kPa"): (100000.0, 0.0, "bar"),
    ("Pa", "kPa"): (1.0, 0.0, "pascal"),
    ("mmol/L", "mmol/L"): (0.9999999999999999, 0.0, "millimole / liter"),
    ("mol/L", "mmol/L"): (999.9999999999999, 0.0, "mole / liter"),
    # display units of the rank table and its exports (per-mass and per-area rates, activation entropy), so that
    # a warm `catalog rank` does not load pint either
    ("mmol/(g*h)", "mmol/(g*h)"): (0.0002777777777777778, 0.0, "millimole / gram / hour"),
    ("mmol/(m^2*h)", "mmol/(m^2*h)"): (2.7777777777777776e-07, 0.0, "millimole / hour / meter ** 2"),
    ("J/(mol*K)", "J/(mol*K)"): (1.0, 0.0, "joule / kelvin / mole"),
}


def si_converter(spelling: str, reference: str) -> tuple[float, float, str]:
    """Return ``(scale, shift, understood)`` so that ``si = value * scale + shift``.

    A pair in :data:`KNOWN_CONVERTERS` is answered from it; any other is worked out by pint
    (:func:`pint_converter`).

    ``reference`` is the column's reference unit (e.g. ``"mL"`` for a volume column); the spelling must have the
    same dimension and a plausible size relative to it. ``understood`` is pint's full name of the unit, shown to
    the user so a misreading is visible.

    Raises
    ------
    UnitProblem
        Unreadable unit, wrong dimension, or implausible size.
    """
    known = KNOWN_CONVERTERS.get((spelling, reference))
    return known if known is not None else pint_converter(spelling, reference)


@lru_cache(maxsize=512)
def pint_converter(spelling: str, reference: str) -> tuple[float, float, str]:
    """:func:`si_converter` worked out by pint: :math:`a = u(1) - u(0)`, :math:`b = u(0)`, with :math:`u(x)` the
    value *x* in ``spelling`` expressed in the SI unit of ``reference``."""
    unit = parse_unit(spelling)
    ref = parse_unit(reference)
    units = registry()
    if unit.dimensionality != ref.dimensionality:
        raise UnitProblem(
            f"'{spelling}' is read as {unit} ({_dimension_words(unit)}), but this column needs "
            f"{_dimension_words(ref)} such as {reference}"
        )
    si_unit = units.Quantity(1.0, ref).to_base_units().units
    zero = units.Quantity(0.0, unit).to(si_unit).magnitude
    one = units.Quantity(1.0, unit).to(si_unit).magnitude
    scale = one - zero
    ref_scale = units.Quantity(1.0, ref).to(si_unit).magnitude - units.Quantity(0.0, ref).to(si_unit).magnitude
    ratio = abs(scale / ref_scale)
    if not (1 / _PLAUSIBLE_FACTOR <= ratio <= _PLAUSIBLE_FACTOR):
        raise UnitProblem(
            f"'{spelling}' is read as {unit}, {ratio:.3g} times {reference}; that is implausible for this column "
            "(check the letter case of the prefix)"
        )
    return float(scale), float(zero), str(unit)


def from_si(values: float | np.ndarray, reference: str) -> float | np.ndarray:
    """Convert SI values (numpy array or scalar) back to the display unit ``reference``: :math:`x = (s - b) / a`.

    ``a`` and ``b`` are the scale and shift of :func:`si_converter` (``si = x a + b``).
    """
    scale, shift, _ = si_converter(reference, reference)
    return (values - shift) / scale


#: 0 °C in kelvin, exact by the definition of the Celsius scale (BIPM SI Brochure, 9th ed., 2.3.1).
ZERO_CELSIUS = 273.15


def celsius(kelvin: float | np.ndarray) -> float | np.ndarray:
    """Kelvin (array or scalar) to degrees Celsius for display: :math:`\\theta = T - 273.15`."""
    return np.asarray(kelvin, dtype=float) - ZERO_CELSIUS if np.ndim(kelvin) else float(kelvin) - ZERO_CELSIUS


def kelvin(celsius_value: float | np.ndarray) -> float | np.ndarray:
    """Degrees Celsius (array or scalar) to kelvin: :math:`T = \\theta + 273.15`."""
    if np.ndim(celsius_value):
        return np.asarray(celsius_value, dtype=float) + ZERO_CELSIUS
    return float(celsius_value) + ZERO_CELSIUS


def _dimension_words(unit: pint.Unit) -> str:
    dim = str(unit.dimensionality)
    return "a dimensionless number" if dim == "dimensionless" else f"dimension {dim}"


_QUANTITY = re.compile(r"^\s*(?P<number>[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(?P<unit>.*?)\s*$")


def parse_temperature(text: str, default_unit: str = "degC") -> float:
    """Read a temperature such as ``"35"`` (in ``default_unit``), ``"310 K"`` or ``"95 degF"``; return kelvin.

    Raises
    ------
    UnitProblem
        Not a number with an optional temperature unit, or at/below absolute zero.
    """
    match = _QUANTITY.match(str(text))
    if match is None:
        raise UnitProblem(f"'{text}' is not a temperature (write e.g. 35, '35 degC' or '308.15 K')")
    spelling = match.group("unit") or default_unit
    if spelling == "degC":
        # The common case (a bare number in °C) is exact by definition and needs no unit registry.
        value = kelvin(float(match.group("number")))
    else:
        scale, shift, _ = si_converter(spelling, "degC")
        value = float(match.group("number")) * scale + shift
    if not np.isfinite(value):
        raise UnitProblem(f"'{text}' is not a finite temperature")
    if value <= 0:
        raise UnitProblem(f"'{text}' is at or below absolute zero")
    return value
