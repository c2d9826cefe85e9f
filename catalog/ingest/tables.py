"""Typed, vectorised conversion of one raw text table to SI values against its column specs.

Pure: a raw table in, a :class:`Checked` table out, every bad cell listed with its file, row and column. Numbers are
converted to SI first and judged after, so a value that only overflows in SI (1e308 h) or only looks wrong in SI
(5000 °C) is caught the same way as one that is wrong as written.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timezone

import numpy as np

from catalog.errors import Problem
from catalog.ingest.columns import FALSE_WORDS, TRUE_WORDS, Column
from catalog.ingest.sources import RawTable
from catalog.units import UnitProblem, celsius, parse_header, si_converter


class Table:
    """Typed columns of one length, by contract name: the checked form of a raw table.

    Numbers are float64 arrays in SI (NaN when empty); text, true/false and date-time columns are object arrays of
    ``str``, ``bool`` or naive-UTC ``datetime`` values, ``None`` when empty. Row *i* is spreadsheet row *i* + 2.
    """

    def __init__(self, columns: dict[str, np.ndarray], n_rows: int):
        self.columns = dict(columns)
        self.n_rows = n_rows
        for name, values in self.columns.items():
            self._check_length(name, values)

    @classmethod
    def from_records(cls, records: Sequence[dict], kinds: dict[str, str]) -> Table:
        """A table of the given columns (name -> column kind) from records of Python values, None when missing."""
        return cls({name: _array([r[name] for r in records], kind) for name, kind in kinds.items()}, len(records))

    def _check_length(self, name: str, values: np.ndarray) -> None:
        if len(values) != self.n_rows:
            raise ValueError(f"column {name!r} has {len(values)} values for {self.n_rows} rows")

    def __len__(self) -> int:
        return self.n_rows

    def __getitem__(self, name: str) -> np.ndarray:
        return self.columns[name]

    def __setitem__(self, name: str, values: np.ndarray) -> None:
        self._check_length(name, values)
        self.columns[name] = values

    def take(self, rows: Iterable[int]) -> Table:
        """The table of the given rows (positions), in that order."""
        at = np.asarray(list(rows), dtype=np.intp)
        return Table({name: values[at] for name, values in self.columns.items()}, len(at))

    def select(self, names: Iterable[str]) -> dict[str, np.ndarray]:
        """The given columns by name, as DuckDB reads a registered table (a NaN number is read as NULL)."""
        return {name: self.columns[name] for name in names}


def _array(values: Sequence, kind: str) -> np.ndarray:
    """Values of one column kind as its array: float64 with NaN for numbers, else objects with None."""
    if kind == "number":
        return np.array([np.nan if v is None else v for v in values], dtype=float)
    out = np.empty(len(values), dtype=object)
    out[:] = values
    return out


def missing(values: np.ndarray) -> np.ndarray:
    """Where a column is empty: NaN in a number column, None in an object column."""
    if values.dtype == object:
        return np.fromiter((v is None for v in values), dtype=bool, count=len(values))
    return np.isnan(values)


@dataclass
class Checked:
    """A validated table in SI, the problems found and notes on how units were understood."""

    table: Table
    problems: list[Problem] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


@dataclass(frozen=True)
class Found:
    """Where a contract column sits in the raw table and how its numbers reach SI (si = value × scale + shift)."""

    position: int
    header: str
    scale: float = 1.0
    shift: float = 0.0


def map_headers(
    label: str, headers: list[str], columns: tuple[Column, ...]
) -> tuple[dict[str, Found], list[Problem], list[str]]:
    """Match headers to contract columns; return name -> :class:`Found`, plus problems and unit notes.

    A column named twice is refused (whatever units the copies carry): which copy is right cannot be guessed.
    """
    spec = {c.name: c for c in columns}
    found: dict[str, Found] = {}
    problems: list[Problem] = []
    notes: list[str] = []
    seen: dict[str, int] = {}  # every contract name met, even one whose unit was refused
    for position, header in enumerate(headers):
        parsed = parse_header(header)
        column = spec.get(parsed.name)
        if column is None:
            if parsed.name:
                notes.append(f"{label}: column '{header}' is not part of the format and was ignored")
            continue
        if parsed.name in seen:
            problems.append(Problem(label, 1, header, f"column '{parsed.name}' appears twice (columns "
                                                      f"{seen[parsed.name] + 1} and {position + 1})"))
            continue
        seen[parsed.name] = position
        scale, shift = 1.0, 0.0
        if column.kind == "number" and column.unit is not None:
            unit = parsed.unit if parsed.unit else column.unit
            try:
                scale, shift, understood = si_converter(unit, column.unit)
            except UnitProblem as exc:
                problems.append(Problem(label, 1, header, str(exc)))
                continue
            if parsed.unit is None and column.unit != "dimensionless":
                notes.append(f"{label}: column '{header}' has no unit; read as {column.unit}")
            elif parsed.unit is not None and parsed.unit != column.unit:
                notes.append(f"{label}: column '{header}' read as {understood}")
        elif parsed.unit:
            problems.append(Problem(label, 1, header, f"column '{parsed.name}' takes no unit"))
            continue
        found[parsed.name] = Found(position, header, scale, shift)
    named = {parse_header(p.column).name for p in problems if p.column}
    problems += [Problem(label, None, c.name, "required column is missing")
                 for c in columns if c.required and c.name not in found and c.name not in named]
    return found, problems, notes


def rows(mask) -> list[int]:
    """Spreadsheet row numbers of the true entries of a boolean mask over data rows."""
    return (np.flatnonzero(np.asarray(mask, dtype=bool)) + 2).tolist()


def check_column(label: str, raw: Sequence[str], column: Column, at: Found) -> tuple[np.ndarray, list[Problem]]:
    """Convert one text column to its typed SI values, listing every bad cell.

    Numbers come back as float64 in SI with NaN for an empty cell; text, true/false and date-time columns as object
    arrays holding ``None`` for an empty cell (see :class:`Table`).
    """
    header = at.header
    text = np.array([v.strip() for v in raw], dtype=object)
    empty = text == ""
    problems: list[Problem] = []
    if column.required:
        problems += [Problem(label, r, header, "value is required but empty") for r in rows(empty)]
    if column.kind in ("text", "id"):
        return np.where(empty, None, text), problems
    if column.kind == "bool":
        low = [v.lower() for v in text]
        values = np.array([None if e else v in TRUE_WORDS for v, e in zip(low, empty, strict=True)], dtype=object)
        bad = ~empty & np.array([v not in TRUE_WORDS and v not in FALSE_WORDS for v in low], dtype=bool)
        problems += [Problem(label, r, header, f"'{v}' is not true/false (or yes/no, 1/0)")
                     for r, v in zip(rows(bad), text[bad], strict=True)]
        return values, problems
    if column.kind == "datetime":
        stamps = np.array([None if e else _datetime(v) for v, e in zip(text, empty, strict=True)], dtype=object)
        bad = ~empty & missing(stamps)
        problems += [Problem(label, r, header, f"'{v}' is not an ISO 8601 date-time (e.g. 2026-03-14T09:30)")
                     for r, v in zip(rows(bad), text[bad], strict=True)]
        return stamps, problems
    # An empty cell is NaN, like the missing value it is; it is told apart from a bad one by ``empty``. Only the
    # filled cells are parsed: parsing is the dearest step, and most optional columns are mostly empty.
    numbers = np.full(len(text), np.nan)
    numbers[~empty] = _numbers(text[~empty])
    bad = ~empty & ~np.isfinite(numbers)
    problems += [Problem(label, r, header, f"'{v}' is not a finite number")
                 for r, v in zip(rows(bad), text[bad], strict=True)]
    with np.errstate(over="ignore", invalid="ignore"):
        si = numbers * at.scale + at.shift
    overflow = ~empty & ~bad & ~np.isfinite(si)
    problems += [Problem(label, r, header, f"{v} is too large to hold once converted to SI")
                 for r, v in zip(rows(overflow), text[overflow], strict=True)]
    problems += _range_problems(label, si, text, column, at)
    return si, problems


def _numbers(cells: np.ndarray) -> np.ndarray:
    """The cells' numbers, NaN where a cell holds none: decimal or exponent notation in ASCII digits, or inf / nan.

    ``float`` alone would also read digit-group underscores (``1_000``) and other scripts' digits, which a
    spreadsheet never writes and which could hide a typing slip. A column that converts whole (the usual case) is
    converted in one call; only a column with a bad cell is read cell by cell.
    """
    joined = "".join(cells)
    if joined.isascii() and "_" not in joined:
        try:
            return cells.astype(float)
        except ValueError:
            pass
    return np.array([_number(v) for v in cells], dtype=float)


def _number(text: str) -> float:
    if not text.isascii() or "_" in text:
        return np.nan
    try:
        return float(text)
    except ValueError:
        return np.nan


def _datetime(text: str) -> datetime | None:
    """An ISO 8601 date or date-time as naive UTC (a time without an offset is taken as UTC); None when it is none."""
    try:
        stamp = datetime.fromisoformat(text)
    except ValueError:
        return None
    return stamp if stamp.tzinfo is None else stamp.astimezone(timezone.utc).replace(tzinfo=None)


def _range_problems(label: str, si: np.ndarray, text: np.ndarray, column: Column, at: Found) -> list[Problem]:
    """Cells below a hard lower bound, above a hard upper bound, or outside the plausible span."""
    header = at.header
    finite = np.isfinite(si)
    problems: list[Problem] = []
    refused = np.zeros(len(si), dtype=bool)
    if column.lower is not None:
        low = finite & ((si <= column.lower) if column.lower_open else (si < column.lower))
        words = "must be above" if column.lower_open else "must not be below"
        what = "absolute zero" if column.unit == "degC" else _display(column.lower, header, at)
        problems += [Problem(label, r, header, f"{v} {words} {what}")
                     for r, v in zip(rows(low), text[low], strict=True)]
        refused |= low
    if column.upper is not None:
        high = finite & (si > column.upper)
        problems += [Problem(label, r, header, f"{v} is above {_display(column.upper, header, at)}")
                     for r, v in zip(rows(high), text[high], strict=True)]
        refused |= high
    if column.plausible is not None:
        lo, hi = column.plausible
        odd = finite & ~refused & ((si < lo) | (si > hi))
        span = f"{_display(lo, header, at)} to {_display(hi, header, at)}"
        problems += [Problem(label, r, header, f"{v} is outside the plausible range for {column.name}, {span} "
                                               "(check the value and the unit in the header)")
                     for r, v in zip(rows(odd), text[odd], strict=True)]
    return problems


def _display(si_value: float, header: str, at: Found) -> str:
    """A bound in the unit the header uses (no unit for zero, which reads the same in any scale unit)."""
    unit = parse_header(header).unit
    if at.shift and not unit:  # a temperature read in the reference °C: say it in °C
        return f"{celsius(si_value):g} °C"
    value = (si_value - at.shift) / at.scale
    return f"{value:g}" if value == 0 or not unit else f"{value:g} {unit}"


def check_table(raw: RawTable, columns: tuple[Column, ...]) -> Checked:
    """Type-check every column of ``raw`` against ``columns``; absent columns come back empty, ids must be unique."""
    found, problems, notes = map_headers(raw.label, list(raw.headers), columns)
    n = len(raw)
    out = {}
    for column in columns:
        if column.name in found:
            values, cell_problems = check_column(raw.label, raw.columns[found[column.name].position], column,
                                                 found[column.name])
            problems += cell_problems
            out[column.name] = values
        else:
            out[column.name] = _absent(column, n)
        if column.default is not None:
            out[column.name] = np.where(np.isnan(out[column.name]), column.default, out[column.name])
    table = Table(out, n)
    for column in columns:
        if column.kind == "id" and column.name in found:
            problems += _duplicates(raw.label, table[column.name], found[column.name].header)
    return Checked(table, problems, notes)


def _absent(column: Column, n: int) -> np.ndarray:
    return np.full(n, np.nan) if column.kind == "number" else np.full(n, None, dtype=object)


def _duplicates(label: str, ids: np.ndarray, header: str) -> list[Problem]:
    if len(set(ids)) == len(ids):  # the usual case, told at the cost of one set
        return []
    where: dict[str, list[int]] = {}
    for i, value in enumerate(ids):
        if value is not None:
            where.setdefault(value, []).append(i + 2)
    problems = []
    for value in sorted(v for v, numbers in where.items() if len(numbers) > 1):
        numbers = where[value]
        problems += [
            Problem(label, r, header, f"'{value}' is used more than once (rows {', '.join(map(str, numbers))})")
            for r in numbers[1:]
        ]
    return problems
