"""Turn what a browser uploads or a user pastes into files the campaign reader takes, bounded and located.

Pure of any user interface: the app hands in names and bytes and gets back a folder or workbook path, trace rows or
a located :class:`~catalog.errors.ValidationError` / :class:`~catalog.errors.CatalogError`. Zip members are
streamed through :func:`catalog.ingest.archive.stream_member`, so the limit is on the bytes really unpacked, never
on the size a member header declares.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from catalog.errors import CatalogError, Problem, ValidationError
from catalog.ingest import sources
from catalog.ingest.archive import WORKBOOK_UNPACKED_LIMIT, open_zip, stream_member

__all__ = [
    "UNZIPPED_LIMIT", "UPLOAD_LIMIT", "PastedTrace", "Upload", "csv_text", "parse_trace_text", "read_trace_upload",
    "stage_upload", "trace_preview",
]

#: Largest upload accepted, bytes (the three files together, or the archive).
UPLOAD_LIMIT = 200 * 2**20
#: Largest total of bytes really unpacked from a zip upload (a small archive can inflate enormously).
UNZIPPED_LIMIT = 2 * UPLOAD_LIMIT
_FIXED = (sources.CATALYSTS_FILE, sources.TRIALS_FILE, sources.TRACES_FILE)
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")
# A number written with a decimal comma, e.g. '1,5' or '-0,25' (no thousands grouping: '1,500' is ambiguous).
_COMMA_NUMBER = re.compile(r"^[+-]?\d*,\d+([eE][+-]?\d+)?$")


@dataclass(frozen=True)
class Upload:
    """One uploaded file: the name the browser gave (used only to choose a fixed name) and its bytes."""

    name: str
    data: bytes


@dataclass(frozen=True)
class PastedTrace:
    """Readings of one trace as text cells (time, value), with how the text was read."""

    rows: list[tuple[str, str]]
    notes: list[str] = field(default_factory=list)


def stage_upload(files: list[Upload], folder: Path, limit: int = UPLOAD_LIMIT,
                 unzipped_limit: int = UNZIPPED_LIMIT) -> Path:
    """Write uploaded files under fixed names inside ``folder``; return what to read (a folder or a workbook).

    Accepted: the three CSV files, one zip holding them (anywhere inside), or one .xlsx workbook. No user-supplied
    path is ever used on disk.

    Raises
    ------
    CatalogError
        Too large (upload, or the really unpacked zip members), an unknown file, or a damaged, encrypted or
        unreadable zip member, each message naming the file.
    """
    total = sum(len(f.data) for f in files)
    if total > limit:
        raise CatalogError(f"the upload is {total / 2**20:.0f} MB; the limit is {limit / 2**20:.0f} MB")
    names = [f.name.lower() for f in files]
    if len(files) == 1 and names[0].endswith((".xlsx", ".xlsm")):
        target = folder / "campaign.xlsx"
        target.write_bytes(files[0].data)
        return target
    campaign_dir = folder / "campaign"
    campaign_dir.mkdir()
    wanted = {name.split(".")[0]: name for name in _FIXED}
    if len(files) == 1 and names[0].endswith(".zip"):
        _unzip(files[0], campaign_dir, unzipped_limit)
        return campaign_dir
    for upload, name in zip(files, names, strict=True):
        stem = next((key for key in wanted if key in name), None)
        if stem is None or not name.endswith(".csv"):
            raise CatalogError(f"{upload.name}: expected catalysts.csv, trials.csv and traces.csv "
                               "(or one .zip or .xlsx)")
        (campaign_dir / wanted[stem]).write_bytes(upload.data)
    return campaign_dir


def _unzip(upload: Upload, target: Path, budget: int) -> None:
    """Copy the three campaign members of a zip into ``target``, counting the bytes really unpacked."""
    with open_zip(io.BytesIO(upload.data), upload.name) as archive:
        members = {}
        for info in archive.infolist():
            base = info.filename.replace("\\", "/").rsplit("/", 1)[-1].lower()
            if base in _FIXED and not info.is_dir() and "__macosx" not in info.filename.lower():
                members.setdefault(base, info)
        if not members:
            raise CatalogError(f"{upload.name}: holds none of catalysts.csv, trials.csv, traces.csv")
        for base, info in members.items():
            with (target / base).open("wb") as out:
                budget -= stream_member(archive, info, budget, upload.name, out.write)


def _check_workbook_bytes(data: bytes, label: str) -> None:
    """Refuse a workbook whose members really unpack to more than the workbook limit (before openpyxl sees it)."""
    with open_zip(io.BytesIO(data), label) as archive:
        left = WORKBOOK_UNPACKED_LIMIT
        for info in archive.infolist():
            if not info.is_dir():
                left -= stream_member(archive, info, left, label, lambda block: None)


def _separator(lines: list[str]) -> str | None:
    """The column separator of pasted text: tab, then semicolon, then comma; None means runs of spaces."""
    for candidate in ("\t", ";", ","):
        if any(candidate in line for line in lines):
            return candidate
    return None


def parse_trace_text(text: str, label: str = "trace") -> PastedTrace:
    """Two columns (time, value) from pasted or uploaded text, separated by tab, semicolon, comma or spaces.

    A first line whose first cell is not a number is a header and is skipped. Cells stay text, so the importer
    reports a bad cell with its row like any other. A decimal comma is read only where it cannot be confused with
    the separator (tab-, semicolon- or space-separated text: ``60;1,5`` is 60 and 1.5, and a note says so); a
    comma-separated line with more than two cells (``60,9,8``: 60 and 9.8, or three columns?) is refused.

    Raises
    ------
    ValidationError
        One problem per ambiguous line, located by its line number in the text.
    """
    numbered = [(n, line.strip()) for n, line in enumerate(text.splitlines(), start=1) if line.strip()]
    separator = _separator([line for _, line in numbered])
    rows: list[tuple[int, list[str]]] = []
    for n, line in numbered:
        parts = line.split(separator) if separator else line.split()
        rows.append((n, [c.strip().strip('"').strip() for c in parts]))
    if rows and not _NUMBER.match(rows[0][1][0] if rows[0][1] else ""):
        rows = rows[1:]
    problems, out, decimal_comma = [], [], False
    for n, cells in rows:
        while len(cells) > 2 and cells[-1] == "":
            cells = cells[:-1]  # a trailing separator leaves an empty last cell
        if len(cells) > 2:
            hint = (" If the numbers use a decimal comma, separate the two columns with a semicolon or a tab "
                    "(e.g. '60;1,5')." if separator == "," else "")
            problems.append(Problem(label, n, None, f"{len(cells)} cells in '{line_of(text, n)}'; expected two "
                                                    f"(time and value).{hint}"))
            continue
        if separator != ",":
            fixed = [c.replace(",", ".") if _COMMA_NUMBER.match(c) else c for c in cells]
            decimal_comma |= fixed != cells
            cells = fixed
        out.append((cells[0] if cells else "", cells[1] if len(cells) > 1 else ""))
    if problems:
        raise ValidationError(problems)
    notes = ["numbers with a decimal comma (e.g. 1,5) were read as 1.5"] if decimal_comma else []
    return PastedTrace(out, notes)


def line_of(text: str, n: int) -> str:
    """Line ``n`` (1-based) of ``text``, stripped and cut to 60 characters for a message."""
    line = text.splitlines()[n - 1].strip()
    return line if len(line) <= 60 else line[:57] + "…"


def read_trace_upload(upload: Upload) -> PastedTrace:
    """Trace readings from an uploaded CSV/text file or .xlsx workbook (first sheet, first two columns).

    Raises
    ------
    ValidationError
        Not UTF-8 text, a damaged workbook, or ambiguous lines (see :func:`parse_trace_text`).
    CatalogError
        A workbook that really unpacks to more than the workbook limit.
    """
    if upload.name.lower().endswith((".xlsx", ".xlsm")):
        _check_workbook_bytes(upload.data, upload.name)
        try:
            sheet = next(iter(sources.workbook_sheets(upload.data).values()), [])
        except Exception as exc:  # noqa: BLE001 - openpyxl raises many types for a damaged workbook
            raise ValidationError([Problem(upload.name, None, None,
                                           f"cannot be read as an .xlsx workbook: {exc}")]) from None
        # Tab-joined so that a cell holding '1,5' is not mistaken for two cells.
        text = "\n".join("\t".join(row[:2]) for row in sheet)
        return parse_trace_text(text, upload.name)
    try:
        text = upload.data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ValidationError([Problem(upload.name, None, None,
                                       f"not UTF-8 text ({exc.reason} at byte {exc.start})")]) from None
    return parse_trace_text(text, upload.name)


def csv_text(header: list[str], rows: list[list]) -> str:
    """A small CSV document (header and rows) as the campaign reader expects it."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return out.getvalue()


def trace_preview(source: sources.CampaignSource, n: int = 5) -> tuple[pd.DataFrame, int]:
    """The first ``n`` trace rows (text) and the number of data rows, without reading the whole trace file.

    Raises
    ------
    ValidationError
        An empty or unreadable traces file, located.
    """
    traces = source.traces
    if traces.csv_path is None:
        return traces.table.to_pandas().head(n), len(traces.table)
    try:
        head = pd.read_csv(traces.csv_path, nrows=n, dtype=str, keep_default_na=False)
    except pd.errors.EmptyDataError:
        message = "is empty: expected a header row (trial_id, time [unit], value) and data rows"
        raise ValidationError([Problem(traces.label, None, None, message)]) from None
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise ValidationError([Problem(traces.label, None, None,
                                       f"cannot be read as CSV: {str(exc).strip()}")]) from None
    lines, last = 0, b"\n"
    with traces.csv_path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            lines += block.count(b"\n")
            last = block[-1:]
    return head, max(0, lines + (0 if last == b"\n" else 1) - 1)
