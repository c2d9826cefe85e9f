"""From stored trials to per-trial and per-catalyst figures: the orchestration of the pure core.

Everything here is a pure function of DataFrames in the store's SI layout, so the same code runs on one campaign
in the CLI, in the app, or on one group of trials inside a distributed engine (e.g. Spark's grouped pandas
functions), unchanged.

Pipeline
--------
1. :func:`trace_amounts` — raw SI signal → amount of product above the first reading (``catalog.core.signals``).
2. :func:`fit_all` — integrated rate laws for every trial at once (``catalog.core.batch``).
3. :func:`trial_figures` — blank model, sites, TOF, TON, per-mass/per-area rates, enhancement, photon yield,
   transport numbers and hazard estimates per trial.
4. :func:`catalyst_figures` — Arrhenius and Eyring per catalyst, TOF and enhancement at the reference temperature,
   replicate spread, reaction order, loading-series slope inputs.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from catalog.analysis.per_catalyst import catalyst_figures
from catalog.analysis.per_trial import blank_limits, fit_all, trial_figures
from catalog.analysis.settings import Settings


@dataclass(frozen=True)
class Analysis:
    """Everything one analysis produced."""

    trials: pd.DataFrame      # per trial, indexed by trial_id
    catalysts: pd.DataFrame   # per catalyst, indexed by catalyst_id
    blank: object             # ArrheniusFit of the blank trials, or None
    settings: Settings


def analyse(catalysts: pd.DataFrame, trials: pd.DataFrame, points: pd.DataFrame, settings: Settings,
            fits: pd.DataFrame | None = None) -> Analysis:
    """Run the whole pipeline on one campaign (or any group of trials) in the store's SI layout.

    ``fits`` may carry cached kinetic fits (indexed by trial_id); only trials missing from it are fitted.
    """
    trials = trials.set_index("trial_id") if "trial_id" in trials.columns else trials
    catalysts = catalysts.set_index("catalyst_id") if "catalyst_id" in catalysts.columns else catalysts
    todo = trials.index if fits is None else trials.index.difference(fits.index)
    if len(todo):
        # A cold start fits every trial: no need to copy a campaign-sized points frame through a filter.
        fresh = fit_all(trials, points if len(todo) == len(trials) else points[points["trial_id"].isin(todo)])
        fits = fresh if fits is None else pd.concat([fits.loc[fits.index.intersection(trials.index)], fresh])
    else:
        fits = fits.loc[trials.index]
    table, blank = trial_figures(trials, catalysts, fits)
    limits = blank_limits(trials, fits)
    return Analysis(table, catalyst_figures(table, catalysts, blank, settings, limits), blank, settings)
