"""Read a campaign (folder of three CSV files, or one .xlsx workbook) into raw text tables, with provenance.

Pure: nothing here touches the database or judges a value. The trace table can be millions of rows, so only its
header is read here; the points themselves are streamed and checked set-wise by the store.

Headers are kept exactly as written, duplicates included, so that validation can refuse a repeated column rather
than have the reader rename it. Row numbers in problems are the line numbers a spreadsheet shows: the header is
row 1, the first data row is row 2.
"""

from __future__ import annotations

import csv
import hashlib
import io
import threading
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

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
#: Rows with too many fields listed before the rest are only counted.
LISTED_RAGGED = 50


@dataclass(frozen=True)
class RawTable:
    """A small table read as text, with the label used in messages (file name, or workbook and sheet).

    ``headers`` are the header cells as written (they may repeat); ``columns`` hold one tuple of cells per header,
    every cell a str, "" for empty.
    """

    label: str
    headers: tuple[str, ...] = ()
    columns: tuple[tuple[str, ...], ...] = ()

    @classmethod
    def from_rows(cls, label: str, headers: Sequence[str], rows: Sequence[Sequence[str]]) -> RawTable:
        """A table from its header and data rows; a short row is padded with empty cells."""
        width = len(headers)
        padded = [row if len(row) == width else [*row, *[""] * (width - len(row))] for row in rows]
        columns = tuple(zip(*padded, strict=True)) if padded else ((),) * width
        return cls(label, tuple(str(h) for h in headers), columns)

    def __len__(self) -> int:
        """The number of data rows."""
        return len(self.columns[0]) if self.columns else 0

    def to_pandas(self):
        """The table as a pandas DataFrame of text (the app's previews); pandas is imported only here."""
        import pandas as pd  # deferred: the import command never needs pandas

        frame = pd.DataFrame({i: pd.Series(c, dtype=object) for i, c in enumerate(self.columns)})
        frame.columns = list(self.headers)
        return frame


@dataclass(frozen=True)
class TraceSource:
    """Where the trace points are: a CSV path streamed by the store, or an in-memory text table from a workbook."""

    label: str
    headers: tuple[str, ...]
    csv_path: Path | None = None
    table: RawTable | None = None


@dataclass(frozen=True)
class CampaignSource:
    """Everything read from one campaign before validation, with provenance.

    ``digest`` holds the SHA-256 of every byte read, which :attr:`content_hash` waits for: a trace file's hash is
    worked out on a thread while the tables are checked and the points read (hashlib releases the GIL).
    """

    source: str
    catalysts: RawTable
    trials: RawTable
    traces: TraceSource
    files: tuple[str, ...]
    digest: str | _Hashing = field(repr=False, compare=False)

    @property
    def content_hash(self) -> str:
        """Hex SHA-256 of the campaign's files (names and bytes), the import's identity."""
        return self.digest if isinstance(self.digest, str) else self.digest.result()


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
    # newline="" keeps a line break inside a quoted cell as written, as the csv module asks.
    reader = csv.reader(io.StringIO(text, newline=""))
    try:
        rows = [row for row in reader if _is_row(row)]
    except csv.Error as exc:
        raise ValidationError([Problem(label, reader.line_num, None, f"cannot be read as CSV: {exc}")]) from None
    if text.count('"') % 2:
        _refuse_open_quote(text, label)
    if not rows:
        raise ValidationError([Problem(label, None, None, "is empty: expected a header row and data rows")])
    width = len(rows[0])
    if any(len(row) > width for row in rows):
        _refuse_ragged(text, label, width)
    return RawTable.from_rows(label, rows[0], rows[1:])


def _refuse_ragged(text: str, label: str, width: int) -> None:
    """Refuse the rows with more fields than the header, located by line (read again: only a faulty file pays)."""
    reader = csv.reader(io.StringIO(text, newline=""))
    ragged = [Problem(label, reader.line_num, None, f"has {len(row)} fields where the header has {width}")
              for row in reader if len(row) > width]
    more = len(ragged) - LISTED_RAGGED
    raise ValidationError(ragged[:LISTED_RAGGED] + (
        [Problem(label, None, None, f"... and {more} more rows with too many fields")] if more > 0 else []))


def _is_row(cells: list[str]) -> bool:
    """False for a line holding nothing but blanks: it is no row at all (not a row of empty cells)."""
    return len(cells) > 1 or bool(cells and cells[0].strip())


def _refuse_open_quote(text: str, label: str) -> None:
    """Refuse a quoted cell left open at the end of the file, which the lenient reader would take as one long cell.

    Only called when the quotes do not pair up; the strict reader then says where the text stops making sense.
    """
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        for _ in reader:
            pass
    except csv.Error as exc:
        raise ValidationError([Problem(label, reader.line_num, None,
                                       f"cannot be read as CSV: {exc} (a quote is not closed)")]) from None


def _not_utf8(label: str, row: int | None, exc: UnicodeDecodeError) -> Problem:
    return Problem(label, row, None, f"not UTF-8 text ({exc.reason} at byte {exc.start}); save it as UTF-8 CSV")


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
    hashed = _Hashing(digest, trace_path.open("rb"))  # opened here, so that a refusal to read shows here
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
        digest=hashed,
    )


class _Hashing:
    """The hex digest of ``digest`` updated with the rest of ``handle`` (closed after), worked out on a thread."""

    def __init__(self, digest, handle):
        self._digest, self._handle = digest, handle
        self._value: str | None = None
        self._error: BaseException | None = None
        # A daemon thread: an interpreter leaving on an error does not wait for the hash of a file it won't import.
        self._thread = threading.Thread(target=self._work, name="catalog-sha256", daemon=True)
        self._thread.start()

    def _work(self) -> None:
        try:
            with self._handle:
                for block in iter(lambda: self._handle.read(1 << 20), b""):
                    self._digest.update(block)
            self._value = self._digest.hexdigest()
        except BaseException as exc:  # noqa: BLE001 - raised again to whoever asks for the hash
            self._error = exc

    def result(self) -> str:
        """The hex digest, once the thread has read the whole file (its read error, if it had one)."""
        self._thread.join()
        if self._error is not None:
            raise self._error
        return self._value


def workbook_sheets(data: bytes) -> dict[str, list[list[str]]]:
    """Every sheet of an .xlsx workbook as rows of text cells, "" for an empty cell, by sheet name.

    A number is written as Python writes it (an integral number without a decimal point: 30.0 is "30"), a
    true/false cell as "True"/"False", a date as "2026-03-14 09:30:00"; an error cell (#N/A) is empty. Trailing
    empty cells and rows are dropped and the rows padded to the widest; in a one-column sheet a blank row is dropped.
    """
    import openpyxl  # deferred: ~0.1 s to import, and only a workbook needs it
    from openpyxl.cell.cell import TYPE_ERROR, TYPE_NUMERIC

    def text(cell) -> str:
        value = cell.value
        if value is None or cell.data_type == TYPE_ERROR:
            return ""
        if cell.data_type == TYPE_NUMERIC and int(value) == value:
            return str(int(value))
        return str(value)

    book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True, keep_links=False)
    try:
        sheets = {}
        for sheet in book.worksheets:
            sheet.reset_dimensions()  # the declared extent of a sheet can be wrong: read what is there
            rows = []
            for row in sheet.rows:
                cells = [text(cell) for cell in row]
                while cells and cells[-1] == "":
                    cells.pop()
                rows.append(cells)
            while rows and not rows[-1]:
                rows.pop()
            width = max((len(r) for r in rows), default=0)
            sheets[sheet.title] = [r + [""] * (width - len(r)) for r in rows if _is_row(r) or width > 1]
        return sheets
    finally:
        book.close()


def _read_workbook(path: Path) -> CampaignSource:
    # openpyxl holds whole sheets in memory, so the real unpacked size is bounded first.
    check_unpacked_size(path)
    data = path.read_bytes()
    try:
        sheets = workbook_sheets(data)
    except Exception as exc:  # noqa: BLE001 - openpyxl raises many types for a damaged workbook
        raise ValidationError([Problem(path.name, None, None, f"cannot be read as an .xlsx workbook: {exc}")]) from None
    lowered = {str(name).strip().lower(): rows for name, rows in sheets.items()}
    missing = [Problem(f"{path.name}", None, None, f"sheet '{s}' is missing") for s in SHEETS if s not in lowered]
    if missing:
        raise ValidationError(missing)

    def table(sheet: str) -> RawTable:
        rows = lowered[sheet]
        label = f"{path.name}, sheet '{sheet}'"
        return RawTable.from_rows(label, rows[0], rows[1:]) if rows else RawTable(label)

    traces = table("traces")
    return CampaignSource(
        source=str(path),
        catalysts=table("catalysts"),
        trials=table("trials"),
        traces=TraceSource(traces.label, traces.headers, table=traces),
        files=(path.name,),
        digest=hashlib.sha256(data).hexdigest(),
    )
