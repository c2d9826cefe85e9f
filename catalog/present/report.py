"""One self-contained HTML report of a screening campaign that opens offline.

The page carries its own copy of the Vega, Vega-Lite and Vega-Embed JavaScript (bundled by vl-convert), once, in the
head; every chart is an inline Vega-Lite spec drawn by that one copy. Nothing is fetched from the network, so the
file can be mailed, archived or opened on an instrument PC without internet access.

The page is the jinja2 template ``templates/report.html.j2`` with autoescape on, so every id, note and message is
text. Chart specs travel as JSON in ``<script type="application/json">`` elements with ``<``, ``>``, ``&`` and the
U+2028/U+2029 separators escaped (:func:`script_json`): no catalyst id, however hostile (``</script>``, ``<!--``),
can end the element or change the page around it.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import os
from datetime import datetime, timezone
from pathlib import Path

import altair as alt
import jinja2
import numpy as np
import pandas as pd
import vl_convert

from catalog import __version__, store
from catalog.analysis import diagnostics, ranking
from catalog.analysis.results import Results, get_results
from catalog.analysis.settings import Settings
from catalog.core.hazard import CAUTION
from catalog.errors import CatalogError
from catalog.present import charts, exports, labels, trace_charts, tradeoff
from catalog.present.files import atomic_write
from catalog.present.numbers import MISSING, format_interval, format_number, unit_label
from catalog.units import from_si

__all__ = ["data_hash", "render_report", "script_json", "write_report"]

# Templates ship as package data (pyproject [tool.setuptools.package-data]); PackageLoader finds them in a wheel.
_TEMPLATES = jinja2.Environment(loader=jinja2.PackageLoader("catalog.present", "templates"),
                                autoescape=True, undefined=jinja2.StrictUndefined, keep_trailing_newline=True)

#: Flag messages listed per code before the rest are summarised as a count.
MAX_MESSAGES = 40

# Vega-Embed options: an export menu for PNG/SVG, but no links out to an online editor, because the file is meant
# to stay offline.
_EMBED_OPTIONS = {"actions": {"export": True, "source": False, "compiled": False, "editor": False}}

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2rem auto; max-width: 72rem; padding: 0 1rem; color: #222; }
h1 { margin-bottom: 0.2rem; }
table { border-collapse: collapse; font-size: 0.85rem; margin: 0.5rem 0 1rem; }
th, td { border-bottom: 1px solid #ddd; padding: 0.25rem 0.5rem; text-align: left; vertical-align: top; }
th { background: #f3f3f3; }
.wide { overflow-x: auto; }
.caution { border: 3px solid #b00020; background: #fff4f4; padding: 0.8rem 1rem; margin: 1rem 0; }
.caution strong { color: #b00020; }
.meta td:first-child { font-weight: bold; }
.chart { margin: 1rem 0 2rem; }
.small { font-size: 0.85rem; color: #555; }
.code { font-size: 0.75rem; color: #666; }
tr.shortlisted td { background: #eef6ee; }
"""

_METHODS = (
    ("From signal to amount",
     "Each reading of a trace is converted to moles of product: gas volumes with the ideal-gas law (less the "
     "water vapour pressure when the gas is collected over water), headspace pressures with the ideal-gas law at "
     "the trial temperature, mass loss divided by the molar mass of the escaping gas, and concentrations times the "
     "liquid volume. The first reading of each trial is the zero."),
    ("Rate laws",
     "Zero-, first- and second-order integrated rate laws, each with a fitted starting offset, are fitted to every "
     "trace by least squares; where the stoichiometric maximum is known, laws with the plateau held at it compete "
     "too, and a fit whose plateau exceeds it by more than 1.96 of its own standard errors is rejected. The law "
     "with the lowest small-sample Akaike criterion (AICc) is kept, and the standard error of the initial rate r0 "
     "includes the Akaike-weighted spread of the candidates' rates. A trace that falls after its maximum (a leak) "
     "is cut there and flagged; a slow start (induction) is flagged with its largest local rate. When no law can "
     "be fitted the initial slope is used."),
    ("Turnover frequency",
     "The initial rate per mole of limiting reactant, less the blank rate at the same temperature, is divided by "
     "the moles of active sites of the catalyst charge. Sites come from a measured site density when one is given, "
     "otherwise from metal loading and dispersion; the site basis column says which. TON is product formed per "
     "site by the end of a trial."),
    ("Arrhenius and Eyring",
     "ln TOF is fitted against 1/T by weighted least squares, the weights from each trial's standard error. "
     "Replicate scatter beyond those errors is an extra variance shared by every trial (Paule-Mandel), and the "
     "slope is never reported more certain than the unweighted fit. 95 % intervals use the Student t quantile on "
     "n − 2 degrees of freedom. The Eyring fit of ln(TOF/T) gives ΔH‡ and ΔS‡ the same way. TOF at the reference "
     "temperature is read off the fitted line with the confidence interval of the line; it is marked as "
     "extrapolated outside the measured range."),
    ("Blank model",
     "An Arrhenius fit of the blank trials detected above their noise (r0 more than 1.96 standard errors above "
     "zero), each weighted by its own standard error on the log scale, with the Birge ratio widening the interval "
     "when the blanks scatter more than those errors explain. A blank not detected above noise gives only an upper "
     "limit; where it bounds the blank rate, the rate enhancement over the uncatalysed blank is reported as a "
     "lower bound. The enhancement is a catalyst's rate over the blank rate at the same temperature, with the "
     "uncertainty of both."),
    ("Ranking",
     "Catalysts are ranked on the chosen figure at the reference temperature. Monte Carlo draws from each "
     "catalyst's interval give a rank interval and the probability of landing in the top k; flagged catalysts "
     "can be excluded or demoted. The trade-off plot sets activity against price (or, without prices, stability "
     "or rate enhancement); its Pareto set holds the catalysts no other catalyst beats on both. A low apparent "
     "Ea is not a merit: a transport-limited rate shows one, so such catalysts are marked on the plot."),
    ("Numbers",
     "Each value is rounded with its 95 % interval to two significant digits of the shorter half-width, as "
     "JCGM 100:2008 (GUM) 7.2.6 recommends; figures without an interval keep three significant digits on the "
     "page and four in the exported files."),
)


def data_hash(catalysts: pd.DataFrame, trials: pd.DataFrame, points: pd.DataFrame) -> str:
    """SHA-256 over the campaign data, independent of row order and of how the database file is laid out.

    Catalysts and trials are sorted by id and hashed as CSV text (full float precision); trace points are sorted
    by trial and time and hashed as their ids and IEEE-754 bytes, which is quick for millions of readings.

    Parameters
    ----------
    catalysts, trials, points : DataFrame
        As returned by :func:`catalog.store.load_campaign` (excluded records are not part of the analysis, so not
        part of the hash).

    Returns
    -------
    str
        64 hex digits.
    """
    digest = hashlib.sha256()
    for name, frame, key in (("catalysts", catalysts, ["catalyst_id"]), ("trials", trials, ["trial_id"])):
        ordered = frame.sort_values(key, kind="stable").reset_index(drop=True)
        digest.update(f"#{name}\n".encode())
        digest.update(ordered.to_csv(index=False, lineterminator="\n", float_format="%.17g").encode())
    ordered = points.sort_values(["trial_id", "t"], kind="stable")
    digest.update(b"#trace_points\n")
    digest.update("\n".join(ordered["trial_id"].astype(str)).encode())
    digest.update(ordered["t"].to_numpy(np.float64).tobytes())
    digest.update(ordered["value"].to_numpy(np.float64).tobytes())
    return digest.hexdigest()


_SCRIPT_ESCAPES = {"<": "\\u003c", ">": "\\u003e", "&": "\\u0026", "\u2028": "\\u2028", "\u2029": "\\u2029"}


def script_json(value) -> str:
    """JSON text that is safe inside an HTML ``<script>`` element.

    ``<``, ``>`` and ``&`` become ``\\u003c``, ``\\u003e``, ``\\u0026`` (so neither ``</script>`` nor ``<!--``
    can appear), and U+2028/U+2029 become escapes (older JavaScript parsers end a line there). JSON.parse reads the
    escapes back as the same characters, so the data are unchanged.
    """
    text = json.dumps(value, ensure_ascii=False, allow_nan=False)
    return "".join(_SCRIPT_ESCAPES.get(ch, ch) for ch in text)


def _vegalite_version() -> str:
    # vl-convert names Vega-Lite versions by major and minor only.
    major, minor = alt.VEGALITE_VERSION.split(".")[:2]
    return f"{major}.{minor}"


def _text(value) -> str:
    """A table cell: missing values empty, floats as stored (already rounded by the shortlist), text as is."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return ""
    if isinstance(value, float | np.floating):
        return f"{float(value):.10g}"
    return str(value)


def _frame_rows(frame: pd.DataFrame) -> dict:
    return {"columns": [str(c) for c in frame.columns],
            "rows": [[_text(v) for v in row] for row in frame.itertuples(index=False, name=None)]}


def _ranking_rows(table: pd.DataFrame, top_k: int, t_ref_c: float) -> dict:
    """The first table of the report: figures with their intervals, flags by title with the code beside."""
    columns = ["rank", "catalyst", f"TOF at {t_ref_c:.1f} °C [{unit_label('1/s')}] (95 %)",
               "apparent Ea [kJ/mol] (95 %)", f"{labels.ENHANCEMENT_SHORT} (95 %)", "trials", "flags"]
    rows = []
    for row in table.to_dict("records"):
        rank = row["rank"]
        rows.append({
            "shortlisted": not pd.isna(rank) and rank <= top_k,
            "cells": ["" if pd.isna(rank) else str(int(rank)), row["catalyst_id"],
                      format_interval(row["tof [1/s]"], row["tof_low [1/s]"], row["tof_high [1/s]"]),
                      format_interval(row["ea [kJ/mol]"], row["ea_low [kJ/mol]"], row["ea_high [kJ/mol]"]),
                      format_interval(row["rate_enhancement"], row["rate_enhancement_low"],
                                      row["rate_enhancement_high"]),
                      "" if pd.isna(row["n_trials"]) else str(int(row["n_trials"]))],
            "flags": [(labels.flag_title(c), c) for c in str(row["flags"] or "").split(";") if c]})
    return {"columns": columns, "rows": rows}


def _flag_groups(flags: pd.DataFrame) -> list[dict]:
    """Each code present: its title and explanation, then the records it was raised for with their messages."""
    groups = []
    for code, group in flags.groupby("code", sort=True):
        title, explanation = diagnostics.FLAG_CODES.get(code, (code, ""))
        # The caution is shown in full at the top and in the hazard section; repeating it in every message
        # would bury the messages.
        items = [{"scope": row.scope, "record": row.record_id, "severity": row.severity,
                  "message": str(row.message).replace(CAUTION, "(See the safety caution.)")}
                 for row in group.head(MAX_MESSAGES).itertuples(index=False)]
        groups.append({"title": title, "code": code, "count": len(group), "records": items,
                       "explanation": explanation.replace(CAUTION, "(See the safety caution.)"),
                       "more": max(len(group) - MAX_MESSAGES, 0)})
    return groups


def _hazard_rows(results: Results, catalyst_ids: list[str]) -> dict:
    """Largest screening estimates over each shortlisted catalyst's trials; empty cells where none was possible."""
    rows = []
    for cid in catalyst_ids:
        group = results.trials[results.trials["catalyst_id"] == cid]
        rise = group["adiabatic_rise"].to_numpy(float)
        burst = group["pressure_rise_max"].to_numpy(float)
        bands = sorted(set(group["hazard_band"].dropna().astype(str)))
        rows.append([cid, format_number(np.nanmax(rise)) if np.isfinite(rise).any() else "", ", ".join(bands),
                     format_number(from_si(np.nanmax(burst), "kPa")) if np.isfinite(burst).any() else ""])
    return {"columns": ["catalyst", "largest adiabatic temperature rise [K]", "severity bands",
                        "largest closed-vessel pressure rise [kPa]"], "rows": rows}


def _figure_values(catalysts: pd.DataFrame, key: str) -> np.ndarray:
    """A ranking figure per catalyst in its display unit (labels.FIGURES); price figures stay in the currency."""
    values = ranking.metric_values(catalysts, key)["value"].to_numpy(float)
    unit = labels.FIGURES[key][2]
    return values if unit is None or "money" in unit else from_si(values, unit)


def _trade_off_figure(catalysts: pd.DataFrame, metric: str, currency: str | None):
    """Activity against its cost (price, else stability, else rate enhancement), with the Pareto set of those two
    figures and every transport-flagged catalyst marked; None when fewer than two catalysts have both."""
    activity, counterpart = tradeoff.trade_off_axes(catalysts, metric)
    frame = pd.DataFrame({"activity": _figure_values(catalysts, activity),
                          "counterpart": _figure_values(catalysts, counterpart)}, index=catalysts.index)
    if (np.isfinite(frame["activity"]) & np.isfinite(frame["counterpart"])).sum() < 2:
        return None, ""
    front = ranking.pareto_front(catalysts, activity, counterpart)
    chart = charts.pareto_chart(frame, "counterpart", "activity", front.index[front.to_numpy(bool)],
                                x_title=labels.figure_name(counterpart, short=True, currency=currency),
                                y_title=labels.figure_name(activity, short=True, currency=currency),
                                warnings=tradeoff.transport_warnings(catalysts), log_x=True, log_y=True)
    words = (f"{labels.FIGURES[activity][0]} against {labels.FIGURES[counterpart][0]}; the Pareto set (filled, "
             "joined) is the catalysts no other catalyst beats on both. Triangles marked ⚠ carry a transport "
             "warning: their rate may measure mass transfer, not the catalyst (hover for the flag).")
    return chart, words


def render_report(results: Results, ranked: pd.DataFrame, top_k: int, points: pd.DataFrame, db_label: str,
                  content_hash: str, metric: str = "tof", created: datetime | None = None,
                  currency: str | None = None) -> str:
    """The report page as one HTML string (pure: everything it shows is passed in).

    Parameters
    ----------
    results : Results
    ranked : DataFrame
        Output of ``catalog.analysis.ranking.rank`` for ``results.catalysts``.
    top_k : int
        Size of the shortlist; its catalysts get trace plots.
    points : DataFrame
        Long-form trace readings (trial_id, t, value; SI) for the trace plots.
    db_label : str
        Database path as shown on the page.
    content_hash : str
        :func:`data_hash` of the campaign data.
    metric : str
        Ranking metric, named in plain words above the table.
    created : datetime, optional
        Time stamp printed on the page (now, UTC, when None).
    currency : str, optional
        Shown for prices (e.g. 'EUR').

    Returns
    -------
    str
    """
    created = created or datetime.now(timezone.utc)
    settings = results.settings
    table = exports.shortlist_table(ranked, results, top_k, metric=metric, currency=currency)
    rank_of = ranked["rank"].to_numpy(float)
    ranked_ids = [cid for cid, r in zip(ranked.index, rank_of, strict=True) if np.isfinite(r)]
    shortlist = [cid for cid, r in zip(ranked.index, rank_of, strict=True) if np.isfinite(r) and r <= top_k]
    t_ref_c = float(from_si(settings.reference_temperature, "degC"))
    numbers = itertools.count()

    def chart(chart_obj, caption):
        return {"id": f"chart-{next(numbers)}", "caption": caption, "spec": script_json(chart_obj.to_dict())}

    figures = []
    if ranked_ids:
        figures.append(chart(charts.tof_bar_chart(results.catalysts, settings.reference_temperature, ranked_ids),
                             f"TOF at {t_ref_c:.1f} °C, rank order; whiskers are 95 % intervals, pale bars are "
                             "extrapolated beyond the measured temperatures."))
    if shortlist:
        figures.append(chart(charts.arrhenius_chart(results, shortlist),
                             "Arrhenius plots of the shortlisted catalysts: filled points are in the fit, open "
                             "points are trials kept out of it; bars are 95 % intervals of single trials, bands "
                             "the 95 % confidence interval of the fitted line."))
        trade_off, words = _trade_off_figure(results.catalysts, metric, currency)
        if trade_off is not None:
            figures.append(chart(trade_off, words))
        enhancement_ids = [c for c in ranked_ids if np.isfinite(results.catalysts.loc[c, "enhancement_ref"])]
        if enhancement_ids:
            figures.append(chart(charts.enhancement_chart(results.catalysts, enhancement_ids,
                                                          threshold=settings.min_enhancement),
                                 f"{labels.ENHANCEMENT.capitalize()} at the reference temperature; dashed line: "
                                 "the smallest the diagnostics accept without a flag."))
    traces = []
    for cid in shortlist:
        trial_ids = list(results.trials.index[results.trials["catalyst_id"] == cid])[:trace_charts.MAX_TRACES]
        both = alt.hconcat(trace_charts.trace_chart(results.trials, points, trial_ids, title=f"{cid}: conversion"),
                           trace_charts.residual_chart(results.trials, points, trial_ids, title=f"{cid}: residuals"))
        traces.append(chart(both, f"{cid}: readings (thinned for display) with the fitted rate law of each trial, "
                                  "and the residuals of those fits."))

    meta = [("created", created.strftime("%Y-%m-%d %H:%M UTC")), ("software", f"catalog {__version__}"),
            ("database", db_label), ("data fingerprint (content hash)", results.data_stamp),
            ("data SHA-256 (every value)", content_hash), ("analysis run key", results.run_key),
            ("catalysts / trials analysed", f"{len(results.catalysts)} / {len(results.trials)}")]
    # Every catalyst flag (their codes appear in the ranking table) and the trial flags of the shortlist.
    shortlist_trials = set(results.trials.index[results.trials["catalyst_id"].isin(shortlist)])
    flags = results.flags
    relevant = flags[(flags["scope"] == "catalyst") | flags["record_id"].isin(shortlist_trials)]
    blank = results.blank
    blank_ea = [from_si(blank[k], "kJ/mol") for k in ("ea", "ea_low", "ea_high")] if blank else []
    blank_text = (f"No blank trials at two or more temperatures: no {labels.ENHANCEMENT}." if not blank else
                  f"Blank model: Ea = {format_interval(*blank_ea, 'kJ/mol')} (95 %) from {blank['n']} trials "
                  f"between {format_number(from_si(blank['t_min'], 'degC'))} and "
                  f"{format_number(from_si(blank['t_max'], 'degC'), 'degC')}.")
    ranking_intro = (f"Ranked on {labels.FIGURES.get(metric, (metric,))[0]} ({t_ref_c:.1f} °C); intervals "
                     f"are 95 %; the shortlist (shaded) is the top {top_k}. {MISSING} or an empty cell is a figure "
                     "that could not be computed from the data. Flags are shown by title; the small code beside "
                     "each is what --exclude and --demote take.")
    template = _TEMPLATES.get_template("report.html.j2")
    return template.render(
        style=_STYLE, bundle=vl_convert.javascript_bundle(vl_version=_vegalite_version()),
        created_date=created.strftime("%Y-%m-%d"), version=__version__, caution=CAUTION, meta=meta,
        settings=labels.settings_rows(settings), ranking_intro=ranking_intro,
        ranking=_ranking_rows(table, top_k, t_ref_c), full=_frame_rows(table), blank_text=blank_text,
        figures=figures, traces=traces, hazards=_hazard_rows(results, shortlist),
        flag_groups=_flag_groups(relevant), methods=_METHODS, embed_options=script_json(_EMBED_OPTIONS))


def write_report(db: str | os.PathLike | None, path: str | os.PathLike, settings: Settings,
                 ranked: pd.DataFrame | None = None, top_k: int = 3, metric: str = "tof",
                 currency: str | None = None, results: Results | None = None) -> Path:
    """Analyse (or read the cached analysis of) the campaign in ``db`` and write the report to ``path``.

    The page is written to a temporary file in the same folder and renamed into place, so a full disk or a crash
    never leaves a truncated report.

    Parameters
    ----------
    db : str, PathLike or None
        The campaign database.
    path : str or PathLike
        Output ``.html`` file.
    settings : Settings
        Used when ``results`` is not given.
    ranked : DataFrame, optional
        A ranking already made (e.g. with the user's weights and exclusions); by default
        ``ranking.rank`` on ``metric`` with its Pareto column on :func:`catalog.present.tradeoff.trade_off_axes`.
    top_k : int
        Shortlist size.
    metric : str
        Ranking metric when ``ranked`` is not given.
    currency : str, optional
        Shown for prices.
    results : Results, optional
        Figures the caller already holds (the CLI has them after ranking); read or computed here otherwise, so a
        read-only database is not analysed twice.

    Returns
    -------
    Path

    Raises
    ------
    CatalogError
        Wrong file ending or the file cannot be written (and whatever the store raises for the database).
    """
    path = Path(path)
    if path.suffix.lower() not in (".html", ".htm"):
        raise CatalogError(f"the report is an HTML page: '{path.name}' should end in .html")
    results = results if results is not None else get_results(db, settings)
    if ranked is None:
        trade_off = None if metric == "score" else tradeoff.trade_off_axes(results.catalysts, metric)
        ranked = ranking.rank(results.catalysts, metric=metric, top_k=top_k, pareto_metrics=trade_off)
    catalysts, trials, points = store.load_campaign(db)
    page = render_report(results, ranked, top_k, points, str(store.resolve_path(db)),
                         data_hash(catalysts, trials, points), metric=metric, currency=currency)
    return atomic_write(path, lambda temp: temp.write_text(page, encoding="utf-8"))
