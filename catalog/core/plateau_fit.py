r"""First- and second-order fits with the plateau fixed at the stoichiometric maximum n_max.

When the charge is known, the product a complete reaction makes is n_max = (limiting amount) x (product ratio), and

.. math::
    \text{first:}\quad P = a + n_\max\left(1 - e^{-k t}\right),\qquad
    \text{second:}\quad P = a + n_\max \frac{b t}{1 + b t},\qquad r_0 = n_\max k \;\text{or}\; n_\max b

leave one nonlinear parameter and at most one linear one. At low conversion (a few per cent) the free-plateau fits
cannot tell curvature from noise, so their r0 is poorly determined or biased; holding the plateau at n_max fixes
the curvature from the charge. In normalised units (u = t/t_max, y = (P - c)/s, m = n_max/s, kappa = k t_max or
b t_max) the model is y = alpha + m h(u; kappa) with h = kappa g(u; kappa), so rho = m kappa and the fit packs into
the (alpha, rho, theta) layout of :class:`catalog.core.rate_laws.ModelFit` with

.. math:: \operatorname{cov}(\alpha, \rho, \theta) = A\,C\,A^T,\quad
          A = \begin{pmatrix}1 & 0\\ 0 & m\\ 0 & 1\end{pmatrix},\quad C = s^2 (J^T J)^{-1},\quad
          J = \left[1,\; m\,(g + \kappa g')\right]

(the offset column dropped when the offset is not fitted). The profile RSS(kappa) is scanned on
:data:`FULL_GRID` (down to 1e-6, for blanks that convert a fraction of a per cent) and refined inside the two cells
around the best grid point: by ``scipy.optimize.minimize_scalar`` in the reference (:func:`fit_full`, which alone
imports scipy.optimize), by vectorised safeguarded Newton on dRSS/dkappa in the batch path (:func:`fit_full_batch`),
started at the vertex of the grid parabola (:func:`parabolic_start`) and run by :func:`bracketed_newton`, which
the free-plateau fits of :mod:`catalog.core.batch` share.
"""

from __future__ import annotations

import numpy as np

from catalog.core.rate_laws import CURVATURE_MAX, ModelFit, covariance, curvature_basis

__all__ = ["FULL_GRID", "STEP_TOL", "bracketed_newton", "parabolic_start", "fit_full", "fit_full_batch", "profile_rss"]

#: dimensionless curvature grid of the fixed-plateau fits: 2 points a decade from 1e-6 to 1e3 (the profile is
#: smooth and unimodal in log kappa; the refinement brackets the best point by its neighbours)
FULL_GRID = np.geomspace(1e-6, 1e3, 19)
_NEWTON_STEPS = 40
#: a row stops once its step (Newton or bisection) is this small relative to kappa
STEP_TOL = 1e-7
#: Newton on dRSS/dkappa converges quadratically, so a Newton step of relative size s leaves an error of order s^2:
#: a row whose Newton step is below this is taken to its root without evaluating the terms again (measured at
#: 10^4 trials: a third fewer evaluations; r0 moves by <= 2e-10 relative, its SE by <= 1e-7, no model choice)
NEWTON_TOL = 1e-5


def _h(model, kappa, U):
    g, d = curvature_basis(model, kappa, U, 1)
    return kappa * g, g + kappa * d


def _pack(model, kappa, U, Y, W, n, m, offset, ok) -> ModelFit:
    """Linear offset, RSS and covariance at the found kappa, in the ModelFit layout (rows of length len(n))."""
    kap = kappa[:, None]
    h, dh = _h(model, kap, U)
    h, dh = np.where(W, h, 0.0), np.where(W, dh, 0.0)
    z = np.where(W, Y - m[:, None] * h, 0.0)
    alpha = z.sum(1) / np.maximum(n, 1) if offset else np.zeros(len(n))
    r = np.where(W, z - alpha[:, None], 0.0)
    rss = (r * r).sum(1)
    jk = m[:, None] * dh
    p = 2 if offset else 1
    if offset:
        jtj = np.stack([np.stack([n, jk.sum(1)], -1), np.stack([jk.sum(1), (jk * jk).sum(1)], -1)], -2)
    else:
        jtj = (jk * jk).sum(1)[:, None, None]
    c = covariance(jtj, rss / (n - p))
    a = np.zeros((len(n), 3, p))
    if offset:
        a[:, 0, 0] = 1.0
    a[:, 1, -1] = m
    a[:, 2, -1] = 1.0
    cov = np.einsum("mij,mjk,mlk->mil", a, c, a)
    ok = ok & np.isfinite(cov[:, 1, 1]) & np.isfinite(rss) & (kappa < CURVATURE_MAX * (1 - 1e-9))
    return ModelFit(alpha, m * kappa, kappa, rss, cov, np.full(len(n), float(p)), np.full(len(n), float(p)), ok)


def profile_rss(model, kappa, U, Y, W, n, m, offset, g=None):
    """Profile RSS at one scalar kappa per row (inf where not finite); ``g``: the basis at kappa, if already known."""
    # U and Y are zero off the readings (padding, cut points) and so is g(0) = 0: only the centring needs the mask.
    z = curvature_basis(model, kappa, U)[0] if g is None else g * kappa
    if g is None:
        z *= kappa
    z *= m[:, None]
    np.subtract(Y, z, out=z)
    if offset:
        z -= (z.sum(1) / np.maximum(n, 1))[:, None]
        z[~W] = 0.0
    z *= z
    rss = z.sum(1)
    return np.where(np.isfinite(rss) & (rss >= 0), rss, np.inf)


def fit_full(model: str, u, y, m: float, offset: bool = True) -> ModelFit:
    """Reference fixed-plateau fit of one normalised trace (u, y), plateau m in units of y."""
    # deferred: the batch path never needs scipy.optimize (0.3 s to import)
    from scipy.optimize import minimize_scalar

    U, Y, W = u[None, :], y[None, :], np.ones((1, len(u)), bool)
    n, mm = np.array([float(len(u))]), np.array([float(m)])
    grid = [float(profile_rss(model, k, U, Y, W, n, mm, offset)[0]) for k in FULL_GRID]
    i = int(np.argmin(grid))
    lo, hi = FULL_GRID[max(i - 1, 0)], FULL_GRID[min(i + 1, FULL_GRID.size - 1)]
    sol = minimize_scalar(lambda k: float(profile_rss(model, k, U, Y, W, n, mm, offset)[0]), bounds=(lo, hi),
                          method="bounded", options={"xatol": 1e-13 * hi, "maxiter": 500})
    kappa = float(sol.x) if np.isfinite(sol.fun) else np.nan
    return _pack(model, np.array([kappa]), U, Y, W, n, mm, offset, np.array([np.isfinite(kappa)]))


def _newton_terms(model, kappa, U, Y, n, m, offset):
    """phi = dRSS/dkappa and phi' at per-row kappa (alpha profiled out; h' = g + kappa g', h'' = 2 g' + kappa g'').

    .. math:: \\phi = -2 m\\, h'^T r,\\qquad \\phi' = 2 m^2\\, \\lVert h' - \\bar{h'}\\rVert^2 - 2 m\\, h''^T r

    from sums over the row: with z = y - m h (zero off the readings, like h' and h''), r = z - z-bar on the
    readings, so h'^T r = h'^T z - z-bar sum h' and the centred norm is sum h'^2 - (sum h')^2 / n.
    """
    kap = kappa[:, None]
    # zero off the readings without a mask: U = Y = 0 there, g(0) and its derivatives vanish, kappa and m are finite
    g, d, e = curvature_basis(model, kap, U, 2)
    z = kap * g
    z *= m[:, None]
    np.subtract(Y, z, out=z)
    ddh = np.multiply(kap, e, out=e)
    ddh += 2 * d
    dh = np.multiply(kap, d, out=d)
    dh += g
    dz, ddz, dd = np.einsum("ij,ij->i", dh, z), np.einsum("ij,ij->i", ddh, z), np.einsum("ij,ij->i", dh, dh)
    if offset:
        nn = np.maximum(n, 1)
        zbar, sdh = z.sum(1) / nn, dh.sum(1)
        dz -= zbar * sdh
        ddz -= zbar * ddh.sum(1)
        dd -= sdh * sdh / nn
    return -2 * m * dz, 2 * m * m * dd - 2 * m * ddz


def bracketed_newton(terms, x, phi, dphi, lo, hi, done, rows, steps, converged, bisect):
    """Safeguarded Newton on phi(x) = 0, row by row, inside each row's bracket [lo, hi] (updated in place with x).

    ``terms(x, *rows)`` gives (phi, phi') at per-row x for the row arrays ``rows`` (2-D, one row per trial);
    ``converged(x_new, x_old)`` ends a row, ``bisect(lo, hi)`` is the fallback step whenever a Newton step leaves
    the bracket or phi' <= 0; a row also ends on a Newton step below :data:`NEWTON_TOL` relative (quadratic
    convergence leaves ~NEWTON_TOL^2 after it). A row is evaluated only while it needs another step, and the row
    arrays are compacted to the rows still running only when half of them have finished, so the iterations neither
    copy the arrays on every step nor evaluate many finished rows.
    """
    work, sub = np.flatnonzero(~done), [a[~done] for a in rows]
    for _ in range(steps):
        act = np.flatnonzero(~done)
        if act.size == 0:
            break
        xa, la, ha = x[act], lo[act], hi[act]
        step = xa - phi[act] / dphi[act]
        good = (dphi[act] > 0) & (step > la) & (step < ha)
        # a Newton step that would not move the row is its root, even on the bracket's end (phi rounded to 0 or
        # just past it): taken, not replaced by a bisection that would leave the root
        still = (dphi[act] > 0) & converged(step, xa)
        xn = np.where(good, step, np.where(still, np.clip(step, la, ha), bisect(la, ha)))
        done[act] = converged(xn, xa) | (good & (np.abs(xn - xa) <= NEWTON_TOL * np.abs(xa)))
        x[act] = xn
        act = act[~done[act]]
        if act.size == 0:
            break
        if 2 * act.size <= work.size:
            sub = [a[act] for a in rows]
            work = act
        # the finished rows still in the working set are evaluated at their final x; their terms are discarded
        p, dp = terms(x[work], *sub)
        running = ~done[work]
        phi[act], dphi[act] = p[running], dp[running]
        below = phi[act] < 0
        lo[act] = np.where(below, x[act], lo[act])
        hi[act] = np.where(below, hi[act], x[act])
    return x


def parabolic_start(grid, i, kappas):
    """Per-row start for Newton: the vertex, in log kappa, of the parabola through the best grid point i and its two
    neighbours, kept inside their cells; the grid point itself at the grid's ends, next to kappa = 0 or where the
    three values are not finite and convex. (About twice as close as the grid point: one Newton step fewer.)
    """
    rows = np.arange(len(i))
    last = kappas.size - 1
    im, ip = np.clip(i - 1, 0, last), np.clip(i + 1, 0, last)
    usable = (i > 0) & (i < last) & (kappas[im] > 0)
    a, b, c = (np.log(np.where(usable, kappas[j], 1.0)) for j in (im, i, ip))
    fa, fb, fc = grid[rows, im], grid[rows, i], grid[rows, ip]
    num = (b - a) ** 2 * (fb - fc) - (b - c) ** 2 * (fb - fa)
    den = (b - a) * (fb - fc) - (b - c) * (fb - fa)
    usable &= np.isfinite(fa) & np.isfinite(fb) & np.isfinite(fc) & (den < 0)
    step = np.where(usable, -0.5 * num / np.where(usable, den, 1.0), 0.0)
    step = np.clip(step, 0.9 * (a - b), 0.9 * (c - b))
    return np.where(usable, np.exp(b + step), kappas[i])


def fit_full_batch(model: str, U, Y, W, n, m, offset: bool, eligible, grid=None) -> ModelFit:
    """Vectorised fixed-plateau fits of padded normalised rows; ``m`` is each row's plateau in units of y.

    The grid point of least RSS brackets the minimum between its neighbours; safeguarded Newton on
    phi = dRSS/dkappa (bisection whenever a step leaves the bracket or phi' <= 0), started at the vertex of the
    grid parabola, refines it to a relative step of :data:`STEP_TOL`. ``grid``: the (rows, FULL_GRID) profile RSS
    (as :func:`profile_rss` gives it), when the caller has scanned it already.
    """
    if grid is None:
        grid = np.stack([profile_rss(model, k, U, Y, W, n, m, offset) for k in FULL_GRID], 1)
    i = np.argmin(grid, axis=1)
    last = FULL_GRID.size - 1
    lo, hi = FULL_GRID[np.maximum(i - 1, 0)], FULL_GRID[np.minimum(i + 1, last)]
    x = parabolic_start(grid, i, FULL_GRID)
    ok = eligible & np.isfinite(m) & (m > 0) & np.isfinite(grid.min(axis=1))
    mm = np.where(ok, m, 1.0)
    phi, dphi = _newton_terms(model, x, U, Y, n, mm, offset)
    lo = np.where(phi < 0, x, lo)
    hi = np.where(phi < 0, hi, x)
    done = ~ok | (phi == 0) | ((i == 0) & (phi > 0)) | ((i == last) & (phi < 0))

    def terms(xk, Uk, Yk, nk, mk):
        return _newton_terms(model, xk, Uk, Yk, nk, mk, offset)

    # geometric bisection: the grid is geometric
    x = bracketed_newton(terms, x, phi, dphi, lo, hi, done, (U, Y, n, mm), _NEWTON_STEPS,
                         lambda xn, xa: np.abs(xn - xa) <= STEP_TOL * xa, lambda la, ha: np.sqrt(la * ha))
    return _pack(model, np.where(ok, x, 1.0), U, Y, W, n, mm, offset, ok)
