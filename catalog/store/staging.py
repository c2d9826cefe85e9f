"""Trace points on their way in: staged in an in-memory DuckDB database, checked set-wise, located when faulty.

A clean CSV file costs one typed read, one streaming check and one streaming write; only a file with a fault is read
again as text, so that each fault is reported with its file, line, column and text as written.

The trial ids are read as an ENUM of this campaign's trials, ordered by how each trial's values reach SI (and with
the trials already stored last), so the conversion is an expression over the id's code, ``value × scale + shift``
with the scale and shift of the code's range, instead of a join: a join does not keep its input's order, and
sorting the points back into file order was the largest cost of an import.
"""

from __future__ import annotations

import csv
import dataclasses
from pathlib import Path

import duckdb
import pandas as pd

from catalog.errors import Problem
from catalog.ingest.columns import LONGEST_TRACE_S
from catalog.ingest.sources import CampaignSource
from catalog.ingest.validate import trace_layout
from catalog.store.db import first_line, literal_path

#: Problems listed per kind of trace fault; the rest are counted, so a million bad rows stay readable.
LISTED_PER_CHECK = 50
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


@dataclasses.dataclass(frozen=True)
class Staged:
    """The staged points: the time scale to seconds, and the trial codes' ranges with their SI scale and shift.

    ``ranges`` holds ``(end, scale, shift, new)``: codes below ``end`` (and not below the previous end) take that
    scale and shift; ``new`` is false for trials already stored, which the final write leaves out.
    """

    time_scale: float
    ranges: tuple[tuple[int, float, float, bool], ...]

    def _by_code(self, field: int) -> tuple[str, list]:
        """A CASE over the code ranges giving one field of each range (the values bound, the shape fixed)."""
        return ("CASE " + " ".join("WHEN code < ? THEN ?" for _ in self.ranges) + " END",
                [x for r in self.ranges for x in (r[0], r[field])])

    def si_points(self, new_only: bool = False) -> tuple[str, list]:
        """SQL (and its parameters) of the staged points ``trial_id, t, value`` in SI, in file order.

        .. math:: t = t_\\mathrm{file}\\,s_t, \\qquad y = y_\\mathrm{file}\\,a_i + b_i

        with :math:`a_i, b_i` the scale and shift of trial *i*'s signal unit. Projections and a filter only, so the
        rows keep the staged (file) order; ``new_only`` leaves out the trials already stored.
        """
        (scale, a), (shift, b), (new, keep) = self._by_code(1), self._by_code(2), self._by_code(3)
        where, w = (new, keep) if new_only and not all(r[3] for r in self.ranges) else ("true", [])
        return (f"SELECT trial_id, time_num * ? AS t, value_num * {scale} + {shift} AS value FROM typed "
                f"WHERE {where}", [self.time_scale, *a, *b, *w])


def stage_traces(
    stage: duckdb.DuckDBPyConnection, source: CampaignSource, trials: pd.DataFrame, stored: set[str]
) -> tuple[list[Problem], list[str], Staged | None]:
    """Load the trace table into the staging database and check it set-wise.

    A CSV file is first read with typed columns, which is all a clean file costs; only when that read fails or a
    check finds a fault (bad cell, time not increasing, unknown trial, trial without points) is it read again as
    text, so that each fault is reported with its line and its text as written. ``stored`` are the ids already in
    the store (their codes come last). Returns the problems, the notes and, for clean points, the
    :class:`Staged` description the final write and the comparison with stored traces use.
    """
    names, time_scale, problems, notes = trace_layout(source.traces)
    label = source.traces.label
    if problems:
        return problems, notes, None
    factors = pd.DataFrame({
        "trial_id": trials["trial_id"],
        "scale": trials["signal_scale"],
        "shift": trials["signal_shift"],
        "stored": trials["trial_id"].isin(stored),
        # Bounds in the file's units, so the checks run on the numbers as read: no product can overflow.
        "time_limit": LONGEST_TRACE_S / time_scale,
        "value_limit": 1e300 / trials["signal_scale"].fillna(1.0).clip(lower=1.0),
    }).dropna(subset=["trial_id"])
    stage.register("factors", factors)
    # Codes in the order (already stored, scale, shift): a few ranges of codes, each with one conversion. A repeated
    # id (already a problem of the trials table) is one member.
    stage.execute("CREATE TYPE trial_key AS ENUM (SELECT trial_id FROM factors GROUP BY trial_id "
                  "ORDER BY bool_or(stored), min(scale), min(shift), trial_id)")
    if not (source.traces.csv_path is not None and _stage_typed(stage, source, names)):
        try:
            _stage_text(stage, source, names)
        except duckdb.Error as exc:
            ragged = _ragged_lines(source.traces.csv_path, label)
            return ragged or [Problem(label, None, None, f"cannot be read as CSV: {first_line(exc)}")], notes, None
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
        problems += [Problem(source.trials.label, trial_rows.get(t), "trial_id",
                             f"trial '{t}' has no trace points in {label}") for (t,) in empty]
    if problems:
        return problems, notes, None
    return problems, notes, _code_ranges(stage, time_scale)


def _code_ranges(stage: duckdb.DuckDBPyConnection, time_scale: float) -> Staged:
    """The trial codes' runs of equal conversion, from the codes DuckDB gave (the type's order is not relied on).

    A run is a gap-free stretch of codes with one (stored, scale, shift): code minus its rank within that group is
    constant along a run.
    """
    rows = stage.execute(
        """
        SELECT max(code) + 1 AS stop, scale, shift, NOT stored
        FROM (SELECT *, code - row_number() OVER (PARTITION BY stored, scale, shift ORDER BY code) AS run
              FROM (SELECT DISTINCT enum_code(trial_id::trial_key) AS code, scale, shift, stored FROM factors))
        GROUP BY stored, scale, shift, run
        ORDER BY stop
        """
    ).fetchall()
    return Staged(time_scale, tuple(rows))


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
    # An id that is not a trial of this campaign (or carries spaces) fails the read: the text path locates it.
    types = [{"time": "DOUBLE", "value": "DOUBLE", "trial_id": "trial_key"}.get(n, "VARCHAR") for n in columns]
    try:
        with literal_path(source.traces.csv_path) as path:
            stage.execute("CREATE TABLE raw AS SELECT * FROM read_csv(?, header = true, names = ?, types = ?)",
                          [path, columns, types])
    except duckdb.Error:
        return False
    stage.execute(
        "CREATE VIEW typed AS SELECT rowid + 2 AS line, trial_id::VARCHAR AS trial_id, enum_code(trial_id) AS code, "
        "time AS time_num, value AS value_num FROM raw"
    )
    # One streaming scan marks the rows that matter: where a trial's run of rows starts, where the file order
    # breaks, where a cell is bad or a time does not increase. Lag over the rows as they come is far cheaper than a
    # window per trial, and exact when they came in file order (checked: consecutive row ids) and each trial's rows
    # are contiguous (runs = trials); otherwise the window per trial decides. The marks are few on a clean file (one
    # per trial), so the counts and the id match below read them, not the points again. The scan reads the typed
    # columns as stored (the id's ENUM code, not its text) with the range limits bound once: half the time of the
    # same checks over the ``typed`` view (_TRACE_FAULTS[:5]; an ENUM id is never '', the members are ids).
    time_limit, value_limit = stage.execute("SELECT min(time_limit), min(value_limit) FROM factors").fetchall()[0]
    cells = ("trial_id IS NULL OR time IS NULL OR NOT isfinite(time) OR value IS NULL OR NOT isfinite(value) "
             "OR abs(time) > $time_limit OR abs(value) > $value_limit")
    stage.execute(
        f"""
        CREATE TEMP TABLE marks AS
        SELECT trial_id, rowid <> previous_row + 1 AS shuffled, trial_id IS DISTINCT FROM previous_trial AS starts,
               ({cells}) OR (trial_id = previous_trial AND time <= previous_time) AS faulty
        FROM (SELECT rowid, trial_id, time, value, lag(rowid) OVER () AS previous_row,
                     lag(trial_id) OVER () AS previous_trial, lag(time) OVER () AS previous_time FROM raw)
        WHERE rowid <> previous_row + 1 OR trial_id IS DISTINCT FROM previous_trial
              OR ({cells}) OR (trial_id = previous_trial AND time <= previous_time)
        """,
        {"time_limit": time_limit, "value_limit": value_limit},
    )
    # Every trial id in the file starts a run at its first row, so the distinct ids of the run starts are all of them.
    shuffled, runs, n_trials, faults = stage.execute(
        "SELECT count(*) FILTER (shuffled), count(*) FILTER (starts), count(DISTINCT trial_id) FILTER (starts), "
        "count(*) FILTER (faulty) FROM marks"
    ).fetchone()
    if not faults and (shuffled or runs != n_trials):
        faults = stage.execute(f"SELECT count(*) FROM ({_NOT_INCREASING})").fetchone()[0]
    if not faults:
        # Every id in the file is a member of the type (the typed read refuses any other), so every trial has points
        # when the file names as many distinct ids as the type has members.
        faults = n_trials != stage.execute("SELECT count(*) FROM unnest(enum_range(NULL::trial_key))").fetchone()[0]
    stage.execute("DROP TABLE marks")
    if faults:
        stage.execute("DROP VIEW typed")
        stage.execute("DROP TABLE raw")
        return False
    return True


def _stage_text(stage: duckdb.DuckDBPyConnection, source: CampaignSource, names: dict[str, str]) -> None:
    """Stage the trace table as text, with the parsed numbers beside it, as the table ``typed``."""
    if source.traces.csv_path is not None:
        # Every column is read as text so a bad cell becomes a located problem, not a parse failure.
        with literal_path(source.traces.csv_path) as path:
            stage.execute(
                "CREATE TABLE raw AS SELECT * FROM read_csv(?, header = true, all_varchar = true, names = ?)",
                [path, _csv_names(source, names)],
            )
    else:
        order = [name for header in source.traces.headers for name, h in names.items() if h == header]
        frame = source.traces.frame.rename(columns={h: n for n, h in names.items()})
        stage.register("raw_frame", frame[order])
        stage.execute("CREATE TABLE raw AS SELECT * FROM raw_frame")
    stage.execute(
        """
        CREATE TABLE typed AS
        SELECT rowid + 2 AS line, trim(trial_id) AS trial_id, enum_code(TRY_CAST(trim(trial_id) AS trial_key)) AS code,
               coalesce(time, '') AS time_text, coalesce(value, '') AS value_text,
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


def same_traces(con, stage, staged: Staged, overlap: list[str]) -> set[str]:
    """Trial ids whose staged points equal the stored ones (same count, same times and values)."""
    stored = con.execute(
        "SELECT trial_id, t, value FROM trace_points WHERE trial_id IN (SELECT * FROM unnest(?))", [overlap]
    ).df()
    stage.register("stored_points", stored)
    points, params = staged.si_points()
    rows = stage.execute(
        f"""
        WITH a AS (SELECT trial_id, t, value, row_number() OVER (PARTITION BY trial_id ORDER BY t) AS k
                   FROM ({points}) WHERE trial_id IN (SELECT trial_id FROM stored_points)),
             b AS (SELECT trial_id, t, value, row_number() OVER (PARTITION BY trial_id ORDER BY t) AS k
                   FROM stored_points)
        SELECT trial_id FROM a FULL JOIN b USING (trial_id, k)
        GROUP BY trial_id
        HAVING bool_and(a.t IS NOT NULL AND b.t IS NOT NULL
                        AND abs(a.t - b.t) <= 1e-12 * abs(b.t) AND abs(a.value - b.value) <= 1e-12 * abs(b.value))
        """,
        params,
    ).fetchall()
    return {r[0] for r in rows}


def write_points(stage: duckdb.DuckDBPyConnection, staged: Staged) -> int:
    """Append the staged points of the trials not yet stored to ``store.trace_points``, in file order.

    A streaming scan of the staged rows (projection and filter only): no join, no sort. Returns the rows written.
    """
    points, params = staged.si_points(new_only=True)
    return stage.execute(f"INSERT INTO store.trace_points {points}", params).fetchone()[0]


def count_points(stage: duckdb.DuckDBPyConnection, staged: Staged) -> int:
    """How many staged points belong to trials not yet stored (the ones :func:`write_points` writes)."""
    points, params = staged.si_points(new_only=True)
    return stage.execute(f"SELECT count(*) FROM ({points})", params).fetchone()[0]


def _ragged_lines(path, label: str, limit: int = 50) -> list[Problem]:
    """Lines whose number of fields differs from the header's, located for the user (only read when DuckDB's
    reader has already refused the file, so a clean import never pays for it)."""
    if path is None:
        return []
    problems: list[Problem] = []
    with open(path, newline="", encoding="utf-8-sig", errors="replace") as handle:
        rows = csv.reader(handle)
        header = next(rows, None)
        if header is None:
            return []
        for row in rows:
            if row and len(row) != len(header):
                problems.append(Problem(label, rows.line_num, None,
                                        f"has {len(row)} fields where the header has {len(header)}"))
                if len(problems) >= limit:
                    break
    return problems
