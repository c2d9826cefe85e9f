"""Read a campaign (folder of three CSV files, or one .xlsx workbook) into raw text tables, with provenance.

Pure: nothing here touches the database or judges a value. The trace table can be millions of rows, so only its
header is read here; the points themselves are streamed and checked set-wise by the store.

Headers are kept exactly as written, duplicates included, so that validation can refuse a repeated column rather
than have the reader rename it. Row numbers in problems are the line numbers a spreadsheet shows: the header is
row 1, the first data row is row 2.
"""

from __future__ import annotations

import hashlib
import io
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from catalog.errors import CatalogError, Problem, ValidationError
from catalog.ingest.archive import check_unpacked_size

CATALYSTS_FILE = "catalysts.csv"
TRIALS_FILE = "trials.csv"
TRACES_FILE = "traces.csv"
SHEETS = ("catalysts", "trials", "traces")
#: Separators a spreadsheet may write instead of commas, with the way each usually happens.
_OTHER_DELIMITERS = {
    ";": "spreadsheets set to a language with a decimal comma save CSV this way",
    "\t": "this is a tab-separated export",
    "|": "this is a pipe-separated export",
}


@dataclass(frozen=True)
class RawTable:
    """A small table read as text, with the label used in messages (file name, or workbook and sheet)."""

    label: str
    frame: pd.DataFrame  # every cell a str, "" for empty; columns are the header strings as written (may repeat)


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


def read_source(path: str | Path) -> CampaignSource:
    """Read a campaign folder (three CSVs) or an .xlsx workbook (three sheets) as text.

    Raises
    ------
    ValidationError
        Missing files or sheets, unreadable files, a delimiter other than the comma.
    CatalogError
        No such path, or a workbook that unpacks to more than the size limit.
    """
    path = Path(path)
    if path.is_dir():
        return _read_folder(path)
    if path.suffix.lower() in (".xlsx", ".xlsm") and path.is_file():
        return _read_workbook(path)
    if not path.exists():
        raise CatalogError(f"{path}: no such folder or file")
    raise CatalogError(f"{path}: expected a campaign folder (three CSV files) or an .xlsx workbook")


def delimiter_problem(header_line: str, label: str) -> Problem | None:
    """A located problem when a header line is split by something other than commas, else None."""
    if "," in header_line:
        return None
    for delimiter, why in _OTHER_DELIMITERS.items():
        if delimiter in header_line:
            shown = "tab" if delimiter == "\t" else f"'{delimiter}'"
            return Problem(label, 1, None, f"the columns are separated by {shown}, not by commas ({why}); save "
                                           "the file as comma-separated CSV with '.' as the decimal mark")
    return None


def _read_csv_text(data: bytes, label: str) -> RawTable:
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ValidationError([_not_utf8(label, None, exc)]) from None
    wrong = delimiter_problem(text.split("\n", 1)[0], label)
    if wrong is not None:
        raise ValidationError([wrong])
    try:
        # header=None keeps the header row as written: pandas would rename a repeated column to 'name.1'. Python
        # strings (object columns), not pandas' Arrow-backed text: the checks work cell by cell on Python strings, and
        # building the Arrow columns only to convert them back cost ~15 ms for 10^4 trials.
        cells = pd.read_csv(io.StringIO(text), header=None, dtype=object, keep_default_na=False, na_filter=False)
    except pd.errors.EmptyDataError:
        raise ValidationError([Problem(label, None, None, "is empty: expected a header row and data rows")]) from None
    except pd.errors.ParserError as exc:
        raise ValidationError([Problem(label, None, None, f"cannot be read as CSV: {str(exc).strip()}")]) from None
    return RawTable(label, _with_header(cells))


def _not_utf8(label: str, row: int | None, exc: UnicodeDecodeError) -> Problem:
    return Problem(label, row, None, f"not UTF-8 text ({exc.reason} at byte {exc.start}); save it as UTF-8 CSV")


def _with_header(cells: pd.DataFrame) -> pd.DataFrame:
    """Turn a header-less text grid into a frame whose columns are its first row."""
    if cells.empty:
        return pd.DataFrame()
    frame = cells.iloc[1:].reset_index(drop=True)
    frame.columns = [str(c) for c in cells.iloc[0]]
    return frame


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
        raise ValidationError([_not_utf8(TRACES_FILE, 1, exc)]) from None
    wrong = delimiter_problem(first, TRACES_FILE)
    if wrong is not None:
        raise ValidationError([wrong])
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
    # openpyxl holds whole sheets in memory, so the real unpacked size is bounded first.
    check_unpacked_size(path)
    data = path.read_bytes()
    try:
        sheets = pd.read_excel(io.BytesIO(data), sheet_name=None, header=None, dtype=str, keep_default_na=False,
                               engine="openpyxl")
    except Exception as exc:  # noqa: BLE001 - openpyxl raises many types for a damaged workbook
        raise ValidationError([Problem(path.name, None, None, f"cannot be read as an .xlsx workbook: {exc}")]) from None
    lowered = {str(name).strip().lower(): frame for name, frame in sheets.items()}
    missing = [Problem(f"{path.name}", None, None, f"sheet '{s}' is missing") for s in SHEETS if s not in lowered]
    if missing:
        raise ValidationError(missing)

    def text(frame: pd.DataFrame) -> pd.DataFrame:
        # Empty cells come back missing whatever dtype is asked for; the raw tables hold "" for them.
        return _with_header(frame.astype(object).where(frame.notna(), "").astype(str))

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
