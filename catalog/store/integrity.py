"""Whole-store checks of data that did not come through an import: what a restored backup must satisfy.

The rules are the import's own (:mod:`catalog.ingest.columns`): each numeric column's bounds and plausible span in
SI, finite numbers, known measurements, and references that resolve (every point belongs to a trial, every
catalysed trial to a catalyst). Each check is one set-based query, so a restore of millions of points stays cheap.
"""

from __future__ import annotations

from catalog.core.measurements import MEASUREMENTS
from catalog.ingest.columns import CATALYST_COLUMNS, TRIAL_COLUMNS

#: Examples named per failed check; the rest are counted.
EXAMPLES = 3


def _bound_checks(table: str, key: str, columns) -> list[tuple[str, str, str, str]]:
    """(table, key, condition, what) for every numeric column: finite and within the import bounds."""
    checks = []
    for column in columns:
        if column.kind != "number":
            continue
        name = f'"{column.name}"'
        conditions, words = [f"NOT isfinite({name})"], ["not finite"]
        if column.lower is not None:
            conditions.append(f"{name} {'<=' if column.lower_open else '<'} {float(column.lower)!r}")
            words.append(f"{'not above' if column.lower_open else 'below'} {column.lower:g} (SI)")
        if column.upper is not None:
            conditions.append(f"{name} > {float(column.upper)!r}")
            words.append(f"above {column.upper:g} (SI)")
        if column.plausible is not None:
            low, high = (float(x) for x in column.plausible)
            conditions.append(f"{name} < {low!r} OR {name} > {high!r}")
            words.append(f"outside the plausible {low:g} to {high:g} (SI)")
        checks.append((table, key, " OR ".join(conditions), f"{table}.{column.name} {' or '.join(words)}"))
    return checks


#: (table, key, condition, message): each is a fault when any row matches. Bounds are the code's own constants,
#: written as float literals; no stored value is ever put into SQL text.
CHECKS = (
    *_bound_checks("catalysts", "catalyst_id", CATALYST_COLUMNS),
    *_bound_checks("trials", "trial_id", TRIAL_COLUMNS),
    ("trials", "trial_id", "measurement IS NULL OR measurement NOT IN ("
     + ", ".join(f"'{m}'" for m in MEASUREMENTS) + ")", "trials.measurement is not a known measurement"),
    ("trials", "trial_id", "catalyst_id IS NOT NULL AND catalyst_id NOT IN (SELECT catalyst_id FROM catalysts)",
     "trials.catalyst_id names no stored catalyst"),
    ("trials", "trial_id", "temperature IS NULL", "trials.temperature is missing"),
    ("trace_points", "trial_id", "trial_id NOT IN (SELECT trial_id FROM trials)",
     "trace points belong to no stored trial (orphans)"),
    ("trace_points", "trial_id", "NOT isfinite(t) OR NOT isfinite(value)", "trace points are not finite numbers"),
)


def restored_problems(con) -> list[str]:
    """Every check the store's current content fails, as 'what: n row(s), e.g. id, id'; empty when clean."""
    problems = []
    for table, key, condition, what in CHECKS:
        n, examples = con.execute(
            f"SELECT count(*), list(DISTINCT {key}) FILTER (WHERE {key} IS NOT NULL)[1:{EXAMPLES}] "
            f"FROM {table} WHERE {condition}").fetchall()[0]
        if n:
            shown = ", ".join(f"'{e}'" for e in sorted(examples or []))
            problems.append(f"{what}: {n} row(s){', e.g. ' + shown if shown else ''}")
    return problems
