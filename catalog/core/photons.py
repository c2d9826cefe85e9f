"""Photon flux of a monochromatic source and apparent quantum yield of a photocatalytic trial."""

from __future__ import annotations

import numpy as np

from catalog.core.constants import N_A, c, h

__all__ = ["apparent_quantum_yield", "photon_flux"]


def photon_flux(power_W, wavelength_m):
    """Molar photon flux of a monochromatic beam.

    .. math:: q_p = \\frac{P\\,\\lambda}{h\\,c\\,N_A}

    Parameters
    ----------
    power_W : float or array_like
        Radiant power reaching the sample, W.
    wavelength_m : float or array_like
        Vacuum wavelength, m.

    Returns
    -------
    float or ndarray
        Photon flux in mol photons / s (einstein/s).
    """
    return np.asarray(power_W, dtype=float) * np.asarray(wavelength_m, dtype=float) / (h * c * N_A)


def apparent_quantum_yield(r0, photon_flux, dark_rate=0.0, electrons_per_molecule=1):
    """Apparent quantum yield: electrons used by the light-induced product per incident photon.

    .. math:: \\mathrm{AQY} = \\frac{n_e\\,(r_\\mathrm{light} - r_\\mathrm{dark})}{q_p}

    Only the rate the light adds counts: the dark rate (the catalyst's own dark rate, which holds the blank, or the
    blank alone) is subtracted first, on the same product basis as ``r0``.

    With ``n_e = 1`` this is the IUPAC photonic efficiency, rate over incident photon flux (IUPAC Glossary of
    terms used in photochemistry, 3rd ed., Pure Appl. Chem. 79, 293 (2007); cited from memory). The electron
    count ``n_e`` is the usual photocatalysis convention: 2 for H2 from water, 4 for O2, 8 for CH4 from CO2.
    "Apparent" because incident, not absorbed, photons are counted, so it is a lower bound on the true quantum
    yield.

    Parameters
    ----------
    r0 : float or array_like
        Rate of product formation under illumination, mol/s.
    photon_flux : float or array_like
        Incident photon flux, mol photons/s (see :func:`photon_flux`).
    dark_rate : float or array_like, default 0
        Rate of product formation in the dark under the same conditions, mol/s.
    electrons_per_molecule : int or array_like, default 1
        Electrons transferred per product molecule.

    Returns
    -------
    float or ndarray
        Dimensionless yield (multiply by 100 for %).
    """
    induced = np.asarray(r0, dtype=float) - np.asarray(dark_rate, dtype=float)
    return electrons_per_molecule * induced / np.asarray(photon_flux, dtype=float)
