"""Read and validate a campaign (folder of three CSV files, or one .xlsx workbook) into SI tables.

Pure: nothing here touches the database. The trace table can be millions of rows, so only its header is read
here; the points themselves are streamed and checked set-wise by :mod:`catalog.store`.

Row numbers in problems are the line numbers a spreadsheet shows: the header is row 1, the first data row is row 2.
"""

from __future__ import annotations

import hashlib
import io
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import periodictable

from catalog.core.signals import water_vapour_pressure
from catalog.errors import CatalogError, Problem, ValidationError
from catalog.units import UnitProblem, celsius, parse_header, si_converter

CATALYSTS_FILE = "catalysts.csv"
TRIALS_FILE = "trials.csv"
TRACES_FILE = "traces.csv"
SHEETS = ("catalysts", "trials", "traces")

#: Reference display unit of each measurement's trace values, and the SI unit they are stored in.
MEASUREMENTS = {
    "gas_volume": ("mL", "m³"),
    "mass_loss": ("g", "kg"),
    "pressure": ("kPa", "Pa"),
    "concentration": ("mmol/L", "mol/m³"),
}

#: Conditions the gas volume is read at when a gas_volume trial does not say (IUPAC SATP-like lab default).
DEFAULT_GAS_PRESSURE = 101_325.0
DEFAULT_GAS_TEMPERATURE = 298.15
#: Where gas can be collected over liquid water: the triple point to the critical point (IAPWS-IF97 region 4).
WATER_T_MIN, WATER_T_MAX = 273.16, 647.096


@dataclass(frozen=True)
class Column:
    """One column of the v1 contract.

    ``unit`` is the reference (display) unit, used when the header carries none and for plausibility checks;
    ``None`` for text. Bounds are in SI; ``lower_open`` makes the lower bound strict.
    """

    name: str
    kind: str = "number"  # number | text | id | bool | datetime
    unit: str | None = None
    required: bool = False
    lower: float | None = None
    lower_open: bool = False
    upper: float | None = None
    default: float | None = None


CATALYST_COLUMNS = (
    Column("catalyst_id", "id", required=True),
    Column("metal", "text"),
    # Zero loading, dispersion or site density would mean no active sites (an infinite TOF): leave the cell empty
    # instead when it is not known.
    Column("metal_loading", unit="wt%", lower=0.0, lower_open=True, upper=1.0),
    Column("dispersion", unit="%", lower=0.0, lower_open=True, upper=1.0),
    Column("site_density", unit="umol/g", lower=0.0, lower_open=True),
    Column("surface_area", unit="m^2/g", lower=0.0),
    Column("description", "text"),
    Column("support", "text"),
    Column("batch", "text"),
    Column("price_per_gram", unit="dimensionless", lower=0.0),
)

TRIAL_COLUMNS = (
    Column("trial_id", "id", required=True),
    Column("catalyst_id", "text"),
    Column("temperature", unit="degC", required=True, lower=0.0, lower_open=True),
    Column("measurement", "text", required=True),
    Column("signal_unit", "text", required=True),
    Column("catalyst_mass", unit="mg", lower=0.0, lower_open=True),
    Column("limiting_amount", unit="mmol", lower=0.0, lower_open=True),
    Column("product_ratio", unit="dimensionless", lower=0.0, lower_open=True, default=1.0),
    Column("gas_pressure", unit="kPa", lower=0.0, lower_open=True),
    Column("gas_temperature", unit="degC", lower=0.0, lower_open=True),
    Column("gas_molar_mass", unit="g/mol", lower=0.0, lower_open=True),
    Column("headspace_volume", unit="mL", lower=0.0, lower_open=True),
    Column("liquid_volume", unit="mL", lower=0.0, lower_open=True),
    Column("initial_concentration", unit="mol/L", lower=0.0),
    Column("particle_size", unit="um", lower=0.0, lower_open=True),
    Column("light_wavelength", unit="nm", lower=0.0, lower_open=True),
    Column("light_power", unit="mW", lower=0.0),
    Column("operator", "text"),
    Column("started_at", "datetime"),
    Column("notes", "text"),
    Column("collected_over_water", "bool"),
    Column("effective_diffusivity", unit="m^2/s", lower=0.0, lower_open=True),
    Column("particle_density", unit="g/cm^3", lower=0.0, lower_open=True),
    Column("mass_transfer_coefficient", unit="m/s", lower=0.0, lower_open=True),
    Column("reaction_enthalpy", unit="kJ/mol"),
    Column("heat_capacity", unit="J/K", lower=0.0, lower_open=True),
)

TRACE_COLUMNS = (
    Column("trial_id", "id", required=True),
    Column("time", unit="s", required=True),
    Column("value", required=True),
)

#: What each measurement needs beyond the always-required columns.
MEASUREMENT_NEEDS = {
    "gas_volume": (),
    "mass_loss": ("gas_molar_mass",),
    "pressure": ("headspace_volume",),
    "concentration": ("liquid_volume",),
}

_TRUE = {"true", "yes", "y", "1"}
_FALSE = {"false", "no", "n", "0"}


@dataclass(frozen=True)
class RawTable:
    """A small table read as text, with the label used in messages (file name, or workbook and sheet)."""

    label: str
    frame: pd.DataFrame  # every cell a str, "" for empty; columns are the original header strings


@dataclass(frozen=True)
class TraceSource:
    """Where the trace points are: a CSV path streamed by the store, or an in-memory frame from a workbook."""

    label: str
    headers: tuple[str, ...]
    csv_path: Path | None = None
    frame: pd.DataFrame | None = None


@dataclass(frozen=True)
class CampaignSource:
    """Everything read from one campaign before validation, with provenance."""

    source: str
    catalysts: RawTable
    trials: RawTable
    traces: TraceSource
    files: tuple[str, ...]
    content_hash: str


@dataclass
class Checked:
    """A validated table in SI, the problems found and notes on how units were understood."""

    frame: pd.DataFrame
    problems: list[Problem] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def read_source(path: str | Path) -> CampaignSource:
    """Read a campaign folder (three CSVs) or an .xlsx workbook (three sheets) as text.

    Raises
    ------
    ValidationError
        Missing files or sheets, unreadable files.
    """
    path = Path(path)
    if path.is_dir():
        return _read_folder(path)
    if path.suffix.lower() in (".xlsx", ".xlsm") and path.is_file():
        return _read_workbook(path)
    if not path.exists():
        raise CatalogError(f"{path}: no such folder or file")
    raise CatalogError(f"{path}: expected a campaign folder (three CSV files) or an .xlsx workbook")


def _read_csv_text(data: bytes, label: str) -> RawTable:
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ValidationError([Problem(label, None, None, f"not UTF-8 text ({exc.reason} at byte {exc.start})")])
    try:
        frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, na_filter=False, skipinitialspace=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise ValidationError([Problem(label, None, None, f"cannot be read as CSV: {str(exc).strip()}")])
    return RawTable(label, frame)


def _read_folder(folder: Path) -> CampaignSource:
    problems = [
        Problem(str(folder / name), None, None, "file is missing")
        for name in (CATALYSTS_FILE, TRIALS_FILE, TRACES_FILE)
        if not (folder / name).is_file()
    ]
    if problems:
        raise ValidationError(problems)
    digest = hashlib.sha256()
    tables = {}
    for name in (CATALYSTS_FILE, TRIALS_FILE):
        data = (folder / name).read_bytes()
        digest.update(name.encode() + b"\0" + data)
        tables[name] = _read_csv_text(data, name)
    trace_path = folder / TRACES_FILE
    with trace_path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    try:
        with trace_path.open("r", encoding="utf-8-sig", newline="") as handle:
            first = handle.readline()
    except UnicodeDecodeError as exc:
        raise ValidationError([Problem(TRACES_FILE, 1, None, f"not UTF-8 text ({exc.reason} at byte {exc.start})")])
    headers = tuple(h.strip().strip('"') for h in first.rstrip("\r\n").split(","))
    return CampaignSource(
        source=str(folder),
        catalysts=tables[CATALYSTS_FILE],
        trials=tables[TRIALS_FILE],
        traces=TraceSource(TRACES_FILE, headers, csv_path=trace_path),
        files=(CATALYSTS_FILE, TRIALS_FILE, TRACES_FILE),
        content_hash=digest.hexdigest(),
    )


def _read_workbook(path: Path) -> CampaignSource:
    data = path.read_bytes()
    try:
        sheets = pd.read_excel(io.BytesIO(data), sheet_name=None, dtype=str, keep_default_na=False, engine="openpyxl")
    except Exception as exc:  # openpyxl raises many types for a damaged workbook
        raise ValidationError([Problem(path.name, None, None, f"cannot be read as an .xlsx workbook: {exc}")])
    lowered = {name.strip().lower(): frame for name, frame in sheets.items()}
    missing = [Problem(f"{path.name}", None, None, f"sheet '{s}' is missing") for s in SHEETS if s not in lowered]
    if missing:
        raise ValidationError(missing)

    def text(frame: pd.DataFrame) -> pd.DataFrame:
        frame = frame.fillna("").astype(str)
        frame.columns = [str(c) for c in frame.columns]
        return frame

    label = {s: f"{path.name}, sheet '{s}'" for s in SHEETS}
    traces = text(lowered["traces"])
    return CampaignSource(
        source=str(path),
        catalysts=RawTable(label["catalysts"], text(lowered["catalysts"])),
        trials=RawTable(label["trials"], text(lowered["trials"])),
        traces=TraceSource(label["traces"], tuple(traces.columns), frame=traces),
        files=(path.name,),
        content_hash=hashlib.sha256(data).hexdigest(),
    )


def _map_headers(
    label: str, headers: list[str], columns: tuple[Column, ...]
) -> tuple[dict[str, tuple[str, float, float]], list[Problem], list[str]]:
    """Match headers to contract columns; return name -> (header, scale, shift) plus problems and unit notes."""
    spec = {c.name: c for c in columns}
    found: dict[str, tuple[str, float, float]] = {}
    problems: list[Problem] = []
    notes: list[str] = []
    for header in headers:
        parsed = parse_header(header)
        column = spec.get(parsed.name)
        if column is None:
            if parsed.name:
                notes.append(f"{label}: column '{header}' is not part of the format and was ignored")
            continue
        if parsed.name in found:
            problems.append(Problem(label, 1, header, f"column '{parsed.name}' appears twice"))
            continue
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
        found[parsed.name] = (header, scale, shift)
    for column in columns:
        if column.required and column.name not in found and not any(p.column and parse_header(p.column).name == column.name for p in problems):
            problems.append(Problem(label, None, column.name, "required column is missing"))
    return found, problems, notes


def _rows(mask: np.ndarray) -> np.ndarray:
    """Spreadsheet row numbers of the true entries of a boolean mask over data rows."""
    return np.flatnonzero(mask) + 2


def _check_column(
    label: str, raw: pd.Series, column: Column, header: str, scale: float, shift: float
) -> tuple[pd.Series, list[Problem]]:
    """Convert one text column to its typed SI values, listing every bad cell."""
    text = raw.astype(str).str.strip()
    empty = (text == "").to_numpy()
    problems: list[Problem] = []
    if column.required:
        problems += [Problem(label, r, header, "value is required but empty") for r in _rows(empty)]
    if column.kind in ("text", "id"):
        return text.where(~empty, None), problems
    if column.kind == "bool":
        low = text.str.lower()
        bad = ~empty & ~low.isin(_TRUE | _FALSE).to_numpy()
        problems += [
            Problem(label, r, header, f"'{v}' is not true/false (or yes/no, 1/0)") for r, v in zip(_rows(bad), text[bad])
        ]
        return low.isin(_TRUE).where(~empty, None).astype("boolean"), problems
    if column.kind == "datetime":
        stamps = pd.to_datetime(text.where(~empty), errors="coerce", format="ISO8601", utc=True)
        bad = ~empty & stamps.isna().to_numpy()
        problems += [
            Problem(label, r, header, f"'{v}' is not an ISO 8601 date-time (e.g. 2026-03-14T09:30)")
            for r, v in zip(_rows(bad), text[bad])
        ]
        return stamps.dt.tz_convert(None), problems
    numbers = pd.to_numeric(text.where(~empty), errors="coerce").astype(float)
    bad = ~empty & ~np.isfinite(numbers.to_numpy())
    problems += [Problem(label, r, header, f"'{v}' is not a finite number") for r, v in zip(_rows(bad), text[bad])]
    si = numbers * scale + shift
    values = si.to_numpy()
    if column.lower is not None:
        low = values <= column.lower if column.lower_open else values < column.lower
        words = "must be above" if column.lower_open else "must not be below"
        for r, v in zip(_rows(low), text[low]):
            what = "absolute zero" if column.unit in ("degC",) else _display(column.lower, header, scale, shift)
            problems.append(Problem(label, r, header, f"{v} {words} {what}"))
    if column.upper is not None:
        high = values > column.upper
        for r, v in zip(_rows(high), text[high]):
            problems.append(Problem(label, r, header, f"{v} is above {_display(column.upper, header, scale, shift)}"))
    return si, problems


def _display(si_value: float, header: str, scale: float, shift: float) -> str:
    """A bound in the unit the header uses (no unit for zero, which reads the same in any scale unit)."""
    value = (si_value - shift) / scale
    unit = parse_header(header).unit
    return f"{value:g}" if value == 0 or not unit else f"{value:g} {unit}"


def _check_table(raw: RawTable, columns: tuple[Column, ...]) -> Checked:
    found, problems, notes = _map_headers(raw.label, list(raw.frame.columns), columns)
    out = {}
    for column in columns:
        if column.name in found:
            header, scale, shift = found[column.name]
            values, cell_problems = _check_column(raw.label, raw.frame[header], column, header, scale, shift)
            problems += cell_problems
            out[column.name] = values.reset_index(drop=True)
        else:
            out[column.name] = _absent(column, len(raw.frame))
    frame = pd.DataFrame(out)
    for column in columns:
        if column.kind == "id" and column.name in found:
            problems += _duplicates(raw.label, frame[column.name], found[column.name][0])
    return Checked(frame, problems, notes)


def _absent(column: Column, n: int) -> pd.Series:
    if column.kind in ("text", "id"):
        return pd.Series([None] * n, dtype=object)
    if column.kind == "bool":
        return pd.Series([pd.NA] * n, dtype="boolean")
    if column.kind == "datetime":
        return pd.Series(pd.NaT, index=range(n), dtype="datetime64[ns]")
    return pd.Series(np.full(n, np.nan))


def _duplicates(label: str, ids: pd.Series, header: str) -> list[Problem]:
    dup = ids.notna() & ids.duplicated(keep=False)
    problems = []
    for value, rows in ids[dup].groupby(ids[dup]).groups.items():
        numbers = [int(i) + 2 for i in rows]
        problems += [
            Problem(label, r, header, f"'{value}' is used more than once (rows {', '.join(map(str, numbers))})")
            for r in numbers[1:]
        ]
    return problems


def check_catalysts(raw: RawTable) -> Checked:
    """Validate ``catalysts.csv``: types, units, ranges, unique ids, known element symbols."""
    checked = _check_table(raw, CATALYST_COLUMNS)
    frame = checked.frame
    metals = frame["metal"]
    for i, symbol in metals.items():
        if symbol is not None and not _is_element(symbol):
            checked.problems.append(Problem(raw.label, int(i) + 2, "metal", f"'{symbol}' is not an element symbol"))
    return checked


def _is_element(symbol: str) -> bool:
    element = getattr(periodictable, symbol, None)
    return isinstance(element, periodictable.core.Element) and element.number > 0


def check_trials(raw: RawTable, known_catalysts: set[str]) -> Checked:
    """Validate ``trials.csv`` against the v1 contract.

    ``known_catalysts`` is every catalyst id available to the trials: from this campaign's catalysts file and from
    the database. Adds columns ``signal_scale`` and ``signal_shift`` (trace value in SI = value × scale + shift).
    """
    checked = _check_table(raw, TRIAL_COLUMNS)
    frame, problems, label = checked.frame, checked.problems, raw.label
    header_of = {parse_header(h).name: h for h in raw.frame.columns}

    def add(mask, column: str, message) -> None:
        header = header_of.get(column, column)
        for i in np.flatnonzero(np.asarray(mask, dtype=bool)):
            text = message(frame.iloc[i]) if callable(message) else message
            problems.append(Problem(label, int(i) + 2, header, text))

    measurement = frame["measurement"]
    unknown = measurement.notna() & ~measurement.isin(list(MEASUREMENTS))
    add(unknown, "measurement", lambda row: f"'{row['measurement']}' is not one of {', '.join(MEASUREMENTS)}")
    known = measurement.where(~unknown)
    scale = np.full(len(frame), np.nan)
    shift = np.full(len(frame), np.nan)
    pairs = frame.loc[known.notna() & frame["signal_unit"].notna(), ["measurement", "signal_unit"]]
    for (kind, unit), rows in pairs.groupby(["measurement", "signal_unit"]).groups.items():
        at = np.asarray(rows)
        try:
            scale[at], shift[at], _ = si_converter(unit, MEASUREMENTS[kind][0])
        except UnitProblem as exc:
            add(frame.index.isin(at), "signal_unit", f"{exc} (measurement {kind})")
    for kind, needs in MEASUREMENT_NEEDS.items():
        for need in needs:
            add((known == kind) & frame[need].isna(), need, f"required for a {kind} trial")
    catalyst = frame["catalyst_id"]
    add(catalyst.notna() & ~catalyst.isin(list(known_catalysts)), "catalyst_id",
        lambda row: f"catalyst '{row['catalyst_id']}' is neither in the catalysts table nor in the database")
    add(catalyst.notna() & frame["catalyst_mass"].isna(), "catalyst_mass", "a catalysed trial needs the catalyst mass")
    wet = (known == "gas_volume") & frame["collected_over_water"].fillna(False).astype(bool)
    gas_T = frame["gas_temperature"].fillna(DEFAULT_GAS_TEMPERATURE)
    liquid_water = (gas_T >= WATER_T_MIN) & (gas_T <= WATER_T_MAX)
    add(wet & ~liquid_water, "gas_temperature",
        lambda row: f"gas collected over water must be between 0.01 and 373.9 °C (read {_celsius(row)})")
    # Over water the gas is saturated with vapour; at or below the vapour pressure no gas could be collected.
    vapour = pd.Series(np.nan, index=frame.index)
    vapour[wet & liquid_water] = water_vapour_pressure(gas_T[wet & liquid_water].to_numpy(float))
    add(wet & (frame["gas_pressure"].fillna(DEFAULT_GAS_PRESSURE) <= vapour), "gas_pressure",
        lambda row: f"{row['gas_pressure'] / 1e3:g} kPa is not above the water vapour pressure at {_celsius(row)} "
                    f"({vapour[row.name] / 1e3:.3g} kPa), so no gas could be collected over water")
    gas = frame["measurement"] == "gas_volume"
    frame.loc[gas & frame["gas_pressure"].isna(), "gas_pressure"] = DEFAULT_GAS_PRESSURE
    frame.loc[gas & frame["gas_temperature"].isna(), "gas_temperature"] = DEFAULT_GAS_TEMPERATURE
    frame["product_ratio"] = frame["product_ratio"].fillna(1.0)
    frame["signal_scale"] = scale
    frame["signal_shift"] = shift
    return checked


def _celsius(row) -> str:
    kelvin = row["gas_temperature"] if pd.notna(row["gas_temperature"]) else DEFAULT_GAS_TEMPERATURE
    return f"{celsius(kelvin):g} °C"


def trace_layout(source: TraceSource) -> tuple[dict[str, str], float, list[Problem], list[str]]:
    """Map the trace headers to (trial_id, time, value) and give the time scale to seconds."""
    found, problems, notes = _map_headers(source.label, list(source.headers), TRACE_COLUMNS)
    names = {name: header for name, (header, _, _) in found.items()}
    time_scale = found["time"][1] if "time" in found else 1.0
    return names, time_scale, problems, notes
