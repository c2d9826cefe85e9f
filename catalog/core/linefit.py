"""A weighted straight line with honest intervals: the fit behind Arrhenius, Eyring, the blank model and orders.

Interval convention: a two-sided 95 % interval is ``estimate ± coverage_factor × standard error``, with the coverage
factor a Student-t quantile on the residual degrees of freedom; with no residual degrees of freedom but stated
standard errors, the variances are taken as known and the normal quantile is used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from catalog.core.stats import Z95, t95

__all__ = ["SCATTER_MODELS", "LineFit", "brent_root", "fit_line"]


@dataclass(frozen=True)
class LineFit:
    """Weighted least-squares straight line ``y = intercept + slope·x``.

    Attributes
    ----------
    intercept, slope : float
        Estimates.
    cov : ndarray, shape (2, 2)
        Covariance of (intercept, slope): with weights 1/(σ² + τ²) when weighted, scaled by the residual variance
        when unweighted.
    dof : int
        Residual degrees of freedom, ``n_points − 2``.
    coverage_factor : float
        Multiplier of a standard error giving the two-sided 95 % interval (Student t on ``dof``; normal when
        ``dof == 0`` and weights were given; NaN when neither applies).
    chi2 : float
        Weighted residual sum of squares (plain RSS without weights).
    birge : float
        Birge ratio ``sqrt(chi2/dof)`` with the stated errors alone; about 1 when they explain the scatter. NaN
        without weights or residual degrees of freedom.
    tau : float
        Extra scatter (standard deviation on the y scale) added to every stated error; 0 when none was needed.
    r2 : float
        Weighted coefficient of determination.
    n_points : int
        Points used.
    weighted : bool
        Whether standard errors of y were given.
    """

    tau: float
    intercept: float
    slope: float
    cov: np.ndarray
    dof: int
    coverage_factor: float
    chi2: float
    birge: float
    r2: float
    n_points: int
    weighted: bool


def _weighted_line(x, y, var):
    """Weighted straight line with weights 1/var: (chi2, intercept, slope, sum w, x_bar, y_bar, Sxx, w)."""
    w = 1.0 / var
    sw = w.sum()
    x_bar = (w * x).sum() / sw
    y_bar = (w * y).sum() / sw
    dx = x - x_bar
    sxx = (w * dx**2).sum()
    slope = (w * dx * y).sum() / sxx
    intercept = y_bar - slope * x_bar
    chi2 = float((w * (y - intercept - slope * x) ** 2).sum())
    return chi2, intercept, slope, sw, x_bar, y_bar, sxx, w


#: Relative part of :func:`brent_root`'s tolerance: four units in the last place, as scipy.optimize.brentq uses.
_ROOT_RTOL = 4 * np.finfo(float).eps


def brent_root(f, a: float, b: float, xtol: float, rtol: float = _ROOT_RTOL, maxiter: int = 100) -> float:
    """A root of ``f`` between ``a`` and ``b`` (where ``f`` changes sign) by Brent's method.

    Inverse quadratic (or secant) steps where they shrink the bracket fast enough, bisection otherwise, stopping
    when the bracket half-width is below :math:`\\delta = (x_{tol} + r_{tol}|x|)/2` (Brent, Algorithms for
    Minimization without Derivatives, Prentice-Hall 1973, ch. 4). The steps are those of
    ``scipy.optimize.brentq``, so the root is the same double (tests/test_linefit.py checks it bit for bit); here,
    because importing scipy.optimize costs ~0.2 s of a cold ranking that needs nothing else from it.

    Raises
    ------
    ValueError
        ``f(a)`` and ``f(b)`` have the same sign.
    RuntimeError
        No convergence in ``maxiter`` steps.
    """
    x_prev, x_cur = a, b
    f_prev, f_cur = f(x_prev), f(x_cur)
    if f_prev == 0:
        return float(x_prev)
    if f_cur == 0:
        return float(x_cur)
    if math.copysign(1.0, f_prev) == math.copysign(1.0, f_cur):
        raise ValueError("f(a) and f(b) must have different signs")
    # x_far is the other end of the bracket; s_cur and s_prev are the last two steps.
    x_far = f_far = s_prev = s_cur = 0.0
    for _ in range(maxiter):
        if f_prev != 0 and f_cur != 0 and math.copysign(1.0, f_prev) != math.copysign(1.0, f_cur):
            x_far, f_far = x_prev, f_prev
            s_prev = s_cur = x_cur - x_prev
        if abs(f_far) < abs(f_cur):  # keep the best estimate in x_cur
            x_prev, x_cur, x_far = x_cur, x_far, x_cur
            f_prev, f_cur, f_far = f_cur, f_far, f_cur
        delta = (xtol + rtol * abs(x_cur)) / 2
        s_half = (x_far - x_cur) / 2
        if f_cur == 0 or abs(s_half) < delta:
            return float(x_cur)
        if abs(s_prev) > delta and abs(f_cur) < abs(f_prev):
            if x_prev == x_far:  # secant
                s_try = -f_cur * (x_cur - x_prev) / (f_cur - f_prev)
            else:  # inverse quadratic interpolation
                d_prev = (f_prev - f_cur) / (x_prev - x_cur)
                d_far = (f_far - f_cur) / (x_far - x_cur)
                s_try = -f_cur * (f_far * d_far - f_prev * d_prev) / (d_far * d_prev * (f_far - f_prev))
            if 2 * abs(s_try) < min(abs(s_prev), 3 * abs(s_half) - delta):
                s_prev, s_cur = s_cur, s_try
            else:
                s_prev = s_cur = s_half
        else:
            s_prev = s_cur = s_half
        x_prev, f_prev = x_cur, f_cur
        x_cur += s_cur if abs(s_cur) > delta else (delta if s_half > 0 else -delta)
        f_cur = f(x_cur)
    raise RuntimeError(f"no root within tolerance after {maxiter} steps")


#: How scatter beyond the stated errors enters a weighted line (see :func:`fit_line`).
SCATTER_MODELS = ("paule-mandel", "birge")


def fit_line(x, y, y_se=None, scatter: str = "paule-mandel"):
    """Fit ``y = a + b·x`` by (weighted) least squares, widening the covariance for scatter beyond the stated errors.

    Weights are :math:`w_i = 1/\\sigma_i^2`. With :math:`\\bar x = \\sum w x/\\sum w` and
    :math:`S_{xx} = \\sum w (x-\\bar x)^2`:

    .. math::
        b = \\frac{\\sum w (x-\\bar x) y}{S_{xx}},\\quad a = \\bar y - b\\bar x,\\quad
        \\operatorname{var} b = \\frac{s}{S_{xx}},\\quad
        \\operatorname{var} a = s\\left(\\frac{1}{\\sum w} + \\frac{\\bar x^2}{S_{xx}}\\right),\\quad
        \\operatorname{cov}(a, b) = -\\frac{s\\,\\bar x}{S_{xx}}

    where, with stated errors, :math:`w_i = 1/(\\sigma_i^2 + \\tau^2)` and :math:`s = 1`: the extra variance
    :math:`\\tau^2 \\ge 0` is zero when the stated errors explain the scatter (:math:`\\chi^2 \\le \\nu`) and
    otherwise solves :math:`\\sum w_i r_i^2 = \\nu` (Paule-Mandel), so replicate scatter widens the interval and
    smaller scatter never narrows it; when an extra variance was needed, the covariance is scaled up, if need be,
    so that the slope is never more certain than the unweighted fit with its residual variance says (the extra
    variance is estimated from few residuals, and the plain Paule-Mandel covariance then covers too rarely: about
    94 % for a nominal 95 % with 15 points in our known-truth campaigns). With ``scatter='birge'`` the weights
    stay :math:`1/\\sigma_i^2` and the
    covariance is multiplied by :math:`\\max(1, \\chi^2/\\nu)` (the Birge ratio squared; Birge, Phys. Rev. 40,
    207 (1932), from memory): right when the stated errors are the whole story up to a common factor, as for blank
    trials whose precision spans 100x because their rates do, where an additive variance would flatten the weights
    and let the least precise point bias the line. Without stated errors :math:`s = \\mathrm{RSS}/\\nu`.
    Centring on :math:`\\bar x` keeps the sums well conditioned for x = 1/T.

    Parameters
    ----------
    x, y : array_like
        Finite 1-D data of equal length, at least two distinct x values.
    y_se : array_like, optional
        Positive finite standard errors of y.
    scatter : 'paule-mandel' | 'birge'
        Extra variance shared by every point (default), or the Birge-ratio scaling of the covariance.

    Returns
    -------
    LineFit
    """
    if scatter not in SCATTER_MODELS:
        raise ValueError(f"scatter must be one of {SCATTER_MODELS}, got {scatter!r}")
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    weighted = y_se is not None
    var = np.asarray(y_se, dtype=float) ** 2 if weighted else np.ones_like(y)
    n = y.size
    if np.unique(x).size < 2:
        raise ValueError("a straight line needs at least two distinct x values")
    dof = n - 2
    chi2, *_ = _weighted_line(x, y, var)
    birge = np.sqrt(chi2 / dof) if weighted and dof > 0 else np.nan
    tau2 = 0.0
    if weighted and dof > 0 and chi2 > dof and scatter == "paule-mandel":
        # Scatter beyond the stated errors (replicate-to-replicate variation) is a variance component shared by
        # every point, not a multiple of each point's own error: solve sum w_i r_i^2 = nu with w_i = 1/(se_i^2 +
        # tau^2) (Paule and Mandel 1982). Scaling the covariance instead would let the few most precise points
        # carry the fit and give intervals that cover too rarely.
        upper = float(np.var(y) * 10 + var.max())
        tau2 = brent_root(lambda t2: _weighted_line(x, y, var + t2)[0] - dof, 0.0, upper, xtol=1e-14 * upper)
    chi2, intercept, slope, sw, x_bar, y_bar, sxx, w = _weighted_line(x, y, var + tau2)
    tss = float((w * (y - y_bar) ** 2).sum())
    if weighted:
        scale = max(1.0, chi2 / dof) if scatter == "birge" and dof > 0 else 1.0
        coverage = t95(dof) if dof > 0 else Z95
    else:
        birge = np.nan
        scale = chi2 / dof if dof > 0 else np.nan
        coverage = t95(dof) if dof > 0 else np.nan
    if weighted and tau2 > 0:
        # The extra variance is itself estimated from nu residuals, and the Paule-Mandel covariance ignores that
        # uncertainty, so with few points it covers too rarely. Never report a slope more certain than the
        # unweighted fit with its own residual variance says (a weighting-free check): scale the covariance up to it.
        r_ols = np.polyfit(x, y, 1, full=True)[1]
        var_ols = float(r_ols[0]) / dof / float(((x - x.mean()) ** 2).sum()) if len(r_ols) else 0.0
        scale = max(scale, var_ols * sxx)
    var_b = scale / sxx
    cov = np.array([[scale / sw + x_bar**2 * var_b, -x_bar * var_b], [-x_bar * var_b, var_b]])
    return LineFit(
        tau=float(np.sqrt(tau2)),
        intercept=float(intercept),
        slope=float(slope),
        cov=cov,
        dof=dof,
        coverage_factor=float(coverage),
        chi2=chi2,
        birge=float(birge),
        r2=1.0 - chi2 / tss if tss > 0 else np.nan,
        n_points=n,
        weighted=weighted,
    )
