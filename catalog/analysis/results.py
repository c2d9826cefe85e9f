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
from importlib import import_module

import numpy as np
import pandas as pd

from catalog import store
from catalog.analysis.settings import FIT_VERSION, Settings


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

    One read-only connection serves the fingerprint and the cached run, and on a cold run the records, the cached
    fits, the plan of point blocks and the points of the first block; it is closed before anything is fitted,
    because DuckDB keeps the memory of a read until its database closes (measured at 10^4 trials: +185 MB of peak
    when held through the fits). A cold run then opens the file once per further block of points and once to store
    what it computed (each open of the file costs ~20-40 ms), that one on the thread of a
    :class:`~catalog.store.RunWriter` while the figures and flags are derived from the fits.
    """
    say = progress or (lambda message: None)
    with store.session(db) as con:
        stamp = store.data_stamp(con)
        key = run_key(settings, stamp)
        cached = store.load_run(con, key)
        if cached is not None:
            return _results(cached, settings, key, stamp, computed=False, stored=True)
        say("loading trials")
        # The analysis modules (deferred, see _compute) are loaded here, so that their import shows in this step
        # rather than in the read of the points.
        import_module("catalog.analysis.pipeline")
        catalysts, trials = store.load_records(con)
        trials_by_id = trials.set_index("trial_id")
        fitted = store.load_fits(con, FIT_VERSION)
        todo = trials_by_id.index.difference(fitted.index)
        blocks = store.point_blocks(con, todo, FIT_BLOCK_POINTS)
        say(f"fitting {len(todo)} trace(s), reusing {len(trials_by_id) - len(todo)} cached fit(s)")
        # A one-slot list, so that only the fitting loop holds the first block's points (and lets them go).
        first = [_read_block(con, blocks, 0, say)]
    fits = _fit_missing(db, trials_by_id, fitted, blocks, first, say)
    # The store opens, takes the fits and drops stale runs on a thread of its own while the figures and flags are
    # derived here; the run is committed, whole, once they are handed over. The fits go in the analysed trials'
    # order, as the trial table holds them.
    with store.RunWriter(db, key, stamp, fits.loc[trials_by_id.index.intersection(fits.index, sort=False)],
                         FIT_VERSION) as writer:
        result, flags = _compute(catalysts, trials, fits, settings, say)
        trial_table = _with_codes(result.trials, flags, "trial")
        catalyst_table = _with_codes(result.catalysts, flags, "catalyst")
        fit = result.blank
        summary = {} if fit is None else {k: getattr(fit, k) for k in _BLANK_FIELDS} | {"n_points": fit.n_points}
        say("storing results")
        stored = writer.finish(json.dumps(asdict(settings), sort_keys=True), summary, trial_table, catalyst_table,
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


def _compute(catalysts: pd.DataFrame, trials: pd.DataFrame, fits: pd.DataFrame, settings: Settings,
             say: Callable[[str], None]):
    """Derive every figure from the kinetic fits and run the diagnostics: (analysis result, flags)."""
    # Deferred: the pipeline pulls in scipy's optimisers (~0.3 s of imports), needed only here.
    from catalog.analysis import diagnostics
    from catalog.analysis.pipeline import analyse

    # Missing inputs give NaN figures by design (empty cells, never made-up numbers); numpy's warnings about
    # them are noise to a user.
    with np.errstate(all="ignore"):
        say("working out the figures (rates, TOF, Arrhenius, blank)")
        no_points = pd.DataFrame({"trial_id": pd.Series(dtype=object), "t": [], "value": []})
        result = analyse(catalysts, trials, no_points, settings, fits=fits)
        say("running diagnostics")
        flags = diagnostics.evaluate(result, settings)
    return result, flags


def _block_words(blocks: list[store.PointBlock], number: int) -> str:
    """' of trials 1-300 of 900' for block ``number`` of several, '' for a single block."""
    if len(blocks) == 1:
        return ""
    sizes = [len(block.trial_ids) for block in blocks]
    done = sum(sizes[:number])
    return f" of trials {done + 1}-{done + sizes[number]} of {sum(sizes)}"


def _read_block(db, blocks: list[store.PointBlock], number: int,
                say: Callable[[str], None]) -> store.PointArrays | None:
    """The trace points of block ``number`` (None when there is no block to fit)."""
    if number >= len(blocks):
        return None
    # Separate messages for the read and the fits: on a large campaign the user (and the benchmark) sees which.
    say(f"  reading the trace points{_block_words(blocks, number)}")
    return store.load_block(db, blocks[number])


def _fit_missing(db, trials: pd.DataFrame, cached: pd.DataFrame, blocks: list[store.PointBlock],
                 first: list[store.PointArrays | None], say: Callable[[str], None]) -> pd.DataFrame:
    """Kinetic fits for every trial: cached ones reused, the rest fitted a block of trace points at a time.

    ``first`` holds the points of the first block (read on the connection that planned the blocks), taken out here.
    """
    from catalog.analysis.per_trial import fit_coded  # deferred with the pipeline (see _compute)

    fresh = []
    for number in range(len(blocks)):
        points = first.pop() if number == 0 else _read_block(db, blocks, number, say)
        say(f"  fitting the rate laws{_block_words(blocks, number)}")
        with np.errstate(all="ignore"):  # NaN figures for missing inputs, by design (see _compute)
            fresh.append(fit_coded(trials.loc[points.trial_ids], points.codes, points.t, points.value))
        points = None  # one block's points in memory at a time
    return pd.concat([cached.loc[cached.index.intersection(trials.index)], *fresh])


def _with_codes(table: pd.DataFrame, flags: pd.DataFrame, scope: str) -> pd.DataFrame:
    """Add a ``flags`` column of semicolon-separated codes for each record of the given scope."""
    mine = flags[flags["scope"] == scope]
    # Distinct (record, code) pairs in sorted order, joined in one pass: a pandas group with a Python aggregate per
    # flagged record cost ~2x as much (measured at 10^4 trials, 500 flagged: 33 -> 13-20 ms).
    codes: dict = {}
    for record, code in sorted(set(zip(mine["record_id"], mine["code"], strict=True))):
        codes[record] = f"{codes[record]};{code}" if record in codes else code
    # Over the index as a list: iterating a pandas string index yields each label through pyarrow (~2 us each, 20 ms
    # at 10^4 trials), its list costs a tenth of that.
    return table.assign(flags=[codes.get(record, "") for record in table.index.tolist()])
