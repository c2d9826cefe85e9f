"""Trace points on their way in: read once by DuckDB straight into the store, checked set-wise, located when faulty.

A clean CSV file costs one typed read that streams into ``store.trace_points`` inside the import's transaction and
one streaming check of the rows it wrote; only a file with a fault (the read refuses it, or the check finds one) is
rolled back and read again as text into the in-memory staging database, so that each fault is reported with its
file, line, column and text as written. A workbook's trace sheet, already in memory, takes the text path only.

The trial ids are read as an ENUM of this campaign's trials, ordered by how each trial's values reach SI, so the
conversion is an expression over the id's code, ``value × scale + shift`` with the scale and shift of the code's
range, instead of a join: a join does not keep its input's order, and sorting the points back into file order was
the largest cost of an import.
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
from pathlib import Path

import duckdb
import numpy as np

from catalog.errors import Problem
from catalog.ingest.columns import LONGEST_TRACE_S
from catalog.ingest.sources import CampaignSource
from catalog.ingest.tables import Table, missing
from catalog.ingest.validate import trace_layout
from catalog.store.db import first_line, literal_path

#: Problems listed per kind of trace fault; the rest are counted, so a million bad rows stay readable.
LISTED_PER_CHECK = 50
#: Largest magnitude of a stored value, in SI: squares and sums of squares of the fits stay finite.
LARGEST_SI_VALUE = 1e300
#: A bad cell among SI points ``t, value`` (both paths judge the numbers after conversion, so they agree).
_BAD_SI = f"NOT isfinite(t) OR NOT isfinite(value) OR abs(t) > {LONGEST_TRACE_S:g} OR abs(value) > {LARGEST_SI_VALUE:g}"
#: Checks of the text-staged ``typed`` rows (line, trial_id, code, texts, numbers and their SI ``t, value``):
#: condition, column, message.
_TRACE_FAULTS = (
    ("trial_id IS NULL OR trial_id = ''", "trial_id", "trial_id is empty"),
    ("time_num IS NULL OR NOT isfinite(time_num)", "time", "time {time_text!r} is not a finite number"),
    ("value_num IS NULL OR NOT isfinite(value_num)", "value", "value {value_text!r} is not a finite number"),
    (f"isfinite(time_num) AND NOT (abs(t) <= {LONGEST_TRACE_S:g})", "time",
     f"time {{time_text}} is outside the plausible range (a trace longer than {LONGEST_TRACE_S:g} s)"),
    (f"isfinite(value_num) AND NOT (abs(value) <= {LARGEST_SI_VALUE:g})", "value",
     "value {value_text} is too large to hold once converted to SI"),
    ("trial_id <> '' AND code IS NULL", "trial_id", "trial '{trial_id}' is not in the trials table of this campaign"),
)
#: Rows of ``points`` whose time is not above the previous reading of the same trial, in ``line`` order.
_NOT_INCREASING = """
    SELECT * FROM (SELECT *, lag(t) OVER (PARTITION BY trial_id ORDER BY line) AS previous FROM {points})
    WHERE t <= previous
"""


class UncleanTraces(Exception):
    """The typed read refused the trace file, or the check of the points it wrote found a fault: roll back and
    locate the faults on the text path."""


@dataclasses.dataclass(frozen=True)
class Staged:
    """How the trace points reach SI: the time scale to seconds, and the trial codes' ranges with their scale and
    shift; ``ranges`` holds ``(end, scale, shift)``: codes below ``end`` (and not below the previous end) take them.
    """

    time_scale: float
    ranges: tuple[tuple[int, float, float], ...]
    names: dict[str, str]  # format name -> header as written

    def _by_code(self, field: int) -> tuple[str, list]:
        """A CASE over the code ranges giving one field of each range (the values bound, the shape fixed)."""
        return ("CASE " + " ".join("WHEN code < ? THEN ?" for _ in self.ranges) + " END",
                [x for r in self.ranges for x in (r[0], r[field])])

    def si_columns(self) -> tuple[str, list]:
        """SQL of the SI columns ``t, value`` over the columns ``code, time, value`` as read, and its parameters.

        .. math:: t = t_\\mathrm{file}\\,s_t, \\qquad y = y_\\mathrm{file}\\,a_i + b_i

        with :math:`a_i, b_i` the scale and shift of trial *i*'s signal unit (NULL for a code outside the ranges).
        """
        (scale, a), (shift, b) = self._by_code(1), self._by_code(2)
        return f"time * ? AS t, value * {scale} + {shift} AS value", [self.time_scale, *a, *b]

    def si_points(self, rows: str, params: list) -> tuple[str, list]:
        """SQL (and its parameters) of the points ``trial_id, t, value`` in SI from ``rows``, a query of
        ``trial_id, code, time, value`` as read (bound by ``params``); a projection, so the rows keep their order."""
        columns, more = self.si_columns()
        return f"SELECT trial_id, {columns} FROM ({rows})", [*more, *params]


def plan_traces(
    stage: duckdb.DuckDBPyConnection, source: CampaignSource, trials: Table
) -> tuple[list[Problem], list[str], Staged | None]:
    """Map the trace headers and prepare the conversion of this campaign's trials to SI in the staging database.

    Returns the header problems, the unit notes and, when the headers are usable, the :class:`Staged` description
    that :func:`write_points` and :func:`locate_trace_faults` take.
    """
    names, time_scale, problems, notes = trace_layout(source.traces)
    if problems:
        return problems, notes, None
    has_id = ~missing(trials["trial_id"])
    stage.register("factors", {name: trials[column][has_id] for name, column in (
        ("trial_id", "trial_id"), ("scale", "signal_scale"), ("shift", "signal_shift"))})
    # Codes in the order (scale, shift): a few ranges of codes, each with one conversion. A repeated id (already a
    # problem of the trials table) is one member.
    stage.execute("CREATE TYPE trial_key AS ENUM (SELECT trial_id FROM factors GROUP BY trial_id "
                  "ORDER BY min(scale), min(shift), trial_id)")
    return problems, notes, _code_ranges(stage, time_scale, names)


def _code_ranges(stage: duckdb.DuckDBPyConnection, time_scale: float, names: dict[str, str]) -> Staged:
    """The trial codes' runs of equal conversion, from the codes DuckDB gave (the type's order is not relied on).

    A run is a gap-free stretch of codes with one (scale, shift): code minus its rank within that group is constant
    along a run.
    """
    rows = stage.execute(
        """
        SELECT max(code) + 1 AS stop, scale, shift
        FROM (SELECT *, code - row_number() OVER (PARTITION BY scale, shift ORDER BY code) AS run
              FROM (SELECT DISTINCT enum_code(trial_id::trial_key) AS code, scale, shift FROM factors))
        GROUP BY scale, shift, run
        ORDER BY stop
        """
    ).fetchall()
    return Staged(time_scale, tuple(rows), names)


def write_points(stage: duckdb.DuckDBPyConnection, source: CampaignSource, staged: Staged, overlap: list[str], *,
                 text: bool = False) -> tuple[int, set[str]]:
    """Append the trace points of the trials not yet stored to ``store.trace_points`` in file order, and check them.

    Runs inside the caller's transaction on the store attached as ``store``. The CSV file is read typed straight
    into the table (``text`` false), or the text-staged rows of :func:`locate_trace_faults` are written. The rows
    written are then checked in one streaming scan: finite numbers within range, times increasing within a trial,
    every trial of the campaign with points. The points of ``overlap`` (trials already stored) are compared with
    the stored ones and removed again. Returns the points kept and the overlapping ids whose points are the same.

    Raises
    ------
    UncleanTraces
        The typed read refused the file or the check found a fault; the caller rolls back and locates the faults.
    """
    start = stage.execute("SELECT coalesce(max(rowid) + 1, 0) FROM store.trace_points").fetchall()[0][0]
    with literal_path(source.traces.csv_path) if not text else contextlib.nullcontext() as path:
        if text:
            rows, params = "SELECT trial_id, code, time_num AS time, value_num AS value FROM typed", []
        else:
            columns = _csv_names(source, staged.names)
            types = [{"time": "DOUBLE", "value": "DOUBLE", "trial_id": "trial_key"}.get(n, "VARCHAR") for n in columns]
            # An id that is not a trial of this campaign (or carries spaces), an empty cell or a word where a number
            # belongs fails the read (or the NOT NULL of the table): the text path locates it.
            rows = ("SELECT trial_id::VARCHAR AS trial_id, enum_code(trial_id) AS code, time, value "
                    "FROM read_csv(?, header = true, names = ?, types = ?)")
            params = [path, columns, types]
        points, params = staged.si_points(rows, params)
        try:
            stage.execute(f"INSERT INTO store.trace_points {points}", params).fetchall()
        except (duckdb.IOException, duckdb.OutOfMemoryException, duckdb.TransactionException):
            raise  # the store's or the machine's trouble, not the file's: the caller reports it
        except duckdb.Error as exc:
            raise UncleanTraces(first_line(exc)) from exc
    if _faults(stage, start):
        raise UncleanTraces("a trace point is out of range, out of order, or a trial has none")
    same: set[str] = set()
    if overlap:
        same = _same_traces(stage, start, overlap)
        stage.execute("DELETE FROM store.trace_points WHERE rowid >= ? AND trial_id IN (SELECT * FROM unnest(?))",
                      [start, overlap]).fetchall()
    kept = stage.execute("SELECT count(*) FROM store.trace_points WHERE rowid >= ?", [start]).fetchall()[0][0]
    return int(kept), same


def _faults(stage: duckdb.DuckDBPyConnection, start: int) -> bool:
    """Whether the points written from row id ``start`` on hold a fault, in one streaming scan.

    The scan marks the rows that matter: where a trial's run of rows starts, where the storage order breaks, where
    a number is bad or a time does not increase. Lag over the rows as they come is far cheaper than a window per
    trial, and exact when they come in storage order (checked: consecutive row ids) and each trial's rows are
    contiguous (runs = trials); otherwise the window per trial decides.
    """
    new = "(SELECT rowid AS line, trial_id, t, value FROM store.trace_points WHERE rowid >= $start)"
    runs, shuffled, n_trials, faulty = stage.execute(
        f"""
        SELECT count(*) FILTER (starts), count(*) FILTER (shuffled), count(DISTINCT trial_id) FILTER (starts),
               count(*) FILTER (faulty)
        FROM (SELECT trial_id, trial_id IS DISTINCT FROM previous_trial AS starts,
                     line <> previous_line + 1 AS shuffled,
                     ({_BAD_SI}) OR (trial_id = previous_trial AND t <= previous_time) AS faulty
              FROM (SELECT *, lag(line) OVER () AS previous_line, lag(trial_id) OVER () AS previous_trial,
                           lag(t) OVER () AS previous_time FROM {new}))
        WHERE starts OR shuffled OR faulty
        """,
        {"start": start},
    ).fetchall()[0]
    if faulty:
        return True
    if shuffled or runs != n_trials:
        if stage.execute(f"SELECT count(*) FROM ({_NOT_INCREASING.format(points=new)})",
                         {"start": start}).fetchall()[0][0]:
            return True
    # Every id written is a member of the type (the typed read refuses any other), so every trial has points when
    # as many distinct ids were written as the type has members.
    return n_trials != stage.execute("SELECT count(*) FROM unnest(enum_range(NULL::trial_key))").fetchall()[0][0]


def _same_traces(stage: duckdb.DuckDBPyConnection, start: int, overlap: list[str]) -> set[str]:
    """Ids of ``overlap`` whose points written from row id ``start`` on equal the stored ones (same count, same
    times and values to 1e-12 relative, one unit conversion's rounding)."""
    rows = stage.execute(
        """
        WITH p AS (SELECT rowid >= $start AS new, trial_id, t, value FROM store.trace_points
                   WHERE trial_id IN (SELECT * FROM unnest($overlap))),
             a AS (SELECT *, row_number() OVER (PARTITION BY trial_id ORDER BY t) AS k FROM p WHERE new),
             b AS (SELECT *, row_number() OVER (PARTITION BY trial_id ORDER BY t) AS k FROM p WHERE NOT new)
        SELECT trial_id FROM a FULL JOIN b USING (trial_id, k)
        GROUP BY trial_id
        HAVING bool_and(a.t IS NOT NULL AND b.t IS NOT NULL
                        AND abs(a.t - b.t) <= 1e-12 * abs(b.t) AND abs(a.value - b.value) <= 1e-12 * abs(b.value))
        """,
        {"start": start, "overlap": overlap},
    ).fetchall()
    return {r[0] for r in rows}


def locate_trace_faults(stage: duckdb.DuckDBPyConnection, source: CampaignSource, trials: Table,
                        staged: Staged) -> list[Problem]:
    """Read the trace table as text into the staging table ``typed`` and locate every fault by line and column.

    The slow path, taken only when the typed read refused the file or its check found a fault, when the tables
    have problems of their own (nothing will be written, every fault is still listed), or for a workbook's trace
    sheet. A clean result leaves ``typed`` for :func:`write_points` (``text=True``).
    """
    label = source.traces.label
    try:
        _stage_text(stage, source, staged)
    except duckdb.Error as exc:
        ragged = _ragged_lines(source.traces.csv_path, label)
        return ragged or [Problem(label, None, None, f"cannot be read as CSV: {first_line(exc)}")]
    names = staged.names
    located = []
    for condition, column, message in _TRACE_FAULTS:
        located += _located(stage, f"SELECT line, trial_id, time_text, value_text FROM typed WHERE {condition}",
                            label, names[column], message)
    located += _located(stage, f"SELECT line, trial_id, time_text, value_text FROM "
                               f"({_NOT_INCREASING.format(points='typed')})",
                        label, names["time"], "time {time_text} does not increase within trial '{trial_id}'")
    problems = _file_lines(located, source.traces.csv_path)
    empty = stage.execute(
        "SELECT trial_id FROM factors WHERE trial_id NOT IN (SELECT DISTINCT trial_id FROM typed) ORDER BY trial_id"
    ).fetchall()
    trial_rows = {t: i + 2 for i, t in enumerate(trials["trial_id"])}
    return problems + [Problem(source.trials.label, trial_rows.get(t), "trial_id",
                               f"trial '{t}' has no trace points in {label}") for (t,) in empty]


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


def _stage_text(stage: duckdb.DuckDBPyConnection, source: CampaignSource, staged: Staged) -> None:
    """Stage the trace table as text, with the parsed numbers and their SI values beside it, as the table ``typed``."""
    names = staged.names
    stage.execute("DROP TABLE IF EXISTS typed")
    if source.traces.csv_path is not None:
        # Every column is read as text so a bad cell becomes a located problem, not a parse failure.
        with literal_path(source.traces.csv_path) as path:
            stage.execute(
                "CREATE TEMP TABLE raw AS SELECT * FROM read_csv(?, header = true, all_varchar = true, names = ?)",
                [path, _csv_names(source, names)],
            )
    else:
        table = source.traces.table
        stage.register("raw_table", {name: np.array(table.columns[table.headers.index(h)], dtype=object)
                                     for h in table.headers for name, at in names.items() if at == h})
        stage.execute("CREATE TEMP TABLE raw AS SELECT * FROM raw_table")
    # The SI numbers come from the same expression as the typed path's, so both judge a number alike.
    columns, params = staged.si_columns()
    stage.execute(
        f"""
        CREATE TABLE typed AS
        SELECT line, trial_id, code, time_text, value_text, time AS time_num, value AS value_num, {columns}
        FROM (SELECT rowid + 2 AS line, trim(trial_id) AS trial_id,
                     enum_code(TRY_CAST(trim(trial_id) AS trial_key)) AS code,
                     coalesce(time, '') AS time_text, coalesce(value, '') AS value_text,
                     TRY_CAST(time AS DOUBLE) AS time, TRY_CAST(value AS DOUBLE) AS value FROM raw)
        """,
        params,
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
