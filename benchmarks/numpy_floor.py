"""The floor for a cold analysis: plain numpy fits of zero-, first- and second-order rate laws with standard errors.

Every trace is fitted at once in blocks that stay in cache-sized memory; nothing is stored, no figure beyond the
initial rate is derived. The models, for a trace :math:`y(t)` with offset :math:`c`:

.. math::

    y = c + r t, \\qquad y = c + a\\,(1 - e^{-kt}), \\qquad y = c + a\\,\\frac{kt}{1 + kt}

The linear one is closed form; the other two start from a closed-form :math:`k` (with :math:`z = y - y_0`, the
first-order law integrates to :math:`z = k a t - k \\int_0^t z`, the second-order one rearranges to
:math:`z = k a t - k t z`, both linear least squares in :math:`(ka, k)`), then four Gauss-Newton steps on
:math:`(c, a, k)` with :math:`a, c` re-projected at each :math:`k` (variable projection). Standard errors come from
:math:`s^2 (J^T J)^{-1}`; the model with the lowest AIC, :math:`n \\ln(\\mathrm{RSS}/n) + 2p`, gives the initial
rate :math:`r_0 = r` or :math:`a k`.
"""

from __future__ import annotations

import numpy as np

#: Trials per block: 2000 × 200 points keeps each temporary near 3 MB, inside a core's cache.
BLOCK = 2000
#: Bounds on k t_end: outside them a trace shows no curvature (linear) or only a step (plateau).
KAPPA_RANGE = (0.01, 100.0)
MODELS = ("zero", "first", "second")


def _basis(model: str, kt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Shape f(kt) of the rise and its derivative df/d(kt)."""
    if model == "first":
        e = np.exp(-kt)
        return 1.0 - e, e
    return kt / (1.0 + kt), 1.0 / (1.0 + kt) ** 2


def _line(f: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Least-squares y = c + a f along the last axis: (a, c, rss)."""
    fm, ym = f.mean(-1, keepdims=True), y.mean(-1, keepdims=True)
    df, dy = f - fm, y - ym
    sff, sfy = (df * df).sum(-1), (df * dy).sum(-1)
    a = sfy / np.where(sff > 0, sff, np.nan)
    return a, ym[..., 0] - a * fm[..., 0], (dy * dy).sum(-1) - a * sfy


def _normal(f: np.ndarray, dk: np.ndarray) -> tuple[np.ndarray, tuple[np.ndarray, ...]]:
    """J^T J per row for the Jacobian columns (1, f, dy/dk), summed directly (a batched matmul of 3x3 is slower)."""
    jac = (np.ones_like(f), f, dk)
    normal = np.empty((len(f), 3, 3))
    for i in range(3):
        for j in range(i, 3):
            normal[:, i, j] = normal[:, j, i] = (jac[i] * jac[j]).sum(1) if i else jac[j].sum(1)
    return normal, jac


def _nonlinear(model: str, t: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Initial rate, its standard error and the RSS of one saturating model for every row of (t, y)."""
    n = t.shape[1]
    z = y - y[:, :1]
    if model == "first":
        other = np.concatenate([np.zeros((len(t), 1)), np.cumsum(np.diff(t) * (z[:, 1:] + z[:, :-1]) / 2, 1)], 1)
    else:
        other = t * z
    # Two-column least squares z = p t - k other, by its 2x2 normal equations.
    stt, soo, sto = (t * t).sum(1), (other * other).sum(1), (t * other).sum(1)
    szt, szo = (z * t).sum(1), (z * other).sum(1)
    k = -(stt * szo - sto * szt) / (stt * soo - sto**2)
    low, high = (bound / t[:, -1] for bound in KAPPA_RANGE)
    k = np.clip(np.where(np.isfinite(k), k, low), low, high)
    for _ in range(4):
        f, dfdx = _basis(model, k[:, None] * t)
        a, c, _ = _line(f, y)
        resid = y - c[:, None] - a[:, None] * f
        normal, jac = _normal(f, a[:, None] * t * dfdx)
        rhs = np.stack([(j * resid).sum(1) for j in jac], axis=-1)
        step = np.linalg.solve(normal, rhs[..., None])[..., 0]
        k = np.clip(np.clip(k + step[:, 2], k / 4, k * 4), low, high)
    f, dfdx = _basis(model, k[:, None] * t)
    a, c, rss = _line(f, y)
    cov = np.linalg.inv(_normal(f, a[:, None] * t * dfdx)[0]) * (rss / (n - 3))[:, None, None]
    # r0 = a k; its variance from the (a, k) block of the covariance by the delta method.
    var = k**2 * cov[:, 1, 1] + a**2 * cov[:, 2, 2] + 2 * a * k * cov[:, 1, 2]
    return a * k, np.sqrt(np.maximum(var, 0.0)), rss


def fit_floor(t: np.ndarray, y: np.ndarray) -> dict[str, np.ndarray]:
    """Fit every trace (rows of ``t`` and ``y``, shape (trials, points)); return r0, r0_se and the chosen model."""
    r0, se, model = (np.empty(len(t)) for _ in range(3))
    with np.errstate(all="ignore"):
        for start in range(0, len(t), BLOCK):
            tb, yb = t[start:start + BLOCK], y[start:start + BLOCK]
            n = tb.shape[1]
            slope, _, rss0 = _line(tb, yb)
            se0 = np.sqrt(rss0 / (n - 2) / ((tb - tb.mean(1, keepdims=True)) ** 2).sum(1))
            fits = [(slope, se0, rss0, 2), *((*_nonlinear(m, tb, yb), 3) for m in MODELS[1:])]
            aic = np.stack([n * np.log(np.maximum(rss, 1e-300) / n) + 2 * p for _, _, rss, p in fits])
            best = np.nanargmin(np.where(np.isfinite(aic), aic, np.inf), axis=0)
            rows = np.arange(len(tb))
            r0[start:start + BLOCK] = np.stack([f[0] for f in fits])[best, rows]
            se[start:start + BLOCK] = np.stack([f[1] for f in fits])[best, rows]
            model[start:start + BLOCK] = best
    return {"r0": r0, "r0_se": se, "model": model.astype(int)}
