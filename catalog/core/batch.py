r"""Campaign-scale rate extraction: the fits of :mod:`catalog.core.kinetics`, vectorised over thousands of trials.

Traces come long-form (one row per point, sorted by trial then time) and are padded, a chunk of trials at a time
(:data:`CHUNK_POINTS`, sized for the cache), to 2-D arrays (trials x points) with zeros after each trial's last
point; every basis g(u) vanishes at u = 0, so padding drops out of all sums. The chunks are independent and are
fitted on a few threads (:func:`fit_traces`, ``workers``), bit for bit as on one. For each model the inner linear least
squares in (a, r0) is closed form from per-trial sums, and the one nonlinear parameter is found without a per-trial
loop:

- first and second order: the profile RSS(kappa) on :data:`catalog.core.rate_laws.CURVATURE_GRID` (and, with n_max
  known, the fixed-plateau profile on :data:`catalog.core.plateau_fit.FULL_GRID`, sharing the basis) from three
  sums per grid point (:func:`_grids`; rescanned from the residuals for near-exact traces, whose RSS the sums'
  rounding would reorder), then Newton on the profile derivative from the vertex of the grid parabola around the
  best point, safeguarded by the two cells around it (:func:`catalog.core.plateau_fit.bracketed_newton`: bisection
  when a step leaves the bracket; a row stops once a Newton step is below 1e-5 relative, after which quadratic
  convergence leaves ~1e-10, or any step is below 1e-7). By the envelope theorem and the derivative of the normal
  equations G^T r = 0 (G = [1, g]),

  .. math::
      \phi = \frac{dRSS}{d\kappa} = -2\rho\, g'^T r,\qquad
      \phi' = -2\left(\rho' g'^T r + \rho\, g''^T r + \rho\, g'^T r'\right),\quad
      r' = -\alpha' - \rho' g - \rho g',\quad
      G^T G \begin{pmatrix}\alpha'\\ \rho'\end{pmatrix} =
      \begin{pmatrix}-\rho\,\Sigma g'\\ g'^T r - \rho\, g^T g'\end{pmatrix};

- zero order: Hudson's exact enumeration of the breakpoint from prefix sums (every data time as tau, and the
  decoupled rising-line / plateau-mean optimum of every interval).

Model choice, fallback and every derived field come from the same code as the reference
(:func:`catalog.core.selection.summarise`), so the two paths differ only in how the minimum is found: both reach the
same least-squares minimum, r0 to ~1e-10 relative.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd

from catalog.core import trace_shape
from catalog.core.plateau_fit import FULL_GRID, STEP_TOL, bracketed_newton, fit_full_batch, parabolic_start, profile_rss
from catalog.core.rate_laws import (
    CHANGE_POINT_PENALTY,
    CODES,
    CURVATURE_GRID,
    CURVATURE_LINE,
    CURVATURE_MAX,
    MODELS,
    SCALAR_FIELDS,
    ModelFit,
    check_models,
    covariance,
    curvature_basis,
    curve_theta,
    embed_cov,
    linear_fit,
    model_eligible,
    normalise,
    shape,
)
from catalog.core.selection import summarise

__all__ = ["COLUMNS", "curve_values", "default_workers", "fit_traces"]

COLUMNS = SCALAR_FIELDS + tuple(f"aic_{m}" for m in MODELS)
#: padded elements (trials x longest trace) fitted at once: about 600 trials of 200 points, so the temporaries of
#: one chunk (1 MB each) stay in cache while the per-call overhead is spread over many rows; at 10,000 x 200,
#: 60,000 ran 1.2x and 240,000 1.3x slower (1,000,000, 8 MB temporaries, 1.6x slower before the sums-based grids)
CHUNK_POINTS = 120_000
#: most threads :func:`fit_traces` starts by default: a campaign of 10,000 trials has about 17 chunks, so a thread
#: per core of a large machine would mostly wait (only 2 cores were measured)
MAX_WORKERS = 4
_NEWTON_STEPS = 60
#: a trace whose best grid RSS is below this fraction of its centred sum of squares gets its grids from the
#: residuals: the sums' rounding (~1e-16 of S_yy) is then no longer far below the RSS differences argmin compares
_SUMS_EXACT = 1e-6


def _rowsum(a, b=None):
    return a.sum(axis=1) if b is None else np.einsum("ij,ij->i", a, b)


def _pack(alpha, rho, theta, rss, jtj, n, free, ok, n_penalty=None) -> ModelFit:
    """ModelFit from the (m, 3, 3) J^T J over (alpha, rho, theta), keeping the ``free`` parameters."""
    free = np.asarray(free, bool)
    p = int(free.sum())
    cov = embed_cov(covariance(jtj[:, free][:, :, free], rss / (n - p)), free)
    ok = ok & np.isfinite(cov[:, 1, 1]) & np.isfinite(rho) & np.isfinite(rss)
    return ModelFit(alpha, rho, theta, rss, cov, np.full(n.shape, float(p)),
                    np.full(n.shape, float(p if n_penalty is None else n_penalty)), ok)


def _jtj(n, sg, sgg, sd, sgd, sdd, rho):
    """J^T J of the columns (1, g, rho g') from their sums."""
    return np.stack([np.stack([n, sg, rho * sd], -1), np.stack([sg, sgg, rho * sgd], -1),
                     np.stack([rho * sd, rho * sgd, rho * rho * sdd], -1)], -2)


def _fit_line_at(g, Y, W, n, offset=True, sy=None):
    """Closed-form y = alpha + rho g per row; residual sum of squares from the residuals themselves."""
    sg, sgg, sgy = _rowsum(g), _rowsum(g, g), _rowsum(g, Y)
    sy = _rowsum(Y) if sy is None else sy
    alpha, rho, det = linear_fit(n, sg, sgg, sy, sgy, offset)
    R = np.subtract(Y, alpha[:, None])
    R -= rho[:, None] * g
    R[~W] = 0.0
    rss = _rowsum(R, R)
    # A singular design (g constant over the readings, e.g. a late first reading at a huge curvature) has no fit.
    good = (det > 1e-13 * np.maximum(n * sgg, 1e-300)) & np.isfinite(rss) & (rss >= 0)
    return alpha, rho, np.where(good, rss, np.inf), sg, sgg


def _fit_zero(U, Y, W, n, eligible, offset=True) -> dict:
    m, L = U.shape
    j = np.arange(L)[None, :]
    nn = n[:, None]
    UU = U * U
    S1, Su, Suu = np.cumsum(W, 1, dtype=float), np.cumsum(U, 1), np.cumsum(UU, 1)
    Sy, Suy, Syy = np.cumsum(Y, 1), np.cumsum(U * Y, 1), np.cumsum(Y * Y, 1)
    Ty, Tyy = Sy[:, -1:], Syy[:, -1:]
    rest_y = Ty - Sy  # sum of y after point j
    # tau on data time u_j: g = u before, u_j after
    after = nn - S1
    sg, sgg, sgy = Su + U * after, Suu + UU * after, Suy + U * rest_y
    a_f, r_f, det_f = linear_fit(nn, sg, sgg, Ty, sgy, offset)
    rss_f = Tyy - a_f * Ty - r_f * sgy
    ok_f = (j >= 2) & (j <= nn - 2) & (det_f > 0)
    # tau inside (u_j, u_{j+1}): rising line on points 0..j and the plateau mean of the rest decouple
    a_r, r_r, _ = linear_fit(S1, Su, Suu, Sy, Suy, offset)
    n_p = nn - S1
    beta = rest_y / np.where(n_p > 0, n_p, 1.0)
    rss_i = (Syy - a_r * Sy - r_r * Suy) + ((Tyy - Syy) - beta * rest_y)
    tau_i = (beta - a_r) / r_r
    u_next = np.concatenate((U[:, 1:], np.full((m, 1), np.inf)), axis=1)
    ok_i = (j >= 2) & (j <= nn - 3) & (U > U[:, :1]) & (r_r != 0) & (tau_i >= U) & (tau_i <= u_next)
    cand = np.concatenate((np.where(ok_f, rss_f, np.inf), np.where(ok_i, rss_i, np.inf)), axis=1)
    cand = np.where(np.isnan(cand), np.inf, cand)
    best = np.argmin(cand, axis=1)
    has_break = np.isfinite(cand[np.arange(m), best])
    taus = np.concatenate((U, tau_i), axis=1)[np.arange(m), best]
    tau = np.where(has_break, taus, np.inf)

    g = np.where(W, np.minimum(U, tau[:, None]), 0.0)
    a_b, r_b, rss_b, sg_b, sgg_b = _fit_line_at(g, Y, W, n, offset)
    h = (W & (U > tau[:, None])).astype(float)
    jtj = _jtj(n, sg_b, sgg_b, _rowsum(h), _rowsum(g, h), _rowsum(h), r_b)
    free = np.array([offset, True, True])
    broken = _pack(a_b, r_b, tau, rss_b, jtj, n, free, eligible & has_break,
                   n_penalty=free.sum() - 1 + CHANGE_POINT_PENALTY)
    a_l, r_l, rss_l, su, suu = _fit_line_at(U, Y, W, n, offset)
    z = np.zeros(m)
    line = _pack(a_l, r_l, np.full(m, np.inf), rss_l, _jtj(n, su, suu, z, z, z, r_l), n,
                 np.array([offset, True, False]), eligible)
    return {"zero": line, "zero_break": broken}


def _profile(model, kappa, U, Y, n, sy, offset=True):
    """Linear parameters, residuals, phi = dRSS/dkappa, phi' and the Jacobian sums at per-row kappa.

    Without the offset alpha = alpha' = 0 and the normal equation is the rho row alone: rho' = (g'^T r - rho
    g^T g') / g^T g.
    """
    g, d, e = curvature_basis(model, kappa[:, None], U, 2)
    sg, sgg, sd, sgd, sdd = _rowsum(g), _rowsum(g, g), _rowsum(d), _rowsum(g, d), _rowsum(d, d)
    alpha, rho, det = linear_fit(n, sg, sgg, sy, _rowsum(g, Y), offset)
    dr = _rowsum(d, Y) - alpha * sd - rho * sgd  # g'^T r
    er = _rowsum(e, Y) - alpha * _rowsum(e) - rho * _rowsum(g, e)  # g''^T r
    b1, b2 = -rho * sd, dr - rho * sgd
    if offset:
        a_p = (sgg * b1 - sg * b2) / det
        r_p = (n * b2 - sg * b1) / det
    else:
        a_p, r_p = 0.0 * b2, b2 / sgg
    d_rp = -a_p * sd - r_p * sgd - rho * sdd  # g'^T r'
    phi = -2 * rho * dr
    dphi = -2 * (r_p * dr + rho * er + rho * d_rp)
    return alpha, rho, phi, dphi, g, d


def _grids(model, U, Y, W, n, sy, syy, m_full, offset=True):
    r"""Profile RSS of the free-plateau fit on CURVATURE_GRID and, if ``m_full`` is given, of the fixed-plateau fit
    on FULL_GRID; the basis is evaluated once where the two grids share a point.

    The RSS comes from three sums per grid point, with the centred sums S_xy = sum xy - sum x sum y / n:

    .. math:: \mathrm{RSS}_\mathrm{free} = S_{yy} - S_{gy}^2 / S_{gg},\qquad
              \mathrm{RSS}_\mathrm{full} = S_{yy} - 2 m\kappa S_{gy} + (m\kappa)^2 S_{gg}

    (plain sums without the offset). The differences cancel to about 1e-16 S_yy, which only the grid's argmin
    sees; for rows whose best fit comes within :data:`_SUMS_EXACT` of S_yy (a near-exact trace, where that error
    could reorder the grid) the grids are recomputed from the residuals (:func:`_grids_from_residuals`).
    """
    rows = U.shape[0]
    free = np.empty((rows, CURVATURE_GRID.size))
    full = None if m_full is None else np.empty((rows, FULL_GRID.size))
    kappas = CURVATURE_GRID if m_full is None else np.union1d(CURVATURE_GRID, FULL_GRID)
    nn = np.maximum(n, 1)
    syy_c = syy - sy * sy / nn if offset else syy
    for kappa in kappas:
        g = curvature_basis(model, kappa, U)[0]
        sg, sgg, sgy = _rowsum(g), _rowsum(g, g), _rowsum(g, Y)
        sgy_c, sgg_c = (sgy - sg * sy / nn, sgg - sg * sg / nn) if offset else (sgy, sgg)
        q = np.flatnonzero(CURVATURE_GRID == kappa)
        if q.size:
            # the singular-design rule of _fit_line_at: g constant over the readings has no fit
            det = n * sgg - sg * sg if offset else sgg
            good = det > 1e-13 * np.maximum(n * sgg, 1e-300)
            free[:, q[0]] = np.where(good, syy_c - sgy_c * sgy_c / sgg_c, np.inf)
        q = np.flatnonzero(FULL_GRID == kappa) if full is not None else q[:0]
        if q.size:
            mk = m_full * kappa
            full[:, q[0]] = syy_c - 2 * mk * sgy_c + mk * mk * sgg_c
    grids = (free,) if full is None else (free, full)
    for grid in grids:
        grid[~np.isfinite(grid)] = np.inf
    best = np.min(free, axis=1) if full is None else np.minimum(free.min(axis=1), np.min(full, axis=1))
    exact = ~(best > _SUMS_EXACT * syy_c)
    if exact.any():
        sub = _grids_from_residuals(model, U[exact], Y[exact], W[exact], n[exact], sy[exact],
                                    None if m_full is None else m_full[exact], offset)
        for grid, part in zip(grids, sub, strict=False):
            grid[exact] = part
    return free, full


def _grids_from_residuals(model, U, Y, W, n, sy, m_full, offset=True):
    """:func:`_grids` with every RSS from the residuals themselves (exact to rounding even for a near-exact fit)."""
    free = np.empty((U.shape[0], CURVATURE_GRID.size))
    full = None if m_full is None else np.empty((U.shape[0], FULL_GRID.size))
    kappas = CURVATURE_GRID if m_full is None else np.union1d(CURVATURE_GRID, FULL_GRID)
    for kappa in kappas:
        g = curvature_basis(model, kappa, U)[0]
        q = np.flatnonzero(CURVATURE_GRID == kappa)
        if q.size:
            # never from syy - alpha sy - rho sgy here: that difference cancels to a negative (or, with a singular
            # design, -inf) value, which argmin would take as the best fit.
            free[:, q[0]] = _fit_line_at(g, Y, W, n, offset, sy)[2]
        q = np.flatnonzero(FULL_GRID == kappa) if full is not None else q[:0]
        if q.size:
            full[:, q[0]] = profile_rss(model, kappa, U, Y, W, n, m_full, offset, g)
    return free, full


def _fit_curved(model, U, Y, W, n, eligible, grid, sy, offset=True) -> ModelFit:
    """Free-plateau fit refined from its profile RSS ``grid`` on CURVATURE_GRID (:func:`_grids`)."""
    i = np.argmin(np.where(np.isnan(grid), np.inf, grid), axis=1)
    last = CURVATURE_GRID.size - 1
    x = parabolic_start(grid, i, CURVATURE_GRID)
    _, _, phi, dphi, _, _ = _profile(model, x, U, Y, n, sy, offset)
    # the minimum lies on the downhill side of the start, within the two cells around the best grid point
    right = phi < 0
    lo = np.where(right, x, CURVATURE_GRID[np.maximum(i - 1, 0)])
    hi = np.where(right, CURVATURE_GRID[np.minimum(i + 1, last)], x)
    done = ((i == 0) & ~right) | ((i == last) & right) | (phi == 0) | ~eligible | ~np.isfinite(grid.min(axis=1))
    at_bound = (i == last) & right

    def terms(xk, Uk, Yk, nk, syk):
        return _profile(model, xk, Uk, Yk, nk, syk, offset)[2:4]

    x = bracketed_newton(terms, x, phi, dphi, lo, hi, done, (U, Y, n, sy), _NEWTON_STEPS,
                         lambda xn, xa: np.abs(xn - xa) <= STEP_TOL * xa + 1e-15, lambda la, ha: 0.5 * (la + ha))
    x = np.where(x < CURVATURE_LINE, 0.0, x)
    g, d = curvature_basis(model, x[:, None], U, 1)
    g, d = np.where(W, g, 0.0), np.where(W, d, 0.0)
    alpha, rho, rss, sg, sgg = _fit_line_at(g, Y, W, n, offset)
    jtj = _jtj(n, sg, sgg, _rowsum(d), _rowsum(g, d), _rowsum(d, d), rho)
    ok = eligible & ~at_bound & (x < CURVATURE_MAX * (1 - 1e-9)) & np.isfinite(rss)
    return _pack(alpha, rho, x, rss, jtj, n, np.array([offset, True, True]), ok)


def _fit_chunk(T, Yr, W, n_max, models, offset=True) -> dict:
    W, cut = trace_shape.leak_cut(T, Yr, W)
    max_rate, induction_z = trace_shape.induction(T, Yr, W)
    U, Y, c, s, tmax = normalise(T, Yr, W, offset)
    n = W.sum(axis=1).astype(float)
    sy, syy = _rowsum(Y), _rowsum(Y, Y)
    eligible = model_eligible(U, W, n, tmax)
    fits = {}
    for mo in models:
        if mo == "zero":
            fits |= _fit_zero(U, Y, W, n, eligible, offset)
            continue
        known = np.isfinite(n_max) & (n_max > 0)
        grid, full_grid = _grids(mo, U, Y, W, n, sy, syy, n_max / s if known.any() else None, offset)
        fits[mo] = _fit_curved(mo, U, Y, W, n, eligible, grid, sy, offset)
        if known.any():
            fits[f"{mo}_full"] = fit_full_batch(mo, U, Y, W, n, n_max / s, offset, eligible & known, full_grid)
    out = summarise(U, Y, W, c, s, tmax, fits, models, n_max, offset)
    return out | {"leak_cut": cut, "max_rate": max_rate, "induction_z": induction_z}


def _long_form(trial_index, t, amount, n_max):
    trial = np.asarray(trial_index).ravel()
    t = np.asarray(t, dtype=float).ravel()
    y = np.asarray(amount, dtype=float).ravel()
    n_max = np.asarray(n_max, dtype=float).ravel()
    if not (trial.shape == t.shape == y.shape):
        raise ValueError("trial_index, t and amount must have the same length")
    if trial.size and (not np.issubdtype(trial.dtype, np.integer) or trial.min() < 0 or trial.max() >= n_max.size):
        raise ValueError(f"trial_index must be integer codes 0..{n_max.size - 1} (one n_max per trial)")
    return trial.astype(np.int64), t, y, n_max


def default_workers() -> int:
    """Threads :func:`fit_traces` uses by default: the cores this process may run on, at most :data:`MAX_WORKERS`."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not every platform has sched_getaffinity
        cores = os.cpu_count() or 1
    return max(1, min(cores, MAX_WORKERS))


def fit_traces(trial_index, t, amount, n_max, models=MODELS, chunk_points: int = CHUNK_POINTS,
               offset: bool = True, workers: int | None = None) -> pd.DataFrame:
    """Fit every trial's trace at once; one row per trial code 0..m-1 with the fields of ``TraceFit``.

    The chunks are independent, so with ``workers`` > 1 they are fitted on that many threads: numpy releases the
    GIL inside its ufuncs and reductions, where nearly all the time goes, and each thread pads its own chunk, so
    at most ``workers`` chunks are in memory at once. Every chunk runs the same operations on the same rows as
    in the plain loop, so the result is bit for bit that of ``workers=1``; the rows come back in trial order.

    Parameters
    ----------
    trial_index : int array, trial code 0..m-1 of each point (long form, sorted by trial then time; unsorted
        input is sorted here).
    t, amount : arrays of time (s) and product amount (mol) per point; non-finite points and t < 0 are left out.
    n_max : array of length m, stoichiometric maximum product amount per trial, mol (NaN if unknown).
    models : subset of ('zero', 'first', 'second') to try.
    chunk_points : padded elements (trials x longest trace) fitted at once; bounds the memory.
    offset : fit the start offset (default); False forces every curve through the origin.
    workers : threads fitting chunks at once; None (default) takes :func:`default_workers`, 1 fits the chunks one
        after the other on the calling thread (for a caller that runs its own threads or processes).

    Returns
    -------
    DataFrame indexed by trial code (``trial``) with columns :data:`COLUMNS` (the scalar TraceFit fields,
    aic_zero, aic_first, aic_second).
    """
    models = check_models(models)
    workers = default_workers() if workers is None else int(workers)
    if workers < 1:
        raise ValueError(f"workers must be at least 1, got {workers}")
    trial, t, y, n_max = _long_form(trial_index, t, amount, n_max)
    m = n_max.size
    keep = np.isfinite(t) & np.isfinite(y) & (t >= 0)
    if not keep.all():
        trial, t, y = trial[keep], t[keep], y[keep]
    if trial.size > 1 and ((np.diff(trial) < 0) | ((np.diff(trial) == 0) & (np.diff(t) < 0))).any():
        order = np.lexsort((t, trial))
        trial, t, y = trial[order], t[order], y[order]
    counts = np.bincount(trial, minlength=m)
    starts = np.concatenate(([0], np.cumsum(counts)))
    width = max(int(counts.max(initial=0)), 1)
    rows = max(1, chunk_points // width)
    workers = min(workers, -(-m // rows)) if m else 1
    if workers > 1:
        # as many chunks as a multiple of the threads, of near-equal size, so no thread fits the last one alone
        chunks = -(-m // rows)
        chunks += -chunks % workers
        rows = -(-m // chunks)
    bounds = [(lo, min(lo + rows, m)) for lo in range(0, m, rows)]

    def fit_block(lo_hi):
        lo, hi = lo_hi
        p0, p1 = starts[lo], starts[hi]
        L = max(int(counts[lo:hi].max(initial=0)), 1)
        row = trial[p0:p1] - lo
        col = np.arange(p0, p1) - starts[trial[p0:p1]]
        T, Yr, W = np.zeros((hi - lo, L)), np.zeros((hi - lo, L)), np.zeros((hi - lo, L), dtype=bool)
        T[row, col], Yr[row, col], W[row, col] = t[p0:p1], y[p0:p1], True
        # inside the block: numpy's error state is per thread
        with np.errstate(all="ignore"):
            return _fit_chunk(T, Yr, W, n_max[lo:hi], models, offset)

    if workers <= 1:
        parts = [fit_block(b) for b in bounds]
    else:
        # map submits only the bounds; a thread pads a chunk when it starts it
        with ThreadPoolExecutor(workers) as pool:
            parts = list(pool.map(fit_block, bounds))
    columns = {name: np.concatenate([p[name] for p in parts]) if parts else np.array([]) for name in COLUMNS}
    df = pd.DataFrame(columns, index=pd.RangeIndex(m, name="trial"))
    return df.astype({"model": str, "k_unit": str, "n_points": np.int64, "leak_cut": np.int64, "plateau_fixed": bool})


def curve_values(fits_df: pd.DataFrame, trial_index, t) -> np.ndarray:
    """Fitted amounts (offset included), mol, at each long-form point, from the rows of :func:`fit_traces`."""
    trial = np.asarray(trial_index, dtype=np.int64).ravel()
    t = np.asarray(t, dtype=float).ravel()
    pos = fits_df.index.get_indexer(trial)
    if (pos < 0).any():
        raise ValueError("trial_index holds codes that fits_df has no row for")
    code = fits_df["model"].map(CODES).to_numpy(dtype=np.int64)[pos]
    r0, k, plateau, offset = (fits_df[c].to_numpy(dtype=float)[pos] for c in ("r0", "k", "plateau", "offset"))
    with np.errstate(all="ignore"):
        return offset + r0 * shape(code, t, curve_theta(code, r0, k, plateau))
