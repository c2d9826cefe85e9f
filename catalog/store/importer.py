"""Import a campaign: validate it completely, then write all of it in one transaction, or nothing.

The catalysts and trials are checked by :mod:`catalog.ingest.validate`; the trace points are staged and checked
by :mod:`catalog.store.staging`; the store file is locked only for the final write.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import duckdb

from catalog.errors import CatalogError, Problem, ValidationError
from catalog.ingest.sources import CampaignSource
from catalog.ingest.tables import Table
from catalog.ingest.validate import check_catalysts, check_trials
from catalog.store.db import attached, connect, first_line, now, resolve_path, scratch_database, transaction, user
from catalog.store.schema import CATALYST_FIELDS, TRIAL_FIELDS
from catalog.store.staging import Staged, UncleanTraces, locate_trace_faults, plan_traces, write_points
from catalog.store.values import same_value


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
        earlier, stored_catalysts, stored_ids = None, {}, set()
    else:
        earlier, stored_catalysts, stored_ids = _stored_state(path, source.content_hash)
    if earlier is not None:
        return ImportReport(None, 0, 0, 0, duplicate_of=earlier[0],
                            notes=[f"identical files were imported as import #{earlier[0]} on "
                                   f"{earlier[1]:%Y-%m-%d %H:%M}; nothing written"])

    say("checking catalysts and trials")
    catalysts = check_catalysts(source.catalysts)
    known = {c for c in catalysts.table["catalyst_id"] if c is not None} | set(stored_catalysts)
    trials = check_trials(source.trials, known)
    problems = catalysts.problems + trials.problems
    notes = catalysts.notes + trials.notes

    new_catalysts, skipped_catalysts, conflict = _split_known(
        catalysts.table, stored_catalysts, CATALYST_FIELDS, "catalyst_id", source.catalysts.label
    )
    problems += conflict
    overlap = [t for t in trials.table["trial_id"] if t is not None and t in stored_ids]

    with scratch_database() as stage:
        trace_problems, trace_notes, staged = plan_traces(stage, source, trials.table)
        problems += trace_problems
        notes += trace_notes
        if problems:
            # Nothing will be written: list every fault of the trace table too, and the trials that differ from
            # the stored ones in their fields (their points are compared only on a write).
            if staged is not None:
                problems += locate_trace_faults(stage, source, trials.table, staged)
            if overlap:
                problems += _split_known(trials.table, _stored_trials(path, overlap), TRIAL_FIELDS, "trial_id",
                                         source.trials.label)[2]
            raise ValidationError(problems)
        return _write(stage, path, _Batch(source, staged, new_catalysts, skipped_catalysts, trials.table, overlap, demo,
                                          who or user(), notes), say)


def _stored_state(path: Path, content_hash: str) -> tuple[tuple | None, dict[str, tuple], set[str]]:
    """An earlier import of identical files (id, time) if any, the stored catalysts (id -> row of
    ``CATALYST_FIELDS``) and the stored trial ids."""
    with connect(path, read_only=True) as con:
        earlier = con.execute(
            "SELECT import_id, imported_at FROM imports WHERE content_hash = ? ORDER BY import_id LIMIT 1",
            [content_hash],
        ).fetchone()
        catalysts = _rows_by_id(con.execute(f"SELECT {', '.join(CATALYST_FIELDS)} FROM catalysts").fetchall())
        trial_ids = {r[0] for r in con.execute("SELECT trial_id FROM trials").fetchall()}
    return earlier, catalysts, trial_ids


def _stored_trials(path: Path, ids: list[str]) -> dict[str, tuple]:
    """The stored trial records of ``ids`` (id -> row of ``TRIAL_FIELDS``)."""
    with connect(path, read_only=True) as con:
        return _rows_by_id(con.execute(
            f"SELECT {', '.join(TRIAL_FIELDS)} FROM trials WHERE trial_id IN (SELECT * FROM unnest(?))", [ids]
        ).fetchall())


def _rows_by_id(rows: list[tuple]) -> dict[str, tuple]:
    """Stored rows by their id, the first field."""
    return {row[0]: row for row in rows}


def _split_known(
    incoming: Table, stored: dict[str, tuple], fields: list[str], key: str, label: str,
    same_trace: set[str] | None = None,
) -> tuple[Table, list[str], list[Problem]]:
    """Separate rows already stored (identical → skipped) from new rows; differing rows are conflicts.

    ``stored`` maps an id to its stored row of ``fields``.
    """
    if not stored:
        return incoming, [], []
    skipped, problems, keep = [], [], []
    for i, ident in enumerate(incoming[key]):
        old = stored.get(ident) if ident is not None else None
        if old is None:
            keep.append(i)
            continue
        changed = [c for c, was in zip(fields, old, strict=True)
                   if c != key and not same_value(incoming[c][i], was)]
        if same_trace is not None and ident not in same_trace:
            changed.append("trace points")
        if changed:
            problems.append(Problem(
                label, i + 2, key,
                f"'{ident}' is already stored with different {', '.join(changed)}; it was not overwritten "
                "(record a correction with 'catalog correct', or give the new record a new id)",
            ))
        else:
            skipped.append(ident)
    return incoming.take(keep), skipped, problems


@dataclass(frozen=True)
class _Batch:
    """What one import writes: the checked records (catalysts and trials not yet stored, trials that may be) and
    its provenance."""

    source: CampaignSource
    staged: Staged
    catalysts: Table
    skipped_catalysts: list[str]
    trials: Table
    overlap: list[str]  # ids of the trials already stored
    demo: bool
    who: str
    notes: list[str]


def _write(stage, path: Path, batch: _Batch, say) -> ImportReport:
    """Write one import atomically into the store, attached to the staging connection, or nothing.

    The trace points go first, read straight from the file into the store; when the file is not clean the write is
    rolled back, the faults are located on the text path and reported, and a file whose text path finds no fault
    (ids written with spaces around them, say) is written from the text-staged rows. The trials already stored are
    then told apart (identical: skipped; different: a conflict, and nothing is written) before the records go in.
    """
    created = not path.exists()
    try:
        with attached(stage, path), _write_errors(path):
            if batch.source.traces.csv_path is not None:
                try:
                    with transaction(stage):
                        return _write_records(stage, batch, say, text=False)
                except UncleanTraces:
                    pass  # rolled back; the text path locates the faults
            problems = locate_trace_faults(stage, batch.source, batch.trials, batch.staged)
            if problems:
                raise ValidationError(problems)
            try:
                with transaction(stage):
                    return _write_records(stage, batch, say, text=True)
            except UncleanTraces as exc:  # the text path found no fault where the check found one: say so
                raise CatalogError(f"{batch.source.traces.label}: cannot be imported ({exc})") from None
    except BaseException:
        if created:  # a failed first import leaves no file behind (the store was made for it, and is empty)
            for leftover in (path, path.with_name(path.name + ".wal")):
                leftover.unlink(missing_ok=True)
        raise


@contextmanager
def _write_errors(path: Path) -> Iterator[None]:
    """DuckDB's refusals during the write, as messages a user can act on (the transaction is rolled back)."""
    try:
        yield
    except duckdb.ConstraintException as exc:
        raise CatalogError(f"{path}: another import wrote some of these ids meanwhile; nothing was written "
                           f"({first_line(exc)})") from exc
    except (duckdb.IOException, duckdb.TransactionException, duckdb.OutOfMemoryException) as exc:
        # A full disk (the store's or the staging spill folder's), a folder that turned read-only: rolled back.
        raise CatalogError(f"{path}: cannot be written ({first_line(exc)}); nothing was written") from exc


def _write_records(stage, batch: _Batch, say, *, text: bool) -> ImportReport:
    """The points, then the new catalysts and trials and the import's own record, in the caller's transaction."""
    source, catalysts, trials = batch.source, batch.catalysts, batch.trials
    say("reading trace points")
    n_points, same_trace = write_points(stage, source, batch.staged, batch.overlap, text=text)
    skipped_trials: list[str] = []
    if batch.overlap:
        stored = _rows_by_id(stage.execute(f"SELECT {', '.join(TRIAL_FIELDS)} FROM store.trials "
                                           "WHERE trial_id IN (SELECT * FROM unnest(?))", [batch.overlap]).fetchall())
        trials, skipped_trials, conflict = _split_known(trials, stored, TRIAL_FIELDS, "trial_id", source.trials.label,
                                                        same_trace)
        if conflict:
            raise ValidationError(conflict)
    say(f"writing {len(catalysts)} catalysts, {len(trials)} trials, {n_points} points")
    # Registered as numpy columns, which DuckDB scans like a table (a NaN number read as NULL).
    stage.register("new_catalysts", catalysts.select(CATALYST_FIELDS))
    stage.register("new_trial_rows", trials.select(TRIAL_FIELDS))
    n_skipped = len(batch.skipped_catalysts) + len(skipped_trials)
    import_id = stage.execute("SELECT coalesce(max(import_id), 0) + 1 FROM store.imports").fetchone()[0]
    stage.execute(
        "INSERT INTO store.imports VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        [import_id, source.source, ", ".join(source.files), source.content_hash, now(), batch.who,
         len(catalysts), len(trials), n_points, n_skipped, batch.demo, "\n".join(batch.notes)],
    )
    stage.execute(
        f"INSERT INTO store.catalysts ({', '.join(CATALYST_FIELDS)}, import_id, excluded) "
        f"SELECT {', '.join(CATALYST_FIELDS)}, ?, false FROM new_catalysts",
        [import_id],
    )
    stage.execute(
        f"INSERT INTO store.trials ({', '.join(TRIAL_FIELDS)}, import_id, excluded) "
        f"SELECT {', '.join(TRIAL_FIELDS)}, ?, false FROM new_trial_rows",
        [import_id],
    )
    return ImportReport(int(import_id), len(catalysts), len(trials), n_points, batch.skipped_catalysts,
                        skipped_trials, batch.notes)
