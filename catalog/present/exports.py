"""The user-facing shortlist table and writing it to CSV, Excel or Parquet.

This is an edge of the package: figures leave SI here, converted with :func:`catalog.units.from_si`, and every
header says its unit as ``name [unit]``. A figure that could not be computed is an empty cell, never a stand-in
number.
"""

from __future__ import annotations

import os
from dataclasses import asdict
from pathlib import Path

import numpy as np
import pandas as pd

from catalog.analysis import diagnostics, ranking
from catalog.core.hazard import CAUTION
from catalog.errors import CatalogError
from catalog.present import labels
from catalog.present.files import atomic_write, neutralise_frame
from catalog.present.numbers import round_for_file, unit_label
from catalog.units import from_si

__all__ = ["FORMATS", "INTERVALS", "REQUIRED_COLUMNS", "flag_codes", "shortlist_table", "write_table"]

#: The columns every shortlist starts with, in this order.
REQUIRED_COLUMNS = (
    "rank", "catalyst_id", "tof [1/s]", "tof_low [1/s]", "tof_high [1/s]", "ea [kJ/mol]", "ea_low [kJ/mol]",
    "ea_high [kJ/mol]", "rate_enhancement", "n_trials", "flags",
)
#: Value column → its 95 % interval columns; each row's three numbers are rounded together (GUM 7.2.6).
INTERVALS = {
    "tof [1/s]": ("tof_low [1/s]", "tof_high [1/s]"),
    "ea [kJ/mol]": ("ea_low [kJ/mol]", "ea_high [kJ/mol]"),
    "rate_enhancement": ("rate_enhancement_low", "rate_enhancement_high"),
    "metric_value": ("metric_low", "metric_high"),
}
# Fixed decimal places: temperatures to 0.01 K (what a thermocouple reading defends, common practice, no source);
# probabilities from a few thousand Monte Carlo draws to 0.001 (binomial error about 0.008 at 4000 draws).
_DECIMALS = {"reference_temperature [degC]": 2, "p_top": 3}  # p_top: the P(top-k) column, whatever its k
#: File endings :func:`write_table` understands.
FORMATS = (".csv", ".xlsx", ".parquet")

# Excel column widths, in characters: wide enough for a header, never so wide a note hides the next column.
_MIN_WIDTH = 8
_MAX_WIDTH = 48


def _display(values, unit: str) -> np.ndarray:
    return from_si(np.asarray(values, dtype=float), unit)


def _t_range(t_min: float, t_max: float) -> str:
    """Temperatures measured, as '25.0–55.1' in °C; empty when unknown."""
    if not (np.isfinite(t_min) and np.isfinite(t_max)):
        return ""
    low, high = _display([t_min, t_max], "degC")
    return f"{low:.1f}–{high:.1f}"


def shortlist_table(ranked: pd.DataFrame, results, top_k: int, metric: str = "tof",
                    currency: str | None = None) -> pd.DataFrame:
    """The ranking as users read it: one row per ranked catalyst, best first, with units in the headers.

    Rows follow ``ranked`` (rank order; catalysts without a rank, e.g. excluded ones, come last as the ranking
    put them). The first columns are :data:`REQUIRED_COLUMNS`; TOF and its 95 % interval are at the reference
    temperature, ``rate_enhancement`` is the rate enhancement over the uncatalysed blank at that temperature. The
    extras follow: the flags by title, interval ends, rank interval and P(top-k) from the Monte Carlo ranking, the
    ranking metric and its value, Eyring parameters, normalised rates, TON, site basis, the rate laws chosen for
    its trials, temperature coverage, exclusion and the ranking's note, metal and support.

    Numbers carry only the digits their uncertainty defends: a value and its interval are rounded together
    (:data:`INTERVALS`, GUM 7.2.6), other figures keep four significant digits
    (:func:`catalog.present.numbers.round_for_file`).

    Parameters
    ----------
    ranked : DataFrame
        Output of ``catalog.analysis.ranking.rank``: indexed by catalyst_id with rank, value, value_low, value_high,
        rank_low, rank_high, p_top_k, pareto, excluded, demoted, note.
    results : catalog.analysis.results.Results
    top_k : int
        The k of P(top-k); names the column ``p_top{k}``.
    metric : str
        Name of the metric the ranking used (a key of ``catalog.analysis.ranking.METRICS`` or 'score');
        ``metric_value`` and its interval are in that metric's SI unit, named in ``metric_unit``.
    currency : str, optional
        Written for the neutral 'money' of price figures in ``metric_unit`` (e.g. 'EUR').

    Returns
    -------
    DataFrame
        Plain columns (no index). ``rank``, ``rank_low``, ``rank_high``, ``n_trials`` and ``n_temperatures`` are
        nullable integers; missing figures are NA / empty strings.
    """
    cat = results.catalysts.reindex(ranked.index)
    T_ref = results.settings.reference_temperature

    def col(name):
        return cat[name].to_numpy(float) if name in cat.columns else np.full(len(cat), np.nan)

    def count(values):
        return pd.array(pd.to_numeric(pd.Series(values), errors="coerce").round(), dtype="Int64")

    def text(name):
        return cat[name].fillna("").astype(str).to_numpy() if name in cat.columns else np.full(len(cat), "")

    out = pd.DataFrame({
        "rank": count(ranked["rank"].to_numpy(float)),
        "catalyst_id": ranked.index.astype(str).to_numpy(),
        "tof [1/s]": col("tof_ref"),
        "tof_low [1/s]": col("tof_ref_low"),
        "tof_high [1/s]": col("tof_ref_high"),
        "ea [kJ/mol]": _display(col("ea"), "kJ/mol"),
        "ea_low [kJ/mol]": _display(col("ea_low"), "kJ/mol"),
        "ea_high [kJ/mol]": _display(col("ea_high"), "kJ/mol"),
        "rate_enhancement": col("enhancement_ref"),
        "n_trials": count(col("n_trials")),
        "flags": text("flags"),
        "flag_titles": [labels.flags_text(cell, with_codes=False) for cell in text("flags")],
        "rate_enhancement_low": col("enhancement_ref_low"),
        "rate_enhancement_high": col("enhancement_ref_high"),
        "tof_extrapolated": cat["tof_ref_extrapolated"].astype("boolean").to_numpy()
        if "tof_ref_extrapolated" in cat.columns else pd.array([pd.NA] * len(cat), dtype="boolean"),
        "rank_low": count(ranked["rank_low"].to_numpy(float)),
        "rank_high": count(ranked["rank_high"].to_numpy(float)),
        f"p_top{top_k}": ranked["p_top_k"].to_numpy(float),
        "metric": metric,
        "metric_unit": unit_label(ranking.METRICS[metric].unit, currency) if metric in ranking.METRICS else "",
        "metric_value": ranked["value"].to_numpy(float),
        "metric_low": ranked["value_low"].to_numpy(float),
        "metric_high": ranked["value_high"].to_numpy(float),
        "pareto": ranked["pareto"].astype(bool).to_numpy(),
        "dh [kJ/mol]": _display(col("dh"), "kJ/mol"),
        "ds [J/(mol K)]": _display(col("ds"), "J/(mol*K)"),
        "rate_per_mass [mmol/(g h)]": _display(col("rate_per_mass_ref"), "mmol/(g*h)"),
        "rate_per_area [mmol/(m2 h)]": _display(col("rate_per_area_ref"), "mmol/(m^2*h)"),
        "ton_max": col("ton_max"),
        "site_basis": text("site_basis"),
        "models": text("models"),
        "n_temperatures": count(col("n_temperatures")),
        "t_range [degC]": [_t_range(a, b) for a, b in zip(col("t_min"), col("t_max"), strict=True)],
        "reference_temperature [degC]": float(_display(T_ref, "degC")),
        "excluded": ranked["excluded"].astype(bool).to_numpy(),
        "demoted": ranked["demoted"].astype(bool).to_numpy(),
        "note": ranked["note"].fillna("").astype(str).to_numpy(),
        "metal": text("metal"),
        "support": text("support"),
    })
    return round_for_file(out, intervals=INTERVALS, decimals={**_DECIMALS, f"p_top{top_k}": _DECIMALS["p_top"]})


def flag_codes(frame: pd.DataFrame) -> list[str]:
    """Sorted distinct codes in the table's semicolon-separated ``flags`` column (none without one)."""
    if "flags" not in frame.columns:
        return []
    codes = {c.strip() for cell in frame["flags"].fillna("").astype(str) for c in cell.split(";")}
    return sorted(c for c in codes if c)


def _cell(value):
    """A value openpyxl can store: NA and NaN become an empty cell, numpy scalars plain Python, and text loses the
    control characters the XLSX format cannot hold (openpyxl refuses them)."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return None
    if isinstance(value, str):
        from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE  # deferred with Workbook in _write_xlsx

        return ILLEGAL_CHARACTERS_RE.sub("\ufffd", value)
    return value.item() if isinstance(value, np.generic) else value


def _write_sheet(sheet, frame: pd.DataFrame) -> None:
    """Header row bold and frozen, values below, column widths from the longest entry (capped).

    Every text cell is stored as a string (type 's'), never as a formula, whatever it starts with.
    """
    from openpyxl.styles import Font  # deferred with Workbook in _write_xlsx
    from openpyxl.utils import get_column_letter

    frame = neutralise_frame(frame)
    sheet.append([str(c) for c in frame.columns])
    for row in frame.itertuples(index=False, name=None):
        sheet.append([_cell(v) for v in row])
    for line in sheet.iter_rows():
        for cell in line:
            if isinstance(cell.value, str):
                cell.data_type = "s"
    for cell in sheet[1]:
        cell.font = Font(bold=True)
    sheet.freeze_panes = "A2"
    for i, name in enumerate(frame.columns, start=1):
        longest = max([len(str(name))] + [len(f"{v:.6g}" if isinstance(v, float) else str(v))
                                           for v in frame.iloc[:, i - 1].dropna()])
        sheet.column_dimensions[get_column_letter(i)].width = min(max(longest + 2, _MIN_WIDTH), _MAX_WIDTH)


def _settings_rows(results) -> pd.DataFrame:
    # Flags may carry hazard screening (thermal-hazard and the like), so the caution travels with the workbook.
    from catalog import __version__  # deferred: a shortlist on screen does not show it

    rows = [("software version", __version__, ""), ("safety caution", CAUTION, "")]
    if results is not None:
        rows += [("data fingerprint", results.data_stamp, "data_stamp"),
                 ("analysis run key", results.run_key, "run_key")]
        names = list(asdict(results.settings))
        rows += [(words, value, name) for (words, value), name in zip(labels.settings_rows(results.settings), names,
                                                                       strict=True)]
    return pd.DataFrame(rows, columns=["setting", "value", "name"])


def _flag_rows(frame: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for code in flag_codes(frame):
        title, explanation = diagnostics.FLAG_CODES.get(code, ("", ""))
        rows.append((title, code, explanation))
    return pd.DataFrame(rows, columns=["title", "code", "explanation"])


def _write_xlsx(frame: pd.DataFrame, path: Path, results) -> None:
    from openpyxl import Workbook  # deferred: ~0.1 s to import, and only an .xlsx file needs it

    book = Workbook()
    sheet = book.active
    sheet.title = "table"
    _write_sheet(sheet, frame)
    _write_sheet(book.create_sheet("flags"), _flag_rows(frame))
    _write_sheet(book.create_sheet("settings"), _settings_rows(results))
    book.save(path)


def write_table(frame: pd.DataFrame, path: str | os.PathLike, results=None) -> Path:
    """Write a table; the format follows the file ending. The file appears whole or not at all
    (:func:`catalog.present.files.atomic_write`).

    - ``.csv``: UTF-8, no index, empty cells for missing values, RFC 4180 quoting and CRLF record ends.
    - ``.xlsx``: sheet 'table' (bold frozen header, fitted column widths), sheet 'flags' (title, code and
      explanation of every code in the ``flags`` column) and sheet 'settings' (software version, the safety caution
      and, when ``results`` is given, the analysis settings in plain words and display units, the data fingerprint
      and the run key).
    - ``.parquet``: via pyarrow, column types and text kept exactly (a typed data file, not a spreadsheet).

    In CSV and XLSX, text starting with ``= + - @``, a tab or a carriage return is prefixed with a single quote
    (:func:`catalog.present.files.neutralise`), so no catalyst id or note runs as a spreadsheet formula.

    Parameters
    ----------
    frame : DataFrame
        Written without its index.
    path : str or PathLike
    results : catalog.analysis.results.Results, optional
        Source of the settings sheet of an Excel file.

    Returns
    -------
    Path

    Raises
    ------
    CatalogError
        Unknown file ending, or the file cannot be written (missing folder, disk full, no permission); an existing
        file at ``path`` is then left unchanged.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in FORMATS:
        raise CatalogError(f"cannot write '{path.name}': use a file ending in {', '.join(FORMATS)}")
    if suffix == ".csv":
        safe = neutralise_frame(frame)
        # CRLF record ends as RFC 4180 asks; it also makes the writer quote a field holding a bare CR or LF, which
        # a "\n" terminator would leave unquoted and so split the row.
        return atomic_write(path, lambda temp: safe.to_csv(temp, index=False, encoding="utf-8", lineterminator="\r\n"))
    if suffix == ".parquet":
        return atomic_write(path, lambda temp: frame.to_parquet(temp, index=False, engine="pyarrow"))
    return atomic_write(path, lambda temp: _write_xlsx(frame, temp, results))
