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
  enumerating the intervals between data times; the straight line (plateau not reached) and the broken line are
  separate candidates;
- with n_max known, first and second order also with the plateau held at n_max (:mod:`catalog.core.plateau_fit`).

``offset=False`` drops the offset a (the curve passes through the origin, one parameter fewer). Candidates are
chosen, and r0's standard error widened by model-selection uncertainty, in :mod:`catalog.core.selection` (AICc,
change-point penalty, plateau above n_max rejected, Akaike weights). Standard errors come from the Jacobian,
cov = s^2 (J^T J)^{-1} with s^2 = RSS/(n - p) (as ``curve_fit(absolute_sigma=False)``). When no model can be fitted
(fewer than :data:`MIN_MODEL_POINTS` points, fits at the curvature bound, singular Jacobian) the initial slope of the
early low-conversion window is fitted instead (``model='initial_slope'``); with fewer than three usable points the
result is ``model='none'``. Before fitting, :mod:`catalog.core.trace_shape` cuts a leak after the maximum and
measures a slow start.

:mod:`catalog.core.batch` runs the same fits vectorised over many trials; normalisation, the shape checks, model
choice, fallback, derived quantities and residual diagnostics work on padded 2-D arrays and are shared by both, so
that only the fitting cores differ and can be checked against each other.
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
#: dimensionless curvature kappa = k t_max (first) or b t_max (second): zero, then 4 points a decade to 1e3
CURVATURE_GRID = np.concatenate(([0.0], np.geomspace(1e-2, 1e3, 21)))
CURVATURE_MAX = float(CURVATURE_GRID[-1])
#: a curvature below this (in units of 1/t_max) cannot be told from a straight line: it is reported as zero
CURVATURE_LINE = 1e-8
#: RSS floor per point in normalised units: a fit closer than 1e-12 of the trace's range counts as exact
RSS_FLOOR = 1e-24
#: What the selection criterion charges for the breakpoint of the broken zero-order line (see catalog.core.selection)
CHANGE_POINT_PENALTY = 3
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
    r0, r0_se : initial rate of product formation dP/dt(0), mol/s, and its standard error including the spread of
        the competing candidates (Akaike-weighted, catalog.core.selection).
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
    aic : model -> best AICc of that rate law's candidates (RSS in mol^2); NaN where none survived.
    n_points : finite points with t >= 0 that were used.
    late_residual_z : mean residual (data - model) of the last ceil(n/3) points over its standard error
        s/sqrt(n_late); negative when the trace falls below the model late (deactivation).
    runs_z : Wald-Wolfowitz runs-test z of the residual signs (zero counts as positive); strongly negative means
        long runs, i.e. systematic misfit.
    plateau_fixed : the chosen fit holds the plateau at n_max (first or second order).
    model_weight : Akaike weight of the chosen fit among the candidates (1 = no competitor).
    leak_cut : readings after the trace's maximum that were left out because the product fell (a leak or drift:
        product cannot decrease); 0 when none.
    max_rate, induction_z : largest local slope of the trace, mol/s, and its excess over the first window's slope
        in standard errors (large when the trace starts slowly: an induction period).
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
    plateau_fixed: bool
    model_weight: float
    leak_cut: int
    max_rate: float
    induction_z: float


SCALAR_FIELDS = tuple(f for f in TraceFit.__dataclass_fields__ if f != "aic")


@dataclass(frozen=True)
class ModelFit:
    """One model fitted to m trials in normalised units (u = t/t_max, y = (P - c)/s); arrays of length m.

    ``theta`` is the curvature: tau in units of t_max for zero order (inf for the straight line), kappa for first
    and second order. ``cov`` (m, 3, 3) is the covariance of (alpha, rho, theta), zero in the rows of parameters
    held fixed; ``n_params`` counts the fitted parameters (residual dof = n - n_params) and ``n_penalty`` what the
    selection criterion charges for them (a change point counts more than one ordinary parameter).
    """

    alpha: np.ndarray
    rho: np.ndarray
    theta: np.ndarray
    rss: np.ndarray
    cov: np.ndarray
    n_params: np.ndarray
    n_penalty: np.ndarray
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
        # only the derivatives asked for: g**3 costs more than the basis itself
        return (g,) + ((-g * g,) if derivatives >= 1 else ()) + ((2.0 * g**3,) if derivatives >= 2 else ())
    x = kappa * u
    small = np.abs(x) < _SERIES_BELOW
    xs = np.where(small, 1.0, x)  # placeholder where the series takes over
    # in place: these arrays are the fits' hottest temporaries
    neg = np.negative(xs, out=np.empty(x.shape))  # out=: arrays even for 0-d input, so the updates stay in place
    phi0 = np.expm1(neg, out=np.empty(x.shape))
    np.negative(phi0, out=phi0)
    phi0 /= xs
    phis = [phi0]
    if derivatives >= 1:
        em = np.exp(neg, out=neg)
        phi1 = np.subtract(em, phi0, out=np.empty(x.shape))
        phi1 /= xs
        phis.append(phi1)
    if derivatives >= 2:
        phi2 = np.multiply(2.0, phi1, out=np.empty(x.shape))
        phi2 += em
        np.negative(phi2, out=phi2)
        phi2 /= xs
        phis.append(phi2)
    if small.any():
        xsmall = x[small]
        for phi, coef in zip(phis, (_PHI1, _PHI1_D1, _PHI1_D2), strict=False):
            phi[small] = np.polynomial.polynomial.polyval(xsmall, coef)
    phi0 *= u
    if derivatives >= 1:
        phi1 *= u * u
    if derivatives >= 2:
        phi2 *= u**3
    return tuple(phis)


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


def embed_cov(cov_sub, free) -> np.ndarray:
    """(m, q, q) covariance of the free parameters among (alpha, rho, theta) as (m, 3, 3), zero where fixed."""
    free = np.flatnonzero(np.asarray(free, bool))
    cov = np.zeros((cov_sub.shape[0], 3, 3))
    cov[:, free[:, None], free[None, :]] = cov_sub
    return cov


def linear_fit(n, sg, sgg, sy, sgy, offset: bool = True):
    """Closed-form least squares y = alpha + rho g from sums (alpha = 0 without offset); returns alpha, rho, det.

    ``det`` is n Sgg - Sg^2 with an offset and Sgg without; the fit is defined where det > 0.
    """
    if not offset:
        return np.zeros_like(np.asarray(sgg, dtype=float)), sgy / sgg, np.asarray(sgg, dtype=float)
    det = n * sgg - sg * sg
    rho = (n * sgy - sg * sy) / det
    alpha = (sy - rho * sg) / np.where(n > 0, n, 1.0)
    return alpha, rho, det


def normalise(T, Y, W, offset: bool = True):
    """Scale padded traces to u = t/t_max in [0, 1] and y = (P - c)/s of unit range, zero at padding.

    Returns U, Yn, c, s, t_max (c, s in the units of Y; s = 1 for a constant trace; c = 0 without an offset term,
    so the model still passes through the origin). Dividing by max|P| first keeps the range finite for any finite
    input.
    """
    n = W.sum(axis=1)
    tmax = np.max(np.where(W, T, 0.0), axis=1, initial=0.0)
    U = np.where(W, T / np.where(tmax > 0, tmax, 1.0)[:, None], 0.0)
    big = np.max(np.where(W, np.abs(Y), 0.0), axis=1, initial=0.0)
    big = np.where(big > 0, big, 1.0)
    X = np.where(W, Y / big[:, None], 0.0)
    c = X.sum(axis=1) / np.maximum(n, 1) if offset else np.zeros(len(n))
    s = (np.max(np.where(W, X, -np.inf), axis=1, initial=-np.inf)
         - np.min(np.where(W, X, np.inf), axis=1, initial=np.inf))
    s = np.where(np.isfinite(s) & (s > 0), s, 1.0)
    Yn = np.where(W, (X - c[:, None]) / s[:, None], 0.0)
    return U, Yn, c * big, s * big, tmax


def model_eligible(U, W, n, tmax) -> np.ndarray:
    """Trials with enough points and at least three distinct times for the three-parameter models."""
    distinct = 1 + ((np.diff(U, axis=1) > 0) & W[:, 1:]).sum(axis=1)
    return (n >= MIN_MODEL_POINTS) & (distinct >= 3) & (tmax > 0)


# ---------------------------------------------------------------------------------------------------------------
# The reference fitting cores: one trial, plain loops and scipy


def _lstsq(g, y, offset=True):
    """Least squares y = alpha + rho g (alpha = 0 without offset); returns alpha, rho, rss (from the residuals)."""
    A = np.column_stack((np.ones_like(g), g)) if offset else g[:, None]
    coef, *_ = np.linalg.lstsq(A, y, rcond=None)
    alpha, rho = (coef[0], coef[1]) if offset else (0.0, coef[0])
    r = y - alpha - rho * g
    sgg = float(g @ g)
    det = len(g) * sgg - float(g.sum()) ** 2 if offset else sgg
    # the same singular-design rule as catalog.core.batch: g constant over the readings has no fit
    good = det > 1e-13 * max(len(g) * sgg, 1e-300)
    return alpha, rho, float(r @ r) if good else np.inf


def _finish_fit(alpha, rho, theta, rss, jac, free, ok, n_penalty=None):
    """Pack one trial's fit with its Jacobian covariance over the ``free`` columns of (alpha, rho, theta)."""
    n = jac.shape[0]
    free = np.asarray(free, bool)
    p = int(free.sum())
    cols = jac[:, free]
    cov = embed_cov(covariance((cols.T @ cols)[None], np.array([rss / (n - p)])), free)
    ok = bool(ok and np.isfinite(cov[0, 1, 1]) and np.isfinite(rho) and np.isfinite(rss))
    return ModelFit(*(np.array([v]) for v in (alpha, rho, theta, rss)), cov, np.array([float(p)]),
                    np.array([float(p if n_penalty is None else n_penalty)]), np.array([ok]))


def _fit_zero(u, y, offset=True) -> dict:
    """Exact zero-order fits: the straight line, and the broken line with tau in [u_2, u_{n-2}] (Hudson's
    enumeration); both are returned as candidates ('zero', 'zero_break')."""
    n = len(u)
    best_rss, best_tau = np.inf, np.nan
    for j in range(2, n - 1):  # tau on a data time
        _, _, rss = _lstsq(np.minimum(u, u[j]), y, offset)
        if rss < best_rss:
            best_rss, best_tau = rss, u[j]
    for j in range(2, n - 2):  # tau strictly inside (u_j, u_{j+1}): rising line and plateau mean decouple
        if u[j] == u[0]:  # all rising points at one time: no line through them
            continue
        a_r, r_r, rss_r = _lstsq(u[: j + 1], y[: j + 1], offset)
        plateau = y[j + 1 :]
        rss = rss_r + float(((plateau - plateau.mean()) ** 2).sum())
        if r_r != 0 and u[j] <= (plateau.mean() - a_r) / r_r <= u[j + 1] and rss < best_rss:
            best_rss, best_tau = rss, (plateau.mean() - a_r) / r_r
    a_l, r_l, rss_l = _lstsq(u, y, offset)
    free = np.array([offset, True, False])
    out = {"zero": _finish_fit(a_l, r_l, np.inf, rss_l, np.column_stack((np.ones(n), u, np.zeros(n))), free, True)}
    if np.isfinite(best_tau):
        g = np.minimum(u, best_tau)
        a_b, r_b, rss_b = _lstsq(g, y, offset)
        free = np.array([offset, True, True])
        jac = np.column_stack((np.ones(n), g, r_b * (u > best_tau)))
        out["zero_break"] = _finish_fit(a_b, r_b, best_tau, rss_b, jac, free, True,
                                        n_penalty=free.sum() - 1 + CHANGE_POINT_PENALTY)
    return out


def _fit_curved(model: str, u, y, offset=True) -> ModelFit:
    """First- or second-order fit: profile grid over kappa, then least_squares in the best grid point's cells."""
    n = len(u)
    grid = [_lstsq(curvature_basis(model, kappa, u)[0], y, offset) for kappa in CURVATURE_GRID]
    i = int(np.argmin([g[2] for g in grid]))
    lo, hi = CURVATURE_GRID[max(i - 1, 0)], CURVATURE_GRID[min(i + 1, len(CURVATURE_GRID) - 1)]
    free = np.array([offset, True, True])

    def residuals(p):
        p = np.r_[0.0, p] if not offset else p
        return p[0] + p[1] * curvature_basis(model, p[2], u)[0] - y

    def jacobian(p):
        p = np.r_[0.0, p] if not offset else p
        g, d = curvature_basis(model, p[2], u, 1)
        return np.column_stack((np.ones(n), g, p[1] * d))[:, free]

    x0 = np.array([grid[i][0], grid[i][1], CURVATURE_GRID[i]])[free]
    bounds = (np.array([-np.inf, -np.inf, lo])[free], np.array([np.inf, np.inf, hi])[free])
    try:
        sol = least_squares(residuals, x0, jac=jacobian, bounds=bounds, method="trf", x_scale="jac", ftol=1e-15,
                            xtol=1e-15, gtol=1e-15, max_nfev=1000)
        kappa = float(sol.x[-1])
    except (ValueError, np.linalg.LinAlgError):
        kappa = np.nan
    if not np.isfinite(kappa):
        return _finish_fit(np.nan, np.nan, np.nan, np.nan, np.full((n, 3), np.nan), free, False)
    kappa = 0.0 if kappa < CURVATURE_LINE else kappa
    g, d = curvature_basis(model, kappa, u, 1)
    alpha, rho, rss = _lstsq(g, y, offset)
    at_bound = kappa >= CURVATURE_MAX * (1 - 1e-9)
    return _finish_fit(alpha, rho, kappa, rss, np.column_stack((np.ones(n), g, rho * d)), free, not at_bound)


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


def fit_trace(t, amount, n_max: float = float("nan"), models=MODELS, offset: bool = True) -> TraceFit:
    """Fit the integrated rate laws to one trace and return the AICc-best candidate (see the module docstring).

    Parameters
    ----------
    t : array of times, s (any order; points with non-finite values or t < 0 are left out).
    amount : array of product amounts, mol.
    n_max : stoichiometric maximum product amount, mol (NaN if unknown). When known, first- and second-order
        fits with the plateau fixed at n_max compete too, and fits whose plateau exceeds it are rejected.
    models : subset of ('zero', 'first', 'second') to try.
    offset : fit the start offset ``a`` (default); False forces the curve through the origin, P = r0 g(t).
    """
    # deferred: catalog.core.selection builds on this module's building blocks
    from catalog.core import plateau_fit, trace_shape
    from catalog.core.selection import summarise

    models = check_models(models)
    t, y = _clean(t, amount)
    n = t.size
    L = max(n, 1)
    T, Yr, W = np.zeros((1, L)), np.zeros((1, L)), np.zeros((1, L), dtype=bool)
    T[0, :n], Yr[0, :n], W[0, :n] = t, y, True
    n_max_a = np.array([n_max], dtype=float)
    with np.errstate(all="ignore"):
        W, cut = trace_shape.leak_cut(T, Yr, W)
        max_rate, induction_z = trace_shape.induction(T, Yr, W)
        U, Yn, c, s, tmax = normalise(T, Yr, W, offset)
        fits = {}
        k = int(W.sum())
        u, yn = U[0, :k], Yn[0, :k]
        if model_eligible(U, W, W.sum(1), tmax)[0]:
            for model in models:
                if model == "zero":
                    fits |= _fit_zero(u, yn, offset)
                    continue
                fits[model] = _fit_curved(model, u, yn, offset)
                if np.isfinite(n_max) and n_max > 0:
                    fits[f"{model}_full"] = plateau_fit.fit_full(model, u, yn, n_max / s[0], offset)
        out = summarise(U, Yn, W, c, s, tmax, fits, models, n_max_a, offset)
    out |= {"leak_cut": cut, "max_rate": max_rate, "induction_z": induction_z}
    scalars = {name: out[name][0] for name in SCALAR_FIELDS}
    ints = ("n_points", "leak_cut")
    scalars = {k: (v if isinstance(v, str) else (int(v) if k in ints else (bool(v) if k == "plateau_fixed"
               else float(v)))) for k, v in scalars.items()}
    return TraceFit(aic={mo: float(out[f"aic_{mo}"][0]) for mo in models}, **scalars)


def curve_theta(code, r0, k, plateau) -> np.ndarray:
    """Physical curvature of each fit from its reported fields: tau = P_inf/r0, k, or b = r0/P_inf."""
    code, r0, k, plateau = np.broadcast_arrays(np.asarray(code),
                                               *(np.asarray(v, dtype=float) for v in (r0, k, plateau)))
    return np.select([code == 0, code == 1, code == 2], [plateau / r0, k, r0 / plateau], np.nan)


def model_curve(fit: TraceFit, t) -> np.ndarray:
    """Fitted amounts (offset included), mol, at times t: a + r0 g(t) of the chosen model (NaN for 'none')."""
    code = CODES[fit.model]
    with np.errstate(all="ignore"):
        theta = curve_theta(code, fit.r0, fit.k, fit.plateau)
        return fit.offset + fit.r0 * shape(code, np.asarray(t, dtype=float), theta)
