"""The analysis cache: kinetic fits per trial, and the result tables of recent analysis runs.

A run is stored under a key of its settings and the data fingerprint; runs of older data are dropped when a new one
is saved, so the cache holds what the current data produced, not history.
"""

from __future__ import annotations

import os
import queue
import threading

import pandas as pd

from catalog.store.db import ReadOnlyDatabase, Store, connect, now, session, transaction
from catalog.store.schema import TRIAL_FIELDS, TRIAL_FIT, TRIAL_RESULT, SchemaMismatch, cache_columns

#: Tables holding one run's rows, keyed by run_key.
_RUN_TABLES = ("trial_results", "catalyst_results", "flags", "analysis_runs")
#: Columns of an analysed trial that are stored elsewhere: its conditions in ``trials``, its fit in ``trial_fits``.
_TRIAL_STORED_ELSEWHERE = frozenset(TRIAL_FIELDS) | {name for name, _ in TRIAL_FIT}


def _insert_frame(con, table: str, frame: pd.DataFrame) -> None:
    """Insert a frame into a cache table by column name; declared columns the frame lacks are stored as NULL.

    Raises
    ------
    SchemaMismatch
        The frame carries a column the table does not declare (it would be lost).
    """
    declared = cache_columns(table)
    extra = [c for c in frame.columns if c not in declared]
    if extra:
        raise SchemaMismatch(f"{table} declares no column for {', '.join(map(repr, extra))}: add it to "
                             "catalog.store.schema with a migration that rebuilds the cache")
    con.register("cache_rows", frame)
    quoted = ", ".join(f'"{c}"' for c in frame.columns)
    con.execute(f"INSERT INTO {table} ({quoted}) SELECT {quoted} FROM cache_rows")
    con.unregister("cache_rows")


def load_fits(db: Store, fit_version: str) -> pd.DataFrame:
    """Cached kinetic fits made by this fit version, indexed by trial_id."""
    with session(db) as con:
        fits = con.execute("SELECT * EXCLUDE (fit_version) FROM trial_fits WHERE fit_version = ?", [fit_version]).df()
    return fits.set_index("trial_id")


def save_run(db: str | os.PathLike | None, run_key: str, settings_json: str, stamp: str, fits: pd.DataFrame,
             fit_version: str, blank: dict, trial_results: pd.DataFrame, catalyst_results: pd.DataFrame,
             flags: pd.DataFrame) -> bool:
    """Store one analysis run (and refresh the per-trial fit cache) in one transaction.

    Older runs are dropped: the cache holds what the current data and recent settings produced, not history.
    :class:`RunWriter` does the same in two steps, the first while the caller still computes the run.

    Returns
    -------
    bool
        False when the database is read-only: nothing was stored, and :func:`run_frames` gives the run instead.
    """
    with RunWriter(db, run_key, stamp, fits, fit_version) as writer:
        return writer.finish(settings_json, blank, trial_results, catalyst_results, flags)


class _Abandoned(Exception):
    """The caller gave up on a run before handing over its tables: roll back what was written of it."""


class RunWriter:
    """One analysis run written to the store on a thread of its own, in one transaction, while the caller derives it.

    Made with the run's key and data stamp and its kinetic fits, the writer at once opens the store (~40 ms),
    begins the transaction, replaces those trials' cached fits and drops the stale runs; then it waits for the
    run's tables (:meth:`finish`), inserts them and commits. DuckDB works without the GIL, so the first step
    overlaps the caller's derivation of the figures and flags from the fits (measured at 10^4 trials: the store's
    share of a cold analysis falls from ~0.25 s to the insert of the result tables and the commit). Nothing is
    visible to another reader before the commit, and a run given up (:meth:`close` before :meth:`finish`, or an
    error on either side) is rolled back whole. The caller must not open the store itself until the writer closes.

    Use as a context manager; :meth:`finish` returns False when the database is read-only (nothing stored).
    """

    def __init__(self, db: str | os.PathLike | None, run_key: str, stamp: str, fits: pd.DataFrame, fit_version: str):
        self._args = (db, run_key, stamp, fits, fit_version)
        self._tables: queue.Queue = queue.Queue()
        self._outcome: list = []  # True / False (read-only) or the exception the thread met
        self._thread = threading.Thread(target=self._run, name="catalog-run-writer", daemon=True)
        self._thread.start()

    def __enter__(self) -> RunWriter:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def finish(self, settings_json: str, blank: dict, trial_results: pd.DataFrame, catalyst_results: pd.DataFrame,
               flags: pd.DataFrame) -> bool:
        """Hand over the rest of the run, wait for the commit; False when the database is read-only.

        Raises whatever the write met (e.g. :class:`~catalog.store.schema.SchemaMismatch`), after its rollback.
        """
        self._tables.put((settings_json, blank, trial_results, catalyst_results, flags))
        self._thread.join()
        outcome = self._outcome[0]
        if isinstance(outcome, BaseException):
            raise outcome
        return outcome

    def close(self) -> None:
        """Give up a run not finished (its write is rolled back) and wait for the thread."""
        if self._thread.is_alive():
            self._tables.put(None)
            self._thread.join()

    def _run(self) -> None:
        try:
            self._write(*self._args)
            self._outcome.append(True)
        except ReadOnlyDatabase:
            self._outcome.append(False)
        except _Abandoned:
            self._outcome.append(None)
        except BaseException as exc:  # handed to the caller's thread by finish()
            self._outcome.append(exc)

    def _write(self, db, run_key, stamp, fits, fit_version) -> None:
        fits = fits.reset_index().rename(columns={"index": "trial_id"})
        fits["fit_version"] = fit_version
        with connect(db) as con, transaction(con):
            con.register("fresh_fits", fits[["trial_id"]])
            con.execute("DELETE FROM trial_fits WHERE trial_id IN (SELECT trial_id FROM fresh_fits)")
            con.unregister("fresh_fits")
            _insert_frame(con, "trial_fits", fits)
            stale = [r[0] for r in con.execute(
                "SELECT run_key FROM analysis_runs WHERE data_stamp <> ? OR run_key = ?", [stamp, run_key]).fetchall()]
            for table in _RUN_TABLES:
                con.execute(f"DELETE FROM {table} WHERE run_key IN (SELECT * FROM unnest(?))", [stale or [""]])
            handed = self._tables.get()
            if handed is None:
                raise _Abandoned
            settings_json, blank, trial_results, catalyst_results, flags = handed
            run = {"run_key": run_key, "settings": settings_json, "data_stamp": stamp, "code_version": fit_version,
                   "created_at": now(), "blank_n": blank.get("n_points")} | {
                f"blank_{k}": blank.get(k) for k in ("ea", "ea_low", "ea_high", "ln_a", "t_min", "t_max")}
            _insert_frame(con, "analysis_runs", pd.DataFrame([run]))
            trial_results = trial_results.drop(
                columns=[c for c in trial_results.columns if c in _TRIAL_STORED_ELSEWHERE])
            for table, frame, key in (("trial_results", trial_results, "trial_id"),
                                      ("catalyst_results", catalyst_results, "catalyst_id")):
                frame = frame.reset_index().rename(columns={"index": key})
                frame["run_key"] = run_key
                _insert_frame(con, table, frame)
            flags = flags.assign(run_key=run_key)
            _insert_frame(con, "flags", flags)


def run_frames(blank: dict, trial_results: pd.DataFrame, catalyst_results: pd.DataFrame,
               flags: pd.DataFrame) -> dict:
    """An analysis run in the layout :func:`load_run` returns, built in memory (for a read-only database).

    ``trial_results`` is the whole analysed trial (conditions, fit and figures), as given to :func:`save_run`.
    """
    run = {"blank_n": blank.get("n_points")} | {
        f"blank_{k}": blank.get(k) for k in ("ea", "ea_low", "ea_high", "ln_a", "t_min", "t_max")}
    trials = trial_results.reset_index().rename(columns={"index": "trial_id"})
    order = [*TRIAL_FIELDS, *(name for name, _ in TRIAL_FIT), *(name for name, _ in TRIAL_RESULT)]
    catalysts = catalyst_results.reset_index().rename(columns={"index": "catalyst_id"})
    return {"run": run, "trial_results": trials[[c for c in order if c in trials.columns]],
            "catalyst_results": catalysts[[c for c in cache_columns("catalyst_results")[1:] if c in catalysts.columns]],
            "flags": flags.reset_index(drop=True)}


def load_run(db: Store, run_key: str) -> dict | None:
    """A stored analysis run: its blank summary and the three result tables; None when not cached."""
    with session(db) as con:
        run = con.execute("SELECT * FROM analysis_runs WHERE run_key = ?", [run_key]).df()
        if run.empty:
            return None
        out = {"run": run.iloc[0].to_dict()}
        # Trial results come back joined to the trial's conditions and kinetic fit: the whole row a page shows.
        out["trial_results"] = con.execute(
            """
            SELECT t.* EXCLUDE (import_id, excluded), f.* EXCLUDE (trial_id, fit_version),
                   r.* EXCLUDE (run_key, trial_id)
            FROM trial_results r JOIN trials t USING (trial_id) LEFT JOIN trial_fits f USING (trial_id)
            WHERE r.run_key = ? ORDER BY t.trial_id
            """, [run_key]).df()
        for table in ("catalyst_results", "flags"):
            out[table] = con.execute(f"SELECT * EXCLUDE (run_key) FROM {table} WHERE run_key = ?", [run_key]).df()
    return out


