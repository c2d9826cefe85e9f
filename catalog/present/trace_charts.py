"""Trace charts: measured and fitted progress of trials overlaid on shared axes, and the residuals of the fits.

Altair refuses to embed more than 5,000 rows per data set by default, and a browser slows down well before that, so
overlays are thinned to an even subset of each trial's readings and fitted curves are drawn on a short time grid; the
fits themselves always use every reading.
"""

from __future__ import annotations

from collections.abc import Iterable

import altair as alt
import numpy as np
import pandas as pd

from catalog.analysis.per_trial import trace_amounts
from catalog.core import batch
from catalog.errors import CatalogError
from catalog.present.charts import CURVE_POINTS, HEIGHT, MAX_ROWS, TEMPERATURE_SCHEME, WIDTH, pick
from catalog.units import celsius, from_si

__all__ = ["MAX_TRACES", "residual_chart", "trace_chart", "trace_frames"]

#: More overlaid traces than this cannot be told apart on one plot.
MAX_TRACES = 40


def _thin(codes: np.ndarray, per_trial: int) -> np.ndarray:
    """Boolean mask keeping at most ``per_trial`` evenly spaced readings of each trial (first and last kept)."""
    keep = np.zeros(len(codes), dtype=bool)
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]])
    ends = np.r_[starts[1:], len(codes)]
    for lo, hi in zip(starts, ends, strict=True):
        n = hi - lo
        idx = np.unique(np.round(np.linspace(0, n - 1, min(n, per_trial))).astype(int)) if n else []
        keep[lo + np.asarray(idx, dtype=int)] = True
    return keep


def trace_frames(trials: pd.DataFrame, points: pd.DataFrame, trial_ids: Iterable[str],
                 normalise: bool = True) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Measured and fitted progress of each trial, ready to plot, thinned to fit :data:`MAX_ROWS`.

    Amounts come from :func:`catalog.analysis.trace_amounts` and the fitted curves from
    :func:`catalog.core.batch.curve_values`; both are shifted by the fitted offset so every trial starts at zero.
    With ``normalise`` the progress is the conversion :math:`X = (n - a)/n_\\max`; trials without a stoichiometric
    maximum then have no conversion and are left out. Otherwise it is the amount of product in mmol.

    Parameters
    ----------
    trials : DataFrame
        ``Results.trials`` (indexed by trial_id: conditions and the kinetic fit columns).
    points : DataFrame
        Long-form readings ``trial_id, t, value`` in SI, e.g. the third table of ``catalog.store.load_campaign``.
    trial_ids : iterable of str
        At most :data:`MAX_TRACES` trials.
    normalise : bool

    Returns
    -------
    observed : DataFrame
        trial_id, catalyst_id, temperature_c, time_min, progress, residual (data − fit, same unit as progress).
    fitted : DataFrame
        trial_id, catalyst_id, temperature_c, time_min, progress.

    Raises
    ------
    CatalogError
        More than :data:`MAX_TRACES` trials, or a trial without results.
    """
    ids = list(dict.fromkeys(trial_ids))
    if len(ids) > MAX_TRACES:
        raise CatalogError(f"{len(ids)} traces asked for; at most {MAX_TRACES} can be overlaid on one chart")
    table = pick(trials, ids)
    sel = points[points["trial_id"].isin(ids)].sort_values(["trial_id", "t"], kind="stable").reset_index(drop=True)
    codes, uniques = pd.factorize(sel["trial_id"], sort=False)
    t = sel["t"].to_numpy(float)
    fits = table.loc[uniques, ["model", "r0", "k", "plateau", "offset"]].reset_index(drop=True)
    amount = trace_amounts(table, sel)
    model_at_points = batch.curve_values(fits, codes, t)
    n_max = table.loc[uniques, "n_max"].to_numpy(float) if normalise else None

    def progress(values, trial_codes):
        shifted = values - fits["offset"].to_numpy(float)[trial_codes]
        if normalise:
            with np.errstate(divide="ignore", invalid="ignore"):
                return shifted / np.where(n_max[trial_codes] > 0, n_max[trial_codes], np.nan)
        return from_si(shifted, "mmol")

    observed_y = progress(amount, codes)
    fitted_y = progress(model_at_points, codes)
    keep = _thin(codes, max(2, MAX_ROWS // max(len(uniques), 1)))
    info = table.loc[uniques]
    observed = pd.DataFrame({
        "trial_id": np.asarray(uniques)[codes], "catalyst_id": info["catalyst_id"].to_numpy()[codes],
        "temperature_c": celsius(info["temperature"].to_numpy(float))[codes], "time_min": from_si(t, "min"),
        "progress": observed_y, "residual": observed_y - fitted_y})[keep]
    grid_codes = np.repeat(np.arange(len(uniques)), CURVE_POINTS)
    t_end = sel.groupby(codes)["t"].max().reindex(range(len(uniques))).to_numpy(float)
    grid_t = (np.linspace(0.0, 1.0, CURVE_POINTS)[None, :] * t_end[:, None]).ravel()
    fitted = pd.DataFrame({
        "trial_id": np.asarray(uniques)[grid_codes], "catalyst_id": info["catalyst_id"].to_numpy()[grid_codes],
        "temperature_c": celsius(info["temperature"].to_numpy(float))[grid_codes],
        "time_min": from_si(grid_t, "min"), "progress": progress(batch.curve_values(fits, grid_codes, grid_t),
                                                                 grid_codes)})
    observed = observed[np.isfinite(observed["progress"].to_numpy(float))].reset_index(drop=True)
    fitted = fitted[np.isfinite(fitted["progress"].to_numpy(float))].reset_index(drop=True)
    return observed, fitted


def _progress_title(normalise: bool) -> str:
    return "conversion" if normalise else "product [mmol]"


def _trace_encodings():
    colour = alt.Color("temperature_c:Q", title="T [°C]", scale=alt.Scale(scheme=TEMPERATURE_SCHEME),
                       legend=alt.Legend(format=".1f"))  # one trial: a single 35.1, not 35.100000
    tips = [alt.Tooltip("trial_id:N", title="trial"), alt.Tooltip("catalyst_id:N", title="catalyst"),
            alt.Tooltip("temperature_c:Q", title="T [°C]", format=".1f"),
            alt.Tooltip("time_min:Q", title="t [min]", format=".2f")]
    return colour, tips


def trace_chart(trials: pd.DataFrame, points: pd.DataFrame, trial_ids: Iterable[str], normalise: bool = True,
                title: str | None = None) -> alt.LayerChart:
    """Progress against time for several trials: thinned readings as dots, the chosen rate-law fit as a line.

    Takes pre-loaded points rather than a database, so it stays pure; pass
    ``catalog.store.load_campaign(db)[2]`` or the concatenated ``load_trace`` frames (with a trial_id column).
    Colour is the trial temperature; hover a dot for its trial.

    Parameters
    ----------
    trials, points, trial_ids, normalise
        As :func:`trace_frames`.
    title : str, optional

    Returns
    -------
    altair.LayerChart
    """
    observed, fitted = trace_frames(trials, points, trial_ids, normalise)
    colour, tips = _trace_encodings()
    x = alt.X("time_min:Q", title="time [min]")
    y_title = _progress_title(normalise)
    dots = alt.Chart(observed).mark_circle(size=14, opacity=0.55).encode(
        x=x, y=alt.Y("progress:Q", title=y_title), color=colour, detail="trial_id:N",
        tooltip=[*tips, alt.Tooltip("progress:Q", title=y_title, format=".4g")])
    lines = alt.Chart(fitted).mark_line(strokeWidth=1.4).encode(
        x=x, y="progress:Q", color=colour, detail="trial_id:N", tooltip=tips)
    return alt.layer(dots, lines).properties(width=WIDTH, height=HEIGHT,
                                             title=title or "Progress with fitted rate law")


def residual_chart(trials: pd.DataFrame, points: pd.DataFrame, trial_ids: Iterable[str], normalise: bool = True,
                   title: str | None = None) -> alt.LayerChart:
    """Residuals (reading − fitted curve) against time: a fit that suits the data scatters evenly about zero.

    A run of residuals on one side late in the trace suggests deactivation or a wrong rate law; the diagnostics
    put numbers on both (late-residual and runs tests). Arguments as :func:`trace_chart`.

    Returns
    -------
    altair.LayerChart
    """
    observed, _ = trace_frames(trials, points, trial_ids, normalise)
    colour, tips = _trace_encodings()
    y_title = f"residual ({_progress_title(normalise)})"
    zero = alt.Chart(pd.DataFrame({"y": [0.0]})).mark_rule(color="grey").encode(y="y:Q")
    dots = alt.Chart(observed).mark_circle(size=14, opacity=0.6).encode(
        x=alt.X("time_min:Q", title="time [min]"), y=alt.Y("residual:Q", title=y_title), color=colour,
        detail="trial_id:N", tooltip=[*tips, alt.Tooltip("residual:Q", title="residual", format=".3g")])
    return alt.layer(zero, dots).properties(width=WIDTH, height=HEIGHT, title=title or "Residuals of the fits")


# ---------------------------------------------------------------------------------------------- catalyst figures
