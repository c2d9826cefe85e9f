"""The v1 campaign contract: the columns of catalysts, trials and traces, their units, limits and plausible ranges.

Two kinds of range guard every number, both in SI:

* ``lower`` / ``upper`` are hard limits, values that cannot be physical (a mass of zero, a temperature at or below
  absolute zero, a loading above 100 %);
* ``plausible`` is the span a screening chemist would defend for a batch trial. A value outside it is refused as a
  probable typing or unit slip (5000 °C for 50 °C, hours written as seconds).

Extending a range: when a real experiment falls outside ``plausible`` (a cryogenic run, a week-long trial), widen
that column's ``plausible`` tuple below and add the case to ``tests/test_hostile_ingest.py``; every importer, the
corrections command and the app read these specs, so that one edit is the whole change.
"""

from __future__ import annotations

from dataclasses import dataclass

#: About three years, in s: no batch trial's trace runs longer.
LONGEST_TRACE_S = 1e8


@dataclass(frozen=True)
class Column:
    """One column of the v1 contract.

    ``unit`` is the reference (display) unit, used when the header carries none; ``None`` for text. Bounds are in
    SI: ``lower_open`` makes the hard lower bound strict; ``plausible`` is the (low, high) span a value must lie in.
    """

    name: str
    kind: str = "number"  # number | text | id | bool | datetime
    unit: str | None = None
    required: bool = False
    lower: float | None = None
    lower_open: bool = False
    upper: float | None = None
    plausible: tuple[float, float] | None = None
    default: float | None = None  # SI value written into an empty cell


# The plausible spans are judgement (common practice, no source); each comment says what the bound would exclude.
CATALYST_COLUMNS = (
    Column("catalyst_id", "id", required=True),
    Column("metal", "text"),
    # Zero loading, dispersion or site density would mean no active sites (an infinite TOF): leave the cell empty
    # instead when it is not known.
    Column("metal_loading", unit="wt%", lower=0.0, lower_open=True, upper=1.0),
    Column("dispersion", unit="%", lower=0.0, lower_open=True, upper=1.0),
    # Up to 20 mmol/g: above the acid-site density of any solid acid.
    Column("site_density", unit="umol/g", lower=0.0, lower_open=True, plausible=(0.0, 20.0)),
    # Up to 10 000 m²/g: above the highest BET areas reported for porous frameworks.
    Column("surface_area", unit="m^2/g", lower=0.0, plausible=(0.0, 1e7)),
    Column("description", "text"),
    Column("support", "text"),
    Column("batch", "text"),
    Column("price_per_gram", unit="dimensionless", lower=0.0, plausible=(0.0, 1e6)),
)

TRIAL_COLUMNS = (
    Column("trial_id", "id", required=True),
    Column("catalyst_id", "text"),
    # 150 K to 1000 K (about -123 °C to 727 °C): from dry-ice/liquid-nitrogen baths to a hot tube furnace.
    Column("temperature", unit="degC", required=True, lower=0.0, lower_open=True, plausible=(150.0, 1000.0)),
    Column("measurement", "text", required=True),
    Column("signal_unit", "text", required=True),
    # 1 µg to 1 kg of catalyst.
    Column("catalyst_mass", unit="mg", lower=0.0, lower_open=True, plausible=(1e-9, 1.0)),
    # 1 nmol to 100 mol of limiting reactant.
    Column("limiting_amount", unit="mmol", lower=0.0, lower_open=True, plausible=(1e-9, 100.0)),
    Column("product_ratio", unit="dimensionless", lower=0.0, lower_open=True, plausible=(1e-3, 100.0), default=1.0),
    # 1 kPa to 10 MPa: a burette or syringe at anything from a rough vacuum to a pressurised line.
    Column("gas_pressure", unit="kPa", lower=0.0, lower_open=True, plausible=(1e3, 1e7)),
    Column("gas_temperature", unit="degC", lower=0.0, lower_open=True, plausible=(150.0, 1000.0)),
    # 1 g/mol (atomic hydrogen) to 1 kg/mol.
    Column("gas_molar_mass", unit="g/mol", lower=0.0, lower_open=True, plausible=(1e-3, 1.0)),
    # 1 µL to 1 m³.
    Column("headspace_volume", unit="mL", lower=0.0, lower_open=True, plausible=(1e-9, 1.0)),
    Column("liquid_volume", unit="mL", lower=0.0, lower_open=True, plausible=(1e-9, 1.0)),
    # Up to 100 mol/L: above any neat liquid (water is 55 mol/L).
    Column("initial_concentration", unit="mol/L", lower=0.0, plausible=(0.0, 1e5)),
    # 1 nm to 10 mm particles.
    Column("particle_size", unit="um", lower=0.0, lower_open=True, plausible=(1e-9, 1e-2)),
    # 100 nm (vacuum UV) to 10 µm (mid infrared).
    Column("light_wavelength", unit="nm", lower=0.0, lower_open=True, plausible=(1e-7, 1e-5)),
    Column("light_power", unit="mW", lower=0.0, plausible=(0.0, 1e4)),
    Column("operator", "text"),
    Column("started_at", "datetime"),
    Column("notes", "text"),
    Column("collected_over_water", "bool"),
    # Gases in open pores are near 1e-5 m²/s; 1e-16 m²/s is below slow solid-state diffusion.
    Column("effective_diffusivity", unit="m^2/s", lower=0.0, lower_open=True, plausible=(1e-16, 1e-3)),
    # 10 kg/m³ (aerogel) to 25 000 kg/m³ (above osmium).
    Column("particle_density", unit="g/cm^3", lower=0.0, lower_open=True, plausible=(10.0, 2.5e4)),
    Column("mass_transfer_coefficient", unit="m/s", lower=0.0, lower_open=True, plausible=(1e-9, 10.0)),
    # ±10 MJ/mol: beyond any combustion enthalpy per mole of a screening substrate.
    Column("reaction_enthalpy", unit="kJ/mol", plausible=(-1e7, 1e7)),
    Column("heat_capacity", unit="J/K", lower=0.0, lower_open=True, plausible=(1e-3, 1e7)),
)

TRACE_COLUMNS = (
    Column("trial_id", "id", required=True),
    Column("time", unit="s", required=True, plausible=(-LONGEST_TRACE_S, LONGEST_TRACE_S)),
    Column("value", required=True),
)

#: Spellings accepted in a true/false column.
TRUE_WORDS = frozenset({"true", "yes", "y", "1"})
FALSE_WORDS = frozenset({"false", "no", "n", "0"})
