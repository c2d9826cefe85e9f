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
import getpass
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
from catalog.campaign import (
    CATALYST_COLUMNS,
    TRIAL_COLUMNS,
    CampaignSource,
    check_catalysts,
    check_trials,
    trace_layout,
)
from catalog.errors import CatalogError, DatabaseBusyError, Problem, ValidationError

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
def connect(db: str | os.PathLike | None = None, *, read_only: bool = False, wait: float = LOCK_WAIT_S) -> Iterator[
    duckdb.DuckDBPyConnection
]:
    """Open the store, apply pending migrations (when writable), and close it afterwards.

    A lock held by another process is retried for ``wait`` seconds, then reported as busy.
    """
    path = resolve_path(db)
    if read_only and not path.exists():
        raise CatalogError(f"{path}: no database here yet; import a campaign first (catalog import FOLDER --db {path})")
    config = {"autoinstall_known_extensions": False, "autoload_known_extensions": False}
    deadline = time.monotonic() + wait
    delay = 0.05
    while True:
        try:
            con = duckdb.connect(str(path), read_only=read_only, config=config)
            break
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
    try:
        if not read_only:
            migrate(con)
        yield con
    finally:
        con.close()


def migrate(con: duckdb.DuckDBPyConnection) -> list[int]:
    """Apply every migration not yet recorded; return the versions applied now."""
    con.execute(
        "CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name VARCHAR, applied_at TIMESTAMP)"
    )
    done = {row[0] for row in con.execute("SELECT version FROM schema_migrations").fetchall()}
    applied = []
    for version, name, sql in MIGRATIONS:
        if version in done:
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
    with connect(path) as con:
        earlier = con.execute(
            "SELECT import_id, imported_at FROM imports WHERE content_hash = ? ORDER BY import_id LIMIT 1",
            [source.content_hash],
        ).fetchone()
        if earlier is not None:
            return ImportReport(None, 0, 0, 0, duplicate_of=earlier[0],
                                notes=[f"identical files were imported as import #{earlier[0]} on {earlier[1]:%Y-%m-%d %H:%M}; nothing written"])
        stored_catalysts = con.execute(f"SELECT {', '.join(_CATALYST_FIELDS)} FROM catalysts").df()
        stored_ids = set(con.execute("SELECT trial_id FROM trials").df()["trial_id"])

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
        if overlap:
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
        n_points = stage.execute(
            "SELECT count(*) FROM points WHERE trial_id IN (SELECT trial_id FROM new_trials)"
        ).fetchone()[0]
        say(f"writing {len(new_catalysts)} catalysts, {len(new_trial_frame)} trials, {n_points} points")
        import_id = _write(stage, path, source, new_catalysts, new_trial_frame, n_points,
                           len(skipped_catalysts) + len(skipped_trials), demo, who or _user(), notes)
    finally:
        stage.close()
    return ImportReport(import_id, len(new_catalysts), len(new_trial_frame), int(n_points),
                        skipped_catalysts, skipped_trials, notes)


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


def _stage_traces(
    stage: duckdb.DuckDBPyConnection, source: CampaignSource, trials: pd.DataFrame
) -> tuple[list[Problem], list[str]]:
    """Load the trace table into the staging database as text, check it set-wise, build SI points.

    Creates the staging table ``points(trial_id, t, value)`` in SI for every trial of this import.
    """
    names, time_scale, problems, notes = trace_layout(source.traces)
    label = source.traces.label
    if problems:
        return problems, notes
    order = [name for header in source.traces.headers for name, h in names.items() if h == header]
    try:
        if source.traces.csv_path is not None:
            # Every column is read as text so a bad cell becomes a located problem, not a parse failure.
            columns = [n if n in names else f"unused_{i}" for i, n in enumerate(_canonical(source.traces.headers, names))]
            stage.execute(
                "CREATE TABLE raw AS SELECT * FROM read_csv(?, header = true, all_varchar = true, names = ?)",
                [str(source.traces.csv_path), columns],
            )
        else:
            frame = source.traces.frame.rename(columns={h: n for n, h in names.items()})
            stage.register("raw_frame", frame[order])
            stage.execute("CREATE TABLE raw AS SELECT * FROM raw_frame")
    except duckdb.Error as exc:
        return [Problem(label, None, None, f"cannot be read as CSV: {_first_line(exc)}")], notes

    factors = pd.DataFrame({
        "trial_id": trials["trial_id"],
        "scale": trials["signal_scale"],
        "shift": trials["signal_shift"],
    }).dropna(subset=["trial_id"])
    stage.register("factors", factors)
    stage.execute(
        """
        CREATE TABLE typed AS
        SELECT rowid + 2 AS line, trim(trial_id) AS trial_id, coalesce(time, '') AS time_text, coalesce(value, '') AS value_text,
               TRY_CAST(time AS DOUBLE) AS time_num, TRY_CAST(value AS DOUBLE) AS value_num
        FROM raw
        """
    )
    stage.execute("DROP TABLE raw")
    checks = [
        ("trial_id IS NULL OR trial_id = ''", names["trial_id"], "trial_id is empty"),
        ("time_num IS NULL OR NOT isfinite(time_num)", names["time"], "time {time_text!r} is not a finite number"),
        ("value_num IS NULL OR NOT isfinite(value_num)", names["value"], "value {value_text!r} is not a finite number"),
        ("trial_id <> '' AND trial_id NOT IN (SELECT trial_id FROM factors)", names["trial_id"],
         "trial '{trial_id}' is not in the trials table of this campaign"),
    ]
    for condition, header, message in checks:
        problems += _located(stage, f"SELECT line, trial_id, time_text, value_text FROM typed WHERE {condition}",
                             label, header, message)
    problems += _located(
        stage,
        """
        SELECT line, trial_id, time_text, value_text FROM (
            SELECT line, trial_id, time_text, value_text, time_num,
                   lag(time_num) OVER (PARTITION BY trial_id ORDER BY line) AS previous
            FROM typed) WHERE time_num <= previous
        """,
        label, names["time"], "time {time_text} does not increase within trial '{trial_id}'",
    )
    empty = stage.execute(
        "SELECT trial_id FROM factors WHERE trial_id NOT IN (SELECT trial_id FROM typed) ORDER BY trial_id"
    ).fetchall()
    trial_rows = {t: i + 2 for i, t in enumerate(trials["trial_id"])}
    problems += [Problem(source.trials.label, trial_rows.get(t), "trial_id", f"trial '{t}' has no trace points in {label}")
                 for (t,) in empty]
    if problems:
        return problems, notes
    stage.execute(
        """
        CREATE TABLE points AS
        SELECT p.trial_id, p.time_num * ? AS t, p.value_num * f.scale + f.shift AS value
        FROM typed p JOIN factors f USING (trial_id)
        ORDER BY p.line
        """,
        [time_scale],
    )
    stage.execute("DROP TABLE typed")
    return problems, notes


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


def load_campaign(db: str | os.PathLike | None = None) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Catalysts, trials and trace points in SI, without excluded records (points sorted by trial and time)."""
    with connect(db, read_only=True) as con:
        catalysts = con.execute(
            f"SELECT {', '.join(_CATALYST_FIELDS)} FROM catalysts WHERE NOT excluded ORDER BY catalyst_id").df()
        trials = con.execute(
            f"""SELECT {', '.join(_TRIAL_FIELDS)} FROM trials
                WHERE NOT excluded AND (catalyst_id IS NULL OR catalyst_id NOT IN
                      (SELECT catalyst_id FROM catalysts WHERE excluded))
                ORDER BY trial_id""").df()
        points = con.execute(
            """SELECT p.trial_id, p.t, p.value FROM trace_points p
               JOIN trials t USING (trial_id) WHERE NOT t.excluded ORDER BY p.trial_id, p.t""").df()
    return catalysts, trials, points


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
