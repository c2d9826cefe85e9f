"""Ranking catalysts with honest uncertainty: Monte Carlo rank intervals, P(top-k), weighted scores, Pareto sets.

A point ranking says PtC-01 beats RuC-02; it does not say whether the data could just as well have put them the
other way round. Here each catalyst's figure is drawn many times from its own uncertainty, the candidates are ranked
in every draw, and the spread of those ranks (a 95 % rank interval) and the share of draws in which a catalyst makes
the top k are reported beside the point rank.

Distributions
-------------
Positive figures (TOF, enhancement, TON, rates, price) are log-normal: the median is the estimate and

.. math:: \\ln x = \\ln \\hat x + \\sigma_{\\ln}\\, t_\\nu

with the fit's own log-scale standard error and its residual degrees of freedom (Student t; normal when the
variance is known): TOF at the reference temperature and the rates derived from it use ``tof_ref_log_se`` and
``tof_ref_dof``, the enhancement ``enhancement_ref_log_se``. A figure without a standard-error column falls back to
its 95 % interval, :math:`\\sigma_{\\ln} = (\\ln x_{high} - \\ln x_{low})/(2 z_{0.975})` (only the upper half
when the lower limit is 0) — never a t-based interval divided by the normal quantile, which would widen the draws
by t/z. Ea is drawn as ``ea + ea_se t_ν`` with ``ea_dof``. Figures without an interval are taken as exact.
Metrics computed from TOF at the reference
temperature (enhancement, rate per mass, per area, per cost) share one standard-normal deviate per catalyst and
draw, because they are monotone functions of the same estimate; Ea is drawn independently of TOF (the covariance of
ln TOF(T_ref) and Ea is not kept; it is small when T_ref lies near the middle of the measured range).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from catalog.analysis.diagnostics import FLAG_CODES
from catalog.core.stats import Z95
from catalog.errors import CatalogError

__all__ = ["METRICS", "Metric", "metric_values", "pareto_front", "rank"]

# Two-sided 95 % normal quantile, matching the interval convention of catalog.core.arrhenius.


@dataclass(frozen=True)
class Metric:
    """How one catalyst figure is read from the catalyst table and which way is better.

    Attributes
    ----------
    title, unit : str
        For display.
    column : str
        Estimate column of the catalyst table.
    higher_is_better : bool
        Direction of the ranking.
    log_scale : bool
        True: positive figure, log-normal uncertainty, standardised on ln x in a score. False: normal, linear.
    interval : tuple of str or None
        ``(estimate, low, high)`` columns whose 95 % interval applies to this figure: directly when ``estimate`` is
        ``column``, else relatively (``x·low/estimate``; site count and mass are taken as exact).
    se : str or None
        Standard-error column on the drawing scale (log scale for a log-scale figure); preferred to the interval.
    dof : str or None
        Degrees-of-freedom column of that standard error (Student-t deviates); normal deviates without one.
    source : str
        Figures with the same source share their random deviates (they derive from one estimate).
    per_price : bool
        Divide by the price per gram (per kg: × 1000), giving the figure per unit of money spent on catalyst.
    """

    title: str
    unit: str
    column: str
    higher_is_better: bool
    log_scale: bool
    interval: tuple[str, str, str] | None
    source: str
    se: str | None = None
    per_price: bool = False
    dof: str | None = None


_TOF_INTERVAL = ("tof_ref", "tof_ref_low", "tof_ref_high")

#: Registry of rankable figures. Ea ranks lower-is-better: a lower apparent Ea means a rate less sensitive to
#: temperature, so the catalyst keeps more of its activity when run cooler.
_TOF_SE = dict(se="tof_ref_log_se", dof="tof_ref_dof")
METRICS: dict[str, Metric] = {
    "tof": Metric("TOF at the reference temperature", "1/s", "tof_ref", True, True, _TOF_INTERVAL, "tof_ref",
                  **_TOF_SE),
    "enhancement": Metric("Rate over the blank at the reference temperature", "-", "enhancement_ref", True, True,
                          ("enhancement_ref", "enhancement_ref_low", "enhancement_ref_high"), "tof_ref",
                          se="enhancement_ref_log_se"),
    "ea": Metric("Apparent activation energy (lower: less temperature-sensitive)", "J/mol", "ea", False, False,
                 ("ea", "ea_low", "ea_high"), "ea", se="ea_se", dof="ea_dof"),
    "ton": Metric("Largest TON reached", "-", "ton_max", True, True, None, "ton_max"),
    "rate_per_mass": Metric("Rate per catalyst mass at the reference temperature", "mol/(kg s)", "rate_per_mass_ref",
                            True, True, _TOF_INTERVAL, "tof_ref", **_TOF_SE),
    "rate_per_area": Metric("Rate per catalyst surface area at the reference temperature", "mol/(m² s)",
                            "rate_per_area_ref", True, True, _TOF_INTERVAL, "tof_ref", **_TOF_SE),
    "cost": Metric("Price per gram of catalyst", "money/g", "price_per_gram", False, True, None, "price_per_gram"),
    "rate_per_cost": Metric("Rate per unit of money spent on catalyst", "mol/(s money)", "rate_per_mass_ref", True,
                            True, _TOF_INTERVAL, "tof_ref", per_price=True, **_TOF_SE),
}


def _numeric(table: pd.DataFrame, name: str | None) -> pd.Series:
    if name is None or name not in table.columns:
        return pd.Series(np.nan, index=table.index, dtype=float)
    return pd.to_numeric(table[name], errors="coerce").astype(float)


def _metric(name: str) -> Metric:
    if name not in METRICS:
        raise CatalogError(f"unknown metric '{name}'; choose from {', '.join(METRICS)} (or 'score' with weights)")
    return METRICS[name]


def metric_values(catalysts: pd.DataFrame, metric: str) -> pd.DataFrame:
    """One metric's estimate, 95 % interval and spread on its drawing scale, per catalyst.

    With :math:`f = \\ln` for log-scale metrics and the identity otherwise,

    .. math:: c = f(x),\\qquad \\sigma = \\frac{[f(x_{high}) - f(x)] + [f(x) - f(x_{low})]}{2 z_{0.975}}

    (one half alone when the other is not finite; the standard error directly when the metric has one).

    Returns
    -------
    DataFrame
        Indexed like ``catalysts``: ``value``, ``value_low``, ``value_high`` (display scale; NaN where unknown),
        ``centre``, ``sigma`` (drawing scale; sigma 0 when no interval is known), ``has_interval`` (bool).
    """
    m = _metric(metric)
    value = _numeric(catalysts, m.column)
    if m.per_price:
        price = _numeric(catalysts, "price_per_gram")
        value = value / (1e3 * price.where(price > 0))
    if m.log_scale:
        value = value.where(value > 0)
    if m.interval is None:
        low = high = pd.Series(np.nan, index=catalysts.index, dtype=float)
    else:
        est, lo, hi = (_numeric(catalysts, c) for c in m.interval)
        if m.interval[0] == m.column and not m.per_price:
            low, high = lo, hi
        elif m.log_scale:
            low, high = value * lo / est, value * hi / est
        else:
            low, high = value + lo - est, value + hi - est
    f = np.log if m.log_scale else (lambda x: x)
    with np.errstate(divide="ignore", invalid="ignore"):
        centre = f(value)
        upper = f(high) - centre
        lower = centre - f(low.where(low > 0) if m.log_scale else low)
    halves = pd.concat([upper, lower], axis=1).where(lambda h: np.isfinite(h) & (h >= 0))
    sigma = halves.mean(axis=1) / Z95
    if m.se is not None:
        se = _numeric(catalysts, m.se)
        sigma = se.where(np.isfinite(se) & (se >= 0), sigma)
    has_interval = sigma.notna()
    dof = _numeric(catalysts, m.dof).where(lambda d: d > 0) if m.dof is not None else pd.Series(
        np.inf, index=catalysts.index)
    return pd.DataFrame({"value": value, "value_low": low, "value_high": high, "centre": centre,
                         "sigma": sigma.fillna(0.0), "dof": dof.fillna(np.inf), "has_interval": has_interval},
                        index=catalysts.index)


def _non_dominated(goodness: np.ndarray) -> np.ndarray:
    """Rows of an (n, m) higher-is-better array that no other row matches or beats on all columns and beats on one."""
    ge = (goodness[None, :, :] >= goodness[:, None, :]).all(axis=2)
    gt = (goodness[None, :, :] > goodness[:, None, :]).any(axis=2)
    return ~(ge & gt).any(axis=1)


def _pareto(catalysts: pd.DataFrame, metrics, candidates: pd.Series) -> pd.Series:
    """Non-dominated candidates on the point estimates of ``metrics``; False for non-candidates and missing values."""
    columns = []
    for name in metrics:
        sign = 1.0 if METRICS[name].higher_is_better else -1.0
        columns.append(sign * metric_values(catalysts, name)["value"])
    goodness = pd.concat(columns, axis=1)
    usable = candidates & goodness.notna().all(axis=1)
    out = pd.Series(False, index=catalysts.index)
    if usable.any():
        out[usable] = _non_dominated(goodness[usable].to_numpy(float))
    return out


def pareto_front(catalysts: pd.DataFrame, metric_x: str, metric_y: str) -> pd.Series:
    """Catalysts not dominated on two metrics, each taken in its own direction.

    Catalyst *j* dominates *i* when it is at least as good on both metrics and better on one; the Pareto set is the
    catalysts nobody dominates. Catalysts missing either value are never in the set.

    Parameters
    ----------
    catalysts : DataFrame
        Catalyst table (:func:`catalog.analysis.analyse` layout).
    metric_x, metric_y : str
        Keys of :data:`METRICS`, e.g. ``'tof'`` and ``'ea'``, or ``'tof'`` and ``'cost'``.

    Returns
    -------
    Series of bool
        Indexed like ``catalysts``.
    """
    _metric(metric_x), _metric(metric_y)
    return _pareto(catalysts, (metric_x, metric_y), pd.Series(True, index=catalysts.index))


def _flag_sets(catalysts: pd.DataFrame, codes) -> pd.Series:
    """Whether each catalyst carries any of ``codes`` in its semicolon-separated ``flags`` column."""
    wanted = set(codes)
    unknown = wanted - set(FLAG_CODES)
    if unknown:
        raise CatalogError(f"unknown flag code(s): {', '.join(sorted(unknown))}")
    if not wanted:
        return pd.Series([frozenset()] * len(catalysts), index=catalysts.index, dtype=object)
    if "flags" not in catalysts.columns:
        raise CatalogError("the catalyst table has no flags; run the diagnostics before excluding or demoting by flag")
    return catalysts["flags"].fillna("").astype(str).map(lambda s: frozenset(s.split(";")) & wanted)


def rank(catalysts: pd.DataFrame, metric: str = "tof", weights: dict | None = None, top_k: int = 3,
         exclude_flags=(), demote_flags=(), n_draws: int = 4000, seed: int = 20261201,
         pareto_metrics=None) -> pd.DataFrame:
    """Rank catalysts on one metric or a weighted score, with Monte Carlo rank intervals and P(top-k).

    Single metric: candidates are ordered by the point estimate in the metric's direction. Weighted score
    (``metric='score'``): with :math:`g_m = \\pm f_m(x_m)` (sign by direction, :math:`f_m = \\ln` for log-scale
    metrics) standardised over the ranked candidates' point estimates,

    .. math:: S = \\sum_m w_m \\,\\frac{g_m - \\bar g_m}{s_{g_m}}

    (:math:`s` the sample standard deviation; a metric with no spread contributes 0). In each of ``n_draws`` draws
    every figure is redrawn from its uncertainty (module docstring), the standardisation is kept fixed, and the
    candidates are ranked (ties split at random); the 2.5th and 97.5th percentiles of a catalyst's ranks form its
    95 % rank interval and the share of draws with rank ≤ ``top_k`` is ``p_top_k``. The same seed gives the same
    output.

    Parameters
    ----------
    catalysts : DataFrame
        Catalyst table indexed by catalyst_id (:func:`catalog.analysis.analyse` layout, plus ``flags`` from the
        diagnostics when flags are used).
    metric : str
        A key of :data:`METRICS`, or ``'score'``.
    weights : dict, optional
        For ``'score'``: metric name → non-negative weight, e.g. ``{'tof': 2, 'enhancement': 1, 'ea': 1}``.
    top_k : int
        k of ``p_top_k``.
    exclude_flags, demote_flags : iterable of str
        Flag codes (:data:`catalog.analysis.diagnostics.FLAG_CODES`). Excluded catalysts stay in the output, unranked;
        demoted ones rank after every catalyst that is not demoted, in the point ranking and in every draw.
    n_draws, seed : int
        Monte Carlo size and seed.
    pareto_metrics : sequence of str, optional
        Metrics of the ``pareto`` column; default the weighted metrics of a score, else the metric against Ea (or
        Ea against TOF when ranking by Ea): activity against temperature sensitivity.

    Returns
    -------
    DataFrame
        Indexed by catalyst_id and sorted by rank (unranked last): ``rank`` (1..n; NaN when excluded or without a
        value), ``value``, ``value_low``, ``value_high`` (the metric's 95 % interval, or the score and its Monte
        Carlo 95 % interval), ``rank_low``, ``rank_high``, ``p_top_k``, ``pareto``, ``excluded``, ``demoted``,
        ``note``.
    """
    if top_k < 1 or n_draws < 1:
        raise CatalogError("top_k and the number of draws must be at least 1")
    if metric == "score":
        if not weights:
            raise CatalogError("a weighted score needs weights, e.g. {'tof': 2, 'enhancement': 1, 'ea': 1}")
        names = sorted(weights)
        for name in names:
            _metric(name)
            if not np.isfinite(weights[name]) or weights[name] < 0:
                raise CatalogError(f"the weight of '{name}' must be a non-negative number")
    else:
        if weights:
            raise CatalogError("weights apply only to metric='score'")
        _metric(metric)
        names = [metric]
    index = catalysts.index
    excluded_by = _flag_sets(catalysts, exclude_flags)
    demoted_by = _flag_sets(catalysts, demote_flags)
    excluded = excluded_by.map(bool).astype(bool)
    demoted = demoted_by.map(bool).astype(bool) & ~excluded

    tables = {name: metric_values(catalysts, name) for name in names}
    has_value = pd.concat([t["centre"].notna() for t in tables.values()], axis=1).all(axis=1)
    ranked = has_value & ~excluded
    signs = {name: 1.0 if METRICS[name].higher_is_better else -1.0 for name in names}

    # Random deviates per source in a fixed (sorted) order, so the draws do not depend on dict order.
    rng = np.random.default_rng(seed)
    n = len(index)
    dofs = {}
    for m in names:  # the first metric of a source that states its dof sets the deviates' dof
        d = tables[m]["dof"].to_numpy(float)
        if METRICS[m].dof is not None and METRICS[m].source not in dofs:
            dofs[METRICS[m].source] = d
    deviates = {}
    for source in sorted({METRICS[m].source for m in names}):
        z = rng.standard_normal((n_draws, n))
        dof = dofs.get(source, np.full(n, np.inf))
        finite = np.isfinite(dof)
        if finite.any():
            # Student t_nu = z / sqrt(chi2_nu / nu): the fit's own standard error with its residual dof
            chi2 = rng.chisquare(np.where(finite, dof, 1.0), (n_draws, n))
            z = np.where(finite, z * np.sqrt(np.where(finite, dof, 1.0) / chi2), z)
        deviates[source] = z
    point = {m: signs[m] * tables[m]["centre"].to_numpy(float) for m in names}
    drawn = {m: signs[m] * (tables[m]["centre"].to_numpy(float)
                            + tables[m]["sigma"].to_numpy(float) * deviates[METRICS[m].source]) for m in names}
    if metric == "score":
        at = ranked.to_numpy()
        g_point = np.zeros(n)
        g_drawn = np.zeros((n_draws, n))
        for m in names:
            mean = float(np.mean(point[m][at])) if at.any() else 0.0
            sd = float(np.std(point[m][at], ddof=1)) if at.sum() > 1 else 0.0
            scale = weights[m] / sd if sd > 0 else 0.0
            g_point = g_point + scale * (point[m] - mean)
            g_drawn = g_drawn + scale * (drawn[m] - mean)
        g_point = np.where(has_value, g_point, np.nan)
        with np.errstate(invalid="ignore"):
            low_high = np.quantile(g_drawn, [0.025, 0.975], axis=0)
        value = pd.DataFrame({"value": g_point, "value_low": np.where(has_value, low_high[0], np.nan),
                              "value_high": np.where(has_value, low_high[1], np.nan)}, index=index)
    else:
        g_point, g_drawn = point[metric], drawn[metric]
        value = tables[metric][["value", "value_low", "value_high"]]

    out = value.copy()
    for column in ("rank", "rank_low", "rank_high", "p_top_k"):
        out[column] = np.nan
    at = np.flatnonzero(ranked.to_numpy())
    if at.size:
        late = demoted.to_numpy()[at].astype(float)
        # Point rank: undemoted first, then by goodness, then by id for a stable order of exact ties.
        ids = np.asarray(index[at].astype(str))
        order = np.lexsort((ids, -g_point[at], late))
        point_rank = np.empty(at.size)
        point_rank[order] = np.arange(1, at.size + 1)
        tie_break = rng.random((n_draws, at.size))
        order = np.lexsort((tie_break, -g_drawn[:, at], np.broadcast_to(late, (n_draws, at.size))), axis=-1)
        ranks = np.empty_like(order)
        np.put_along_axis(ranks, order, np.arange(1, at.size + 1)[None, :].repeat(n_draws, 0), axis=1)
        rank_low, rank_high = np.quantile(ranks, [0.025, 0.975], axis=0, method="inverted_cdf")
        out.iloc[at, out.columns.get_loc("rank")] = point_rank
        out.iloc[at, out.columns.get_loc("rank_low")] = rank_low
        out.iloc[at, out.columns.get_loc("rank_high")] = rank_high
        out.iloc[at, out.columns.get_loc("p_top_k")] = (ranks <= top_k).mean(axis=0)

    if pareto_metrics is None:
        pareto_metrics = names if metric == "score" else ((metric, "ea") if metric != "ea" else ("ea", "tof"))
    for name in pareto_metrics:
        _metric(name)
    out["pareto"] = _pareto(catalysts, tuple(pareto_metrics), ranked)
    out["excluded"] = excluded
    out["demoted"] = demoted
    out["note"] = _notes(index, names, tables, has_value, excluded_by, demoted_by)
    out.index.name = "catalyst_id"
    out = out.assign(_unranked=out["rank"].isna(), _id=index.astype(str))
    out = out.sort_values(["_unranked", "rank", "_id"], kind="stable").drop(columns=["_unranked", "_id"])
    return out[["rank", "value", "value_low", "value_high", "rank_low", "rank_high", "p_top_k", "pareto",
                "excluded", "demoted", "note"]]


def _notes(index, names, tables, has_value, excluded_by, demoted_by) -> list[str]:
    """Why a catalyst is unranked or demoted, and which figures had no interval (drawn as exact)."""
    notes = []
    for i in range(len(index)):
        parts = []
        if excluded_by.iloc[i]:
            parts.append("excluded: flagged " + ", ".join(sorted(excluded_by.iloc[i])))
        if demoted_by.iloc[i] and not excluded_by.iloc[i]:
            parts.append("demoted: flagged " + ", ".join(sorted(demoted_by.iloc[i])))
        missing = [n for n in names if not np.isfinite(tables[n]["centre"].iloc[i])]
        if missing:
            parts.append("no value for " + ", ".join(missing))
        # Only metrics that normally carry an interval; price and TON are exact by nature.
        exact = [n for n in names if n not in missing and METRICS[n].interval is not None
                 and not tables[n]["has_interval"].iloc[i]]
        if exact and has_value.iloc[i]:
            parts.append("no interval for " + ", ".join(exact) + " (taken as exact)")
        notes.append("; ".join(parts))
    return notes
