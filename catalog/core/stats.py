"""Statistical constants and quantiles shared by every interval the package reports.

All intervals are two-sided at :data:`CONFIDENCE`; a fit with residual degrees of freedom uses Student's t, a value
whose standard error is known (or pooled with many dof) the normal quantile :data:`Z95`.

Every Student-t figure the analysis needs has an integer number of degrees of freedom (points less parameters), for
which the distribution function is a finite trigonometric series; it is evaluated here with numpy and the math
module, because scipy.special, the usual source, costs ~0.25 s of imports (with numpy.f2py, which its array-API
layer pulls in), a tenth of a cold analysis of 10^4 trials.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

#: Coverage of every reported interval.
CONFIDENCE = 0.95
#: Two-sided 95 % normal quantile, Φ⁻¹(0.975) (Abramowitz and Stegun, Handbook of Mathematical Functions, table
#: 26.5; equals scipy.stats.norm.ppf(0.975)). A literal so that importing it does not load scipy.stats.
Z95 = 1.959963984540054

#: Terms of the tail series summed at a time (:func:`t_tail`): bounds the memory for very many degrees of freedom.
_TAIL_BLOCK = 1 << 14
#: A remainder of the tail series below this fraction of the sum so far ends it (below half an ulp).
_TAIL_REST = 1e-17


def _series(odd: bool, log_c2: float, head: int, size: int):
    """The terms of the series in cos²θ of :func:`t_tail`, relative to term 0 (which is 1), in blocks of
    consecutive terms from term 0 on, without end: the ``head`` terms of the finite series first (in blocks of at
    most :data:`_TAIL_BLOCK`), then blocks of ``size`` terms of the tail.

    Term j is ∏_{i<=j} r_i cos^{2j}θ with r_i = (2i−1)/(2i) for even ν and (2i)/(2i+1) for odd ν, taken as the
    exponential of a sum of logs: the ratios' (``log1p`` of −1/(2i) or −1/(2i+1), each exact to rounding), not a
    ratio of gamma functions, whose logs lose digits to their size when j is large; and ``j ln cos²θ``, which
    cannot underflow to zero before the sum of logs does.
    """
    log_product, start = 0.0, 0
    while True:
        n = min(head - start, _TAIL_BLOCK) if start < head else size
        i = np.arange(start + 1, start + n, dtype=float)
        logs = log_product + np.concatenate(([0.0], np.cumsum(np.log1p(-1.0 / (2.0 * i + (1.0 if odd else 0.0))))))
        yield np.exp(logs + np.arange(start, start + n) * log_c2)
        start += n
        log_product = float(logs[-1]) + math.log1p(-1.0 / (2.0 * start + (1.0 if odd else 0.0)))


def t_tail(t: float, dof: int) -> float:
    """Two-sided tail P(|T| > t) of Student's t with an integer number of degrees of freedom ``dof`` >= 1.

    With θ = arctan(t/√ν), Abramowitz and Stegun, Handbook of Mathematical Functions, 26.7.3 (odd ν) and 26.7.4
    (even ν), give A(t|ν) = P(|T| <= t) as

    .. math::
        A = \\frac{2}{\\pi}\\Bigl[\\theta + \\sin\\theta\\cos\\theta\\Bigl(1 + \\frac{2}{3}\\cos^2\\theta + \\dots
            + \\frac{2\\cdot 4\\cdots(\\nu-3)}{1\\cdot 3\\cdots(\\nu-2)}\\cos^{\\nu-3}\\theta\\Bigr)\\Bigr]
            \\ (\\nu\\ \\mathrm{odd};\\ 2\\theta/\\pi\\ \\mathrm{for}\\ \\nu = 1),\\qquad
        A = \\sin\\theta\\Bigl(1 + \\frac{1}{2}\\cos^2\\theta + \\dots
            + \\frac{1\\cdot 3\\cdots(\\nu-3)}{2\\cdot 4\\cdots(\\nu-2)}\\cos^{\\nu-2}\\theta\\Bigr)
            \\ (\\nu\\ \\mathrm{even}).

    Continued to infinity, the even series is the binomial series of (1 − cos²θ)^{-1/2} = 1/sinθ and the odd one
    that of arcsin(cosθ)/sinθ = (π/2 − θ)/sinθ, so both make A = 1: the tail 1 − A is the rest of the same series.
    Where A > 1/2 the tail is summed from there (every term positive, full relative precision for a tiny p-value,
    where 1 − A would cancel); elsewhere it is 1 − A. sinθ and cosθ are taken as t/√(ν + t²) and √ν/√(ν + t²):
    the cosine of a θ close to π/2 would lose digits.

    The F test with (1, ν) degrees of freedom has the same tail at t = √F: P(F_{1,ν} > F) = P(|T_ν| > √F).
    """
    if dof < 1 or dof != int(dof):
        raise ValueError(f"the degrees of freedom must be a positive integer, got {dof}")
    dof = int(dof)
    if not t > 0:
        return 1.0
    hypot = math.sqrt(dof + t * t)
    sin, cos = t / hypot, math.sqrt(dof) / hypot
    odd = dof % 2 == 1
    log_c2 = -math.log1p(t * t / dof)  # ln cos²θ, exact to rounding even when cos²θ is close to 1
    first_tail = (dof - 1) // 2 if odd else dof // 2  # the finite series holds terms 0 .. first_tail - 1
    # Tail blocks as long as it takes the terms to fall by e^-40 at the rate of cos²θ per term (mostly one block).
    blocks = _series(odd, log_c2, first_tail, min(math.ceil(40.0 / max(-log_c2, 1e-300)) + 1, _TAIL_BLOCK))
    head, start = 0.0, 0
    while start < first_tail:
        terms = next(blocks)
        head += float(terms.sum())
        start += terms.size
    inside = 2.0 / math.pi * (math.atan(t / math.sqrt(dof)) + sin * cos * head) if odd else sin * head
    if inside <= 0.5:
        return 1.0 - inside
    rest = 0.0
    while True:
        terms = next(blocks)
        rest += float(terms.sum())
        # The terms fall at least as fast as cos²θ per step: what is left after a block is below last / (1 - cos²θ).
        if terms[-1] / -math.expm1(log_c2) <= _TAIL_REST * rest:
            break
    return 2.0 / math.pi * sin * cos * rest if odd else sin * rest


def _t_density(t: float, dof: int) -> float:
    """Probability density of Student's t with ``dof`` degrees of freedom at ``t``."""
    log_norm = math.lgamma((dof + 1) / 2) - math.lgamma(dof / 2) - 0.5 * math.log(dof * math.pi)
    return math.exp(log_norm - (dof + 1) / 2 * math.log1p(t * t / dof))


@lru_cache(maxsize=None)
def t95(dof: float) -> float:
    """Two-sided 95 % Student-t quantile for an integer number of degrees of freedom ``dof``; :data:`Z95` for an
    infinite ``dof``.

    .. math:: t_{0.975,\\nu}:\\quad P(|T_\\nu| > t) = 1 - \\mathrm{CONFIDENCE}

    One and two degrees of freedom have closed forms, t = cot(π α/2) and t = (1 − α)/√(2 (α/2)(1 − α/2)) with
    α = 1 − CONFIDENCE (from the distribution functions 2θ/π and sinθ of :func:`t_tail`). Otherwise Newton's
    method on the tail of :func:`t_tail`, from :data:`Z95`: the tail is convex and falling for t > 0 and the
    root lies above the normal quantile, so every step lands between the last point and the root, and the steps
    end when one no longer shrinks (at rounding).
    """
    if dof == math.inf:
        return Z95
    alpha = 1.0 - CONFIDENCE
    if dof == 1:
        return 1.0 / math.tan(math.pi * alpha / 2)
    if dof == 2:
        return (1.0 - alpha) / math.sqrt(2.0 * (alpha / 2) * (1.0 - alpha / 2))
    t, last = Z95, math.inf
    while True:
        step = (t_tail(t, dof) - alpha) / (2.0 * _t_density(t, dof))
        t += step
        if not abs(step) < last or abs(step) <= 4 * math.ulp(t):
            return t
        last = abs(step)
