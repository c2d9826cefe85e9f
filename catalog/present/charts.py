"""Altair chart builders shared by the HTML report and the Streamlit app: DataFrames in, charts out.

Every builder is pure: it takes result tables in SI (``Results.trials`` / ``Results.catalysts`` and long-form trace
points) and returns an Altair chart; nothing here reads the database or writes files. Units are converted for display
here, because a chart axis is an edge of the package.

Altair refuses to embed more than 5,000 rows per data set by default, and a browser slows down well before that,
so trace overlays are thinned to an even subset of each trial's readings and fitted curves are drawn on a short time
grid; the fits themselves always use every reading.
"""

from __future__ import annotations

from collections.abc import Iterable

import altair as alt
import numpy as np
import pandas as pd

from catalog.analysis.per_catalyst import standard_series
from catalog.core import arrhenius
from catalog.core.stats import Z95
from catalog.errors import CatalogError
from catalog.present import labels
from catalog.units import celsius

__all__ = [
    "MAX_ROWS",
    "arrhenius_chart",
    "enhancement_chart",
    "pareto_chart",
    "tof_bar_chart",
]

#: Rows of one data set a chart may carry; Altair's own default limit, kept rather than switched off.
MAX_ROWS = 5000
#: Points on each fitted curve: enough for a smooth line at screen resolution.
CURVE_POINTS = 60
#: Categorical colours for catalysts (Tableau 10: ten hues chosen to stay distinct for common colour-vision types).
CATEGORY_SCHEME = "tableau10"
#: Sequential colours for temperature (viridis: ordered in lightness, so it also reads in greyscale).
TEMPERATURE_SCHEME = "viridis"
#: Height of one catalyst's row in a bar chart, px: each catalyst gets its own row at any chart width.
ROW_STEP = 24
#: Longest catalyst label drawn before it is cut with an ellipsis, px.
LABEL_LIMIT = 220

WIDTH = 420
HEIGHT = 300


def pick(frame: pd.DataFrame, ids: Iterable[str] | None) -> pd.DataFrame:
    """Rows of ``frame`` for ``ids`` in the given order (all rows when None); unknown ids are a user error."""
    if ids is None:
        return frame
    ids = list(ids)
    missing = [i for i in ids if i not in frame.index]
    if missing:
        raise CatalogError(f"no results for: {', '.join(map(str, missing))}")
    return frame.loc[ids]


# ------------------------------------------------------------------------------------------------------ Arrhenius

def arrhenius_frames(trials: pd.DataFrame, catalyst_ids: Iterable[str],
                     n_grid: int = CURVE_POINTS) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Points and fitted lines of an Arrhenius plot of TOF, one catalyst at a time.

    The fit is rebuilt from the same trials the analysis used (the catalyst's standard series, see
    ``catalog.analysis``), so the line, its band and the catalyst table agree. Trials outside that series
    (concentration series, illuminated trials) are returned with ``in_fit`` False.

    Per-trial error bars are :math:`\\ln\\mathrm{TOF} \\pm 1.96\\,\\sigma_\\mathrm{TOF}/\\mathrm{TOF}` (delta method).
    The band is the 95 % confidence interval of the fitted line from the (ln A, Ea) covariance,
    :func:`catalog.core.arrhenius.predict`.

    Parameters
    ----------
    trials : DataFrame
        ``Results.trials`` (indexed by trial_id; needs catalyst_id, temperature, tof, tof_se and the conditions the
        standard-series choice reads).
    catalyst_ids : iterable of str
    n_grid : int
        Temperatures on each fitted line.

    Returns
    -------
    points : DataFrame
        catalyst_id, trial_id, temperature_c, inv_t (1000/T, 1/K), ln_tof, ln_tof_low, ln_tof_high, in_fit.
    lines : DataFrame
        catalyst_id, temperature_c, inv_t, ln_tof, ln_low, ln_high (empty for a catalyst without an Arrhenius fit).
    """
    point_parts, line_parts = [], []
    for cid in catalyst_ids:
        group = trials[trials["catalyst_id"] == cid]
        if group.empty:
            continue
        T = group["temperature"].to_numpy(float)
        tof = group["tof"].to_numpy(float)
        se = group["tof_se"].to_numpy(float)
        main = standard_series(group)
        with np.errstate(divide="ignore", invalid="ignore"):
            ln_tof = np.log(tof)
            half = Z95 * se / tof
        point_parts.append(pd.DataFrame({
            "catalyst_id": cid, "trial_id": group.index.to_numpy(), "temperature_c": celsius(T),
            "inv_t": 1000.0 / T, "ln_tof": ln_tof, "ln_tof_low": ln_tof - half, "ln_tof_high": ln_tof + half,
            "in_fit": main}))
        try:
            fit = arrhenius.fit_arrhenius(T[main], tof[main], se[main])
        except (arrhenius.TooFewTemperatures, ValueError):
            continue
        grid = np.linspace(fit.t_min, fit.t_max, n_grid)
        pred = arrhenius.predict(fit, grid)
        line_parts.append(pd.DataFrame({
            "catalyst_id": cid, "temperature_c": celsius(grid), "inv_t": 1000.0 / grid,
            "ln_tof": np.log(pred.value), "ln_low": np.log(pred.low), "ln_high": np.log(pred.high)}))
    points = pd.concat(point_parts, ignore_index=True) if point_parts else pd.DataFrame(
        columns=["catalyst_id", "trial_id", "temperature_c", "inv_t", "ln_tof", "ln_tof_low", "ln_tof_high", "in_fit"])
    lines = pd.concat(line_parts, ignore_index=True) if line_parts else pd.DataFrame(
        columns=["catalyst_id", "temperature_c", "inv_t", "ln_tof", "ln_low", "ln_high"])
    points = points[np.isfinite(points["ln_tof"].to_numpy(float))].reset_index(drop=True)
    return points, lines


def arrhenius_chart(results, catalyst_ids: Iterable[str]) -> alt.LayerChart:
    """Arrhenius plot of TOF (ln TOF against 1000/T) with per-trial error bars, fitted lines and 95 % bands.

    Filled points are the trials in the fit; open points are trials of the same catalyst kept out of it (another
    initial concentration or illumination). Blank trials are not drawn: their rate is per vessel, not per site, so
    it has no place on a TOF axis.

    Parameters
    ----------
    results : catalog.analysis.results.Results
    catalyst_ids : iterable of str

    Returns
    -------
    altair.LayerChart
    """
    ids = list(catalyst_ids)
    points, lines = arrhenius_frames(results.trials, ids)
    colour = alt.Color("catalyst_id:N", title="catalyst", scale=alt.Scale(scheme=CATEGORY_SCHEME, domain=ids))
    x = alt.X("inv_t:Q", title="1000 / T [K⁻¹]", scale=alt.Scale(zero=False))
    tips = [alt.Tooltip("catalyst_id:N", title="catalyst"), alt.Tooltip("trial_id:N", title="trial"),
            alt.Tooltip("temperature_c:Q", title="T [°C]", format=".1f"),
            alt.Tooltip("ln_tof:Q", title="ln TOF", format=".3f"), alt.Tooltip("in_fit:N", title="in fit")]
    base_points = alt.Chart(points)
    bars = base_points.mark_rule(opacity=0.6).encode(
        x=x, y=alt.Y("ln_tof_low:Q", title="ln (TOF / s⁻¹)", scale=alt.Scale(zero=False)), y2="ln_tof_high:Q",
        color=colour)
    dots = base_points.mark_point(size=45, strokeWidth=1.5).encode(
        x=x, y="ln_tof:Q", color=colour,
        fill=alt.condition("datum.in_fit", colour, alt.value("white")), tooltip=tips)
    base_lines = alt.Chart(lines)
    band = base_lines.mark_area(opacity=0.18).encode(x=x, y="ln_low:Q", y2="ln_high:Q", color=colour)
    fitted = base_lines.mark_line(strokeWidth=1.5).encode(x=x, y="ln_tof:Q", color=colour)
    return alt.layer(band, fitted, bars, dots).properties(
        width=WIDTH, height=HEIGHT, title="Arrhenius plot of TOF (fit ± 95 % confidence band)")


# ------------------------------------------------------------------------------------------------------- traces

def _interval_chart(frame: pd.DataFrame, value: str, low: str, high: str, axis_title: str, log: bool,
                    title: str, rule_at: float | None = None) -> alt.LayerChart:
    """Horizontal bars (or dots on a log axis) with 95 % interval whiskers, one row per catalyst, in frame order.

    ``rule_at`` adds a dashed vertical reference line at that value.
    """
    order = frame["catalyst_id"].tolist()
    y = alt.Y("catalyst_id:N", title=None, sort=order, axis=alt.Axis(labelLimit=LABEL_LIMIT))
    scale = alt.Scale(type="log") if log else alt.Scale(zero=True)
    x = alt.X(f"{value}:Q", title=axis_title, scale=scale)
    tips = [alt.Tooltip("catalyst_id:N", title="catalyst"), alt.Tooltip(f"{value}:Q", format=".4g", title="value"),
            alt.Tooltip(f"{low}:Q", format=".4g", title="95 % low"),
            alt.Tooltip(f"{high}:Q", format=".4g", title="95 % high"),
            alt.Tooltip("extrapolated:N", title="extrapolated")]
    base = alt.Chart(frame)
    # Bars start at zero, which a log axis does not have: there a dot marks the value instead.
    mark = base.mark_point(filled=True, size=60) if log else base.mark_bar(opacity=0.75, height=14)
    # Extrapolated values are drawn paler so the eye does not weigh them like measured ones.
    body = mark.encode(x=x, y=y, opacity=alt.condition("datum.extrapolated", alt.value(0.35), alt.value(0.85)),
                       tooltip=tips)
    whiskers = base.mark_rule(color="black").encode(x=f"{low}:Q", x2=f"{high}:Q", y=y)
    layers = [body, whiskers]
    if rule_at is not None:
        layers.append(alt.Chart(pd.DataFrame({value: [float(rule_at)]})).mark_rule(
            strokeDash=[4, 3], color="grey").encode(x=f"{value}:Q"))
    # A step height gives every catalyst its own row whatever width the page gives the chart.
    return alt.layer(*layers).properties(width=WIDTH, height=alt.Step(ROW_STEP), title=title)


def tof_bar_chart(catalysts: pd.DataFrame, reference_temperature: float,
                  catalyst_ids: Iterable[str] | None = None) -> alt.LayerChart:
    """TOF at the reference temperature with its 95 % interval, one bar per catalyst in the given (rank) order.

    Catalysts without a TOF at the reference temperature are left out rather than drawn at zero.

    Parameters
    ----------
    catalysts : DataFrame
        ``Results.catalysts`` (tof_ref, tof_ref_low, tof_ref_high, tof_ref_extrapolated).
    reference_temperature : float
        K, for the axis title.
    catalyst_ids : iterable of str, optional
        Which catalysts and in which order (e.g. the ranking's index); all, by id, when None.
    """
    rows = pick(catalysts, catalyst_ids)
    frame = pd.DataFrame({
        "catalyst_id": rows.index.to_numpy(), "tof": rows["tof_ref"].to_numpy(float),
        "tof_low": rows["tof_ref_low"].to_numpy(float), "tof_high": rows["tof_ref_high"].to_numpy(float),
        "extrapolated": rows["tof_ref_extrapolated"].fillna(False).astype(bool).to_numpy()})
    frame = frame[np.isfinite(frame["tof"])].reset_index(drop=True)
    t_ref = float(celsius(reference_temperature))
    return _interval_chart(frame, "tof", "tof_low", "tof_high", f"TOF at {t_ref:.1f} °C [s⁻¹]", log=False,
                           title="TOF at the reference temperature (95 % interval)")


def enhancement_chart(catalysts: pd.DataFrame, catalyst_ids: Iterable[str] | None = None,
                      threshold: float | None = None) -> alt.LayerChart:
    """Rate enhancement over the uncatalysed blank at the reference temperature, log axis, with 95 % intervals.

    .. math:: E = \\frac{r_\\mathrm{blank}(T_\\mathrm{ref}) + \\mathrm{TOF}(T_\\mathrm{ref})\\,n_\\mathrm{sites}}
              {r_\\mathrm{blank}(T_\\mathrm{ref})}

    (computed in ``catalog.analysis``). A dashed rule marks ``threshold`` (e.g. ``Settings.min_enhancement``) when
    given.

    Parameters
    ----------
    catalysts : DataFrame
        ``Results.catalysts`` (enhancement_ref, enhancement_ref_low, enhancement_ref_high, blank_extrapolated).
    catalyst_ids : iterable of str, optional
    threshold : float, optional
    """
    rows = pick(catalysts, catalyst_ids)
    frame = pd.DataFrame({
        "catalyst_id": rows.index.to_numpy(), "enhancement": rows["enhancement_ref"].to_numpy(float),
        "low": rows["enhancement_ref_low"].to_numpy(float), "high": rows["enhancement_ref_high"].to_numpy(float),
        "extrapolated": rows["blank_extrapolated"].fillna(False).astype(bool).to_numpy()})
    frame = frame[np.isfinite(frame["enhancement"]) & (frame["enhancement"] > 0)].reset_index(drop=True)
    return _interval_chart(frame, "enhancement", "low", "high", f"{labels.ENHANCEMENT_SHORT} (log scale)", log=True,
                           title=f"{labels.ENHANCEMENT.capitalize()} at the reference temperature (95 % interval)",
                           rule_at=threshold)


def pareto_chart(catalysts: pd.DataFrame, x_metric: str, y_metric: str, front: Iterable[str],
                 x_title: str | None = None, y_title: str | None = None, warnings: dict[str, str] | None = None,
                 log_x: bool = False, log_y: bool = False) -> alt.LayerChart:
    """Two catalyst figures against each other, the Pareto set highlighted and joined in x order.

    The chart plots what it is given: ``front`` should be the set that is optimal for these two figures (for
    example :func:`catalog.analysis.ranking.pareto_front` of them). Values are plotted as given; say the unit in
    the titles. A catalyst in ``warnings`` is drawn as a triangle, its label carries a warning sign and its
    tooltip the warning, so a transport-limited catalyst never looks optimal without its flag
    (:func:`catalog.present.tradeoff.transport_warnings`).

    Parameters
    ----------
    catalysts : DataFrame
        Indexed by catalyst_id, with columns ``x_metric`` and ``y_metric``.
    x_metric, y_metric : str
        Column names.
    front : iterable of str
        Catalyst ids on the Pareto set.
    x_title, y_title : str, optional
        Axis titles (default: the column names).
    warnings : dict, optional
        Catalyst id → warning text.
    log_x, log_y : bool
        Log axes (for positive figures spanning decades, such as TOF and price).
    """
    for name in (x_metric, y_metric):
        if name not in catalysts.columns:
            raise CatalogError(f"no catalyst figure called '{name}'")
    on_front = set(front)
    warnings = warnings or {}
    frame = pd.DataFrame({"catalyst_id": catalysts.index.astype(str).to_numpy(),
                          "x": catalysts[x_metric].to_numpy(float), "y": catalysts[y_metric].to_numpy(float)})
    keep = np.isfinite(frame["x"]) & np.isfinite(frame["y"])
    keep &= (frame["x"] > 0 if log_x else True) & (frame["y"] > 0 if log_y else True)
    frame = frame[keep].reset_index(drop=True)
    frame["pareto"] = frame["catalyst_id"].isin(on_front)
    frame["warning"] = [warnings.get(c, "") for c in frame["catalyst_id"]]
    frame["label"] = [f"{c} ⚠" if w else c for c, w in zip(frame["catalyst_id"], frame["warning"], strict=True)]
    x_title, y_title = x_title or x_metric, y_title or y_metric
    x = alt.X("x:Q", title=x_title, scale=alt.Scale(type="log") if log_x else alt.Scale(zero=False))
    y = alt.Y("y:Q", title=y_title, scale=alt.Scale(type="log") if log_y else alt.Scale(zero=False))
    base = alt.Chart(frame)
    dots = base.mark_point(size=80, strokeWidth=1.5, color="black").encode(
        x=x, y=y, fill=alt.condition("datum.pareto", alt.value("black"), alt.value("white")),
        shape=alt.condition("datum.warning != ''", alt.value("triangle-up"), alt.value("circle")),
        tooltip=[alt.Tooltip("catalyst_id:N", title="catalyst"), alt.Tooltip("x:Q", title=x_title, format=".3g"),
                 alt.Tooltip("y:Q", title=y_title, format=".3g"), alt.Tooltip("pareto:N", title="Pareto set"),
                 alt.Tooltip("warning:N", title="warning")])
    # Only the Pareto set and the warned catalysts are labelled: a label on every point piles up in the crowd of
    # middling catalysts; the tooltip names every point.
    named = frame[frame["pareto"] | (frame["warning"] != "")]
    labels_layer = alt.Chart(named).mark_text(align="left", dx=7, dy=-6, fontSize=10).encode(x=x, y=y,
                                                                                          text="label:N")
    path = alt.Chart(frame[frame["pareto"]].sort_values("x")).mark_line(color="black", strokeDash=[3, 2]).encode(
        x="x:Q", y="y:Q", order="x:Q")
    return alt.layer(path, dots, labels_layer).properties(
        width=WIDTH, height=HEIGHT, title="Trade-off (filled and joined: Pareto set; ⚠ triangle: transport warning)")

