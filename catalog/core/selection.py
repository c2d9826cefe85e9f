r"""Model choice and every reported field of a trace fit, shared by the reference and the vectorised paths.

Each fitting core returns candidate fits (:class:`catalog.core.rate_laws.ModelFit`) in normalised units; this module
turns them into the reported fields of :class:`catalog.core.rate_laws.TraceFit`:

1. **Plateau above the stoichiometric maximum.** A candidate whose plateau exceeds n_max by more than
   z_{0.975} standard errors is rejected: no rate law can make more product than the charge allows.
2. **Small-sample criterion.** Candidates compete by the corrected Akaike criterion (Hurvich and Tsai,
   Biometrika 76, 297 (1989))

   .. math:: \mathrm{AIC_c} = n \ln\frac{\mathrm{RSS}}{n} + 2k + \frac{2k(k+1)}{n-k-1}

   with k the penalty count of the candidate: its parameters, except that the breakpoint of the broken line counts
   three, not one (an AIC-type penalty for a change point; Ninomiya, Statist. Probab. Lett. 72, 237 (2005), from
   memory): the breakpoint is chosen by search over the data, so its likelihood gain is larger than an ordinary
   parameter's.
3. **Model-selection uncertainty.** With Akaike weights :math:`w_i \propto e^{-\Delta_i/2}` (Burnham and Anderson,
   Model Selection and Multimodel Inference, 2nd ed. 2002, section 4.2), the reported r0 is the chosen candidate's
   and its standard error is the weighted root-mean-square about it,

   .. math:: \mathrm{se}(r_0) = \sqrt{\sum_i w_i\left[\mathrm{se}_i^2 + (r_{0,i} - r_{0,\mathrm{best}})^2\right]}

   (the unconditional standard error of Burnham and Anderson eq. 4.9, centred on the reported value), so a trace
   that two rate laws explain about equally well carries the spread of their initial rates.
4. Fallback to the initial slope of the early window when no candidate survives.
"""

from __future__ import annotations

import math

import numpy as np

from catalog.core.rate_laws import (
    CODES,
    K_UNITS,
    MODELS,
    NAMES,
    RSS_FLOOR,
    SCALAR_FIELDS,
    ModelFit,
    covariance,
    embed_cov,
    linear_fit,
    shape,
)
from catalog.core.stats import Z95

__all__ = ["CANDIDATES", "aicc", "candidates_for", "summarise"]

#: Every candidate a core may return, in tie-break order within a rate law: the plain law, then its variant
#: (broken line for zero order, plateau fixed at n_max for first and second order).
CANDIDATES = {"zero": ("zero", "zero_break"), "first": ("first", "first_full"), "second": ("second", "second_full")}
SLOPE_WINDOW_FRACTION = 0.2  # fallback window: up to the first point past 20 % of the rise ...
SLOPE_WINDOW_MIN_POINTS = 4  # ... and never fewer than this many points
MIN_SLOPE_POINTS = 3


def candidates_for(models) -> list:
    """Candidate names of the rate laws asked for, in tie-break order."""
    return [c for mo in models for c in CANDIDATES[mo]]


def aicc(rss, n, k, scale=1.0) -> np.ndarray:
    """AICc = n ln(RSS/n) + 2k + 2k(k+1)/(n-k-1), RSS floored at n * RSS_FLOOR and reported in scale^2.

    NaN where n - k - 1 <= 0 (the correction is undefined: too few points for that many parameters).
    """
    n = np.asarray(n, dtype=float)
    k = np.asarray(k, dtype=float)
    rss = np.maximum(np.asarray(rss, dtype=float), n * RSS_FLOOR)
    room = n - k - 1
    value = n * (np.log(rss / n) + 2.0 * np.log(scale)) + 2.0 * k + 2.0 * k * (k + 1) / np.where(room > 0, room, 1)
    return np.where(room > 0, value, np.nan)


def _plateau(code, fit: ModelFit):
    """Plateau above the offset (normalised units) and its standard error; NaN where the law has none."""
    th, rho, cov = fit.theta, fit.rho, fit.cov
    zero = np.broadcast_to(np.asarray(code) == 0, th.shape)
    reached = np.where(zero, np.isfinite(th), th > 0)
    th = np.where(reached, th, np.nan)
    plateau = np.where(zero, rho * th, rho / th)
    grad = np.where(zero[:, None], np.stack([0 * th, th, rho], -1), np.stack([0 * th, 1 / th, -rho / th**2], -1))
    se = np.sqrt(np.einsum("mi,mij,mj->m", grad, cov, grad))
    return plateau, se


def _initial_slope(U, Y, W, n, offset):
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
    alpha, rho, det = linear_fit(nwf, su, suu, sy, suy, offset)
    R = np.where(Ww, Yw - alpha[:, None] - rho[:, None] * Uw, 0.0)
    rss = (R * R).sum(1)
    tss = np.where(Ww, Yw - (sy / np.maximum(nwf, 1))[:, None], 0.0)
    tss = (tss * tss).sum(1)
    p = 2 if offset else 1
    dof = nwf - p
    jtj = np.stack([np.stack([nwf, su, 0 * su], -1), np.stack([su, suu, 0 * su], -1), np.zeros((m, 3))], -2)
    free = np.array([offset, True, False])
    cov = embed_cov(covariance(jtj[:, free][:, :, free], rss / np.where(dof > 0, dof, np.nan)), free)
    ok = (nw >= MIN_SLOPE_POINTS) & (det > 0) & np.isfinite(cov[:, 1, 1]) & np.isfinite(alpha) & np.isfinite(rho)
    fit = ModelFit(alpha, rho, np.full(m, np.nan), rss, cov, np.full(m, float(p)), np.full(m, float(p)), ok)
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


def summarise(U, Y, W, c, s, tmax, fits: dict, models, n_max, offset: bool = True) -> dict:
    """Choose a candidate per trial by AICc, fall back to the initial slope, and derive every reported field.

    ``fits`` maps candidate names (:data:`CANDIDATES`) to :class:`ModelFit`. Returns column name -> array of
    length m (the scalar TraceFit fields plus aic_zero, aic_first, aic_second: the best AICc of each rate law).
    """
    m, L = U.shape
    n = W.sum(axis=1)
    nf = n.astype(float)
    n_max = np.asarray(n_max, dtype=float)
    per_max = np.where(n_max > 0, n_max, np.nan)
    names = [c_ for c_ in candidates_for(models) if c_ in fits]
    table = np.full((m, max(len(names), 1)), np.nan)
    for i, name in enumerate(names):
        f = fits[name]
        code = CODES[name.split("_")[0]]
        plateau, plateau_se = _plateau(np.full(m, code), f)
        # Beyond n_max by more than its own 95 % half-width (plus rounding): more product than the charge holds.
        excess = plateau - per_max / s
        too_high = np.isfinite(excess) & (excess > Z95 * np.nan_to_num(plateau_se) + 1e-9 * np.abs(per_max / s))
        table[:, i] = np.where(f.ok & ~too_high, aicc(f.rss, nf, f.n_penalty, s), np.nan)
    out = {}
    for mo in MODELS:
        cols = [i for i, name in enumerate(names) if name.split("_")[0] == mo]
        with np.errstate(all="ignore"):
            out[f"aic_{mo}"] = np.fmin.reduce(table[:, cols], axis=1) if cols else np.full(m, np.nan)
    ranked = np.where(np.isnan(table), np.inf, table)
    has_model = np.isfinite(ranked).any(axis=1)
    best = np.argmin(ranked, axis=1)

    slope, slope_tss, nw = _initial_slope(U, Y, W, n, offset)
    cand_code = np.array([CODES[name.split("_")[0]] for name in names] or [CODES["none"]])
    code = np.where(has_model, cand_code[best], np.where(slope.ok, CODES["initial_slope"], CODES["none"]))
    rows = np.arange(m)

    def pick(attr):
        stack = [getattr(fits[name], attr) for name in names] + [getattr(slope, attr)]
        return np.stack(stack)[np.where(has_model, best, len(names)), rows]

    alpha, rho, theta, rss = pick("alpha"), pick("rho"), pick("theta"), pick("rss")
    cov, n_params = pick("cov"), pick("n_params").astype(float)
    is_model = code <= 2
    is_slope = code == CODES["initial_slope"]
    none = code == CODES["none"]
    full = np.zeros(m, bool)
    for i, name in enumerate(names):
        full |= has_model & (best == i) & name.endswith("_full")

    # Akaike weights over the surviving candidates, and the r0 spread they imply.
    delta = table - np.nanmin(np.where(has_model[:, None], table, 0.0), axis=1, keepdims=True)
    weight = np.where(np.isfinite(delta), np.exp(-0.5 * np.nan_to_num(delta, nan=np.inf)), 0.0)
    weight /= np.where(weight.sum(1, keepdims=True) > 0, weight.sum(1, keepdims=True), 1.0)
    if names:
        rhos = np.stack([fits[name].rho for name in names], 1)
        ses2 = np.stack([fits[name].cov[:, 1, 1] for name in names], 1)
        spread = np.where(weight > 0, ses2 + (rhos - rho[:, None]) ** 2, 0.0)
        rho_se = np.where(has_model, np.sqrt((weight * spread).sum(1)), np.sqrt(cov[:, 1, 1]))
        model_weight = np.where(has_model, weight[rows, best], np.nan)
    else:
        rho_se, model_weight = np.sqrt(cov[:, 1, 1]), np.full(m, np.nan)

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
    fit_best = ModelFit(alpha, rho, theta, rss, cov, n_params, n_params, is_model)
    plateau, plateau_se = _plateau(code, fit_best)
    k2 = th**2 / (rho * s * tmax)
    k2_grad = np.stack([0 * th, -k2 / rho, 2 * k2 / th], -1)
    k2_se = np.sqrt(np.einsum("mi,mij,mj->m", k2_grad, cov, k2_grad))
    r0_se = s * rho_se / tmax
    u_last = U[rows, np.maximum(n - 1, 0)]
    y_last = Y[rows, np.maximum(n - 1, 0)]
    final = np.where(is_slope, s * (y_last - alpha), s * rho * shape(code, u_last, theta))

    out["model"] = NAMES[code]
    out["r0"] = r0
    out["r0_se"] = r0_se
    out["k"] = np.select([zero, first, second], [r0, theta / tmax, k2], np.nan)
    out["k_se"] = np.select([zero, first, second], [s * np.sqrt(cov[:, 1, 1]) / tmax, np.sqrt(cov[:, 2, 2]) / tmax,
                                                    k2_se], np.nan)
    out["k_unit"] = K_UNITS[code]
    out["half_life"] = np.select([zero, first, second], [th * tmax / 2, math.log(2) * tmax / th, tmax / th], np.nan)
    out["offset"] = c + s * alpha
    out["plateau"] = np.where(reached, s * plateau, np.nan)
    # held at n_max, the plateau has no error of its own (its covariance row is zero up to rounding)
    out["plateau_se"] = np.where(reached, np.where(full, 0.0, s * plateau_se), np.nan)
    out["n_max"] = n_max
    out["plateau_ratio"] = out["plateau"] / per_max
    out["final_amount"] = final
    out["final_conversion"] = final / per_max
    out["r2"] = np.where(used_tss > 0, 1 - rss / used_tss, np.nan)
    out["rmse"] = s * np.sqrt(rss / np.maximum(used_n, 1))
    out["n_points"] = n
    out["late_residual_z"] = np.where(is_model, late_z, np.nan)
    out["runs_z"] = np.where(is_model, runs_z, np.nan)
    out["plateau_fixed"] = full
    out["model_weight"] = model_weight
    for name in SCALAR_FIELDS:
        if name in ("model", "k_unit", "n_points", "n_max", "plateau_fixed", "leak_cut", "induction"):
            continue
        if name in out:
            out[name] = np.where(none, np.nan, out[name])
    return out
