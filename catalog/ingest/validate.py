"""The campaign's own rules on top of the typed tables: elements, measurements and their conditions, blanks, water.

Pure: raw tables in, :class:`~catalog.ingest.tables.Checked` SI tables out, with every problem located by file, row
and column. The store calls these before it writes anything.
"""

from __future__ import annotations

import numpy as np

from catalog.core.elements import is_element
from catalog.core.measurements import MEASUREMENTS
from catalog.core.signals import water_vapour_pressure
from catalog.errors import Problem
from catalog.ingest.columns import CATALYST_COLUMNS, TRACE_COLUMNS, TRIAL_COLUMNS
from catalog.ingest.sources import RawTable, TraceSource
from catalog.ingest.tables import Checked, Table, check_table, map_headers, missing
from catalog.units import UnitProblem, celsius, parse_header, si_converter

#: Where gas can be collected over liquid water: the triple point to the critical point (IAPWS-IF97 region 4).
WATER_T_MIN, WATER_T_MAX = 273.16, 647.096
_GAS = MEASUREMENTS["gas_volume"]
_GAS_DEFAULTS = {c.column: c.default for c in _GAS.conditions}


def check_catalysts(raw: RawTable) -> Checked:
    """Validate ``catalysts.csv``: types, units, ranges, unique ids, known element symbols."""
    checked = check_table(raw, CATALYST_COLUMNS)
    checked.problems.extend(catalyst_rules(checked.table, raw.label, _headers(raw)))
    return checked


def catalyst_rules(table: Table, label: str, header_of: dict[str, str] | None = None) -> list[Problem]:
    """The rules across a typed (SI) catalyst table: known element symbols. Also run on a corrected record."""
    header = (header_of or {}).get("metal", "metal")
    return [Problem(label, i + 2, header, f"'{symbol}' is not an element symbol")
            for i, symbol in enumerate(table["metal"]) if symbol is not None and not is_element(symbol)]


def _headers(raw: RawTable) -> dict[str, str]:
    """Contract name -> header as written (the first copy when a name repeats)."""
    out: dict[str, str] = {}
    for h in raw.headers:
        out.setdefault(parse_header(h).name, h)
    return out


def check_trials(raw: RawTable, known_catalysts: set[str]) -> Checked:
    """Validate ``trials.csv`` against the v1 contract and the measurement registry.

    ``known_catalysts`` is every catalyst id available to the trials: from this campaign's catalysts file and from
    the database. Adds columns ``signal_scale`` and ``signal_shift`` (trace value in SI = value × scale + shift).
    A trials table without data rows is a problem: there would be nothing to import.
    """
    checked = check_table(raw, TRIAL_COLUMNS)
    if not len(checked.table) and not checked.problems:
        checked.problems.append(
            Problem(raw.label, None, None, "has a header but no data rows: there is no trial to import"))
    checked.problems.extend(trial_rules(checked.table, known_catalysts, raw.label, _headers(raw)))
    return checked


def _is_in(values: np.ndarray, members) -> np.ndarray:
    """Where an object column holds one of ``members`` (never where it is empty)."""
    members = set(members)
    return np.fromiter((v is not None and v in members for v in values), dtype=bool, count=len(values))


def trial_rules(table: Table, known_catalysts: set[str], label: str,
                header_of: dict[str, str] | None = None) -> list[Problem]:
    """The rules across a typed (SI) trial table: measurements and their conditions, catalysts, blanks, water.

    Also run on a corrected record, on its stored SI values. Fills the measurement defaults and adds
    ``signal_scale`` and ``signal_shift`` to ``table``; ``header_of`` names columns as written (else the contract
    name).
    """
    problems: list[Problem] = []
    header_of = header_of or {}

    def add(mask, column: str, message) -> None:
        header = header_of.get(column, column)
        for i in np.flatnonzero(np.asarray(mask, dtype=bool)):
            text = message(int(i)) if callable(message) else message
            problems.append(Problem(label, int(i) + 2, header, text))

    measurement = table["measurement"]
    unknown = ~missing(measurement) & ~_is_in(measurement, MEASUREMENTS)
    add(unknown, "measurement", lambda i: f"'{measurement[i]}' is not one of {', '.join(MEASUREMENTS)}")
    known = np.where(unknown, None, measurement)
    scale = np.full(len(table), np.nan)
    shift = np.full(len(table), np.nan)
    pairs: dict[tuple[str, str], list[int]] = {}
    for i, (kind, unit) in enumerate(zip(known, table["signal_unit"], strict=True)):
        if kind is not None and unit is not None:
            pairs.setdefault((kind, unit), []).append(i)
    for (kind, unit), at in sorted(pairs.items()):
        try:
            scale[at], shift[at], _ = si_converter(unit, MEASUREMENTS[kind].reference_unit)
        except UnitProblem as exc:
            add(np.isin(np.arange(len(table)), at), "signal_unit", f"{exc} (measurement {kind})")
    required = {c.name for c in TRIAL_COLUMNS if c.required}
    for kind, entry in MEASUREMENTS.items():
        for need in entry.needs:
            if need not in required:  # an empty required cell is already reported
                add(_is_in(known, (kind,)) & missing(table[need]), need, f"required for a {kind} trial")
    catalyst = table["catalyst_id"]
    blank = missing(catalyst)
    mass_given = ~np.isnan(table["catalyst_mass"])
    add(~blank & ~_is_in(catalyst, known_catalysts), "catalyst_id",
        lambda i: f"catalyst '{catalyst[i]}' is neither in the catalysts table nor in the database")
    add(~blank & ~mass_given, "catalyst_mass", "a catalysed trial needs the catalyst mass")
    add(blank & mass_given, "catalyst_mass",
        "a blank trial (no catalyst_id) has no catalyst mass: leave it empty, or give the catalyst_id")
    _check_gas_over_water(table, known, add)
    for kind, entry in MEASUREMENTS.items():
        for c in entry.conditions:
            if c.stored and c.default is not None:
                values = table[c.column]
                values[_is_in(measurement, (kind,)) & missing(values)] = c.default
    table["signal_scale"] = scale
    table["signal_shift"] = shift
    return problems


def _check_gas_over_water(table: Table, known: np.ndarray, add) -> None:
    """Gas collected over water needs liquid water at the gas temperature and a pressure above its vapour pressure.

    .. math:: T_\\mathrm{tp} \\le T_\\mathrm{gas} \\le T_c, \\qquad p_\\mathrm{gas} > p_w(T_\\mathrm{gas})
    """
    wet = _is_in(known, ("gas_volume",)) & np.array([bool(v) for v in table["collected_over_water"]], dtype=bool)
    gas_T = _filled(table["gas_temperature"], _GAS_DEFAULTS["gas_temperature"])
    liquid_water = (gas_T >= WATER_T_MIN) & (gas_T <= WATER_T_MAX)
    add(wet & ~liquid_water, "gas_temperature",
        lambda i: f"gas collected over water must be between 0.01 and 373.9 °C (read {_celsius(gas_T[i])})")
    # Over water the gas is saturated with vapour; at or below the vapour pressure no gas could be collected.
    vapour = np.full(len(table), np.nan)
    vapour[wet & liquid_water] = water_vapour_pressure(gas_T[wet & liquid_water])
    gas_p = _filled(table["gas_pressure"], _GAS_DEFAULTS["gas_pressure"])
    add(wet & (gas_p <= vapour), "gas_pressure",
        lambda i: f"{table['gas_pressure'][i] / 1e3:g} kPa is not above the water vapour pressure at "
                  f"{_celsius(gas_T[i])} ({vapour[i] / 1e3:.3g} kPa), so no gas could be collected over water")


def _filled(values: np.ndarray, default: float) -> np.ndarray:
    return np.where(np.isnan(values), default, values)


def _celsius(kelvin: float) -> str:
    return f"{celsius(kelvin):g} °C"


def trace_layout(source: TraceSource) -> tuple[dict[str, str], float, list[Problem], list[str]]:
    """Map the trace headers to (trial_id, time, value) and give the time scale to seconds."""
    found, problems, notes = map_headers(source.label, list(source.headers), TRACE_COLUMNS)
    names = {name: at.header for name, at in found.items()}
    time_scale = found["time"].scale if "time" in found else 1.0
    return names, time_scale, problems, notes
