"""The kinds of kinetic trace catalog understands, one registry entry each.

Everything that differs between a gas burette, a balance, a pressure transducer and an analyser lives in one
:class:`Measurement`: its key (the ``measurement`` cell of a trial), the plain words shown to people, the SI unit the
trace values are stored in, the display units offered (the first is the unit a header without ``[unit]`` is read in),
the trial conditions its conversion to moles reads, and the converter itself (a function of
:mod:`catalog.core.signals`). The importer, the analysis and the app all read this table, so a new kind is one entry
here plus its converter.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from catalog.core import signals

if TYPE_CHECKING:  # only named in a signature: the import path reads the registry and has no use for pandas
    import pandas as pd

__all__ = ["MEASUREMENTS", "Condition", "Measurement", "condition_arrays", "to_amount"]


@dataclass(frozen=True)
class Condition:
    """One trial condition a converter reads.

    ``column`` is the trial column (SI), ``keyword`` the converter's parameter. ``default`` (SI) is used when the
    trial leaves the cell empty; ``None`` makes the column required for this measurement. With ``stored`` the
    importer writes the default into the empty cell, so the stored trial shows what was assumed.
    """

    column: str
    keyword: str
    default: float | bool | None = None
    stored: bool = True


@dataclass(frozen=True)
class Measurement:
    """One kind of kinetic trace: how it is named, in which units it comes, and how it becomes moles."""

    key: str
    label: str
    si_unit: str
    units: tuple[str, ...]
    conditions: tuple[Condition, ...]
    convert: Callable[..., np.ndarray]

    @property
    def reference_unit(self) -> str:
        """The unit a signal is read in when the trial names none, and the first one offered."""
        return self.units[0]

    @property
    def needs(self) -> tuple[str, ...]:
        """Trial columns that must be filled for this measurement (conditions without a default)."""
        return tuple(c.column for c in self.conditions if c.default is None)


#: One entry per measurement kind, keyed by the ``measurement`` cell of a trial.
MEASUREMENTS: dict[str, Measurement] = {
    m.key: m
    for m in (
        Measurement(
            "gas_volume", "gas volume (burette or syringe)", "m³", ("mL", "L"),
            # Read at the lab's usual conditions when the trial does not say (IUPAC SATP-like: 101.325 kPa, 25 °C).
            (Condition("gas_pressure", "p_gas", 101_325.0), Condition("gas_temperature", "T_gas", 298.15),
             Condition("collected_over_water", "over_water", False, stored=False)),
            signals.amount_from_gas_volume,
        ),
        Measurement(
            "mass_loss", "mass loss (balance)", "kg", ("g", "mg"),
            (Condition("gas_molar_mass", "M"),),
            signals.amount_from_mass_loss,
        ),
        Measurement(
            "pressure", "headspace pressure (closed vessel)", "Pa", ("kPa", "bar", "Pa"),
            (Condition("headspace_volume", "V_headspace"), Condition("temperature", "T")),
            signals.amount_from_pressure,
        ),
        Measurement(
            "concentration", "product concentration (analyser)", "mol/m³", ("mmol/L", "mol/L"),
            (Condition("liquid_volume", "V_liquid"),),
            signals.amount_from_concentration,
        ),
    )
}
_COLUMNS = frozenset(c.column for m in MEASUREMENTS.values() for c in m.conditions)


def to_amount(measurement, values, **conditions):
    """Convert a trace of raw SI values to moles of product, choosing the converter by measurement kind.

    .. math:: n = f_{\\mathrm{kind}}(y;\\ \\text{conditions})

    =================  ===========================================  ==============================================
    measurement        values                                       conditions used (trial columns, SI)
    =================  ===========================================  ==============================================
    ``gas_volume``     collected volume, m³                         gas_pressure (Pa, default 101.325 kPa),
                                                                    gas_temperature (K, default 298.15 K),
                                                                    collected_over_water (bool, default False)
    ``mass_loss``      balance reading, kg                          gas_molar_mass (kg/mol)
    ``pressure``       absolute headspace pressure, Pa              headspace_volume (m³), temperature (K)
    ``concentration``  product concentration, mol/m³                liquid_volume (m³)
    =================  ===========================================  ==============================================

    Conditions a measurement does not use are ignored, so a whole trial record can be passed; an unknown condition
    name is an error so that a misspelt keyword is never silently dropped.

    Parameters
    ----------
    measurement : str
        A key of :data:`MEASUREMENTS`.
    values : array_like
        Raw values in SI units.
    **conditions
        Trial columns from the table above, SI units.

    Returns
    -------
    float or ndarray
        Amount in mol.
    """
    unknown = set(conditions) - _COLUMNS
    if unknown:
        raise TypeError(f"unknown condition(s): {', '.join(sorted(unknown))}")
    if measurement not in MEASUREMENTS:
        raise ValueError(f"unknown measurement {measurement!r}; expected one of {', '.join(MEASUREMENTS)}")
    kind = MEASUREMENTS[measurement]
    missing = [name for name in kind.needs if name not in conditions]
    if missing:
        raise ValueError(f"measurement {measurement!r} needs {', '.join(missing)}")
    arguments = {c.keyword: conditions.get(c.column, c.default) for c in kind.conditions}
    return kind.convert(values, **arguments)


def condition_arrays(measurement: str, trials: pd.DataFrame) -> dict[str, np.ndarray]:
    """The conditions one measurement's converter reads, as arrays over ``trials`` with defaults filled.

    Returns a mapping of trial column to values, ready for ``to_amount(measurement, values, **mapping)``.
    """
    out = {}
    for c in MEASUREMENTS[measurement].conditions:
        column = trials[c.column]
        if c.default is not None:
            column = column.fillna(c.default)
        out[c.column] = column.to_numpy(bool if isinstance(c.default, bool) else float)
    return out
