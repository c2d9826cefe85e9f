"""The three integrated rate laws, shared by the reference fits (:mod:`catalog.core.kinetics`) and the vectorised
ones (:mod:`catalog.core.batch`): model codes, the curvature basis and its derivatives, result containers, the
normalisation, the linear algebra of a separable fit, and the fitted curve.

.. math::
    \\text{zero:}\\quad P = a + r_0 \\min(t, \\tau), \\qquad
    \\text{first:}\\quad P = a + \\frac{r_0}{k}(1 - e^{-k t}), \\qquad
    \\text{second:}\\quad P = a + \\frac{r_0 t}{1 + b t}
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["CODES", "MODELS", "ModelFit", "TraceFit", "curvature_basis", "model_curve"]

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

    One kappa > 0 for every u (the grid scans) without derivatives takes g_1 = -expm1(-kappa u) / kappa directly:
    expm1 is exact to rounding for every kappa u, so only the derivatives need the series, and the direct form
    makes three passes over u instead of a dozen.
    """
    if derivatives == 0 and model == "first" and np.ndim(kappa) == 0 and kappa > 0:
        g = np.multiply(u, -float(kappa), dtype=float)
        np.expm1(g, out=g)
        g /= -float(kappa)
        return (g,)
    kappa, u = np.broadcast_arrays(np.asarray(kappa, dtype=float), np.asarray(u, dtype=float))
    if model == "second":
        g = u / (1.0 + kappa * u)
        if derivatives == 0:
            return (g,)
        # products, not powers: np.power with exponent 3 costs more than the basis itself
        gg = g * g
        return (g, np.negative(gg)) + ((np.multiply(2.0 * g, gg),) if derivatives >= 2 else ())
    x = kappa * u
    phis = _phi(x, u, derivatives)
    phis[0] *= u
    if derivatives >= 1:
        uu = u * u
        phis[1] *= uu
    if derivatives >= 2:
        phis[2] *= uu
        phis[2] *= u
    return tuple(phis)


def _horner(x, coef):
    """Power series sum coef[i] x^i by Horner's rule, in place (the operations of numpy's polyval)."""
    out = np.full(x.shape, coef[-1])
    for c in coef[-2::-1]:
        out *= x
        out += c
    return out


def _phi(x, u, derivatives):
    """phi(x), phi'(x), phi''(x) of curvature_basis: closed forms, the series where they cancel.

    Where every x is small (small kappa, e.g. the low end of the curvature grids) the series alone is summed. Else
    the series is needed only where x is small and u is not zero: at u = 0 (the first reading, padding) the basis
    is phi u^(k+1) = 0 whatever phi is, so the closed form's placeholder value there drops out exactly.
    """
    coefs = (_PHI1, _PHI1_D1, _PHI1_D2)[: derivatives + 1]
    small = np.abs(x) < _SERIES_BELOW
    if small.all():
        return [_horner(x, c) for c in coefs]
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
    small &= u != 0
    if small.any():
        xsmall = x[small]
        for phi, coef in zip(phis, coefs, strict=False):
            phi[small] = _horner(xsmall, coef)
    return phis


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
    r"""Batched s2 (J^T J)^{-1} for 1 to 3 parameters; NaN for a trial whose column-equilibrated J^T J has
    rcond < 1e-12.

    The equilibrated matrix A (unit diagonal) is inverted by its adjugate, A^{-1} = adj(A) / det(A), and its
    condition is the ratio of its extreme eigenvalues in absolute value (its singular values: A is symmetric).
    For three parameters, with the off-diagonal entries b, c, d, the eigenvalues of A - I solve the depressed cubic
    t^3 - (b^2 + c^2 + d^2) t - 2bcd = 0 (Smith, Commun. ACM 4, 168 (1961), from memory):

    .. math:: t_k = 2P\cos\left(\theta - \frac{2\pi k}{3}\right),\quad P = \sqrt{\frac{b^2+c^2+d^2}{3}},\quad
              \theta = \frac{1}{3}\arccos\frac{bcd}{P^3}

    Both are exact to rounding like the singular value decomposition they replace (an absolute error of about
    1e-16 in the smallest eigenvalue), at a fraction of its cost for small matrices.
    """
    jtj = np.asarray(jtj, dtype=float)
    p = jtj.shape[-1]
    if p > 3:
        raise ValueError(f"covariance handles at most 3 parameters, got {p}")
    diag = np.diagonal(jtj, axis1=-2, axis2=-1)
    good = np.isfinite(jtj).all(axis=(-2, -1)) & (diag > 0).all(axis=-1) & np.isfinite(s2)
    d = np.where(good[:, None], np.sqrt(np.abs(diag)), 1.0)
    a = np.where(good[:, None, None], jtj / (d[:, :, None] * d[:, None, :]), np.eye(p))
    with np.errstate(divide="ignore", invalid="ignore"):  # a singular row fails the rcond test below
        inv, eig = _adjugate_inverse(a)
    eig = np.abs(eig)
    good &= eig.min(axis=-1) > _RCOND * eig.max(axis=-1)
    cov = inv / (d[:, :, None] * d[:, None, :]) * np.asarray(s2, dtype=float)[:, None, None]
    cov[~good] = np.nan
    return cov


def _adjugate_inverse(a):
    """Inverse and eigenvalues of a batch of symmetric (m, p, p) matrices with unit diagonal, p <= 3."""
    p = a.shape[-1]
    if p == 1:
        return 1.0 / a, a[:, 0, :].copy()
    if p == 2:
        b = a[:, 0, 1]
        det = a[:, 0, 0] * a[:, 1, 1] - b * b
        inv = np.stack([np.stack([a[:, 1, 1], -b], -1), np.stack([-b, a[:, 0, 0]], -1)], -2) / det[:, None, None]
        return inv, np.stack([1.0 - np.abs(b), 1.0 + np.abs(b)], -1)
    a00, a11, a22 = a[:, 0, 0], a[:, 1, 1], a[:, 2, 2]
    b, c, d = a[:, 0, 1], a[:, 0, 2], a[:, 1, 2]
    c00, c01, c02 = a11 * a22 - d * d, c * d - b * a22, b * d - c * a11
    c11, c12, c22 = a00 * a22 - c * c, b * c - a00 * d, a00 * a11 - b * b
    det = a00 * c00 + b * c01 + c * c02
    inv = np.stack([np.stack([c00, c01, c02], -1), np.stack([c01, c11, c12], -1),
                    np.stack([c02, c12, c22], -1)], -2) / det[:, None, None]
    big = np.sqrt((b * b + c * c + d * d) / 3.0)
    cos3 = np.clip(b * c * d / np.where(big > 0, big**3, 1.0), -1.0, 1.0)
    theta = np.arccos(cos3) / 3.0
    # the diagonal is 1 to rounding; its mean carries that rounding into the eigenvalues
    mid = (a00 + a11 + a22) / 3.0
    eig = mid[:, None] + 2.0 * big[:, None] * np.cos(theta[:, None] - 2.0 * np.pi * np.arange(3) / 3.0)
    return inv, eig


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



def check_models(models) -> tuple:
    models = tuple(models)
    unknown = [m for m in models if m not in MODELS]
    if unknown or not models:
        raise ValueError(f"models must be a non-empty subset of {MODELS}, got {models}")
    return models


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
