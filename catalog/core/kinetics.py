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

import numpy as np
from scipy.optimize import least_squares

from catalog.core.rate_laws import (
    CHANGE_POINT_PENALTY,
    CURVATURE_GRID,
    CURVATURE_LINE,
    CURVATURE_MAX,
    MODELS,
    SCALAR_FIELDS,
    ModelFit,
    TraceFit,
    check_models,
    covariance,
    curvature_basis,
    embed_cov,
    model_eligible,
    normalise,
)

__all__ = ["fit_trace"]

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
