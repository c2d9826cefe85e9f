"""Moles of active sites and the site-, mass- and area-normalised rates built on them (TOF, TON)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from catalog.core.signals import molar_mass

__all__ = ["SiteCount", "Turnover", "rate_per_area", "rate_per_mass", "site_amount", "ton", "tof"]


@dataclass(frozen=True)
class SiteCount:
    """Moles of active sites and how they were counted.

    Attributes
    ----------
    moles : float
        Active sites, mol (NaN when nothing was given to count them).
    basis : str
        ``'measured site density'``, ``'surface metal (dispersion)'``, ``'total metal (no dispersion given)'`` or
        ``'unknown'``.
    note : str
        Plain-language caveat for the report; empty when there is none.
    """

    moles: float
    basis: str
    note: str


@dataclass(frozen=True)
class Turnover:
    """Turnover frequency and its propagated standard error, 1/s."""

    tof: float | np.ndarray
    tof_se: float | np.ndarray


def site_amount(catalyst_mass, metal=None, metal_loading=np.nan, dispersion=np.nan, site_density=np.nan):
    """Count active sites, preferring a measured site density over a count from metal loading.

    .. math::
        n_\\mathrm{sites} = \\rho_\\mathrm{sites}\\,m_\\mathrm{cat}
        \\quad\\text{or}\\quad
        n_\\mathrm{sites} = \\frac{m_\\mathrm{cat}\\,w_\\mathrm{M}}{M_\\mathrm{M}}\\,D

    A measured density (chemisorption, titration) counts what reacts, so it wins. Without dispersion D every metal
    atom is counted (D = 1): the site count is then an upper bound and the TOF a lower bound, which the note says.

    Parameters
    ----------
    catalyst_mass : float
        Catalyst mass in the trial, kg.
    metal : str, optional
        Element symbol of the active metal, e.g. ``"Pt"``; its molar mass comes from standard atomic weights.
    metal_loading : float, optional
        Metal mass fraction, 0-1.
    dispersion : float, optional
        Fraction of metal atoms at the surface, 0-1.
    site_density : float, optional
        Measured sites per catalyst mass, mol/kg.

    Returns
    -------
    SiteCount
    """
    if np.isfinite(site_density):
        if site_density < 0:
            raise ValueError("site density cannot be negative")
        return SiteCount(float(site_density * catalyst_mass), "measured site density", "")
    if metal and np.isfinite(metal_loading):
        if not 0.0 <= metal_loading <= 1.0:
            raise ValueError(f"metal loading is a mass fraction between 0 and 1, got {metal_loading}")
        metal_moles = catalyst_mass * metal_loading / molar_mass(metal)
        if np.isfinite(dispersion):
            if not 0.0 < dispersion <= 1.0:
                raise ValueError(f"dispersion is a fraction between 0 and 1, got {dispersion}")
            return SiteCount(float(metal_moles * dispersion), "surface metal (dispersion)", "")
        return SiteCount(
            float(metal_moles),
            "total metal (no dispersion given)",
            "no dispersion given: every metal atom is counted as a site, so the TOF is a lower bound",
        )
    return SiteCount(
        np.nan, "unknown", "no site density and no metal with loading given: sites, TOF and TON cannot be computed"
    )


def tof(r0, r0_se, blank_rate, blank_rate_se, sites):
    """Turnover frequency: blank-corrected initial rate per mole of active sites.

    .. math:: \\mathrm{TOF} = \\frac{r_0 - r_\\mathrm{blank}}{n_\\mathrm{sites}},\\qquad
              \\sigma_\\mathrm{TOF} = \\frac{\\sqrt{\\sigma_{r_0}^2 + \\sigma_\\mathrm{blank}^2}}{n_\\mathrm{sites}}

    The two rates come from separate trials, so their errors add in quadrature; the site count is treated as exact
    (its uncertainty is a systematic scale on every TOF of that catalyst and does not change a ranking within it).

    Parameters
    ----------
    r0, r0_se : float or array_like
        Initial rate of the catalysed trial and its standard error, mol/s.
    blank_rate, blank_rate_se : float or array_like
        Uncatalysed rate at the same conditions and its standard error, mol/s (0 and 0 if there is no blank).
    sites : float or array_like
        Active sites, mol.

    Returns
    -------
    Turnover
    """
    sites = np.asarray(sites, dtype=float)
    return Turnover(
        tof=(np.asarray(r0, dtype=float) - blank_rate) / sites,
        tof_se=np.hypot(r0_se, blank_rate_se) / sites,
    )


def ton(final_amount, sites):
    """Turnover number: product formed per mole of active sites.

    .. math:: \\mathrm{TON} = \\frac{n_\\mathrm{product}}{n_\\mathrm{sites}}

    Parameters
    ----------
    final_amount : float or array_like
        Product formed, mol.
    sites : float or array_like
        Active sites, mol.

    Returns
    -------
    float or ndarray
        Dimensionless.
    """
    return np.asarray(final_amount, dtype=float) / np.asarray(sites, dtype=float)


def rate_per_mass(r0, mass):
    """Mass-specific rate, :math:`r_m = r_0 / m_\\mathrm{cat}`, in mol/(kg s).

    Parameters
    ----------
    r0 : float or array_like
        Rate, mol/s.
    mass : float or array_like
        Catalyst mass, kg.
    """
    return np.asarray(r0, dtype=float) / np.asarray(mass, dtype=float)


def rate_per_area(r0, mass, surface_area):
    """Areal rate, :math:`r_A = r_0 / (m_\\mathrm{cat}\\,a_s)`, in mol/(m² s).

    Parameters
    ----------
    r0 : float or array_like
        Rate, mol/s.
    mass : float or array_like
        Catalyst mass, kg.
    surface_area : float or array_like
        Specific surface area (e.g. BET), m²/kg, as stored for each catalyst.
    """
    return rate_per_mass(r0, mass) / np.asarray(surface_area, dtype=float)
