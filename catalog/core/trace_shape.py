r"""Shape checks run on a trace before the rate-law fit: a leak after the maximum, and a slow (induction) start.

Both work on padded rows (trials x points, valid points first, in time order) of raw amounts, so the reference and
the batch fits share them. The reading noise is estimated from second differences of consecutive readings,

.. math:: \hat\sigma = \sqrt{\pi/2}\;\overline{|\Delta^2 y|}\,/\sqrt{6}

(for white noise of sd sigma, Delta^2 y has sd sqrt(6) sigma and E|x| = sigma sqrt(2/pi)); curvature of a dense
trace adds little, and a sparse, strongly curved trace only raises the estimate, which makes both checks more
cautious.

- **Leak or drift.** Product cannot decrease. When the 5-point running mean peaks before the end and the last three
  readings lie more than :data:`LEAK_DROP_SIGMA` noise sd (and 2 % of the rise) below that peak, the readings after
  the peak are left out of the fit and counted in ``leak_cut``: the fall is a leak or drift of the instrument, not
  the chemistry, so it must not read as deactivation.
- **Induction period.** Local slopes are fitted over sliding windows of w = max(4, n/8) readings; the excess of
  the largest over the first, in standard errors,

  .. math:: z = \frac{r_\max - r_\mathrm{first}}{\sqrt{\mathrm{se}_\max^2 + \mathrm{se}_\mathrm{first}^2}},
            \qquad \mathrm{se} = \hat\sigma \sqrt{\frac{w}{w S_{tt} - S_t^2}}

  (set to 0 unless r_max also exceeds :data:`INDUCTION_RATIO` times r_first) is large when the trace starts slowly
  and then accelerates (a sigmoidal start), which no integrated rate law
  here describes: r0 from the fit is then not the catalyst's rate, and the largest local rate is reported beside it.
"""

from __future__ import annotations

import numpy as np

__all__ = ["INDUCTION_RATIO", "LEAK_DROP_SIGMA", "induction", "leak_cut", "noise_sd"]

#: A slow start needs the largest local rate to exceed the first window's by this factor as well as significantly;
#: z is reported as 0 below it (common practice, no source).
INDUCTION_RATIO = 1.5

#: Drop below the running-mean peak, in noise sd, that counts as a fall in product (about 4 sd: a clean plateau's
#: peak-to-end difference rarely exceeds 2 sd; common practice, no source).
LEAK_DROP_SIGMA = 4.0
_LEAK_MIN_RISE = 0.02
_SMOOTH = 5


def noise_sd(Y, W) -> np.ndarray:
    """Reading noise sd per row from the mean absolute second difference (module docstring)."""
    d2 = Y[:, 2:] - 2 * Y[:, 1:-1] + Y[:, :-2]
    ok = W[:, 2:]
    count = ok.sum(1)
    mean_abs = np.where(ok, np.abs(d2), 0.0).sum(1) / np.where(count > 0, count, 1)
    return np.where(count > 0, np.sqrt(np.pi / 2) * mean_abs / np.sqrt(6.0), np.nan)


def _prefix(a):
    """Row prefix sums with a leading zero column (float); cumulated straight into the result, no concatenation."""
    out = np.zeros((a.shape[0], a.shape[1] + 1))
    np.cumsum(a, axis=1, dtype=float, out=out[:, 1:])
    return out


def leak_cut(T, Y, W):
    """Leave out readings after the maximum when the product falls afterwards; returns (W, points cut)."""
    m, L = Y.shape
    n = W.sum(1)
    if L < 2 * _SMOOTH:
        return W, np.zeros(m, np.int64)
    sd = noise_sd(Y, W)
    P = _prefix(np.where(W, Y, 0.0))
    j = np.arange(L - _SMOOTH + 1)
    smooth = (P[:, j + _SMOOTH] - P[:, j]) / _SMOOTH  # mean of readings j .. j+4, centred on j+2
    smooth = np.where(j[None, :] + _SMOOTH <= n[:, None], smooth, -np.inf)
    peak_at = np.argmax(smooth, axis=1)
    peak = smooth[np.arange(m), peak_at]
    centre = peak_at + _SMOOTH // 2
    last = np.arange(L)[None, :] >= (n - 3)[:, None]
    tail = np.where(W & last, Y, 0.0).sum(1) / 3.0
    rise = peak - Y[:, 0]
    drop = peak - tail
    leak = ((n - 1 - centre) >= 3) & (n >= 2 * _SMOOTH) & (drop > LEAK_DROP_SIGMA * sd) & (drop > _LEAK_MIN_RISE * rise)
    keep = W & (~leak[:, None] | (np.arange(L)[None, :] <= centre[:, None]))
    return keep, np.where(leak, n - keep.sum(1), 0).astype(np.int64)


def induction(T, Y, W):
    """Largest local slope (units of Y per unit of T) and its excess over the first window's slope, z."""
    m, L = Y.shape
    n = W.sum(1)
    w = np.maximum(4, n // 8)
    sd = noise_sd(Y, W)
    Tw, Yw = np.where(W, T, 0.0), np.where(W, Y, 0.0)
    P1, Pt, Ptt, Py, Pty = (_prefix(a) for a in (W, Tw, Tw * Tw, Yw, Tw * Yw))
    j = np.arange(L)[None, :]
    # flat positions of each window's end in the (m, L + 1) prefix arrays, computed once for all five
    end = np.minimum(j + w[:, None], L) + (L + 1) * np.arange(m)[:, None]

    def window(P):
        return P.take(end) - P[:, :L]

    s1, st, stt, sy, sty = (window(P) for P in (P1, Pt, Ptt, Py, Pty))
    det = s1 * stt - st * st
    valid = (j + w[:, None] <= n[:, None]) & (det > 0)
    det = np.where(valid, det, 1.0)
    slope = np.where(valid, (s1 * sty - st * sy) / det, -np.inf)
    se = np.where(valid, sd[:, None] * np.sqrt(s1 / det), np.nan)
    best = np.argmax(slope, axis=1)
    rows = np.arange(m)
    enough = valid.sum(1) >= 2
    r_max = np.where(enough, slope[rows, best], np.nan)
    z = (r_max - slope[:, 0]) / np.hypot(se[rows, best], se[:, 0])
    z = np.where(r_max > INDUCTION_RATIO * np.maximum(slope[:, 0], 0.0), z, 0.0)
    return r_max, np.where(enough, z, np.nan)
