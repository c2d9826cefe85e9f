"""Import a campaign: validate it completely, then write all of it in one transaction, or nothing.

The catalysts and trials are checked by :mod:`catalog.ingest.validate`; the trace points are staged and checked
by :mod:`catalog.store.staging`; the store file is locked only for the final write.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import pandas as pd

from catalog.errors import CatalogError, Problem, ValidationError
from catalog.ingest.sources import CampaignSource
from catalog.ingest.validate import check_catalysts, check_trials
from catalog.store.db import attached, connect, first_line, now, resolve_path, scratch_database, transaction, user
from catalog.store.schema import CATALYST_FIELDS, TRIAL_FIELDS
from catalog.store.staging import Staged, count_points, same_traces, stage_traces, write_points
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
        earlier, stored_catalysts, stored_ids = None, pd.DataFrame(columns=CATALYST_FIELDS), set()
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

    with scratch_database() as stage:
        say("reading trace points")
        trace_problems, trace_notes, staged = stage_traces(stage, source, trials.frame, set(overlap))
        problems += trace_problems
        notes += trace_notes
        skipped_trials: list[str] = []
        # Without clean points there is no staged trace to compare with the stored one (and nothing will be written).
        if overlap and not trace_problems:
            with connect(path, read_only=True) as con:
                stored_trials = con.execute(
                    f"SELECT {', '.join(TRIAL_FIELDS)} FROM trials WHERE trial_id IN (SELECT * FROM unnest(?))",
                    [overlap],
                ).df()
                same_trace = same_traces(con, stage, staged, overlap)
            new_trial_frame, skipped_trials, conflict = _split_known(
                trials.frame[TRIAL_FIELDS + ["signal_scale", "signal_shift"]], stored_trials, "trial_id",
                source.trials.label, same_trace,
            )
            problems += conflict
        else:
            new_trial_frame = trials.frame
        if problems:
            raise ValidationError(problems)

        new_trial_frame = new_trial_frame.reset_index(drop=True)
        n_points = count_points(stage, staged)
        say(f"writing {len(new_catalysts)} catalysts, {len(new_trial_frame)} trials, {n_points} points")
        import_id = _write(stage, path, source, staged, new_catalysts, new_trial_frame, n_points,
                           len(skipped_catalysts) + len(skipped_trials), demo, who or user(), notes)
    return ImportReport(import_id, len(new_catalysts), len(new_trial_frame), int(n_points),
                        skipped_catalysts, skipped_trials, notes)


def _stored_state(path: Path, content_hash: str) -> tuple[tuple | None, pd.DataFrame, set[str]]:
    """An earlier import of identical files (id, time) if any, the stored catalysts and the stored trial ids."""
    with connect(path, read_only=True) as con:
        earlier = con.execute(
            "SELECT import_id, imported_at FROM imports WHERE content_hash = ? ORDER BY import_id LIMIT 1",
            [content_hash],
        ).fetchone()
        catalysts = con.execute(f"SELECT {', '.join(CATALYST_FIELDS)} FROM catalysts").df()
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
        changed = [c for c in stored.columns if not same_value(row[c], old[c])]
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


def _write(stage, path: Path, source: CampaignSource, staged: Staged, catalysts: pd.DataFrame, trials: pd.DataFrame,
           n_points: int, n_skipped: int, demo: bool, who: str, notes: list[str]) -> int:
    """Write one import atomically into the store, attached to the staging connection."""
    with attached(stage, path):
        try:
            stage.register("new_catalysts", catalysts[CATALYST_FIELDS].reset_index(drop=True))
            stage.register("new_trial_rows", trials[TRIAL_FIELDS].reset_index(drop=True))
            with transaction(stage):
                import_id = stage.execute("SELECT coalesce(max(import_id), 0) + 1 FROM store.imports").fetchone()[0]
                stage.execute(
                    "INSERT INTO store.imports VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    [import_id, source.source, ", ".join(source.files), source.content_hash, now(), who,
                     len(catalysts), len(trials), n_points, n_skipped, demo, "\n".join(notes)],
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
                write_points(stage, staged)
        except duckdb.ConstraintException as exc:
            raise CatalogError(f"{path}: another import wrote some of these ids meanwhile; nothing was written "
                               f"({first_line(exc)})") from exc
        except (duckdb.IOException, duckdb.TransactionException, duckdb.OutOfMemoryException) as exc:
            # A full disk (the store's or the staging spill folder's), a folder that turned read-only: rolled back.
            raise CatalogError(f"{path}: cannot be written ({first_line(exc)}); nothing was written") from exc
    return int(import_id)

