"""Changing stored records: corrections, exclusions, inclusions and purges, each written to the history.

A correction is checked with the import rules, so it cannot store what an import would refuse; an exclusion leaves
a record out of analysis and can be undone; a purge deletes for good and keeps the deleted record in the history.
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass

import pandas as pd

from catalog.errors import CatalogError, Problem, ValidationError
from catalog.ingest.columns import CATALYST_COLUMNS, TRIAL_COLUMNS
from catalog.ingest.sources import RawTable
from catalog.ingest.tables import Table, check_table
from catalog.ingest.validate import catalyst_rules, trial_rules
from catalog.store.db import connect, now, resolve_path, transaction, user
from catalog.store.values import as_text, bound, is_missing, same_value

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
    found = con.execute(f"SELECT * FROM {table} WHERE {key} = ?", [record_id])
    row = found.fetchone()
    if row is None:
        raise CatalogError(f"no {_noun(table)} '{record_id}' in the database")
    return dict(zip([d[0] for d in found.description], row, strict=True))


def _correction_cell(column, value_text: str) -> tuple[str, str]:
    """Header and cell for a corrected value, so it is read exactly like an import cell with that header."""
    match = _NUMBER_AND_UNIT.match(value_text) if column.kind == "number" else None
    if match is None or not match.group(2):
        # Text, a plain number in the reference unit, or something unreadable that the cell check will name.
        return column.name, value_text
    return f"{column.name} [{match.group(2)}]", match.group(1)


def _parse_cell(column, header: str, cell: str, label: str):
    """The typed SI value of the corrected cell, read with the import's cell rules (type, unit, range).

    Raises
    ------
    ValidationError
        The cell breaks a cell rule (not a number, an unknown unit, out of range...).
    """
    checked = check_table(RawTable.from_rows(label, [header], [[cell]]), (column,))
    if checked.problems:
        raise ValidationError([Problem(label, None, p.column, p.message) for p in checked.problems])
    return checked.table[column.name][0]


def _record_problems(table: str, columns, record: dict, known: set[str],
                     label: str) -> tuple[list[Problem], Table]:
    """The import's rules across one typed (SI) record, and the record as they leave it (defaults filled).

    Nothing is turned back into text or re-parsed.
    """
    one = Table.from_records([record], {c.name: c.kind for c in columns})
    problems = catalyst_rules(one, label) if table == "catalysts" else trial_rules(one, known, label)
    return problems, one


def _record_change(con, table: str, record_id: str, column: str, old: str | None, new: str | None,
                   who: str | None, reason: str | None) -> Change:
    change_id = int(con.execute("SELECT coalesce(max(change_id), 0) + 1 FROM history").fetchone()[0])
    con.execute("INSERT INTO history VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                [change_id, table, record_id, column, old, new, who or user(), now(), reason])
    return Change(change_id, table, record_id, column, old, new)


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
        A column of the import contract (:data:`catalog.ingest.columns.TRIAL_COLUMNS` or ``CATALYST_COLUMNS``),
        not the id.
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
        if table == "trials" and column == "catalyst_id":
            _refuse_blank_switch(record_id, is_missing(stored[column]), not value_text.strip())
        known = {r[0] for r in con.execute("SELECT catalyst_id FROM catalysts").fetchall()}
        value = _parse_cell(spec[column], header, cell, label)
        # The record's rules run on typed SI values, as stored; only what the correction newly breaks is reported,
        # so a rule added since the import does not block correcting an unrelated column.
        before = {str(p) for p in _record_problems(table, columns, stored, known, label)[0]}
        after, record = _record_problems(table, columns, stored | {column: value}, known, label)
        problems = [Problem(label, None, p.column, p.message) for p in after if str(p) not in before]
        if problems:
            raise ValidationError(problems)
        value = record[column][0]
        if same_value(value, stored[column]):
            raise CatalogError(f"{_noun(table)} '{record_id}' already has {column} = {as_text(stored[column])}; "
                               "nothing recorded")
        con.execute(f'UPDATE {table} SET "{column}" = ? WHERE {key} = ?', [bound(value), record_id])
        if table == "trials":
            con.execute("DELETE FROM trial_fits WHERE trial_id = ?", [record_id])
        return _record_change(con, table, record_id, column, as_text(stored[column]), as_text(value), who, reason)


def _refuse_blank_switch(record_id: str, was_blank: bool, becomes_blank: bool) -> None:
    """Clearing catalyst_id would silently turn a catalysed trial into an uncatalysed blank, the baseline of every
    enhancement: a different experiment, which takes a new import, never a correction."""
    if becomes_blank and not was_blank:
        raise CatalogError(f"an empty catalyst_id would turn trial '{record_id}' into an uncatalysed blank, a "
                           "different experiment; import the blank under a new trial id (catalyst_id left empty) and "
                           "exclude or purge this trial. To move the trial to another catalyst, give that catalyst's "
                           "id")


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
        return _record_change(con, table, record_id, "excluded", as_text(bool(row[0])), as_text(excluded),
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
        record = {"record": {name: as_text(value) for name, value in stored.items()}}
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


