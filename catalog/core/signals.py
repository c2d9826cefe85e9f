"""Raw signal to amount of product (mol): gas volume, balance mass loss, headspace pressure, analyser concentration.

Every function takes SI values (m³, Pa, K, kg, kg/mol, mol/m³) and returns moles; scalars and numpy arrays broadcast.
Baseline offsets are not removed here: the trace fit estimates them, so these conversions stay linear in the signal.
"""

from __future__ import annotations

import numpy as np

from catalog.core.constants import R

__all__ = [
    "amount_from_concentration",
    "amount_from_gas_volume",
    "amount_from_mass_loss",
    "amount_from_pressure",
    "conversion",
    "molar_mass",
    "water_vapour_pressure",
]

# IAPWS-IF97 region 4 (saturation line) coefficients n1..n10, Table 34 of the IAPWS Revised Release on the IAPWS
# Industrial Formulation 1997 (2007). An open standard; the test suite checks them against the release's own
# verification values and an independent implementation.
_IF97_N = (
    0.11670521452767e4,
    -0.72421316703206e6,
    -0.17073846940092e2,
    0.12020824702470e5,
    -0.32325550322333e7,
    0.14915108613530e2,
    -0.48232657361591e4,
    0.40511340542057e6,
    -0.23855557567849e0,
    0.65017534844798e3,
)
_IF97_T_MIN = 273.15  # K, lower end of the region-4 validity range
_IF97_T_CRIT = 647.096  # K, critical temperature: the saturation line ends here


def water_vapour_pressure(T):
    """Saturation pressure of water, IAPWS-IF97 region 4.

    .. math::
        \\vartheta = T + \\frac{n_9}{T - n_{10}},\\quad
        A = \\vartheta^2 + n_1\\vartheta + n_2,\\;
        B = n_3\\vartheta^2 + n_4\\vartheta + n_5,\\;
        C = n_6\\vartheta^2 + n_7\\vartheta + n_8

        p_s = \\left(\\frac{2C}{-B + \\sqrt{B^2 - 4AC}}\\right)^4 \\;\\mathrm{MPa}

    Parameters
    ----------
    T : float or array_like
        Temperature in K, 273.15 K to 647.096 K.

    Returns
    -------
    float or ndarray
        Saturation pressure in Pa.

    Raises
    ------
    ValueError
        If any temperature lies outside the validity range of the equation.
    """
    T = np.asarray(T, dtype=float)
    if np.any(~((T >= _IF97_T_MIN) & (T <= _IF97_T_CRIT))):
        raise ValueError(
            f"water vapour pressure is defined here for {_IF97_T_MIN} K to {_IF97_T_CRIT} K only (IAPWS-IF97 region 4)"
        )
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _IF97_N
    theta = T + n9 / (T - n10)
    a = theta**2 + n1 * theta + n2
    b = n3 * theta**2 + n4 * theta + n5
    c = n6 * theta**2 + n7 * theta + n8
    p_mpa = (2.0 * c / (-b + np.sqrt(b**2 - 4.0 * a * c))) ** 4
    return p_mpa * 1e6


def molar_mass(formula):
    """Molar mass of an element or formula from IUPAC standard atomic weights (via ``periodictable``).

    .. math:: M = 10^{-3} \\sum_i \\nu_i A_{r,i}\\;\\mathrm{kg/mol}

    Parameters
    ----------
    formula : str
        Element symbol or formula, e.g. ``"Pt"``, ``"H2"``, ``"CO2"``.

    Returns
    -------
    float
        Molar mass in kg/mol.

    Raises
    ------
    ValueError
        If the formula cannot be parsed or names an unknown element.
    """
    # Imported here: it builds its mass tables on import (~0.05-0.1 s), which the commands that never need a mass
    # (import, listing) should not pay for.
    import periodictable

    # A bare element symbol (a catalyst's metal) is looked up directly: periodictable builds its formula grammar on
    # first use (measured ~0.09 s of a cold analysis), and a one-atom formula's mass is that element's mass.
    element = getattr(periodictable.elements, formula, None) if isinstance(formula, str) else None
    if isinstance(element, periodictable.core.Element) and element.number > 0:
        return element.mass * 1e-3
    try:
        parsed = periodictable.formula(formula)
    # periodictable reports bad input with its parser's own exception types, which are not part of its API.
    except Exception as exc:  # noqa: BLE001
        raise ValueError(f"cannot read chemical formula {formula!r}") from exc
    if not parsed.atoms:
        raise ValueError(f"cannot read chemical formula {formula!r}")
    return parsed.mass * 1e-3  # periodictable gives g/mol


def _once_per_run(func, x: np.ndarray) -> np.ndarray:
    """``func(x)`` for an elementwise ``func``, evaluated once per run of equal values of a 1-D ``x``.

    A trace gathers its trial's gas temperature at every reading, so a campaign's 2×10^6 readings hold a few
    thousand runs: the saturation equation on the runs, repeated, gives the same values (numpy's array loops do
    not depend on an element's position; checked bit for bit) at a fraction of the cost (measured 0.2 s → 5 ms).
    """
    if x.ndim != 1 or x.size < 2:
        return func(x)
    starts = np.flatnonzero(np.concatenate(([True], x[1:] != x[:-1])))
    return np.repeat(func(x[starts]), np.diff(np.append(starts, x.size)))


def amount_from_gas_volume(V, p_gas, T_gas, over_water=False):
    """Moles of gas collected as a volume, ideal-gas law, optionally corrected for water vapour.

    .. math:: n = \\frac{(p - [\\text{over water}]\\,p_w(T))\\,V}{R\\,T}

    Gas collected over water is saturated with vapour, so the product's partial pressure is the total pressure less
    the water vapour pressure at the gas temperature.

    Parameters
    ----------
    V : float or array_like
        Gas volume in m³.
    p_gas : float or array_like
        Absolute pressure of the collected gas in Pa.
    T_gas : float or array_like
        Gas temperature in K.
    over_water : bool or array_like of bool, default False
        True when the gas was collected over water.

    Returns
    -------
    float or ndarray
        Amount of gas in mol.
    """
    T_gas = np.asarray(T_gas, dtype=float)
    over_water = np.asarray(over_water, dtype=bool)
    # Only evaluate the vapour equation where it is needed, so a dry collection at an odd temperature never raises.
    p_w = _once_per_run(water_vapour_pressure, T_gas) if np.any(over_water) else 0.0
    partial = np.asarray(p_gas, dtype=float) - over_water * p_w
    return partial * np.asarray(V, dtype=float) / (R * T_gas)


def amount_from_mass_loss(m, M):
    """Moles of gas that left a vessel on a balance.

    .. math:: n_i = \\frac{m_0 - m_i}{M}

    The first reading only sets the zero; the baseline offset is estimated later by the trace fit.

    Parameters
    ----------
    m : array_like
        Balance readings in kg, in time order (1-D).
    M : float
        Molar mass of the escaping gas in kg/mol.

    Returns
    -------
    ndarray
        Amount of gas released in mol, one value per reading.
    """
    m = np.asarray(m, dtype=float)
    if m.ndim != 1 or m.size == 0:
        raise ValueError("mass readings must be a non-empty 1-D series")
    return (m[0] - m) / M


def amount_from_pressure(p, V_headspace, T):
    """Moles of gas in a closed headspace from its absolute pressure.

    .. math:: n = \\frac{p\\,V}{R\\,T}

    Parameters
    ----------
    p : float or array_like
        Absolute pressure in Pa (the initial gas fill is removed later as the fitted baseline).
    V_headspace : float or array_like
        Headspace volume in m³.
    T : float or array_like
        Headspace temperature in K.

    Returns
    -------
    float or ndarray
        Amount of gas in mol.
    """
    return np.asarray(p, dtype=float) * V_headspace / (R * np.asarray(T, dtype=float))


def amount_from_concentration(c, V_liquid):
    """Moles of product in solution from an analyser concentration.

    .. math:: n = c\\,V

    Parameters
    ----------
    c : float or array_like
        Concentration in mol/m³.
    V_liquid : float or array_like
        Liquid volume in m³.

    Returns
    -------
    float or ndarray
        Amount in mol.
    """
    return np.asarray(c, dtype=float) * V_liquid


def conversion(amount, limiting_amount, product_ratio=1.0):
    """Fractional conversion of the limiting reactant from the amount of product formed.

    .. math:: X = \\frac{n}{\\nu\\,n_\\mathrm{lim}}

    Parameters
    ----------
    amount : float or array_like
        Product formed, mol.
    limiting_amount : float or array_like
        Initial amount of the limiting reactant, mol.
    product_ratio : float, default 1.0
        Moles of product formed per mole of limiting reactant at full conversion (ν).

    Returns
    -------
    float or ndarray
        Conversion, dimensionless (1 = complete).
    """
    return np.asarray(amount, dtype=float) / (product_ratio * np.asarray(limiting_amount, dtype=float))

