"""Text for a terminal: the rank table in 100 columns and long problem lists condensed.

Pure: tables and messages in, text out; the CLI prints it. Wide columns stay in the exported files, where a
spreadsheet can show them; the screen keeps what a chemist reads first.
"""

from __future__ import annotations

import re
from string import ascii_lowercase

import pandas as pd

from catalog.present import labels
from catalog.present.numbers import format_interval
from catalog.units import from_si

__all__ = ["SCREEN_WIDTH", "condense", "rank_screen"]

#: Terminal width the rank table is laid out for.
SCREEN_WIDTH = 100
#: Copies of one message shown before the rest are counted.
KEEP_COPIES = 3
# Longest catalyst id shown in full; longer ids are cut with an ellipsis (the files carry them whole).
_ID_WIDTH = 18
_GAP = "  "


def _cut(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"


def _metric_cells(table: pd.DataFrame, metric: str) -> list[str]:
    """The ranking figure in its display unit (price figures stay in the currency)."""
    unit = labels.FIGURES.get(metric, (None, None, None))[2]
    trio = [table[c].to_numpy(float) for c in ("metric_value", "metric_low", "metric_high")]
    if unit and "money" not in unit:
        trio = [from_si(values, unit) for values in trio]
    return [format_interval(v, lo, hi) for v, lo, hi in zip(*trio, strict=True)]


def rank_screen(table: pd.DataFrame, top_k: int, metric: str = "tof", t_ref_c: float | None = None,
                width: int = SCREEN_WIDTH, currency: str | None = None) -> str:
    """The shortlist as a fixed-width table that fits ``width`` columns, then a legend of the flags.

    Columns: rank, catalyst, TOF, apparent Ea and rate enhancement each with its 95 % interval rounded together
    (GUM 7.2.6), the 95 % rank interval, P(top k) and the flags as letters explained below the table. Ranking on
    another figure shows that figure in place of Ea. When the table is too wide the gaps narrow, then the rank
    interval and then P(top k) are left out (the files keep them).

    Parameters
    ----------
    table : DataFrame
        :func:`catalog.present.exports.shortlist_table`.
    top_k : int
    metric : str
    t_ref_c : float, optional
        Reference temperature in °C, for the TOF header.
    width : int
    currency : str, optional
    """
    codes = sorted({c for cell in table["flags"].fillna("") for c in str(cell).split(";") if c})
    letter = {code: _flag_mark(i) for i, code in enumerate(codes)}
    at = f" at {t_ref_c:.1f} °C" if t_ref_c is not None else ""
    columns: dict[str, list[str]] = {
        "#": ["" if pd.isna(r) else str(int(r)) for r in table["rank"]],
        "catalyst": [_cut(str(c), _ID_WIDTH) for c in table["catalyst_id"]],
        f"TOF{at} [s⁻¹]": [format_interval(v, lo, hi) for v, lo, hi in
                           zip(table["tof [1/s]"], table["tof_low [1/s]"], table["tof_high [1/s]"], strict=True)],
    }
    if metric in ("tof", "ea", "enhancement"):
        columns["Ea [kJ/mol]"] = [format_interval(v, lo, hi) for v, lo, hi in zip(
            table["ea [kJ/mol]"], table["ea_low [kJ/mol]"], table["ea_high [kJ/mol]"], strict=True)]
    else:
        columns[labels.figure_name(metric, short=True, currency=currency)] = _metric_cells(table, metric)
    columns[labels.ENHANCEMENT_SHORT] = [format_interval(v, lo, hi) for v, lo, hi in zip(
        table["rate_enhancement"], table["rate_enhancement_low"], table["rate_enhancement_high"], strict=True)]
    columns["ranks"] = ["" if pd.isna(lo) else f"{int(lo)}–{int(hi)}"
                        for lo, hi in zip(table["rank_low"], table["rank_high"], strict=True)]
    columns[f"P(top{top_k})"] = [_probability(p) for p in table[f"p_top{top_k}"]]
    columns["flags"] = [" ".join(letter[c] for c in str(cell).split(";") if c) for cell in table["flags"].fillna("")]
    gap = _GAP
    for optional in (None, "ranks", f"P(top{top_k})"):
        if optional is not None:
            del columns[optional]
        gap = next((g for g in (_GAP, " ") if _width(columns, g) <= width), " ")
        if _width(columns, gap) <= width:
            break
    lines = [_line(columns, None, gap), *(_line(columns, i, gap) for i in range(len(table))), ""]
    if "ranks" in columns:
        lines.append("ranks: 95 % interval of the rank over the Monte Carlo draws")
    if codes:
        lines.append("flags (warnings, never hidden):")
        lines += [_cut(f"  {letter[c]}  {labels.flag_title(c)} ({c})", width) for c in codes]
    return "\n".join(lines)


def _probability(p) -> str:
    """P(top k) to two decimals; a chance that is not zero never shows as 0.00."""
    if pd.isna(p):
        return ""
    return "<0.01" if 0 < p < 0.005 else f"{p:.2f}"


def _flag_mark(i: int) -> str:
    return ascii_lowercase[i] if i < len(ascii_lowercase) else f"z{i - len(ascii_lowercase) + 1}"


def _widths(columns: dict[str, list[str]]) -> dict[str, int]:
    return {name: max([len(name), *map(len, cells)]) for name, cells in columns.items()}


def _width(columns: dict[str, list[str]], gap: str) -> int:
    return sum(_widths(columns).values()) + len(gap) * (len(columns) - 1)


def _line(columns: dict[str, list[str]], row: int | None, gap: str) -> str:
    widths = _widths(columns)
    cells = [name if row is None else columns[name][row] for name in columns]
    return gap.join(c.ljust(widths[n]) for c, n in zip(cells, columns, strict=True)).rstrip()


# ------------------------------------------------------------------------------------------------- messages

_LOCATED = re.compile(r"^(?P<indent>\s*)(?P<file>[^,]+), row (?P<row>\d+), column '(?P<column>[^']+)': (?P<text>.*)$")
# What differs between copies of one message: quoted values and numbers.
_VARIABLE = re.compile(r"'[^']*'|-?\d+(?:\.\d+)?(?:e-?\d+)?")


def condense(message: str, keep: int = KEEP_COPIES) -> str:
    """A long problem list made readable: at most ``keep`` copies of each kind of message, then a count.

    Two rules, applied to lines of the form ``FILE, row N, column 'C': text`` (other lines pass unchanged):

    - a refused header (row 1) hides the row problems of that column in that file, which follow from it;
    - copies of one message (same file and column, same text once quoted values and numbers are blanked) after
      the first ``keep`` become one line "… and N more like this (rows a–b)".
    """
    lines = message.splitlines()
    parsed = [_LOCATED.match(line) for line in lines]
    refused = {(m["file"], m["column"]) for m in parsed if m and m["row"] == "1"}
    follow_on: dict[tuple[str, str], int] = {}
    kept: list[tuple[str, object]] = []  # (line, key or None)
    counts: dict[object, list[int]] = {}
    for line, m in zip(lines, parsed, strict=True):
        if m is None:
            kept.append((line, None))
            continue
        where = (m["file"], m["column"])
        if where in refused and m["row"] != "1":
            follow_on[where] = follow_on.get(where, 0) + 1
            continue
        key = (*where, _VARIABLE.sub("…", m["text"]))
        rows = counts.setdefault(key, [])
        rows.append(int(m["row"]))
        if len(rows) <= keep:
            kept.append((line, key))
    out = []
    last_of = {key: i for i, (_, key) in enumerate(kept) if key is not None}
    for i, (line, key) in enumerate(kept):
        out.append(line)
        m = _LOCATED.match(line)
        if m and m["row"] == "1" and (m["file"], m["column"]) in follow_on:
            n = follow_on[(m["file"], m["column"])]
            out.append(f"{m['indent']}  ({n} follow-on problem(s) in rows of this column left out: fix the header "
                       "first)")
        if key is not None and last_of[key] == i and len(counts[key]) > keep:
            rest = counts[key][keep:]
            indent = _LOCATED.match(line)["indent"]
            out.append(f"{indent}… and {len(rest)} more like this (rows {min(rest)}–{max(rest)})")
    return "\n".join(out)
