"""The campaign store: the only module that speaks SQL.

One DuckDB file holds every catalyst, trial and trace point in SI units, with the provenance of each import, the
history of every correction, and cached analysis results. Values always travel as bound parameters or registered
DataFrames; no value is ever formatted into SQL text. The schema is built by numbered migrations recorded in
``schema_migrations``.

DuckDB lets one process write a file at a time, and while a writer holds it other processes cannot open it, so
every function here opens the file, does its work and closes it again; a lock is retried briefly and then reported
as :class:`~catalog.errors.DatabaseBusyError`.
"""

from __future__ import annotations

import contextlib
import dataclasses
import getpass
import json
import os
import re
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

from catalog import __version__
from catalog.errors import CatalogError, DatabaseBusyError, Problem, ValidationError
from catalog.ingest.columns import CATALYST_COLUMNS, LONGEST_TRACE_S, TRIAL_COLUMNS
from catalog.ingest.sources import CampaignSource, RawTable
from catalog.ingest.validate import check_catalysts, check_trials, trace_layout
from catalog.units import from_si

DEFAULT_DB = "catalog.duckdb"
ENV_DB = "CATALOG_DB"
#: How long a command waits for another process to release the database before saying it is busy.
LOCK_WAIT_S = 10.0
#: Problems listed per kind of trace fault; the rest are counted, so a million bad rows stay readable.
LISTED_PER_CHECK = 50

_CATALYST_FIELDS = [c.name for c in CATALYST_COLUMNS]
_TRIAL_FIELDS = [c.name for c in TRIAL_COLUMNS]

_SQL_TYPES = {"number": "DOUBLE", "text": "VARCHAR", "id": "VARCHAR", "bool": "BOOLEAN", "datetime": "TIMESTAMP"}


def _columns_sql(columns, key: str) -> str:
    parts = []
    for c in columns:
        sql_type = _SQL_TYPES[c.kind]
        parts.append(f"{c.name} {sql_type}{' PRIMARY KEY' if c.name == key else ''}")
    return ",\n    ".join(parts)


MIGRATIONS: tuple[tuple[int, str, str], ...] = (
    (
        1,
        "campaign tables: imports, catalysts, trials, trace points",
        f"""
CREATE TABLE imports (
    import_id INTEGER PRIMARY KEY,
    source VARCHAR,
    files VARCHAR,
    content_hash VARCHAR,
    imported_at TIMESTAMP,
    imported_by VARCHAR,
    n_catalysts INTEGER,
    n_trials INTEGER,
    n_points BIGINT,
    n_skipped INTEGER,
    is_demo BOOLEAN,
    notes VARCHAR
);
CREATE TABLE catalysts (
    {_columns_sql(CATALYST_COLUMNS, "catalyst_id")},
    import_id INTEGER,
    excluded BOOLEAN DEFAULT false
);
CREATE TABLE trials (
    {_columns_sql(TRIAL_COLUMNS, "trial_id")},
    import_id INTEGER,
    excluded BOOLEAN DEFAULT false
);
CREATE TABLE trace_points (
    trial_id VARCHAR NOT NULL,
    t DOUBLE NOT NULL,
    value DOUBLE NOT NULL
);
""",
    ),
    (
        2,
        "history of corrections and exclusions",
        """
CREATE TABLE history (
    change_id INTEGER PRIMARY KEY,
    table_name VARCHAR NOT NULL,
    record_id VARCHAR NOT NULL,
    column_name VARCHAR NOT NULL,
    old_value VARCHAR,
    new_value VARCHAR,
    changed_by VARCHAR,
    changed_at TIMESTAMP,
    reason VARCHAR
);
""",
    ),
    (
        3,
        "analysis cache: kinetic fits per trial, results per analysis run, flags",
        """
CREATE TABLE trial_fits (
    trial_id VARCHAR PRIMARY KEY, fit_version VARCHAR NOT NULL,
    model VARCHAR, r0 DOUBLE, r0_se DOUBLE, k DOUBLE, k_se DOUBLE, k_unit VARCHAR, half_life DOUBLE, "offset" DOUBLE,
    plateau DOUBLE, plateau_se DOUBLE, n_max DOUBLE, plateau_ratio DOUBLE, final_amount DOUBLE,
    final_conversion DOUBLE, r2 DOUBLE, rmse DOUBLE, n_points INTEGER, late_residual_z DOUBLE, runs_z DOUBLE,
    aic_zero DOUBLE, aic_first DOUBLE, aic_second DOUBLE
);
CREATE TABLE analysis_runs (
    run_key VARCHAR PRIMARY KEY, settings VARCHAR, data_stamp VARCHAR, code_version VARCHAR, created_at TIMESTAMP,
    blank_ea DOUBLE, blank_ea_low DOUBLE, blank_ea_high DOUBLE, blank_ln_a DOUBLE, blank_t_min DOUBLE,
    blank_t_max DOUBLE, blank_n INTEGER
);
CREATE TABLE trial_results (
    run_key VARCHAR NOT NULL, trial_id VARCHAR NOT NULL,
    rate DOUBLE, rate_se DOUBLE, blank_rate DOUBLE, blank_extrapolated BOOLEAN, enhancement DOUBLE,
    enhancement_low DOUBLE, enhancement_high DOUBLE, sites DOUBLE, site_basis VARCHAR, tof DOUBLE, tof_se DOUBLE,
    ton DOUBLE, rate_per_mass DOUBLE, rate_per_area DOUBLE, photon_flux DOUBLE, quantum_yield DOUBLE,
    weisz_prater DOUBLE, mears DOUBLE, adiabatic_rise DOUBLE, hazard_band VARCHAR, pressure_rise_max DOUBLE,
    flags VARCHAR
);
CREATE TABLE catalyst_results (
    run_key VARCHAR NOT NULL, catalyst_id VARCHAR NOT NULL,
    n_trials INTEGER, n_temperatures INTEGER, n_arrhenius INTEGER, t_min DOUBLE, t_max DOUBLE, site_basis VARCHAR,
    models VARCHAR, ea DOUBLE, ea_se DOUBLE, ea_low DOUBLE, ea_high DOUBLE, ln_a DOUBLE, ln_a_low DOUBLE,
    ln_a_high DOUBLE, dh DOUBLE, dh_low DOUBLE, dh_high DOUBLE, ds DOUBLE, ds_low DOUBLE, ds_high DOUBLE,
    curvature_p DOUBLE, birge DOUBLE, r2_arrhenius DOUBLE, tof_ref DOUBLE, tof_ref_low DOUBLE, tof_ref_high DOUBLE,
    tof_ref_extrapolated BOOLEAN, delta_ea_blank DOUBLE, enhancement_ref DOUBLE, enhancement_ref_low DOUBLE,
    enhancement_ref_high DOUBLE, blank_extrapolated BOOLEAN, rate_per_mass_ref DOUBLE, rate_per_area_ref DOUBLE,
    ton_max DOUBLE, replicate_cv DOUBLE, "order" DOUBLE, order_low DOUBLE, order_high DOUBLE,
    order_temperature DOUBLE, median_sites DOUBLE, min_enhancement DOUBLE, max_weisz_prater DOUBLE,
    max_mears DOUBLE, max_adiabatic_rise DOUBLE, metal VARCHAR, support VARCHAR, metal_loading DOUBLE,
    dispersion DOUBLE, price_per_gram DOUBLE, description VARCHAR, flags VARCHAR
);
CREATE TABLE flags (
    run_key VARCHAR NOT NULL, scope VARCHAR NOT NULL, record_id VARCHAR NOT NULL, code VARCHAR NOT NULL,
    severity VARCHAR, message VARCHAR, value DOUBLE, threshold DOUBLE
);
""",
    ),
    (
        4,
        "rate fits: fixed plateau, model weight, leak cut, induction; blank bounds and log-scale errors",
        """
ALTER TABLE trial_fits ADD COLUMN plateau_fixed BOOLEAN;
ALTER TABLE trial_fits ADD COLUMN model_weight DOUBLE;
ALTER TABLE trial_fits ADD COLUMN leak_cut INTEGER;
ALTER TABLE trial_fits ADD COLUMN max_rate DOUBLE;
ALTER TABLE trial_fits ADD COLUMN induction_z DOUBLE;
ALTER TABLE trial_results ADD COLUMN blank_undetected BOOLEAN;
ALTER TABLE trial_results ADD COLUMN enhancement_bound BOOLEAN;
ALTER TABLE catalyst_results ADD COLUMN tof_ref_log_se DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN tof_ref_dof DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN ea_dof DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN enhancement_ref_log_se DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN enhancement_ref_bound BOOLEAN;
ALTER TABLE catalyst_results ADD COLUMN weisz_prater_limit DOUBLE;
""",
    ),
)


def resolve_path(db: str | os.PathLike | None) -> Path:
    """Database location: the explicit path, else ``$CATALOG_DB``, else ``catalog.duckdb`` here."""
    if db:
        return Path(db)
    return Path(os.environ.get(ENV_DB) or DEFAULT_DB)


def _is_lock_error(exc: Exception) -> bool:
    text = str(exc).lower()
    return "lock" in text and ("conflicting" in text or "could not set lock" in text or "in use" in text)


def _holder(exc: Exception) -> str:
    match = re.search(r"PID (\d+)", str(exc))
    return f" (process {match.group(1)})" if match else ""


@contextlib.contextmanager
def connect(db: str | os.PathLike | None = None, *, read_only: bool = False, wait: float = LOCK_WAIT_S,
            create: bool = False) -> Iterator[duckdb.DuckDBPyConnection]:
    """Open the store, apply pending migrations, and close it afterwards.

    Only ``create=True`` (an import's final write) makes a new file, so a mistyped path or a failed command never
    leaves an empty database behind. A lock held by another process is retried for ``wait`` seconds, then reported
    as busy. A read-only open of a file made by an older version first brings its schema up to date.
    """
    path = resolve_path(db)
    if not create and not path.exists():
        raise CatalogError(f"{path}: no database here yet; import a campaign first (catalog import FOLDER --db {path})")
    con = _open(path, read_only, wait)
    if read_only and _pending_migrations(con):
        # A file from an older version: bring its schema up to date once, then read as asked.
        con.close()
        with connect(path, wait=wait):
            pass
        con = _open(path, read_only, wait)
    try:
        if not read_only:
            migrate(con)
        yield con
    finally:
        con.close()


def _open(path: Path, read_only: bool, wait: float) -> duckdb.DuckDBPyConnection:
    config = {"autoinstall_known_extensions": False, "autoload_known_extensions": False}
    deadline = time.monotonic() + wait
    delay = 0.05
    while True:
        try:
            return duckdb.connect(str(path), read_only=read_only, config=config)
        except duckdb.IOException as exc:
            if not _is_lock_error(exc):
                raise CatalogError(f"{path}: cannot open the database: {exc}") from exc
            if time.monotonic() >= deadline:
                raise DatabaseBusyError(
                    f"{path} is in use by another program{_holder(exc)}; try again when it has finished"
                ) from exc
            time.sleep(delay)
            delay = min(delay * 2, 0.5)
        except duckdb.Error as exc:
            raise CatalogError(f"{path}: not a catalog database or damaged: {exc}") from exc


def _pending_migrations(con: duckdb.DuckDBPyConnection) -> bool:
    # fetchall, not fetchone: DuckDB 2.0 keeps a half-read result open and refuses the caller's next statement.
    done = con.execute(
        "SELECT count(*) FROM information_schema.tables WHERE table_name = 'schema_migrations'").fetchall()[0][0]
    latest = con.execute("SELECT max(version) FROM schema_migrations").fetchall()[0][0] if done else None
    return latest is None or latest < MIGRATIONS[-1][0]


def migrate(con: duckdb.DuckDBPyConnection, upto: int | None = None) -> list[int]:
    """Apply every migration not yet recorded (up to version ``upto``, if given); return the versions applied now."""
    con.execute(
        "CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name VARCHAR, applied_at TIMESTAMP)"
    )
    done = {row[0] for row in con.execute("SELECT version FROM schema_migrations").fetchall()}
    applied = []
    for version, name, sql in MIGRATIONS:
        if version in done or (upto is not None and version > upto):
            continue
        with transaction(con):
            con.execute(sql)
            con.execute("INSERT INTO schema_migrations VALUES (?, ?, ?)", [version, name, _now()])
        applied.append(version)
    return applied


@contextlib.contextmanager
def transaction(con: duckdb.DuckDBPyConnection) -> Iterator[None]:
    """BEGIN ... COMMIT, with an explicit ROLLBACK on any error.

    DuckDB 2.0 silently rolls back a COMMIT issued after a failed statement, so the failure must be caught and
    rolled back here rather than trusting COMMIT to report it.
    """
    con.execute("BEGIN TRANSACTION")
    try:
        yield
    except BaseException:
        con.execute("ROLLBACK")
        raise
    con.execute("COMMIT")


def _now() -> datetime:
    return datetime.now(timezone.utc).replace(tzinfo=None)


def _user() -> str:
    try:
        return getpass.getuser()
    except Exception:  # no login name in some containers
        return "unknown"


# --------------------------------------------------------------------------------------------------- import


@dataclass
class ImportReport:
    """What an import did: counts written, rows skipped as already stored, unit notes."""

    import_id: int | None
    n_catalysts: int
    n_trials: int
    n_points: int
    skipped_catalysts: list[str] = field(default_factory=list)
    skipped_trials: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    duplicate_of: int | None = None


def import_campaign(
    db: str | os.PathLike | None,
    source: CampaignSource,
    *,
    demo: bool = False,
    who: str | None = None,
    progress=None,
) -> ImportReport:
    """Validate a campaign completely, then write all of it in one transaction, or nothing.

    Rows already in the store are skipped when identical and reported as conflicts when not, so a re-import never
    duplicates and never silently overwrites. The trace points are streamed through an in-memory DuckDB staging
    database and checked with set-based queries; the store file is locked only for the final write.

    Raises
    ------
    ValidationError
        Every problem found, each naming file, row and column. The store is unchanged.
    """
    say = progress or (lambda message: None)
    path = resolve_path(db)
    if not path.exists():
        earlier, stored_catalysts, stored_ids = None, pd.DataFrame(columns=_CATALYST_FIELDS), set()
    else:
        earlier, stored_catalysts, stored_ids = _stored_state(path, source.content_hash)
    if earlier is not None:
        return ImportReport(None, 0, 0, 0, duplicate_of=earlier[0],
                            notes=[f"identical files were imported as import #{earlier[0]} on "
                                   f"{earlier[1]:%Y-%m-%d %H:%M}; nothing written"])

    say("checking catalysts and trials")
    catalysts = check_catalysts(source.catalysts)
    known = set(catalysts.frame["catalyst_id"].dropna()) | set(stored_catalysts["catalyst_id"])
    trials = check_trials(source.trials, known)
    problems = catalysts.problems + trials.problems
    notes = catalysts.notes + trials.notes

    new_catalysts, skipped_catalysts, conflict = _split_known(
        catalysts.frame, stored_catalysts, "catalyst_id", source.catalysts.label
    )
    problems += conflict
    overlap = [t for t in trials.frame["trial_id"].dropna() if t in stored_ids]

    stage = duckdb.connect(config={"autoinstall_known_extensions": False, "autoload_known_extensions": False})
    try:
        say("reading trace points")
        trace_problems, trace_notes = _stage_traces(stage, source, trials.frame)
        problems += trace_problems
        notes += trace_notes
        skipped_trials: list[str] = []
        # Without clean points there is no staged trace to compare with the stored one (and nothing will be written).
        if overlap and not trace_problems:
            with connect(path, read_only=True) as con:
                stored_trials = con.execute(
                    f"SELECT {', '.join(_TRIAL_FIELDS)} FROM trials WHERE trial_id IN (SELECT * FROM unnest(?))", [overlap]
                ).df()
                same_trace = _same_traces(con, stage, overlap)
            new_trial_frame, skipped_trials, conflict = _split_known(
                trials.frame[_TRIAL_FIELDS + ["signal_scale", "signal_shift"]], stored_trials, "trial_id",
                source.trials.label, same_trace,
            )
            problems += conflict
        else:
            new_trial_frame = trials.frame
        if problems:
            raise ValidationError(problems)

        new_trial_frame = new_trial_frame.reset_index(drop=True)
        stage.register("new_trials", pd.DataFrame({"trial_id": new_trial_frame["trial_id"]}))
        # Without skipped trials every staged row is written: counting them needs no join.
        n_points = stage.execute(
            "SELECT count(*) FROM points WHERE trial_id IN (SELECT trial_id FROM new_trials)" if skipped_trials
            else "SELECT count(*) FROM typed"
        ).fetchone()[0]
        say(f"writing {len(new_catalysts)} catalysts, {len(new_trial_frame)} trials, {n_points} points")
        import_id = _write(stage, path, source, new_catalysts, new_trial_frame, n_points,
                           len(skipped_catalysts) + len(skipped_trials), demo, who or _user(), notes)
    finally:
        stage.close()
    return ImportReport(import_id, len(new_catalysts), len(new_trial_frame), int(n_points),
                        skipped_catalysts, skipped_trials, notes)


def _stored_state(path: Path, content_hash: str) -> tuple[tuple | None, pd.DataFrame, set[str]]:
    """An earlier import of identical files (id, time) if any, the stored catalysts and the stored trial ids."""
    with connect(path, read_only=True) as con:
        earlier = con.execute(
            "SELECT import_id, imported_at FROM imports WHERE content_hash = ? ORDER BY import_id LIMIT 1",
            [content_hash],
        ).fetchone()
        catalysts = con.execute(f"SELECT {', '.join(_CATALYST_FIELDS)} FROM catalysts").df()
        trial_ids = set(con.execute("SELECT trial_id FROM trials").df()["trial_id"])
    return earlier, catalysts, trial_ids


def _split_known(
    incoming: pd.DataFrame, stored: pd.DataFrame, key: str, label: str, same_trace: set[str] | None = None
) -> tuple[pd.DataFrame, list[str], list[Problem]]:
    """Separate rows already stored (identical → skipped) from new rows; differing rows are conflicts."""
    if stored.empty:
        return incoming, [], []
    stored = stored.set_index(key)
    known = incoming[key].isin(stored.index).to_numpy()
    skipped, problems, keep = [], [], list(incoming.index[~known])
    for i, row in incoming[known].iterrows():
        ident = row[key]
        old = stored.loc[ident]
        changed = [c for c in stored.columns if not _same_value(row[c], old[c])]
        if same_trace is not None and ident not in same_trace:
            changed.append("trace points")
        if changed:
            problems.append(Problem(
                label, int(i) + 2, key,
                f"'{ident}' is already stored with different {', '.join(changed)}; it was not overwritten "
                "(record a correction with 'catalog correct', or give the new record a new id)",
            ))
        else:
            skipped.append(ident)
    return incoming.loc[sorted(keep)], skipped, problems


def _same_value(a, b) -> bool:
    a_missing = a is None or (not isinstance(a, str) and pd.isna(a))
    b_missing = b is None or (not isinstance(b, str) and pd.isna(b))
    if a_missing or b_missing:
        return a_missing and b_missing
    if isinstance(a, (float, np.floating)) or isinstance(b, (float, np.floating)):
        return bool(np.isclose(float(a), float(b), rtol=1e-12, atol=0.0))
    if isinstance(a, (pd.Timestamp, datetime)) or isinstance(b, (pd.Timestamp, datetime)):
        return pd.Timestamp(a) == pd.Timestamp(b)
    return a == b


#: Checks of the staged ``typed`` rows: condition on (line, trial_id, time_num, value_num), column, message.
_TRACE_FAULTS = (
    ("trial_id IS NULL OR trial_id = ''", "trial_id", "trial_id is empty"),
    ("time_num IS NULL OR NOT isfinite(time_num)", "time", "time {time_text!r} is not a finite number"),
    ("value_num IS NULL OR NOT isfinite(value_num)", "value", "value {value_text!r} is not a finite number"),
    ("abs(time_num) > (SELECT min(time_limit) FROM factors)", "time",
     f"time {{time_text}} is outside the plausible range (a trace longer than {LONGEST_TRACE_S:g} s)"),
    ("abs(value_num) > (SELECT min(value_limit) FROM factors)", "value",
     "value {value_text} is too large to hold once converted to SI"),
    ("trial_id <> '' AND trial_id NOT IN (SELECT trial_id FROM factors)", "trial_id",
     "trial '{trial_id}' is not in the trials table of this campaign"),
)
#: Staged rows whose time is not above the previous reading of the same trial, in file order.
_NOT_INCREASING = """
    SELECT * FROM (SELECT *, lag(time_num) OVER (PARTITION BY trial_id ORDER BY line) AS previous FROM typed)
    WHERE time_num <= previous
"""


def _stage_traces(
    stage: duckdb.DuckDBPyConnection, source: CampaignSource, trials: pd.DataFrame
) -> tuple[list[Problem], list[str]]:
    """Load the trace table into the staging database, check it set-wise, and define the SI points.

    A CSV file is first read with typed columns, which is all a clean file costs; only when that read fails or a
    check finds a fault (bad cell, time not increasing, unknown trial, trial without points) is it read again as
    text, so that each fault is reported with its line and its text as written. Defines the staging view
    ``points(trial_id, t, value)`` in SI for every trial of this import.
    """
    names, time_scale, problems, notes = trace_layout(source.traces)
    label = source.traces.label
    if problems:
        return problems, notes
    stage.register("factors", pd.DataFrame({
        "trial_id": trials["trial_id"],
        "scale": trials["signal_scale"],
        "shift": trials["signal_shift"],
        "time_scale": time_scale,
        # Bounds in the file's units, so the checks run on the numbers as read: no product can overflow.
        "time_limit": LONGEST_TRACE_S / time_scale,
        "value_limit": 1e300 / trials["signal_scale"].fillna(1.0).clip(lower=1.0),
    }).dropna(subset=["trial_id"]))
    if not (source.traces.csv_path is not None and _stage_typed(stage, source, names)):
        try:
            _stage_text(stage, source, names)
        except duckdb.Error as exc:
            return [Problem(label, None, None, f"cannot be read as CSV: {_first_line(exc)}")], notes
        located = []
        for condition, column, message in _TRACE_FAULTS:
            located += _located(stage, f"SELECT line, trial_id, time_text, value_text FROM typed WHERE {condition}",
                                label, names[column], message)
        located += _located(stage, f"SELECT line, trial_id, time_text, value_text FROM ({_NOT_INCREASING})",
                            label, names["time"], "time {time_text} does not increase within trial '{trial_id}'")
        problems += _file_lines(located, source.traces.csv_path)
        empty = stage.execute(
            "SELECT trial_id FROM factors WHERE trial_id NOT IN (SELECT DISTINCT trial_id FROM typed) ORDER BY trial_id"
        ).fetchall()
        trial_rows = {t: i + 2 for i, t in enumerate(trials["trial_id"])}
        problems += [Problem(source.trials.label, trial_rows.get(t), "trial_id", f"trial '{t}' has no trace points in {label}")
                     for (t,) in empty]
    if problems:
        return problems, notes
    # A view, not a table: the points are read once more by the final write, so they are never held twice. With
    # DuckDB's default preserve_insertion_order the join keeps the file's row order.
    stage.execute(
        """
        CREATE VIEW points AS
        SELECT p.trial_id, p.time_num * f.time_scale AS t, p.value_num * f.scale + f.shift AS value
        FROM typed p JOIN factors f USING (trial_id)
        """
    )
    return problems, notes


def _file_lines(problems: list[Problem], path: Path | None) -> list[Problem]:
    """Turn data-row numbers into the file's own line numbers where the file has blank lines.

    The CSV reader skips blank lines, so row k of the table can sit further down the file. This runs only when a
    fault was found, so a clean import never pays for the extra pass over the file.
    """
    wanted = sorted({p.row for p in problems if p.row is not None})
    if path is None or not wanted:
        return problems
    physical: dict[int, int] = {}
    row = 1  # the header is row 1
    with path.open("r", encoding="utf-8-sig", errors="replace", newline="") as handle:
        next(handle, None)
        for number, text in enumerate(handle, start=2):
            if text.strip():
                row += 1
                if row in wanted:
                    physical[row] = number
                    if len(physical) == len(wanted):
                        break
    return [dataclasses.replace(p, row=physical.get(p.row, p.row)) if p.row is not None else p for p in problems]


def _csv_names(source: CampaignSource, names: dict[str, str]) -> list[str]:
    """Column names for DuckDB's CSV reader: the format's names, ``unused_<i>`` for columns outside it."""
    return [n if n in names else f"unused_{i}" for i, n in enumerate(_canonical(source.traces.headers, names))]


def _stage_typed(stage: duckdb.DuckDBPyConnection, source: CampaignSource, names: dict[str, str]) -> bool:
    """Stage the trace CSV with numeric time and value columns; False (nothing staged) unless it is all clean.

    The faults are only counted here; locating them is left to the text path, which alone keeps each cell's text
    for the message.
    """
    columns = _csv_names(source, names)
    types = ["DOUBLE" if n in ("time", "value") else "VARCHAR" for n in columns]
    try:
        stage.execute("CREATE TABLE raw AS SELECT * FROM read_csv(?, header = true, names = ?, types = ?)",
                      [str(source.traces.csv_path), columns, types])
    except duckdb.Error:
        return False
    stage.execute(
        "CREATE VIEW typed AS SELECT rowid + 2 AS line, trim(trial_id) AS trial_id, time AS time_num, "
        "value AS value_num FROM raw"
    )
    cells = " OR ".join(f"({c})" for c, _, _ in _TRACE_FAULTS[:5])
    # One streaming scan counts the bad cells and the times that do not increase. Lag over the rows as they come is
    # far cheaper than a window per trial, and exact when they came in file order (checked: consecutive lines) and
    # each trial's rows are contiguous (runs = trials); otherwise the window per trial decides.
    shuffled, runs, n_trials, faults = stage.execute(
        f"""
        SELECT count(*) FILTER (line <> previous_line + 1), count(*) FILTER (trial_id IS DISTINCT FROM previous_trial),
               count(DISTINCT trial_id),
               count(*) FILTER (({cells}) OR (trial_id = previous_trial AND time_num <= previous_time))
        FROM (SELECT *, lag(line) OVER () AS previous_line, lag(trial_id) OVER () AS previous_trial,
                     lag(time_num) OVER () AS previous_time FROM typed)
        """
    ).fetchone()
    if not faults and (shuffled or runs != n_trials):
        faults = stage.execute(f"SELECT count(*) FROM ({_NOT_INCREASING})").fetchone()[0]
    if not faults:
        # Ids are matched once each, not once per row: every id in the file is a trial and every trial has points.
        matched, expected = stage.execute(
            "SELECT count(*), (SELECT count(*) FROM factors) FROM factors "
            "WHERE trial_id IN (SELECT DISTINCT trial_id FROM typed)"
        ).fetchone()
        faults = matched != n_trials or matched != expected
    if faults:
        stage.execute("DROP VIEW typed")
        stage.execute("DROP TABLE raw")
        return False
    return True


def _stage_text(stage: duckdb.DuckDBPyConnection, source: CampaignSource, names: dict[str, str]) -> None:
    """Stage the trace table as text, with the parsed numbers beside it, as the table ``typed``."""
    if source.traces.csv_path is not None:
        # Every column is read as text so a bad cell becomes a located problem, not a parse failure.
        stage.execute(
            "CREATE TABLE raw AS SELECT * FROM read_csv(?, header = true, all_varchar = true, names = ?)",
            [str(source.traces.csv_path), _csv_names(source, names)],
        )
    else:
        order = [name for header in source.traces.headers for name, h in names.items() if h == header]
        frame = source.traces.frame.rename(columns={h: n for n, h in names.items()})
        stage.register("raw_frame", frame[order])
        stage.execute("CREATE TABLE raw AS SELECT * FROM raw_frame")
    stage.execute(
        """
        CREATE TABLE typed AS
        SELECT rowid + 2 AS line, trim(trial_id) AS trial_id, coalesce(time, '') AS time_text, coalesce(value, '') AS value_text,
               TRY_CAST(time AS DOUBLE) AS time_num, TRY_CAST(value AS DOUBLE) AS value_num
        FROM raw
        """
    )
    stage.execute("DROP TABLE raw")


def _canonical(headers: tuple[str, ...], names: dict[str, str]) -> list[str]:
    by_header = {h: n for n, h in names.items()}
    return [by_header.get(h, "") for h in headers]


def _located(stage, sql: str, label: str, header: str, message: str) -> list[Problem]:
    total = stage.execute(f"SELECT count(*) FROM ({sql})").fetchone()[0]
    if total == 0:
        return []
    rows = stage.execute(f"{sql} ORDER BY line LIMIT {LISTED_PER_CHECK}").fetchall()
    out = [
        Problem(label, int(line), header,
                message.format(trial_id=trial, time_text=time_text, value_text=value_text))
        for line, trial, time_text, value_text in rows
    ]
    if total > LISTED_PER_CHECK:
        out.append(Problem(label, None, header, f"... and {total - LISTED_PER_CHECK} more rows with the same problem"))
    return out


def _same_traces(con, stage, overlap: list[str]) -> set[str]:
    """Trial ids whose staged points equal the stored ones (same count, same times and values)."""
    stored = con.execute(
        "SELECT trial_id, t, value FROM trace_points WHERE trial_id IN (SELECT * FROM unnest(?))", [overlap]
    ).df()
    stage.register("stored_points", stored)
    rows = stage.execute(
        """
        WITH a AS (SELECT trial_id, t, value, row_number() OVER (PARTITION BY trial_id ORDER BY t) AS k
                   FROM points WHERE trial_id IN (SELECT trial_id FROM stored_points)),
             b AS (SELECT trial_id, t, value, row_number() OVER (PARTITION BY trial_id ORDER BY t) AS k
                   FROM stored_points)
        SELECT trial_id FROM a FULL JOIN b USING (trial_id, k)
        GROUP BY trial_id
        HAVING bool_and(a.t IS NOT NULL AND b.t IS NOT NULL
                        AND abs(a.t - b.t) <= 1e-12 * abs(b.t) AND abs(a.value - b.value) <= 1e-12 * abs(b.value))
        """
    ).fetchall()
    return {r[0] for r in rows}


def _first_line(exc: Exception) -> str:
    return str(exc).strip().splitlines()[0]


def _write(stage, path: Path, source: CampaignSource, catalysts: pd.DataFrame, trials: pd.DataFrame,
           n_points: int, n_skipped: int, demo: bool, who: str, notes: list[str]) -> int:
    """Write one import atomically into the store, attached to the staging connection."""
    with connect(path, create=True):
        pass  # creates the file on a first import and brings its schema up to date before the attach
    deadline = time.monotonic() + LOCK_WAIT_S
    while True:
        try:
            stage.execute("ATTACH ? AS store", [str(path)])
            break
        except duckdb.IOException as exc:
            if not _is_lock_error(exc) or time.monotonic() >= deadline:
                raise DatabaseBusyError(f"{path} is in use by another program{_holder(exc)}; nothing was written") from exc
            time.sleep(0.2)
    try:
        stage.register("new_catalysts", catalysts[_CATALYST_FIELDS].reset_index(drop=True))
        stage.register("new_trial_rows", trials[_TRIAL_FIELDS].reset_index(drop=True))
        with transaction(stage):
            import_id = stage.execute("SELECT coalesce(max(import_id), 0) + 1 FROM store.imports").fetchone()[0]
            stage.execute(
                "INSERT INTO store.imports VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                [import_id, source.source, ", ".join(source.files), source.content_hash, _now(), who,
                 len(catalysts), len(trials), n_points, n_skipped, demo, "\n".join(notes)],
            )
            stage.execute(
                f"INSERT INTO store.catalysts ({', '.join(_CATALYST_FIELDS)}, import_id, excluded) "
                f"SELECT {', '.join(_CATALYST_FIELDS)}, ?, false FROM new_catalysts",
                [import_id],
            )
            stage.execute(
                f"INSERT INTO store.trials ({', '.join(_TRIAL_FIELDS)}, import_id, excluded) "
                f"SELECT {', '.join(_TRIAL_FIELDS)}, ?, false FROM new_trial_rows",
                [import_id],
            )
            stage.execute(
                "INSERT INTO store.trace_points SELECT trial_id, t, value FROM points "
                "WHERE trial_id IN (SELECT trial_id FROM new_trial_rows)"
            )
    except duckdb.ConstraintException as exc:
        raise CatalogError(f"{path}: another import wrote some of these ids meanwhile; nothing was written ({_first_line(exc)})") from exc
    finally:
        stage.execute("DETACH store")
    return int(import_id)


# --------------------------------------------------------------------------------------------------- reading


def list_trials(db: str | os.PathLike | None = None, include_excluded: bool = True) -> pd.DataFrame:
    """One row per trial with its catalyst, conditions (SI), point count and time span."""
    with connect(db, read_only=True) as con:
        return con.execute(
            """
            SELECT t.trial_id, t.catalyst_id, t.temperature, t.measurement, t.signal_unit, t.catalyst_mass,
                   t.operator, t.started_at, t.excluded, t.import_id,
                   count(p.t) AS n_points, max(p.t) AS duration
            FROM trials t LEFT JOIN trace_points p USING (trial_id)
            WHERE ? OR NOT t.excluded
            GROUP BY ALL
            ORDER BY t.trial_id
            """,
            [include_excluded],
        ).df()


def list_imports(db: str | os.PathLike | None = None) -> pd.DataFrame:
    """Provenance of every import, newest last."""
    with connect(db, read_only=True) as con:
        return con.execute("SELECT * FROM imports ORDER BY import_id").df()


def table_counts(db: str | os.PathLike | None = None) -> dict[str, int]:
    """Row counts of the campaign tables."""
    with connect(db, read_only=True) as con:
        return {
            name: con.execute(f"SELECT count(*) FROM {name}").fetchone()[0]
            for name in ("imports", "catalysts", "trials", "trace_points")
        }


# --------------------------------------------------------------------------------------------------- analysis cache

_CACHE_TABLES = ("trial_results", "catalyst_results", "flags")


def _table_columns(con, table: str) -> list[str]:
    return [r[0] for r in con.execute(
        "SELECT column_name FROM information_schema.columns WHERE table_name = ? ORDER BY ordinal_position", [table]
    ).fetchall()]


def _insert_frame(con, table: str, frame: pd.DataFrame) -> None:
    """Insert the frame's columns that the table has, by name (the cache tables ignore extra columns)."""
    keep = [c for c in _table_columns(con, table) if c in frame.columns]
    con.register("cache_rows", frame[keep])
    quoted = ", ".join(f'"{c}"' for c in keep)
    con.execute(f"INSERT INTO {table} ({quoted}) SELECT {quoted} FROM cache_rows")
    con.unregister("cache_rows")


def data_stamp(db: str | os.PathLike | None = None) -> str:
    """A fingerprint of the campaign data: changes with every import, correction, exclusion or purge."""
    with connect(db, read_only=True) as con:
        row = con.execute(
            """
            SELECT (SELECT coalesce(max(import_id), 0) FROM imports), (SELECT coalesce(max(change_id), 0) FROM history),
                   (SELECT count(*) FROM trials), (SELECT count(*) FROM catalysts)
            """
        ).fetchone()
    return "i{}-h{}-t{}-c{}".format(*row)


def load_records(db: str | os.PathLike | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Catalysts and trials in SI, without excluded records (a trial of an excluded catalyst is left out too)."""
    with connect(db, read_only=True) as con:
        catalysts = con.execute(
            f"SELECT {', '.join(_CATALYST_FIELDS)} FROM catalysts WHERE NOT excluded ORDER BY catalyst_id").df()
        trials = con.execute(
            f"""SELECT {', '.join(_TRIAL_FIELDS)} FROM trials
                WHERE NOT excluded AND (catalyst_id IS NULL OR catalyst_id NOT IN
                      (SELECT catalyst_id FROM catalysts WHERE excluded))
                ORDER BY trial_id""").df()
    return catalysts, trials


def load_points(db: str | os.PathLike | None, trial_ids=None) -> pd.DataFrame:
    """Trace points ``trial_id, t, value`` (SI) of the given trials, or of every included trial; sorted by trial, t.

    Reading a campaign's points a block of trials at a time keeps the memory of a 10^7-point analysis bounded.
    """
    with connect(db, read_only=True) as con:
        if trial_ids is None:
            return con.execute(
                """SELECT p.trial_id, p.t, p.value FROM trace_points p
                   JOIN trials t USING (trial_id) WHERE NOT t.excluded ORDER BY p.trial_id, p.t""").df()
        con.register("wanted", pd.DataFrame({"trial_id": pd.Series(list(trial_ids), dtype=object)}))
        return con.execute(
            """SELECT p.trial_id, p.t, p.value FROM trace_points p SEMI JOIN wanted w ON p.trial_id = w.trial_id
               ORDER BY p.trial_id, p.t""").df()


def load_campaign(db: str | os.PathLike | None = None) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Catalysts, trials and trace points in SI, without excluded records (points sorted by trial and time)."""
    catalysts, trials = load_records(db)
    return catalysts, trials, load_points(db)


def load_trace(db: str | os.PathLike | None, trial_id: str) -> pd.DataFrame:
    """One trial's points (t, value) in SI."""
    with connect(db, read_only=True) as con:
        return con.execute("SELECT t, value FROM trace_points WHERE trial_id = ? ORDER BY t", [trial_id]).df()


def load_fits(db: str | os.PathLike | None, fit_version: str) -> pd.DataFrame:
    """Cached kinetic fits made by this fit version, indexed by trial_id."""
    with connect(db, read_only=True) as con:
        fits = con.execute("SELECT * EXCLUDE (fit_version) FROM trial_fits WHERE fit_version = ?", [fit_version]).df()
    return fits.set_index("trial_id")


def save_run(db: str | os.PathLike | None, run_key: str, settings_json: str, stamp: str, fits: pd.DataFrame,
             fit_version: str, blank: dict, trial_results: pd.DataFrame, catalyst_results: pd.DataFrame,
             flags: pd.DataFrame) -> None:
    """Store one analysis run (and refresh the per-trial fit cache) in one transaction.

    Older runs are dropped: the cache holds what the current data and recent settings produced, not history.
    """
    fits = fits.reset_index().rename(columns={"index": "trial_id"})
    fits["fit_version"] = fit_version
    with connect(db) as con, transaction(con):
        con.register("fresh_fits", fits[["trial_id"]])
        con.execute("DELETE FROM trial_fits WHERE trial_id IN (SELECT trial_id FROM fresh_fits)")
        con.unregister("fresh_fits")
        _insert_frame(con, "trial_fits", fits)
        stale = [r[0] for r in con.execute(
            "SELECT run_key FROM analysis_runs WHERE data_stamp <> ? OR run_key = ?", [stamp, run_key]).fetchall()]
        for table in (*_CACHE_TABLES, "analysis_runs"):
            con.execute(f"DELETE FROM {table} WHERE run_key IN (SELECT * FROM unnest(?))", [stale or [""]])
        con.execute(
            "INSERT INTO analysis_runs VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            [run_key, settings_json, stamp, fit_version, _now(), *(blank.get(k) for k in (
                "ea", "ea_low", "ea_high", "ln_a", "t_min", "t_max", "n_points"))],
        )
        for table, frame, key in (("trial_results", trial_results, "trial_id"),
                                  ("catalyst_results", catalyst_results, "catalyst_id")):
            frame = frame.reset_index().rename(columns={"index": key})
            frame["run_key"] = run_key
            _insert_frame(con, table, frame)
        flags = flags.assign(run_key=run_key)
        _insert_frame(con, "flags", flags)


def load_run(db: str | os.PathLike | None, run_key: str) -> dict | None:
    """A stored analysis run: its blank summary and the three result tables; None when not cached."""
    with connect(db, read_only=True) as con:
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


# --------------------------------------------------------------------------------------------------- corrections

#: Tables that take corrections, with their key and column contract. Table and column names put into correction
#: SQL come only from here, never from the caller.
_RECORDS = {
    "trials": ("trial_id", TRIAL_COLUMNS),
    "catalysts": ("catalyst_id", CATALYST_COLUMNS),
}
#: Trial columns fixed at import: the stored trace points were converted to SI with them, so a change would leave the
#: points meaning something else.
_FIXED_AT_IMPORT = ("measurement", "signal_unit")
#: A number optionally followed by a unit, bracketed or not: "35 degC", "12.5 [mg]", "-3e-2".
_NUMBER_AND_UNIT = re.compile(
    r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*\[?\s*((?:[A-Za-z%°µμ℃][^\[\]]*?)?)\s*\]?\s*$")
#: History column name of a purge row, whose old value is the whole record as JSON.
PURGED = "(record)"


@dataclass(frozen=True)
class Change:
    """One row written to the history: a correction, exclusion, inclusion or purge.

    Values are the canonical text of the stored SI value (see :func:`history`).
    """

    change_id: int
    table: str
    record_id: str
    column: str
    old_value: str | None
    new_value: str | None


def _record_spec(table: str):
    if table not in _RECORDS:
        raise CatalogError(f"'{table}' takes no corrections; choose one of: {', '.join(_RECORDS)}")
    return _RECORDS[table]


def _noun(table: str) -> str:
    return table.removesuffix("s")


def _stored_row(con, table: str, key: str, record_id: str) -> dict:
    frame = con.execute(f"SELECT * FROM {table} WHERE {key} = ?", [record_id]).df()
    if frame.empty:
        raise CatalogError(f"no {_noun(table)} '{record_id}' in the database")
    return frame.iloc[0].to_dict()


def _as_text(value) -> str | None:
    """Canonical text of a stored value: shortest round-trip float, ISO 8601 time, true/false; None when missing."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return None
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (float, np.floating)):
        return repr(float(value))
    if isinstance(value, (pd.Timestamp, datetime)):
        return pd.Timestamp(value).isoformat()
    return str(value)


def _cell_text(value, column) -> str:
    """A stored SI value written back as an import cell in the column's reference unit."""
    text = _as_text(value)
    if text is None:
        return ""
    if column.kind == "number" and column.unit is not None:
        return repr(float(from_si(float(value), column.unit)))
    return text


def _correction_cell(column, value_text: str) -> tuple[str, str]:
    """Header and cell for a corrected value, so it is read exactly like an import cell with that header."""
    match = _NUMBER_AND_UNIT.match(value_text) if column.kind == "number" else None
    if match is None or not match.group(2):
        # Text, a plain number in the reference unit, or something unreadable that the cell check will name.
        return column.name, value_text
    return f"{column.name} [{match.group(2)}]", match.group(1)


def _check_record(table: str, columns, stored: dict, known: set[str], label: str,
                  override: tuple[str, str, str] | None = None):
    """Run the import checks over one stored record rebuilt as a one-row table, optionally with one cell replaced."""
    headers, cells = [], []
    for column in columns:
        if override is not None and column.name == override[0]:
            headers.append(override[1])
            cells.append(override[2])
        else:
            headers.append(column.name)
            cells.append(_cell_text(stored[column.name], column))
    raw = RawTable(label, pd.DataFrame([cells], columns=headers, dtype=str))
    return check_catalysts(raw) if table == "catalysts" else check_trials(raw, known)


def _record_change(con, table: str, record_id: str, column: str, old: str | None, new: str | None,
                   who: str | None, reason: str | None) -> Change:
    change_id = int(con.execute("SELECT coalesce(max(change_id), 0) + 1 FROM history").fetchone()[0])
    con.execute("INSERT INTO history VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                [change_id, table, record_id, column, old, new, who or _user(), _now(), reason])
    return Change(change_id, table, record_id, column, old, new)


def _bound(value):
    """A checked cell as a value DuckDB binds: Python scalars, None for missing."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return None
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    if isinstance(value, (np.generic,)):
        return value.item()
    return value


def correct(db: str | os.PathLike | None, table: str, record_id: str, column: str, value_text: str,
            who: str | None = None, reason: str | None = None) -> Change:
    """Correct one value of a trial or catalyst, keeping the previous value, who and when in the history.

    ``value_text`` is read like an import cell of that column: a number with an optional unit (``"35 degC"``,
    ``"12.5 mg"``; without a unit the column's reference unit), text, true/false or an ISO 8601 time; an empty
    text clears an optional value. The whole record is re-checked with the import rules, so a correction cannot
    store what an import would refuse. Correcting a trial drops its cached kinetic fit so it is refitted.

    Parameters
    ----------
    db : path-like or None
        Database file (see :func:`resolve_path`).
    table : {"trials", "catalysts"}
    record_id : str
        The trial or catalyst id.
    column : str
        A column of the import contract (:data:`catalog.ingest.columns.TRIAL_COLUMNS` or ``CATALYST_COLUMNS``), not the id.
    value_text : str
        The new value as it would be typed in an import cell.
    who, reason : str, optional
        Recorded with the change; ``who`` defaults to the login name.

    Returns
    -------
    Change
        The history row written.

    Raises
    ------
    CatalogError
        Unknown table, record or column, an id column, a column fixed at import, or a value equal to the stored one.
    ValidationError
        The value breaks an import rule; nothing was written.
    """
    key, columns = _record_spec(table)
    spec = {c.name: c for c in columns}
    if column == key:
        raise CatalogError(f"the id of a {_noun(table)} cannot be changed; import the record under the new id and "
                           "purge the old one")
    if column not in spec:
        raise CatalogError(f"'{column}' is not a correctable column of {table}; choose one of: "
                           f"{', '.join(c for c in spec if c != key)}")
    if table == "trials" and column in _FIXED_AT_IMPORT:
        raise CatalogError(f"'{column}' fixed how the trace points were converted at import and cannot be corrected; "
                           "import the trial again under a new id and exclude or purge this one")
    header, cell = _correction_cell(spec[column], value_text)
    label = f"correction of {_noun(table)} '{record_id}'"
    with connect(db) as con, transaction(con):
        stored = _stored_row(con, table, key, record_id)
        known = {r[0] for r in con.execute("SELECT catalyst_id FROM catalysts").fetchall()}
        # Stored values go back through a unit conversion and may trip a bound by one ulp; only what the correction
        # newly breaks is reported.
        before = {str(p) for p in _check_record(table, columns, stored, known, label).problems}
        after = _check_record(table, columns, stored, known, label, (column, header, cell))
        problems = [Problem(label, None, p.column, p.message) for p in after.problems if str(p) not in before]
        if problems:
            raise ValidationError(problems)
        value = after.frame.at[0, column]
        if _same_value(value, stored[column]):
            raise CatalogError(f"{_noun(table)} '{record_id}' already has {column} = {_as_text(stored[column])}; "
                               "nothing recorded")
        con.execute(f'UPDATE {table} SET "{column}" = ? WHERE {key} = ?', [_bound(value), record_id])
        if table == "trials":
            con.execute("DELETE FROM trial_fits WHERE trial_id = ?", [record_id])
        return _record_change(con, table, record_id, column, _as_text(stored[column]), _as_text(value), who, reason)


def _set_excluded(db, table: str, record_id: str, excluded: bool, who: str | None, reason: str | None) -> Change:
    key, _ = _record_spec(table)
    with connect(db) as con, transaction(con):
        row = con.execute(f"SELECT excluded FROM {table} WHERE {key} = ?", [record_id]).fetchone()
        if row is None:
            raise CatalogError(f"no {_noun(table)} '{record_id}' in the database")
        if bool(row[0]) == excluded:
            state = "excluded" if excluded else "included"
            raise CatalogError(f"{_noun(table)} '{record_id}' is already {state}; nothing recorded")
        con.execute(f"UPDATE {table} SET excluded = ? WHERE {key} = ?", [excluded, record_id])
        return _record_change(con, table, record_id, "excluded", _as_text(bool(row[0])), _as_text(excluded),
                              who, reason)


def exclude(db: str | os.PathLike | None, table: str, record_id: str, who: str | None = None,
            reason: str | None = None) -> Change:
    """Leave a trial or catalyst out of analysis without deleting anything; undone by :func:`include`.

    Excluding a catalyst also leaves out its trials. The change is recorded in the history.
    """
    return _set_excluded(db, table, record_id, True, who, reason)


def include(db: str | os.PathLike | None, table: str, record_id: str, who: str | None = None,
            reason: str | None = None) -> Change:
    """Take an excluded trial or catalyst back into analysis; the change is recorded in the history."""
    return _set_excluded(db, table, record_id, False, who, reason)


def history(db: str | os.PathLike | None = None, record_id: str | None = None) -> pd.DataFrame:
    """Every recorded change, oldest first, optionally of one record only.

    Columns: change_id, table_name, record_id, column_name, old_value, new_value, changed_by, changed_at (UTC),
    reason. Values are the canonical text of the stored SI value (K, kg, m³, ...); a purge row has column_name
    ``"(record)"`` and the deleted record as JSON in old_value.
    """
    with connect(db, read_only=True) as con:
        return con.execute(
            "SELECT * FROM history WHERE record_id = coalesce(?::VARCHAR, record_id) ORDER BY change_id", [record_id]
        ).df()


def purge(db: str | os.PathLike | None, table: str, record_id: str, who: str | None = None,
          reason: str | None = None) -> Change:
    """Delete a trial (with its trace points and cached fit) or a catalyst that has no trials, for good.

    The one irreversible operation: the history keeps the deleted record as JSON (with the number of trace points
    removed) so the deletion itself is never silent. Prefer :func:`exclude`, which can be undone.

    Raises
    ------
    CatalogError
        Unknown record, or a catalyst that still has trials.
    """
    key, _ = _record_spec(table)
    with connect(db) as con, transaction(con):
        stored = _stored_row(con, table, key, record_id)
        record = {"record": {name: _as_text(value) for name, value in stored.items()}}
        if table == "catalysts":
            n_trials = con.execute("SELECT count(*) FROM trials WHERE catalyst_id = ?", [record_id]).fetchone()[0]
            if n_trials:
                raise CatalogError(f"catalyst '{record_id}' still has {n_trials} trial(s); purge or re-assign them "
                                   "first, or exclude the catalyst instead")
        else:
            record["trace_points"] = int(
                con.execute("SELECT count(*) FROM trace_points WHERE trial_id = ?", [record_id]).fetchone()[0])
            con.execute("DELETE FROM trace_points WHERE trial_id = ?", [record_id])
            con.execute("DELETE FROM trial_fits WHERE trial_id = ?", [record_id])
        con.execute(f"DELETE FROM {table} WHERE {key} = ?", [record_id])
        return _record_change(con, table, record_id, PURGED, json.dumps(record, ensure_ascii=False), None, who, reason)


def purge_import(db: str | os.PathLike | None, import_id: int, who: str | None = None,
                 reason: str | None = None) -> Change:
    """Delete everything one import wrote (e.g. the demo campaign), for good, and notes it in the history.

    Its trials go with their trace points and cached fits; its catalysts go unless trials of other imports still
    use them. The import's provenance row is removed and the history keeps a JSON summary of what was deleted.
    """
    with connect(db) as con, transaction(con):
        row = con.execute("SELECT source, n_trials FROM imports WHERE import_id = ?", [int(import_id)]).fetchone()
        if row is None:
            raise CatalogError(f"no import #{import_id} in {resolve_path(db)}")
        trial_ids = "SELECT trial_id FROM trials WHERE import_id = ?"
        summary = {
            "source": row[0],
            "trials": con.execute(f"SELECT count(*) FROM ({trial_ids})", [int(import_id)]).fetchone()[0],
            "trace_points": con.execute(
                f"SELECT count(*) FROM trace_points WHERE trial_id IN ({trial_ids})", [int(import_id)]).fetchone()[0],
        }
        for table in ("trace_points", "trial_fits"):
            con.execute(f"DELETE FROM {table} WHERE trial_id IN ({trial_ids})", [int(import_id)])
        con.execute("DELETE FROM trials WHERE import_id = ?", [int(import_id)])
        unused = "import_id = ? AND catalyst_id NOT IN (SELECT catalyst_id FROM trials WHERE catalyst_id IS NOT NULL)"
        summary["catalysts"] = con.execute(f"SELECT count(*) FROM catalysts WHERE {unused}",
                                           [int(import_id)]).fetchone()[0]
        con.execute(f"DELETE FROM catalysts WHERE {unused}", [int(import_id)])
        con.execute("DELETE FROM imports WHERE import_id = ?", [int(import_id)])
        return _record_change(con, "imports", str(import_id), PURGED, json.dumps(summary, ensure_ascii=False), None,
                              who, reason)


def list_catalysts(db: str | os.PathLike | None = None, include_excluded: bool = False) -> pd.DataFrame:
    """The catalyst registry (SI), with each catalyst's number of trials; no trace points are read."""
    with connect(db, read_only=True) as con:
        return con.execute(
            f"""
            SELECT {', '.join('c.' + f for f in _CATALYST_FIELDS)}, c.excluded, count(t.trial_id) AS n_trials
            FROM catalysts c LEFT JOIN trials t USING (catalyst_id)
            WHERE ? OR NOT c.excluded
            GROUP BY ALL ORDER BY c.catalyst_id
            """,
            [include_excluded],
        ).df()


# --------------------------------------------------------------------------------------------------- backup

BACKUP_MANIFEST = "catalog-backup.json"
BACKUP_FORMAT = 1
_IDENTIFIER = re.compile(r"^[a-z_][a-z0-9_]*$")


def _all_tables(con) -> list[str]:
    names = [r[0] for r in con.execute(
        "SELECT table_name FROM information_schema.tables WHERE table_schema = 'main' AND table_type = 'BASE TABLE' "
        "ORDER BY table_name").fetchall()]
    # Table names go into SQL text, so only plain lower-case identifiers are accepted.
    odd = [n for n in names if not _IDENTIFIER.match(n)]
    if odd:
        raise CatalogError(f"unexpected table names in the database: {', '.join(map(repr, odd))}")
    return names


def backup(db: str | os.PathLike | None, directory: str | os.PathLike) -> dict:
    """Write a consistent copy of every table as Parquet into a new folder, with a manifest written last.

    All tables are read in one transaction, so the copy is one moment of the store even if a writer is waiting.
    The manifest (``catalog-backup.json``) holds the format, the catalog version, the time (UTC), the migrations and
    every table's row count; a folder without it is an unfinished backup and :func:`restore` refuses it.

    Returns
    -------
    dict
        The manifest.
    """
    out = Path(directory)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise CatalogError(f"{out}: not an empty folder; choose a new folder for the backup")
    path = resolve_path(db)
    with connect(path, read_only=True) as con, transaction(con):
        out.mkdir(parents=True, exist_ok=True)
        counts = {}
        for name in _all_tables(con):
            con.execute(f"COPY (SELECT * FROM {name}) TO ? (FORMAT parquet)", [str(out / f"{name}.parquet")])
            counts[name] = int(con.execute(f"SELECT count(*) FROM {name}").fetchone()[0])
        migrations = [r[0] for r in con.execute("SELECT version FROM schema_migrations ORDER BY version").fetchall()]
    manifest = {"format": BACKUP_FORMAT, "catalog_version": __version__, "created_at": _now().isoformat(),
                "source": str(path), "migrations": migrations, "tables": counts}
    partial = out / (BACKUP_MANIFEST + ".partial")
    partial.write_text(json.dumps(manifest, indent=2), encoding="utf-8")
    os.replace(partial, out / BACKUP_MANIFEST)
    return manifest


def _read_manifest(folder: Path) -> dict:
    try:
        manifest = json.loads((folder / BACKUP_MANIFEST).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise CatalogError(f"{folder}: no {BACKUP_MANIFEST}; not a backup, or an unfinished one") from None
    except (OSError, ValueError) as exc:
        raise CatalogError(f"{folder / BACKUP_MANIFEST}: cannot be read: {exc}") from exc
    if not isinstance(manifest, dict) or manifest.get("format") != BACKUP_FORMAT:
        raise CatalogError(f"{folder / BACKUP_MANIFEST}: not a backup format this version reads")
    known = {version for version, _, _ in MIGRATIONS}
    versions = manifest.get("migrations")
    if not isinstance(versions, list) or not versions or not set(versions) <= known:
        raise CatalogError(f"{folder}: made by a newer catalog (schema versions {versions}); upgrade to restore it")
    if not isinstance(manifest.get("tables"), dict):
        raise CatalogError(f"{folder / BACKUP_MANIFEST}: the table list is missing")
    return manifest


def _holds_data(path: Path) -> bool:
    with connect(path, read_only=True) as con:
        return any(con.execute(f"SELECT count(*) > 0 FROM {name}").fetchone()[0]
                   for name in _all_tables(con) if name != "schema_migrations")


def _remove_database(path: Path) -> None:
    for leftover in (path, path.with_name(path.name + ".wal")):
        leftover.unlink(missing_ok=True)


def restore(directory: str | os.PathLike, db: str | os.PathLike | None, *, force: bool = False) -> dict:
    """Rebuild a database file from a :func:`backup` folder.

    The copy is built in a side file, checked against the manifest's row counts and only then moved over the
    target, so a failed restore leaves the target as it was. The schema comes from this version's own migrations
    (up to the backup's), never from SQL text found in the folder.

    Parameters
    ----------
    directory : path-like
        The backup folder.
    db : path-like or None
        Target database file.
    force : bool, default False
        Replace a target that already holds data.

    Returns
    -------
    dict
        The manifest of the restored backup.

    Raises
    ------
    CatalogError
        Not a backup, unreadable or incomplete files, counts that disagree, or a target holding data without force.
    """
    folder = Path(directory)
    manifest = _read_manifest(folder)
    target = resolve_path(db)
    if target.exists() and not force and _holds_data(target):
        raise CatalogError(f"{target} already holds data; restore into a new file, or use force to replace it")
    partial = target.with_name(target.name + ".restoring")
    _remove_database(partial)
    con = duckdb.connect(str(partial), config={"autoinstall_known_extensions": False,
                                               "autoload_known_extensions": False})
    try:
        migrate(con, upto=max(manifest["migrations"]))
        tables = _all_tables(con)
        wanted = set(manifest["tables"])
        if wanted != set(tables):
            raise CatalogError(f"{folder}: its tables ({', '.join(sorted(wanted))}) do not match schema version "
                               f"{max(manifest['migrations'])}")
        with transaction(con):
            con.execute("DELETE FROM schema_migrations")
            for name in tables:
                file = folder / f"{name}.parquet"
                if not file.is_file():
                    raise CatalogError(f"{file}: missing; the backup is incomplete")
                con.execute(f"INSERT INTO {name} BY NAME SELECT * FROM read_parquet(?)", [str(file)])
                count = con.execute(f"SELECT count(*) FROM {name}").fetchone()[0]
                if count != manifest["tables"][name]:
                    raise CatalogError(f"{file}: {count} rows, but the manifest says {manifest['tables'][name]}; "
                                       "the backup is damaged")
        con.execute("CHECKPOINT")
    except duckdb.Error as exc:
        con.close()
        _remove_database(partial)
        raise CatalogError(f"{folder}: cannot be restored: {_first_line(exc)}") from exc
    except BaseException:
        con.close()
        _remove_database(partial)
        raise
    con.close()
    if target.exists():
        try:
            # Waits for any other user of the target to finish, and folds its log into the file so no stale
            # write-ahead log is replayed over the restored copy.
            with connect(target) as old:
                old.execute("CHECKPOINT")
        except DatabaseBusyError:
            _remove_database(partial)
            raise
        except CatalogError:
            pass  # a damaged target is being replaced on purpose
    target.with_name(target.name + ".wal").unlink(missing_ok=True)
    os.replace(partial, target)
    return manifest
