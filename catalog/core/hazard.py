"""Screening estimates for thermal runaway and headspace pressure, always with the safety caution attached."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from catalog.core.constants import R

__all__ = [
    "CAUTION",
    "HIGH_RISE",
    "LOW_RISE",
    "HazardEstimate",
    "PressureRise",
    "adiabatic_temperature_rise",
    "pressure_rise",
]

CAUTION = (
    "Screening estimate only, not a safety assessment. It assumes the stated amounts and heat capacity and ignores "
    "heat loss, side reactions, solvent boiling and decomposition. Reactions that release hydrogen or other gases "
    "in a closed vessel build pressure, and hydrogen forms flammable mixtures with air over a wide range. Scaling "
    "up, changing vessel, or running unattended needs your site's process-safety review; local codes and that "
    "review govern."
)

# Severity bands of the adiabatic temperature rise, K (Stoessel, Thermal Safety of Chemical Processes, Wiley-VCH
# 2008; from memory): below LOW_RISE 'low', above HIGH_RISE 'high', between 'medium'.
LOW_RISE = 50.0
HIGH_RISE = 200.0


@dataclass(frozen=True)
class HazardEstimate:
    """Adiabatic temperature rise (K), its severity band ('low' | 'medium' | 'high') and the caution text."""

    delta_t_ad: float | np.ndarray
    band: str | np.ndarray
    caution: str


@dataclass(frozen=True)
class PressureRise:
    """Pressure increase of a closed headspace (Pa) and the caution text."""

    delta_p: float | np.ndarray
    caution: str


def adiabatic_temperature_rise(reaction_enthalpy_J_per_mol, amount_mol, heat_capacity_J_per_K):
    """Temperature rise if all the reaction heat stayed in the vessel contents.

    .. math:: \\Delta T_\\mathrm{ad} = \\frac{(-\\Delta_r H)\\,n}{C_{p,\\mathrm{total}}}

    Band: 'low' below 50 K, 'medium' from 50 K to 200 K, 'high' above 200 K (Stoessel 2008); 'unknown' when an
    input is missing (NaN). Endothermic reactions give a negative rise and band 'low'.

    Parameters
    ----------
    reaction_enthalpy_J_per_mol : float or array_like
        Reaction enthalpy per mole of the amount below, J/mol (negative for exothermic).
    amount_mol : float or array_like
        Amount that can react, mol.
    heat_capacity_J_per_K : float or array_like
        Heat capacity of the vessel contents (mass × specific heat), J/K.

    Returns
    -------
    HazardEstimate
    """
    rise = -np.asarray(reaction_enthalpy_J_per_mol, dtype=float) * amount_mol / np.asarray(
        heat_capacity_J_per_K, dtype=float
    )
    band = np.select([rise < LOW_RISE, rise <= HIGH_RISE], ["low", "medium"], "high")
    band = np.where(np.isnan(rise), "unknown", band)
    return HazardEstimate(delta_t_ad=rise, band=band[()] if band.ndim else str(band), caution=CAUTION)


def pressure_rise(amount_gas, headspace_volume, T):
    """Pressure added to a closed headspace by the gas a reaction releases, ideal gas.

    .. math:: \\Delta p = \\frac{n\\,R\\,T}{V}

    Parameters
    ----------
    amount_gas : float or array_like
        Gas released, mol.
    headspace_volume : float or array_like
        Free gas volume of the closed vessel, m³.
    T : float or array_like
        Gas temperature, K.

    Returns
    -------
    PressureRise
    """
    delta_p = np.asarray(amount_gas, dtype=float) * R * np.asarray(T, dtype=float) / np.asarray(
        headspace_volume, dtype=float
    )
    return PressureRise(delta_p=delta_p, caution=CAUTION)
