"""Cached analysis results: the one call the CLI and the app make to get figures for a campaign.

A result set is keyed by the analysis settings, the code version and a fingerprint of the data; when neither the
data nor the settings changed it is read back from the store (a query, not a recomputation). Otherwise only trials
without a cached kinetic fit are fitted, the cheap per-trial and per-catalyst figures are recomputed, the
diagnostics run, and the run is stored; the figures just computed are returned as they are, not read back.

The analysis modules (and the scipy fits under them) are imported only on that cold path, so a command that finds
its results cached starts without them.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Callable
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from catalog import store
from catalog.analysis.settings import FIT_VERSION, TRIAL_FIT_COLUMNS, Settings


@dataclass(frozen=True)
class Results:
    """Figures for one campaign under one set of settings.

    Attributes
    ----------
    trials : DataFrame
        One row per analysed trial (indexed by trial_id): conditions (SI), kinetic fit, derived figures and
        ``flags`` (semicolon-separated codes).
    catalysts : DataFrame
        One row per catalyst (indexed by catalyst_id): Arrhenius/Eyring, figures at the reference temperature,
        ``flags``.
    flags : DataFrame
        Every flag: scope ('trial' or 'catalyst'), record_id, code, severity, message, value, threshold.
    blank : dict
        Summary of the blank Arrhenius model (ea, ea_low, ea_high, ln_a, t_min, t_max, n); empty without blanks.
    """

    trials: pd.DataFrame
    catalysts: pd.DataFrame
    flags: pd.DataFrame
    blank: dict
    settings: Settings
    run_key: str
    data_stamp: str
    computed: bool
    #: False when the database is read-only: the figures were computed for this call and not stored.
    cached: bool = True


#: Blank-model figures kept in a run, as ``blank_<name>`` columns of the store's run table.
_BLANK_FIELDS = ("ea", "ea_low", "ea_high", "ln_a", "t_min", "t_max")


#: Trace points fitted per block: bounds the memory of a cold analysis by points, whatever the number of trials.
FIT_BLOCK_POINTS = 2_000_000


def run_key(settings: Settings, stamp: str) -> str:
    """Cache key of a result set: settings (with the schema numbers) and data fingerprint."""
    return hashlib.sha256(f"{settings.key()}|{stamp}".encode()).hexdigest()[:20]


def get_results(db: str | os.PathLike | None, settings: Settings,
                progress: Callable[[str], None] | None = None) -> Results:
    """Results for the campaign in ``db`` under ``settings``, from the cache when it is current.

    Every read (fingerprint, cached run, or on a cold run the records, cached fits and point blocks) shares one
    read-only connection; a cold run opens the file once more, to store what it computed. Holding the file for the
    reads also keeps writers out between the fingerprint and the points, so a run is never stored under a stamp
    its data did not have.
    """
    say = progress or (lambda message: None)
    with store.session(db) as con:
        stamp = store.data_stamp(con)
        key = run_key(settings, stamp)
        cached = store.load_run(con, key)
        if cached is not None:
            return _results(cached, settings, key, stamp, computed=False, stored=True)
        result, flags = _compute(con, settings, say)
    trial_table = _with_codes(result.trials, flags, "trial")
    catalyst_table = _with_codes(result.catalysts, flags, "catalyst")
    fit = result.blank
    summary = {} if fit is None else {k: getattr(fit, k) for k in _BLANK_FIELDS} | {"n_points": fit.n_points}
    say("storing results")
    stored = store.save_run(db, key, json.dumps(asdict(settings), sort_keys=True), stamp,
                            result.trials[list(TRIAL_FIT_COLUMNS)], FIT_VERSION, summary, trial_table, catalyst_table,
                            flags)
    if not stored:
        say("the database is read-only: figures computed for this command, not cached")
    # The figures just computed are returned in the layout a cached read has; reading them back from the store
    # would only cost a second pass over every result row.
    return _results(store.run_frames(summary, trial_table, catalyst_table, flags), settings, key, stamp,
                    computed=True, stored=stored)


def _results(frames: dict, settings: Settings, key: str, stamp: str, computed: bool, stored: bool) -> Results:
    """Results from a run in the layout of :func:`catalog.store.load_run`, whether read back or built in memory."""
    run = frames["run"]
    blank = {} if pd.isna(run.get("blank_ea")) else {
        k: run[f"blank_{k}"] for k in _BLANK_FIELDS} | {"n": run["blank_n"]}
    trials = frames["trial_results"].set_index("trial_id").sort_index()
    catalysts = frames["catalyst_results"].set_index("catalyst_id").sort_index()
    return Results(trials, catalysts, frames["flags"], blank, settings, key, stamp, computed, stored)


def _compute(con, settings: Settings, say: Callable[[str], None]):
    """Fit what is not cached, derive every figure and run the diagnostics: (analysis result, flags)."""
    # Deferred: the pipeline pulls in scipy's optimisers (~0.3 s of imports), needed only here.
    from catalog.analysis import diagnostics
    from catalog.analysis.pipeline import analyse

    say("loading trials")
    catalysts, trials = store.load_records(con)
    # Missing inputs give NaN figures by design (empty cells, never made-up numbers); numpy's warnings about
    # them are noise to a user.
    with np.errstate(all="ignore"):
        fits = _fit_missing(con, trials.set_index("trial_id"), store.load_fits(con, FIT_VERSION), say)
        no_points = pd.DataFrame({"trial_id": pd.Series(dtype=object), "t": [], "value": []})
        result = analyse(catalysts, trials, no_points, settings, fits=fits)
        say("running diagnostics")
        flags = diagnostics.evaluate(result, settings)
    return result, flags


def _fit_missing(con, trials: pd.DataFrame, cached: pd.DataFrame, say: Callable[[str], None]) -> pd.DataFrame:
    """Kinetic fits for every trial: cached ones reused, the rest fitted a block of trace points at a time."""
    from catalog.analysis.per_trial import fit_all  # deferred with the pipeline (see _compute)

    todo = trials.index.difference(cached.index)
    say(f"fitting {len(todo)} trace(s), reusing {len(trials) - len(todo)} cached fit(s)")
    fresh, done = [], 0
    blocks = store.point_blocks(con, todo, FIT_BLOCK_POINTS)
    for block in blocks:
        # Separate messages for the read and the fits: on a large campaign the user (and the benchmark) sees which.
        part = f" of trials {done + 1}-{done + len(block)} of {len(todo)}" if len(blocks) > 1 else ""
        say(f"  reading the trace points{part}")
        points = store.load_points(con, block)
        say(f"  fitting the rate laws{part}")
        fresh.append(fit_all(trials.loc[block], points))
        done += len(block)
    return pd.concat([cached.loc[cached.index.intersection(trials.index)], *fresh])


def _with_codes(table: pd.DataFrame, flags: pd.DataFrame, scope: str) -> pd.DataFrame:
    """Add a ``flags`` column of semicolon-separated codes for each record of the given scope."""
    mine = flags[flags["scope"] == scope]
    codes = mine.groupby("record_id")["code"].agg(lambda c: ";".join(sorted(set(c)))).to_dict()
    return table.assign(flags=[codes.get(record, "") for record in table.index])
