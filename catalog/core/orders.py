"""Reaction order from a series of initial rates at different starting concentrations."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from catalog.core.linefit import fit_line

__all__ = ["OrderFit", "reaction_order"]


@dataclass(frozen=True)
class OrderFit:
    """Result of :func:`reaction_order`.

    Attributes
    ----------
    order, order_se, low, high : float
        Apparent order in the varied species, its standard error and 95 % interval (NaN with two points and no
        standard errors).
    n_points : int
        Points used (positive, finite concentration and rate).
    intercept : float
        ln of the rate at unit concentration (1 mol/m³), in the log of the rate unit.
    """

    order: float
    order_se: float
    low: float
    high: float
    n_points: int
    intercept: float


def reaction_order(concentration, r0, r0_se=None):
    """Apparent order from the slope of ln r0 against ln c, all other conditions held fixed.

    .. math:: r_0 = k\\,c^{\\,n} \\;\\Rightarrow\\; \\ln r_0 = \\ln k + n \\ln c

    Weighted as in :func:`catalog.core.arrhenius.fit_arrhenius` when standard errors are given
    (var ln r0 = (σ/r0)² plus the Paule-Mandel extra scatter); intervals use Student t with n − 2 degrees of freedom.

    Parameters
    ----------
    concentration : array_like
        Initial concentration of the varied species, mol/m³ (the order does not depend on the unit).
    r0 : array_like
        Initial rates.
    r0_se : array_like, optional
        Standard errors of r0.

    Returns
    -------
    OrderFit

    Raises
    ------
    ValueError
        Fewer than two distinct positive concentrations with a positive rate.
    """
    c = np.asarray(concentration, dtype=float).ravel()
    r = np.asarray(r0, dtype=float).ravel()
    keep = np.isfinite(c) & (c > 0) & np.isfinite(r) & (r > 0)
    se = None
    if r0_se is not None:
        se = np.broadcast_to(np.asarray(r0_se, dtype=float).ravel(), r.shape)
        keep &= np.isfinite(se) & (se > 0)
        se = se[keep] / r[keep]
    if np.unique(c[keep]).size < 2:
        raise ValueError("a reaction order needs initial rates at two or more distinct concentrations")
    line = fit_line(np.log(c[keep]), np.log(r[keep]), se)
    order_se = float(np.sqrt(line.cov[1, 1]))
    half = line.coverage_factor * order_se
    return OrderFit(
        order=line.slope,
        order_se=order_se,
        low=line.slope - half,
        high=line.slope + half,
        n_points=line.n_points,
        intercept=line.intercept,
    )
