"""Arrhenius and Eyring fits with honest intervals, predictions, and the enhancement over a blank model.

The straight-line fit behind both is :func:`catalog.core.linefit.fit_line`.

Interval convention throughout: a two-sided 95 % interval is ``estimate ± coverage_factor × standard error``, with
the coverage factor a Student-t quantile on the residual degrees of freedom. When the fit has no residual degrees of
freedom but the caller gave standard errors, the variances are taken as known and the normal quantile is used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from catalog.core.constants import R, h, k_B
from catalog.core.linefit import fit_line
from catalog.core.stats import CONFIDENCE, t_tail
from catalog.errors import CatalogError

__all__ = [
    "CONFIDENCE",
    "TEMPERATURE_RESOLUTION",
    "ArrheniusFit",
    "Enhancement",
    "EyringFit",
    "Prediction",
    "TooFewTemperatures",
    "enhancement",
    "eyring_frequency",
    "fit_arrhenius",
    "fit_eyring",
    "predict",
]

# Readings that differ by less than this (K) are one set point: thermocouple noise must not pass as a second
# temperature and make an ill-conditioned Ea look determined.
TEMPERATURE_RESOLUTION = 0.01


class TooFewTemperatures(CatalogError, ValueError):
    """A rate constant measured at fewer than two distinct temperatures has no activation energy."""


@dataclass(frozen=True)
class ArrheniusFit:
    """Result of :func:`fit_arrhenius`; energies in J/mol, A in the units of k.

    ``cov`` is the 2×2 covariance of (ln A, Ea), in units (1, J/mol). ``coverage_factor`` turns a standard error
    into the 95 % half-width (see the module docstring). ``birge`` is NaN for an unweighted fit.
    ``curvature_p`` is the p-value of an F test for adding a 1/T² term; a small value says ln k is not straight in
    1/T over the range (a change of mechanism, transport limitation or a non-constant Ea).
    """

    ea: float
    ea_se: float
    ea_low: float
    ea_high: float
    ln_a: float
    ln_a_se: float
    ln_a_low: float
    ln_a_high: float
    cov: np.ndarray
    dof: int
    coverage_factor: float
    n_points: int
    n_temperatures: int
    n_dropped: int
    t_min: float
    t_max: float
    r2: float
    birge: float
    curvature_p: float


@dataclass(frozen=True)
class EyringFit:
    """Result of :func:`fit_eyring`: ΔH‡ (J/mol) and ΔS‡ (J/(mol K)) with 95 % intervals.

    ``cov`` is the 2×2 covariance of (ΔS‡, ΔH‡).
    """

    dh: float
    dh_se: float
    dh_low: float
    dh_high: float
    ds: float
    ds_se: float
    ds_low: float
    ds_high: float
    cov: np.ndarray
    dof: int
    coverage_factor: float
    n_points: int
    n_dropped: int
    t_min: float
    t_max: float


@dataclass(frozen=True)
class Prediction:
    """A predicted value with its 95 % interval; ``extrapolated`` is True outside the fitted temperature range."""

    value: float | np.ndarray
    low: float | np.ndarray
    high: float | np.ndarray
    extrapolated: bool | np.ndarray


@dataclass(frozen=True)
class Enhancement:
    """Catalysed rate over the blank rate at the same temperature, with its 95 % interval."""

    ratio: float | np.ndarray
    low: float | np.ndarray
    high: float | np.ndarray
    extrapolated: bool | np.ndarray


def _usable(T, k, k_se):
    """Keep points with finite T > 0, finite k > 0 and (if given) finite se > 0; count the rest."""
    T = np.asarray(T, dtype=float).ravel()
    k = np.asarray(k, dtype=float).ravel()
    if T.shape != k.shape:
        raise ValueError("temperatures and rate constants must have the same length")
    keep = np.isfinite(T) & (T > 0) & np.isfinite(k) & (k > 0)
    se = None
    if k_se is not None:
        se = np.broadcast_to(np.asarray(k_se, dtype=float).ravel(), k.shape)
        keep &= np.isfinite(se) & (se > 0)
        se = se[keep]
    n_temperatures = np.unique(np.round(T[keep] / TEMPERATURE_RESOLUTION)).size
    if n_temperatures < 2:
        raise TooFewTemperatures(
            "a catalyst measured at one temperature has no activation energy: "
            f"{n_temperatures} distinct temperature(s) with a usable positive rate"
        )
    return T[keep], k[keep], se, int((~keep).sum()), n_temperatures


def _curvature_p(x, y, w, chi2_line, n_temperatures):
    """p-value of the F test for a quadratic term in x, or NaN with fewer than four temperatures.

    .. math:: F = \\frac{\\chi^2_1 - \\chi^2_2}{\\chi^2_2/(n-3)},\\quad p = P(F_{1,n-3} > F)

    The F ratio, not a χ² difference, so stated errors that are too small or too large cancel out.
    """
    n = y.size
    if n_temperatures < 4 or n <= 3:
        return np.nan
    u = (x - x.mean()) / x.std()
    design = np.column_stack([np.ones_like(u), u, u**2]) * np.sqrt(w)[:, None]
    coef = np.linalg.lstsq(design, y * np.sqrt(w), rcond=None)[0]
    chi2_quad = float(((y * np.sqrt(w) - design @ coef) ** 2).sum())
    if chi2_quad <= 0.0:
        return 0.0 if chi2_line > 0.0 else np.nan
    f = (chi2_line - chi2_quad) / (chi2_quad / (n - 3))
    # P(F_{1,n-3} > F) is the two-sided Student-t tail at sqrt(F) (see t_tail), evaluated without scipy.
    return t_tail(math.sqrt(max(f, 0.0)), n - 3)


def fit_arrhenius(T, k, k_se=None, scatter: str = "paule-mandel"):
    """Fit the Arrhenius equation by weighted least squares of ln k on 1/T.

    .. math:: \\ln k = \\ln A - \\frac{E_a}{R}\\,\\frac{1}{T},\\qquad
              \\operatorname{var}(\\ln k_i) \\approx \\left(\\frac{\\sigma_{k,i}}{k_i}\\right)^2

    With standard errors, replicate scatter beyond the stated errors enters as an extra variance τ² added to every
    point (Paule-Mandel, see :func:`fit_line`), so it widens the interval, while scatter smaller than stated never
    narrows it; ``birge`` reports how far the stated errors alone fall short. Without standard errors it is
    ordinary least squares with the residual variance. Intervals are
    ``estimate ± t(0.975, n−2)·se``; with standard errors that already explain the scatter this is conservative
    (coverage a little above 95 %), which we prefer to an interval that trusts the stated errors blindly.

    Parameters
    ----------
    T : array_like
        Temperatures in K.
    k : array_like
        Rate constants or initial rates (any consistent unit; A comes out in the same unit).
    k_se : array_like, optional
        Standard errors of k, same unit.
    scatter : 'paule-mandel' | 'birge'
        How scatter beyond the stated errors enters (:func:`fit_line`); the blank model uses 'birge'.

    Returns
    -------
    ArrheniusFit
        Points with k ≤ 0 or any non-finite value are dropped and counted in ``n_dropped``.

    Raises
    ------
    TooFewTemperatures
        Fewer than two distinct temperatures (within :data:`TEMPERATURE_RESOLUTION`) remain.
    """
    T, k, se, n_dropped, n_temperatures = _usable(T, k, k_se)
    x = 1.0 / T
    y = np.log(k)
    y_se = None if se is None else se / k
    line = fit_line(x, y, y_se, scatter)
    # (ln A, Ea) = (a, −R b): a linear map J of (a, b).
    jac = np.diag([1.0, -R])
    cov = jac @ line.cov @ jac.T
    ea = -R * line.slope
    ea_se = float(np.sqrt(cov[1, 1]))
    ln_a_se = float(np.sqrt(cov[0, 0]))
    c = line.coverage_factor
    # The same weights as the line, extra scatter included, so the two χ² of the curvature F test are comparable.
    w = np.ones_like(y) if y_se is None else 1.0 / (y_se**2 + line.tau**2)
    return ArrheniusFit(
        ea=float(ea),
        ea_se=ea_se,
        ea_low=float(ea - c * ea_se),
        ea_high=float(ea + c * ea_se),
        ln_a=line.intercept,
        ln_a_se=ln_a_se,
        ln_a_low=float(line.intercept - c * ln_a_se),
        ln_a_high=float(line.intercept + c * ln_a_se),
        cov=cov,
        dof=line.dof,
        coverage_factor=c,
        n_points=line.n_points,
        n_temperatures=n_temperatures,
        n_dropped=n_dropped,
        t_min=float(T.min()),
        t_max=float(T.max()),
        r2=float(line.r2),
        birge=line.birge,
        curvature_p=_curvature_p(x, y, w, line.chi2, n_temperatures),
    )


def _ln_k_and_var(fit, T):
    """ln k at T from an Arrhenius fit and its variance from the (ln A, Ea) covariance.

    .. math:: \\operatorname{var}\\ln k = \\sigma^2_{\\ln A} + \\frac{\\sigma^2_{E_a}}{(RT)^2}
              - \\frac{2\\,\\operatorname{cov}(\\ln A, E_a)}{RT}
    """
    u = 1.0 / (R * np.asarray(T, dtype=float))
    ln_k = fit.ln_a - fit.ea * u
    var = fit.cov[0, 0] + fit.cov[1, 1] * u**2 - 2.0 * fit.cov[0, 1] * u
    return ln_k, np.maximum(var, 0.0)


def _log_interval(ln_value, var, fit, T):
    """(value, low, high, extrapolated) for a log-scale estimate: ``exp(ln v ∓ c·sd)``, c the fit's coverage factor.

    Extrapolated means T outside the temperatures the fit saw.
    """
    half = fit.coverage_factor * np.sqrt(var)
    T = np.asarray(T, dtype=float)
    return np.exp(ln_value), np.exp(ln_value - half), np.exp(ln_value + half), (T < fit.t_min) | (T > fit.t_max)


def predict(fit, T):
    """Rate constant at temperature T from an Arrhenius fit, with the 95 % confidence interval of the fitted line.

    .. math:: k(T) = \\exp\\left(\\ln A - \\frac{E_a}{RT}\\right),\\qquad
              [k_-, k_+] = \\exp\\left(\\ln k \\mp c\\,\\sqrt{\\operatorname{var}\\ln k}\\right)

    with ``c`` the fit's coverage factor. The interval is for the mean rate constant, not for a new single trial.

    Parameters
    ----------
    fit : ArrheniusFit
    T : float or array_like
        Temperature in K.

    Returns
    -------
    Prediction
        ``extrapolated`` is True where T lies outside ``[fit.t_min, fit.t_max]``.
    """
    ln_k, var = _ln_k_and_var(fit, T)
    return Prediction(*_log_interval(ln_k, var, fit, T))


def eyring_frequency(T):
    """Universal frequency factor of transition-state theory, :math:`k_B T / h`, in 1/s.

    Parameters
    ----------
    T : float or array_like
        Temperature in K.
    """
    return k_B * np.asarray(T, dtype=float) / h


def fit_eyring(T, k, k_se=None):
    """Fit the Eyring equation (transmission coefficient 1) by weighted least squares of ln(k/T) on 1/T.

    .. math:: \\ln\\frac{k}{T} = \\ln\\frac{k_B}{h} + \\frac{\\Delta S^\\ddagger}{R}
              - \\frac{\\Delta H^\\ddagger}{R}\\,\\frac{1}{T}

    Weights, extra scatter, dropping rules and intervals are those of :func:`fit_arrhenius`. ΔS‡ depends on the
    unit of k: it is the textbook value for a first-order k in 1/s; for other orders it refers to a 1 mol/m³
    standard state.

    Parameters
    ----------
    T : array_like
        Temperatures in K.
    k : array_like
        Rate constants in SI units (1/s for first order).
    k_se : array_like, optional
        Standard errors of k.

    Returns
    -------
    EyringFit
    """
    T, k, se, n_dropped, _ = _usable(T, k, k_se)
    line = fit_line(1.0 / T, np.log(k / T), None if se is None else se / k)
    # (ΔS‡, ΔH‡) = (R (a − ln(k_B/h)), −R b)
    jac = np.diag([R, -R])
    cov = jac @ line.cov @ jac.T
    dh = -R * line.slope
    ds = R * (line.intercept - np.log(k_B / h))
    dh_se = float(np.sqrt(cov[1, 1]))
    ds_se = float(np.sqrt(cov[0, 0]))
    c = line.coverage_factor
    return EyringFit(
        dh=float(dh),
        dh_se=dh_se,
        dh_low=float(dh - c * dh_se),
        dh_high=float(dh + c * dh_se),
        ds=float(ds),
        ds_se=ds_se,
        ds_low=float(ds - c * ds_se),
        ds_high=float(ds + c * ds_se),
        cov=cov,
        dof=line.dof,
        coverage_factor=c,
        n_points=line.n_points,
        n_dropped=n_dropped,
        t_min=float(T.min()),
        t_max=float(T.max()),
    )


def enhancement(r0_cat, r0_cat_se, blank_fit, T):
    """How many times faster the catalysed trial is than the uncatalysed (blank) reaction at the same temperature.

    .. math:: E = \\frac{r_{0,\\mathrm{cat}}}{r_{0,\\mathrm{blank}}(T)},\\qquad
              \\operatorname{var}\\ln E = \\left(\\frac{\\sigma_{r}}{r_{0,\\mathrm{cat}}}\\right)^2
              + \\operatorname{var}\\ln r_{0,\\mathrm{blank}}(T)

    ``r_0,blank(T)`` comes from an Arrhenius fit of the blank trials' initial rates (same unit and the same vessel
    basis as ``r0_cat``). The interval is ``exp(ln E ∓ c·sd)`` with ``c`` the blank fit's coverage factor; the
    uncertainty of the blank model usually dominates.

    Parameters
    ----------
    r0_cat, r0_cat_se : float or array_like
        Initial rate of the catalysed trial and its standard error.
    blank_fit : ArrheniusFit
        Fit of blank initial rates against temperature.
    T : float or array_like
        Temperature of the catalysed trial, K.

    Returns
    -------
    Enhancement
        ``extrapolated`` is True when T lies outside the blank trials' temperature range.
    """
    ln_blank, var_blank = _ln_k_and_var(blank_fit, T)
    r0_cat = np.asarray(r0_cat, dtype=float)
    var = (np.asarray(r0_cat_se, dtype=float) / r0_cat) ** 2 + var_blank
    return Enhancement(*_log_interval(np.log(r0_cat) - ln_blank, var, blank_fit, T))
