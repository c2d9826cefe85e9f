r"""Per-trial integrated rate-law fits: the reference implementation of rate extraction.

A trial's trace is the amount of product P(t) (mol) against time t (s). Three integrated rate laws in the limiting
reactant are fitted, each with a fitted start offset ``a`` (readings rarely start at zero) and written in terms of
the initial rate r0 and one curvature parameter so that a trace that never reaches its plateau still gives a sound
r0:

.. math::
    \text{zero:}\quad   P = a + r_0 \min(t, \tau),                        \qquad P_\infty = r_0 \tau

    \text{first:}\quad  P = a + \frac{r_0}{k}\left(1 - e^{-k t}\right),   \qquad P_\infty = r_0 / k

    \text{second:}\quad P = a + \frac{r_0 t}{1 + b t},                     \qquad P_\infty = r_0 / b,\;
                                                                                  k_2 = b^2 / r_0

All three tend to the straight line a + r0 t as the curvature goes to zero (tau -> inf, k -> 0, b -> 0); the
curvature is bounded below by zero (the rate laws only slow down). For a fixed curvature each model is linear in
(a, r0), so every fit is a separable least-squares problem in one nonlinear parameter:

- first and second order: the profile RSS(kappa) is scanned on :data:`CURVATURE_GRID` (dimensionless
  kappa = k t_max or b t_max) and refined with ``scipy.optimize.least_squares`` inside the two grid cells around the
  best grid point;
- zero order: the breakpoint tau is found exactly (Hudson 1966, segmented regression with a continuous join) by
  enumerating the intervals between data times; the straight line (plateau not reached, two parameters) competes
  with the broken line (three parameters) by AIC.

Models are chosen by the Gaussian AIC = n ln(RSS/n) + 2p (plain AIC, not AICc) with p = 3 (a, r0, curvature), and
p = 2 for the zero-order straight line. Standard errors come from the Jacobian,
cov = s^2 (J^T J)^{-1} with s^2 = RSS/(n - p) (as ``curve_fit(absolute_sigma=False)``). When no model can be fitted
(fewer than :data:`MIN_MODEL_POINTS` points, fits at the curvature bound, singular Jacobian) the initial slope of the
early low-conversion window is fitted instead (``model='initial_slope'``); with fewer than :data:`MIN_SLOPE_POINTS`
usable points the result is ``model='none'``.

:mod:`catalog.core.batch` runs the same fits vectorised over many trials; the post-processing below (normalisation,
model choice, fallback, derived quantities, residual diagnostics) works on padded 2-D arrays and is shared by both,
so that only the fitting cores differ and can be checked against each other.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

__all__ = ["MODELS", "TraceFit", "fit_trace", "model_curve"]

MODELS = ("zero", "first", "second")
#: model codes used in the padded 2-D arrays shared with catalog.core.batch
CODES = {"zero": 0, "first": 1, "second": 2, "initial_slope": 3, "none": 4}
NAMES = np.array(["zero", "first", "second", "initial_slope", "none"], dtype=object)
K_UNITS = np.array(["mol/s", "1/s", "1/(mol*s)", "", ""], dtype=object)

MIN_MODEL_POINTS = 5  # three parameters and at least two residual degrees of freedom
MIN_SLOPE_POINTS = 3
SLOPE_WINDOW_FRACTION = 0.2  # fallback window: up to the first point past 20 % of the rise ...
SLOPE_WINDOW_MIN_POINTS = 4  # ... and never fewer than this many points
#: dimensionless curvature kappa = k t_max (first) or b t_max (second): zero, then 4 points a decade to 1e3
CURVATURE_GRID = np.concatenate(([0.0], np.geomspace(1e-2, 1e3, 21)))
CURVATURE_MAX = float(CURVATURE_GRID[-1])
#: a curvature below this (in units of 1/t_max) cannot be told from a straight line: it is reported as zero
CURVATURE_LINE = 1e-8
#: RSS floor per point in normalised units: a fit closer than 1e-12 of the trace's range counts as exact
RSS_FLOOR = 1e-24
_RCOND = 1e-12
_SERIES_BELOW = 1e-2
# phi1(x) = (1 - exp(-x))/x = sum (-x)^n/(n+1)!; eight terms are exact to rounding for x < 1e-2
_PHI1 = np.array([(-1.0) ** n / math.factorial(n + 1) for n in range(8)])
_PHI1_D1 = np.polynomial.polynomial.polyder(_PHI1)
_PHI1_D2 = np.polynomial.polynomial.polyder(_PHI1, 2)


@dataclass(frozen=True)
class TraceFit:
    """Result of fitting one trial's trace; amounts in mol, times in s.

    Attributes
    ----------
    model : 'zero' | 'first' | 'second' | 'initial_slope' | 'none'
    r0, r0_se : initial rate of product formation dP/dt(0) and its standard error, mol/s.
    k, k_se : rate constant of the chosen model: r0 (mol/s) for zero order, k (1/s) for first order,
        k2 = b^2/r0 (1/(mol s), amount basis) for second order; NaN for the fallbacks.
    k_unit : 'mol/s' | '1/s' | '1/(mol*s)' | ''.
    half_life : time from t = 0 to half the plateau: tau/2, ln 2 / k, 1/b = 1/(k2 P_inf); NaN if no plateau.
    offset : fitted a (amount at t = 0), mol.
    plateau, plateau_se : fitted P_inf above the offset, mol; NaN when the plateau is not determined
        (straight line, zero curvature).
    n_max : stoichiometric maximum product amount passed in, mol.
    plateau_ratio : plateau / n_max (NaN unless n_max > 0).
    final_amount : fitted amount above the offset at the last time (for ``initial_slope`` the measured last
        amount minus the offset), mol.
    final_conversion : final_amount / n_max (NaN unless n_max > 0).
    r2, rmse : coefficient of determination and root-mean-square residual (mol) of the chosen fit (over the
        fallback window for ``initial_slope``).
    aic : model -> AIC = n ln(RSS/n) + 2p (RSS in mol^2) for every model tried; NaN where it failed.
    n_points : finite points with t >= 0 that were used.
    late_residual_z : mean residual (data - model) of the last ceil(n/3) points over its standard error
        s/sqrt(n_late); negative when the trace falls below the model late (deactivation).
    runs_z : Wald-Wolfowitz runs-test z of the residual signs (zero counts as positive); strongly negative means
        long runs, i.e. systematic misfit.
    """

    model: str
    r0: float
    r0_se: float
    k: float
    k_se: float
    k_unit: str
    half_life: float
    offset: float
    plateau: float
    plateau_se: float
    n_max: float
    plateau_ratio: float
    final_amount: float
    final_conversion: float
    r2: float
    rmse: float
    aic: dict
    n_points: int
    late_residual_z: float
    runs_z: float


SCALAR_FIELDS = tuple(f for f in TraceFit.__dataclass_fields__ if f != "aic")


@dataclass(frozen=True)
class ModelFit:
    """One model fitted to m trials in normalised units (u = t/t_max, y = (P - c)/s); arrays of length m.

    ``theta`` is the curvature: tau in units of t_max for zero order (inf for the straight line), kappa for first
    and second order. ``cov`` (m, 3, 3) is the covariance of (alpha, rho, theta); ``n_params`` is 2 or 3.
    """

    alpha: np.ndarray
    rho: np.ndarray
    theta: np.ndarray
    rss: np.ndarray
    cov: np.ndarray
    n_params: np.ndarray
    ok: np.ndarray


# ---------------------------------------------------------------------------------------------------------------
# Building blocks shared with catalog.core.batch


def curvature_basis(model: str, kappa, u, derivatives: int = 0) -> tuple:
    r"""Shape g(u; kappa) of the curved rate laws and its first ``derivatives`` kappa-derivatives.

    .. math::
        g_1 = \frac{1 - e^{-\kappa u}}{\kappa} = u\,\varphi(\kappa u),\qquad g_2 = \frac{u}{1 + \kappa u}

    with phi(x) = (1 - e^{-x})/x summed as a series for x < 1e-2 (the closed forms cancel there). Both tend to u as
    kappa -> 0 and vanish at u = 0, so zero-padded arrays contribute nothing to sums. Works for any consistent
    time unit (kappa u is dimensionless).
    """
    kappa, u = np.broadcast_arrays(np.asarray(kappa, dtype=float), np.asarray(u, dtype=float))
    if model == "second":
        g = u / (1.0 + kappa * u)
        return (g, -g * g, 2.0 * g**3)[: derivatives + 1]
    x = kappa * u
    small = np.abs(x) < _SERIES_BELOW
    xs = np.where(small, 1.0, x)  # placeholder where the series takes over
    phis = [-np.expm1(-xs) / xs]
    if derivatives >= 1:
        em = np.exp(-xs)
        phis.append((em - phis[0]) / xs)
    if derivatives >= 2:
        phis.append(-(em + 2.0 * phis[1]) / xs)
    if small.any():
        xsmall = x[small]
        for phi, coef in zip(phis, (_PHI1, _PHI1_D1, _PHI1_D2)):
            phi[small] = np.polynomial.polynomial.polyval(xsmall, coef)
    return tuple(u ** (i + 1) * phi for i, phi in enumerate(phis))


def shape(code, u, theta) -> np.ndarray:
    """g(u; theta) of each element's model code (zero: min(u, tau); first/second: curved; fallback: u).

    ``code`` and ``theta`` broadcast against ``u``; any consistent time unit.
    """
    code, u, theta = np.broadcast_arrays(np.asarray(code), np.asarray(u, dtype=float), np.asarray(theta, dtype=float))
    g = u.copy()
    for model in ("zero", "first", "second"):
        sel = code == CODES[model]
        if not sel.any():
            continue
        th = theta[sel]
        if model == "zero":
            g[sel] = np.minimum(u[sel], np.where(np.isfinite(th), th, np.inf))
        else:
            g[sel] = curvature_basis(model, np.where(np.isfinite(th) & (th > 0), th, 0.0), u[sel])[0]
    g[code == CODES["none"]] = np.nan
    return g


def covariance(jtj, s2) -> np.ndarray:
    """Batched s2 (J^T J)^{-1}; NaN for a trial whose column-equilibrated J^T J has rcond < 1e-12."""
    jtj = np.asarray(jtj, dtype=float)
    p = jtj.shape[-1]
    diag = np.diagonal(jtj, axis1=-2, axis2=-1)
    good = np.isfinite(jtj).all(axis=(-2, -1)) & (diag > 0).all(axis=-1) & np.isfinite(s2)
    d = np.where(good[:, None], np.sqrt(np.abs(diag)), 1.0)
    a = np.where(good[:, None, None], jtj / (d[:, :, None] * d[:, None, :]), np.eye(p))
    uu, sv, vt = np.linalg.svd(a)
    good &= sv[:, -1] > _RCOND * sv[:, 0]
    inv = np.einsum("mji,mj,mkj->mik", vt, 1.0 / sv, uu)
    cov = inv / (d[:, :, None] * d[:, None, :]) * np.asarray(s2, dtype=float)[:, None, None]
    cov[~good] = np.nan
    return cov


def embed_cov2(cov2) -> np.ndarray:
    """(m, 2, 2) covariance of (alpha, rho) as (m, 3, 3) with a zero curvature row and column."""
    cov = np.zeros((cov2.shape[0], 3, 3))
    cov[:, :2, :2] = cov2
    return cov


def linear_fit(n, sg, sgg, sy, sgy):
    """Closed-form least squares y = alpha + rho g from sums; returns alpha, rho, det."""
    det = n * sgg - sg * sg
    rho = (n * sgy - sg * sy) / det
    alpha = (sy - rho * sg) / np.where(n > 0, n, 1.0)
    return alpha, rho, det


def aic(rss, n, n_params, scale=1.0) -> np.ndarray:
    """Gaussian AIC = n ln(RSS/n) + 2p with RSS floored at n * RSS_FLOOR (normalised) and reported in scale^2."""
    n = np.asarray(n, dtype=float)
    rss = np.maximum(np.asarray(rss, dtype=float), n * RSS_FLOOR)
    return n * (np.log(rss / n) + 2.0 * np.log(scale)) + 2.0 * np.asarray(n_params, dtype=float)


def normalise(T, Y, W):
    """Scale padded traces to u = t/t_max in [0, 1] and y = (P - c)/s of unit range, zero at padding.

    Returns U, Yn, c, s, t_max (c, s in the units of Y; s = 1 for a constant trace). Dividing by max|P| first keeps
    the range finite for any finite input.
    """
    n = W.sum(axis=1)
    tmax = np.max(np.where(W, T, 0.0), axis=1, initial=0.0)
    U = np.where(W, T / np.where(tmax > 0, tmax, 1.0)[:, None], 0.0)
    big = np.max(np.where(W, np.abs(Y), 0.0), axis=1, initial=0.0)
    big = np.where(big > 0, big, 1.0)
    X = np.where(W, Y / big[:, None], 0.0)
    c = X.sum(axis=1) / np.maximum(n, 1)
    s = np.max(np.where(W, X, -np.inf), axis=1, initial=-np.inf) - np.min(np.where(W, X, np.inf), axis=1, initial=np.inf)
    s = np.where(np.isfinite(s) & (s > 0), s, 1.0)
    Yn = np.where(W, (X - c[:, None]) / s[:, None], 0.0)
    return U, Yn, c * big, s * big, tmax


def model_eligible(U, W, n, tmax) -> np.ndarray:
    """Trials with enough points and at least three distinct times for the three-parameter models."""
    distinct = 1 + ((np.diff(U, axis=1) > 0) & W[:, 1:]).sum(axis=1)
    return (n >= MIN_MODEL_POINTS) & (distinct >= 3) & (tmax > 0)


def _initial_slope(U, Y, W, n):
    """Straight line over the early window: points up to the first one past 20 % of the rise, at least 4.

    Returns a ModelFit (theta NaN), the window's total sum of squares and its size.
    """
    m, L = U.shape
    pos = np.arange(L)[None, :]
    y0 = Y[:, 0]
    rise = np.max(np.where(W, Y, -np.inf), axis=1) - y0
    reached = W & (Y - y0[:, None] >= SLOPE_WINDOW_FRACTION * rise[:, None]) & (rise > 0)[:, None]
    first = np.where(reached.any(axis=1), np.argmax(reached, axis=1), L)
    nw = np.minimum(np.maximum(first + 1, SLOPE_WINDOW_MIN_POINTS), n)
    Ww = W & (pos < nw[:, None])
    Uw, Yw = np.where(Ww, U, 0.0), np.where(Ww, Y, 0.0)
    nwf = nw.astype(float)
    su, suu, sy, suy = Uw.sum(1), (Uw * Uw).sum(1), Yw.sum(1), (Uw * Yw).sum(1)
    alpha, rho, det = linear_fit(nwf, su, suu, sy, suy)
    R = np.where(Ww, Yw - alpha[:, None] - rho[:, None] * Uw, 0.0)
    rss = (R * R).sum(1)
    tss = np.where(Ww, Yw - (sy / np.maximum(nwf, 1))[:, None], 0.0)
    tss = (tss * tss).sum(1)
    jtj = np.stack([np.stack([nwf, su], -1), np.stack([su, suu], -1)], -2)
    dof = nwf - 2
    cov = embed_cov2(covariance(jtj, rss / np.where(dof > 0, dof, np.nan)))
    ok = (nw >= MIN_SLOPE_POINTS) & (det > 0) & np.isfinite(cov[:, 1, 1]) & np.isfinite(alpha) & np.isfinite(rho)
    fit = ModelFit(alpha, rho, np.full(m, np.nan), rss, cov, np.full(m, 2.0), ok)
    return fit, tss, nw


def _residual_diagnostics(R, W, n, dof, rss):
    """Late-residual z and runs-test z of padded residual rows."""
    m, L = R.shape
    pos = np.arange(L)[None, :]
    n_late = np.ceil(n / 3.0)
    late = W & (pos >= (n - n_late)[:, None])
    sd = np.sqrt(rss / dof)
    late_z = np.where(late, R, 0.0).sum(1) / n_late / (sd / np.sqrt(n_late))
    plus = R >= 0
    runs = 1 + ((plus[:, 1:] != plus[:, :-1]) & W[:, 1:]).sum(1)
    n1 = (plus & W).sum(1).astype(float)
    n2 = n - n1
    mean = 2 * n1 * n2 / n + 1
    var = 2 * n1 * n2 * (2 * n1 * n2 - n) / (n * n * (n - 1))
    runs_z = (runs - mean) / np.sqrt(np.where(var > 0, var, np.nan))
    return late_z, runs_z


def summarise(U, Y, W, c, s, tmax, fits: dict, models, n_max) -> dict:
    """Choose a model per trial by AIC, fall back to the initial slope, and derive every reported field.

    ``fits`` maps each tried model to its :class:`ModelFit`. Returns column name -> array of length m (the scalar
    TraceFit fields plus aic_zero, aic_first, aic_second).
    """
    m, L = U.shape
    n = W.sum(axis=1)
    nf = n.astype(float)
    out = {}
    table = np.full((m, len(MODELS)), np.nan)
    for i, model in enumerate(MODELS):
        if model in fits:
            f = fits[model]
            table[:, i] = np.where(f.ok, aic(f.rss, nf, f.n_params, s), np.nan)
        out[f"aic_{model}"] = table[:, i]
    # ties go to the first model in the order asked for
    order = [MODELS.index(mo) for mo in models]
    ranked = np.where(np.isnan(table[:, order]), np.inf, table[:, order])
    has_model = np.isfinite(ranked).any(axis=1)
    best = np.array(order)[np.argmin(ranked, axis=1)]

    slope, slope_tss, nw = _initial_slope(U, Y, W, n)
    code = np.where(has_model, best, np.where(slope.ok, CODES["initial_slope"], CODES["none"]))

    def pick(attr):
        stack = [getattr(fits[mo], attr) if mo in fits else np.full_like(getattr(slope, attr), np.nan)
                 for mo in MODELS] + [getattr(slope, attr)]
        idx = np.minimum(code, 3)
        return np.stack(stack)[idx, np.arange(m)]

    alpha, rho, theta, rss = pick("alpha"), pick("rho"), pick("theta"), pick("rss")
    cov, n_params = pick("cov"), pick("n_params").astype(float)
    is_model = code <= 2
    is_slope = code == CODES["initial_slope"]
    none = code == CODES["none"]

    R = np.where(W, Y - alpha[:, None] - rho[:, None] * shape(code[:, None], U, theta[:, None]), 0.0)
    tss = np.where(W, Y - (Y.sum(1) / np.maximum(nf, 1))[:, None], 0.0)
    tss = (tss * tss).sum(1)
    dof = nf - n_params
    late_z, runs_z = _residual_diagnostics(R, W, nf, np.where(dof > 0, dof, np.nan), rss)
    used_n = np.where(is_slope, nw, nf)
    used_tss = np.where(is_slope, slope_tss, tss)

    zero, first, second = code == 0, code == 1, code == 2
    reached = (zero & np.isfinite(theta)) | ((first | second) & (theta > 0))
    th = np.where(reached, theta, np.nan)
    r0 = s * rho / tmax
    plateau = np.where(zero, s * rho * th, s * rho / th)
    grad = np.where(zero[:, None], np.stack([0 * th, th, rho], -1), np.stack([0 * th, 1 / th, -rho / th**2], -1))
    plateau_se = s * np.sqrt(np.einsum("mi,mij,mj->m", grad, cov, grad))
    k2 = th**2 / (rho * s * tmax)
    k2_grad = np.stack([0 * th, -k2 / rho, 2 * k2 / th], -1)
    k2_se = np.sqrt(np.einsum("mi,mij,mj->m", k2_grad, cov, k2_grad))
    r0_se = s * np.sqrt(cov[:, 1, 1]) / tmax
    u_last = U[np.arange(m), np.maximum(n - 1, 0)]
    y_last = Y[np.arange(m), np.maximum(n - 1, 0)]
    final = np.where(is_slope, s * (y_last - alpha), s * rho * shape(code, u_last, theta))

    out["model"] = NAMES[code]
    out["r0"] = r0
    out["r0_se"] = r0_se
    out["k"] = np.select([zero, first, second], [r0, theta / tmax, k2], np.nan)
    out["k_se"] = np.select([zero, first, second], [r0_se, np.sqrt(cov[:, 2, 2]) / tmax, k2_se], np.nan)
    out["k_unit"] = K_UNITS[code]
    out["half_life"] = np.select([zero, first, second], [th * tmax / 2, math.log(2) * tmax / th, tmax / th], np.nan)
    out["offset"] = c + s * alpha
    out["plateau"] = np.where(reached, plateau, np.nan)
    out["plateau_se"] = np.where(reached, plateau_se, np.nan)
    n_max = np.asarray(n_max, dtype=float)
    per_max = np.where(n_max > 0, n_max, np.nan)
    out["n_max"] = n_max
    out["plateau_ratio"] = out["plateau"] / per_max
    out["final_amount"] = final
    out["final_conversion"] = final / per_max
    out["r2"] = np.where(used_tss > 0, 1 - rss / used_tss, np.nan)
    out["rmse"] = s * np.sqrt(rss / np.maximum(used_n, 1))
    out["n_points"] = n
    out["late_residual_z"] = np.where(is_model, late_z, np.nan)
    out["runs_z"] = np.where(is_model, runs_z, np.nan)
    for name in SCALAR_FIELDS:
        if name in ("model", "k_unit", "n_points", "n_max"):
            continue
        out[name] = np.where(none, np.nan, out[name])
    return out


# ---------------------------------------------------------------------------------------------------------------
# The reference fitting cores: one trial, plain loops and scipy


def _lstsq(g, y):
    """Least squares y = alpha + rho g; returns alpha, rho, rss (residuals summed directly)."""
    A = np.column_stack((np.ones_like(g), g))
    (alpha, rho), *_ = np.linalg.lstsq(A, y, rcond=None)
    r = y - alpha - rho * g
    return alpha, rho, float(r @ r)


def _finish_fit(alpha, rho, theta, rss, jac, n_params, ok):
    """Pack one trial's fit with its Jacobian covariance (dof = n - n_params)."""
    n = jac.shape[0]
    cols = jac if n_params == 3 else jac[:, :2]
    cov = covariance((cols.T @ cols)[None], np.array([rss / (n - n_params)]))
    if n_params == 2:
        cov = embed_cov2(cov)
    ok = bool(ok and np.isfinite(cov[0, 1, 1]) and np.isfinite(rho) and np.isfinite(rss))
    return ModelFit(*(np.array([v]) for v in (alpha, rho, theta, rss)), cov, np.array([float(n_params)]), np.array([ok]))


def _fit_zero(u, y) -> ModelFit:
    """Exact zero-order fit: straight line, or broken line with tau in [u_2, u_{n-2}] (Hudson's enumeration)."""
    n = len(u)
    best_rss, best_tau = np.inf, np.nan
    for j in range(2, n - 1):  # tau on a data time
        _, _, rss = _lstsq(np.minimum(u, u[j]), y)
        if rss < best_rss:
            best_rss, best_tau = rss, u[j]
    for j in range(2, n - 2):  # tau strictly inside (u_j, u_{j+1}): rising line and plateau mean decouple
        if u[j] == u[0]:  # all rising points at one time: no line through them
            continue
        a_r, r_r, rss_r = _lstsq(u[: j + 1], y[: j + 1])
        plateau = y[j + 1 :]
        rss = rss_r + float(((plateau - plateau.mean()) ** 2).sum())
        if r_r != 0 and u[j] <= (plateau.mean() - a_r) / r_r <= u[j + 1] and rss < best_rss:
            best_rss, best_tau = rss, (plateau.mean() - a_r) / r_r
    a_l, r_l, rss_l = _lstsq(u, y)
    line = _finish_fit(a_l, r_l, np.inf, rss_l, np.column_stack((np.ones(n), u, np.zeros(n))), 2, True)
    if not np.isfinite(best_tau):
        return line
    g = np.minimum(u, best_tau)
    a_b, r_b, rss_b = _lstsq(g, y)
    broken = _finish_fit(a_b, r_b, best_tau, rss_b, np.column_stack((np.ones(n), g, r_b * (u > best_tau))), 3, True)
    if broken.ok[0] and aic(rss_b, n, 3) < aic(rss_l, n, 2):
        return broken
    return line


def _fit_curved(model: str, u, y) -> ModelFit:
    """First- or second-order fit: profile grid over kappa, then least_squares in the best grid point's cells."""
    n = len(u)
    grid = [_lstsq(curvature_basis(model, kappa, u)[0], y) for kappa in CURVATURE_GRID]
    i = int(np.argmin([g[2] for g in grid]))
    lo, hi = CURVATURE_GRID[max(i - 1, 0)], CURVATURE_GRID[min(i + 1, len(CURVATURE_GRID) - 1)]

    def residuals(p):
        return p[0] + p[1] * curvature_basis(model, p[2], u)[0] - y

    def jacobian(p):
        g, d = curvature_basis(model, p[2], u, 1)
        return np.column_stack((np.ones(n), g, p[1] * d))

    x0 = np.array([grid[i][0], grid[i][1], CURVATURE_GRID[i]])
    try:
        sol = least_squares(residuals, x0, jac=jacobian, bounds=([-np.inf, -np.inf, lo], [np.inf, np.inf, hi]),
                            method="trf", x_scale="jac", ftol=1e-15, xtol=1e-15, gtol=1e-15, max_nfev=1000)
        kappa = float(sol.x[2])
    except (ValueError, np.linalg.LinAlgError):
        kappa = np.nan
    if not np.isfinite(kappa):
        return _finish_fit(np.nan, np.nan, np.nan, np.nan, np.full((n, 3), np.nan), 3, False)
    kappa = 0.0 if kappa < CURVATURE_LINE else kappa
    g, d = curvature_basis(model, kappa, u, 1)
    alpha, rho, rss = _lstsq(g, y)
    at_bound = kappa >= CURVATURE_MAX * (1 - 1e-9)
    return _finish_fit(alpha, rho, kappa, rss, np.column_stack((np.ones(n), g, rho * d)), 3, not at_bound)


def _clean(t, amount):
    t = np.asarray(t, dtype=float).ravel()
    y = np.asarray(amount, dtype=float).ravel()
    if t.shape != y.shape:
        raise ValueError(f"t and amount differ in length ({t.size} and {y.size})")
    keep = np.isfinite(t) & np.isfinite(y) & (t >= 0)
    t, y = t[keep], y[keep]
    order = np.argsort(t, kind="stable")
    return t[order], y[order]


def check_models(models) -> tuple:
    models = tuple(models)
    unknown = [m for m in models if m not in MODELS]
    if unknown or not models:
        raise ValueError(f"models must be a non-empty subset of {MODELS}, got {models}")
    return models


def fit_trace(t, amount, n_max: float = float("nan"), models=MODELS) -> TraceFit:
    """Fit the integrated rate laws to one trace and return the AIC-best one (see the module docstring).

    Parameters
    ----------
    t : array of times, s (any order; points with non-finite values or t < 0 are left out).
    amount : array of product amounts, mol.
    n_max : stoichiometric maximum product amount, mol (NaN if unknown).
    models : subset of ('zero', 'first', 'second') to try.
    """
    models = check_models(models)
    t, y = _clean(t, amount)
    n = t.size
    L = max(n, 1)
    T, Yr, W = np.zeros((1, L)), np.zeros((1, L)), np.zeros((1, L), dtype=bool)
    T[0, :n], Yr[0, :n], W[0, :n] = t, y, True
    with np.errstate(all="ignore"):
        U, Yn, c, s, tmax = normalise(T, Yr, W)
        fits = {}
        if model_eligible(U, W, W.sum(1), tmax)[0]:
            for model in models:
                fits[model] = _fit_zero(U[0], Yn[0]) if model == "zero" else _fit_curved(model, U[0], Yn[0])
        out = summarise(U, Yn, W, c, s, tmax, fits, models, np.array([n_max], dtype=float))
    scalars = {name: out[name][0] for name in SCALAR_FIELDS}
    scalars = {k: (v if isinstance(v, str) else (int(v) if k == "n_points" else float(v))) for k, v in scalars.items()}
    return TraceFit(aic={mo: float(out[f"aic_{mo}"][0]) for mo in models}, **scalars)


def curve_theta(code, r0, k, plateau) -> np.ndarray:
    """Physical curvature of each fit from its reported fields: tau = P_inf/r0, k, or b = r0/P_inf."""
    code, r0, k, plateau = np.broadcast_arrays(np.asarray(code), *(np.asarray(v, dtype=float) for v in (r0, k, plateau)))
    return np.select([code == 0, code == 1, code == 2], [plateau / r0, k, r0 / plateau], np.nan)


def model_curve(fit: TraceFit, t) -> np.ndarray:
    """Fitted amounts (offset included), mol, at times t: a + r0 g(t) of the chosen model (NaN for 'none')."""
    code = CODES[fit.model]
    with np.errstate(all="ignore"):
        theta = curve_theta(code, fit.r0, fit.k, fit.plateau)
        return fit.offset + fit.r0 * shape(code, np.asarray(t, dtype=float), theta)
