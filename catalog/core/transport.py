"""Transport-limitation checks for porous catalyst particles: Weisz-Prater, Mears, Thiele modulus, effectiveness.

Length convention: every function here takes the particle **radius** R of a sphere. Some texts use the
volume-to-external-surface length L = R/3 instead; pass that length as ``radius`` to reproduce their numbers.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "MEARS_LIMIT",
    "WEISZ_PRATER_LIMIT",
    "WEISZ_PRATER_LIMIT_FIRST_ORDER",
    "effectiveness_sphere",
    "mears",
    "thiele_modulus_sphere",
    "weisz_prater",
    "weisz_prater_limit",
]

# Below this N_WP internal diffusion does not limit the rate for the usual range of orders
# (Weisz and Prater, Adv. Catal. 6, 143 (1954)).
WEISZ_PRATER_LIMIT = 0.3
# For a first-order reaction the limit commonly quoted is 1 (common practice, no source).
WEISZ_PRATER_LIMIT_FIRST_ORDER = 1.0
# External (film) mass transfer is negligible below this (Mears, Ind. Eng. Chem. Process Des. Dev. 10, 541 (1971)).
MEARS_LIMIT = 0.15

# Zero order in a sphere: C(r) = C_s - k0 (R^2 - r^2)/(6 D), so the centre stays wet while N_WP = k0 R^2/(C_s D) < 6
# (derived here, radius convention).
_WP_ZERO_ORDER = 6.0


def weisz_prater_limit(order):
    """Largest Weisz-Prater number (radius convention) at which pore diffusion costs at most 5 % of the rate.

    .. math::
        n \\le 0:\\; N_\\mathrm{WP} < 6 \\quad\\text{(exact: the particle centre still sees reactant)}

        n > 0:\\;  N_\\mathrm{WP} < \\frac{0.95 \\times 1.5}{n + 1}

    For n > 0: with the generalised modulus :math:`\\phi_n^2 = \\tfrac{n+1}{2}\\phi^2` (Bischoff, AIChE J.
    11, 351 (1965), from memory) and the small-modulus series of :func:`effectiveness_sphere`,
    :math:`\\eta \\approx 1 - \\phi_n^2/15 \\ge 0.95` gives :math:`\\phi^2 \\le 1.5/(n+1)` and
    :math:`N_\\mathrm{WP} = \\eta\\phi^2`: 0.71 for first order, 0.48 for second. NaN order gives NaN (the
    caller then uses its order-free limit, :data:`WEISZ_PRATER_LIMIT`).
    """
    n = np.asarray(order, dtype=float)
    limit = np.where(n <= 0, _WP_ZERO_ORDER, 0.95 * 1.5 / (np.maximum(n, 0) + 1.0))
    return np.where(np.isfinite(n), limit, np.nan)[()]


# Below this φ the closed form loses digits to cancellation (relative error ~ 3ε/φ²); the four-term series is
# accurate there to the next term, 2φ⁸/31185 < 1e-14.
_SMALL_PHI = 0.05


def weisz_prater(r_obs_per_volume, radius, c_surface, d_eff):
    """Weisz-Prater number, the observable internal-diffusion criterion.

    .. math:: N_\\mathrm{WP} = \\frac{r_\\mathrm{obs}\\,R^2}{C_s\\,D_\\mathrm{eff}}

    Compare with :data:`WEISZ_PRATER_LIMIT`.

    Parameters
    ----------
    r_obs_per_volume : float or array_like
        Observed rate per particle volume, mol/(m³ s).
    radius : float or array_like
        Particle radius, m.
    c_surface : float or array_like
        Reactant concentration at the particle surface, mol/m³.
    d_eff : float or array_like
        Effective diffusivity in the pores, m²/s.

    Returns
    -------
    float or ndarray
        Dimensionless.
    """
    return np.asarray(r_obs_per_volume, dtype=float) * np.asarray(radius, dtype=float) ** 2 / (
        np.asarray(c_surface, dtype=float) * np.asarray(d_eff, dtype=float)
    )


def mears(rate_per_mass, bulk_density, radius, order, k_c, c_bulk):
    """Mears criterion for external (film) mass transfer.

    .. math:: M = \\frac{r'\\,\\rho_b\\,R\\,n}{k_c\\,C_b}

    Compare with :data:`MEARS_LIMIT`.

    Parameters
    ----------
    rate_per_mass : float or array_like
        Observed rate per catalyst mass, mol/(kg s).
    bulk_density : float or array_like
        Bed bulk density, kg/m³.
    radius : float or array_like
        Particle radius, m.
    order : float or array_like
        Reaction order.
    k_c : float or array_like
        Film mass-transfer coefficient, m/s.
    c_bulk : float or array_like
        Bulk-fluid reactant concentration, mol/m³.

    Returns
    -------
    float or ndarray
        Dimensionless.
    """
    return (
        np.asarray(rate_per_mass, dtype=float)
        * np.asarray(bulk_density, dtype=float)
        * np.asarray(radius, dtype=float)
        * np.asarray(order, dtype=float)
        / (np.asarray(k_c, dtype=float) * np.asarray(c_bulk, dtype=float))
    )


def thiele_modulus_sphere(radius, k_v, d_eff):
    """Thiele modulus of a first-order reaction in a sphere, radius convention.

    .. math:: \\phi = R\\sqrt{\\frac{k_v}{D_\\mathrm{eff}}}

    With this convention :func:`effectiveness_sphere` gives η → 3/φ for large φ.

    Parameters
    ----------
    radius : float or array_like
        Particle radius, m.
    k_v : float or array_like
        First-order rate constant per particle volume, 1/s.
    d_eff : float or array_like
        Effective diffusivity, m²/s.

    Returns
    -------
    float or ndarray
        Dimensionless.
    """
    return np.asarray(radius, dtype=float) * np.sqrt(np.asarray(k_v, dtype=float) / np.asarray(d_eff, dtype=float))


def effectiveness_sphere(phi):
    """Internal effectiveness factor of a first-order reaction in an isothermal sphere.

    .. math:: \\eta = \\frac{3}{\\phi^2}\\left(\\phi\\coth\\phi - 1\\right)
              \\approx 1 - \\frac{\\phi^2}{15} + \\frac{2\\phi^4}{315} - \\frac{\\phi^6}{1575}
              \\quad (\\phi \\to 0)

    The series is used for small φ, where the closed form cancels; ``φ / tanh φ`` stays finite for large φ.

    Parameters
    ----------
    phi : float or array_like
        Thiele modulus (radius convention, :func:`thiele_modulus_sphere`), ≥ 0.

    Returns
    -------
    float or ndarray
        η between 0 and 1.
    """
    phi = np.asarray(phi, dtype=float)
    if np.any(phi < 0):
        raise ValueError("the Thiele modulus cannot be negative")
    small = phi < _SMALL_PHI
    p2 = phi**2
    series = 1.0 - p2 / 15.0 + 2.0 * p2**2 / 315.0 - p2**3 / 1575.0
    safe = np.where(small, 1.0, phi)  # keeps the unused branch free of 0/0
    closed = 3.0 / safe**2 * (safe / np.tanh(safe) - 1.0)
    return np.where(small, series, closed)[()]
