"""One self-contained HTML report of a screening campaign that opens offline.

The page carries its own copy of the Vega, Vega-Lite and Vega-Embed JavaScript (bundled by vl-convert), once, in the
head; every chart is an inline Vega-Lite spec drawn by that one copy. Nothing is fetched from the network, so the
file can be mailed, archived or opened on an instrument PC without internet access.
"""

from __future__ import annotations

import hashlib
import html
import itertools
import json
import os
from dataclasses import asdict
from datetime import datetime, timezone
from pathlib import Path

import altair as alt
import numpy as np
import pandas as pd
import vl_convert

from catalog import __version__, store
from catalog.analysis import diagnostics, ranking
from catalog.analysis.results import Results, get_results
from catalog.analysis.settings import Settings
from catalog.core.hazard import CAUTION
from catalog.errors import CatalogError
from catalog.present import charts, exports
from catalog.units import from_si

__all__ = ["data_hash", "render_report", "write_report"]

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
"""

_METHODS = (
    ("From signal to amount",
     "Each reading of a trace is converted to moles of product: gas volumes with the ideal-gas law (less the "
     "water vapour pressure when the gas is collected over water), headspace pressures with the ideal-gas law at "
     "the trial temperature, mass loss divided by the molar mass of the escaping gas, and concentrations times the "
     "liquid volume. The first reading of each trial is the zero."),
    ("Rate laws",
     "Zero-, first- and second-order integrated rate laws, each with a fitted starting offset, are fitted to every "
     "trace by least squares. The law with the lowest Akaike information criterion (AIC) is kept; when none can "
     "be fitted the initial slope is used. The initial rate r0 is the slope of the chosen curve at t = 0."),
    ("Turnover frequency",
     "The initial rate per mole of limiting reactant, less the blank rate at the same temperature, is divided by "
     "the moles of active sites of the catalyst charge. Sites come from a measured site density when one is given, "
     "otherwise from metal loading and dispersion; the site basis column says which. TON is product formed per "
     "site by the end of a trial."),
    ("Arrhenius and Eyring",
     "ln TOF is fitted against 1/T by weighted least squares, the weights from each trial's standard error. When "
     "the scatter exceeds what those errors explain, the parameter covariance is widened by the squared Birge "
     "ratio (never narrowed). 95 % intervals use the Student t quantile on n − 2 degrees of freedom. The Eyring "
     "fit of ln(TOF/T) gives ΔH‡ and ΔS‡ the same way. TOF at the reference temperature is read off the fitted "
     "line with the confidence interval of the line; it is marked as extrapolated outside the measured range."),
    ("Blank model",
     "The initial rates of the uncatalysed (blank) trials are fitted with their own Arrhenius line. The "
     "enhancement of a catalyst is its rate over the blank rate at the same temperature, with the uncertainty of "
     "both."),
    ("Ranking",
     "Catalysts are ranked on the chosen figure at the reference temperature. Monte Carlo draws from each "
     "catalyst's interval give a rank interval and the probability of landing in the top k; flagged catalysts "
     "can be excluded or demoted. The Pareto set holds the catalysts no other catalyst beats on every figure "
     "compared."),
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


def _e(text) -> str:
    return html.escape(str(text))


def _table(frame: pd.DataFrame) -> str:
    """An HTML table with compact numbers and empty cells for missing values (pandas escapes the text)."""
    return frame.to_html(index=False, na_rep="", border=0, float_format=lambda v: f"{v:.4g}")


def _vegalite_version() -> str:
    # vl-convert names Vega-Lite versions by major and minor only.
    major, minor = alt.VEGALITE_VERSION.split(".")[:2]
    return f"{major}.{minor}"


def _chart_block(chart, index: int, caption: str) -> str:
    """A placeholder div, its caption and the script that draws the spec into it with the page's Vega-Embed."""
    spec = json.dumps(chart.to_dict()).replace("</", "<\\/")
    div = f"chart-{index}"
    return (f'<figure class="chart"><div id="{div}"></div><figcaption class="small">{_e(caption)}</figcaption>'
            f'</figure>\n<script type="text/javascript">vegaEmbed("#{div}", {spec}, '
            f"{json.dumps(_EMBED_OPTIONS)}).catch(console.error);</script>")


def _settings_table(settings: Settings) -> pd.DataFrame:
    # Text from the start: a frame of mixed ints and floats would print the ints as floats.
    rows = [(name, str(value)) for name, value in asdict(settings).items()]
    rows.insert(1, ("reference_temperature [degC]", f"{float(from_si(settings.reference_temperature, 'degC')):.2f}"))
    return pd.DataFrame(rows, columns=["setting", "value"])


def _flag_section(flags: pd.DataFrame) -> str:
    """Each code present: its title and explanation, then the records it was raised for with their messages."""
    if flags.empty:
        return "<p>No flags were raised.</p>"
    parts = []
    for code, group in flags.groupby("code", sort=True):
        title, explanation = diagnostics.FLAG_CODES.get(code, (code, ""))
        # The caution is shown in full at the top and in the hazard section; repeating it in every message
        # would bury the messages.
        explanation = explanation.replace(CAUTION, "(See the safety caution.)")
        items = [f"<li>{_e(row.scope)} <code>{_e(row.record_id)}</code> ({_e(row.severity)}): "
                 f"{_e(str(row.message).replace(CAUTION, '(See the safety caution.)'))}</li>"
                 for row in group.head(MAX_MESSAGES).itertuples(index=False)]
        if len(group) > MAX_MESSAGES:
            items.append(f"<li>… and {len(group) - MAX_MESSAGES} more</li>")
        parts.append(f"<h3><code>{_e(code)}</code>: {_e(title)} ({len(group)})</h3><p>{_e(explanation)}</p>"
                     f"<ul>{''.join(items)}</ul>")
    return "\n".join(parts)


def _hazard_table(results: Results, catalyst_ids: list[str]) -> pd.DataFrame:
    """Largest screening estimates over each shortlisted catalyst's trials; empty cells where none was possible."""
    rows = []
    for cid in catalyst_ids:
        group = results.trials[results.trials["catalyst_id"] == cid]
        rise = group["adiabatic_rise"].to_numpy(float)
        burst = group["pressure_rise_max"].to_numpy(float)
        bands = sorted(set(group["hazard_band"].dropna().astype(str)))
        rows.append({
            "catalyst_id": cid,
            "max adiabatic rise [K]": np.nanmax(rise) if np.isfinite(rise).any() else np.nan,
            "bands": ", ".join(bands),
            "max closed-vessel pressure rise [kPa]": from_si(np.nanmax(burst), "kPa") if np.isfinite(burst).any()
            else np.nan})
    return pd.DataFrame(rows, columns=["catalyst_id", "max adiabatic rise [K]", "bands",
                                       "max closed-vessel pressure rise [kPa]"])


def _pareto_figure(catalysts: pd.DataFrame, ranked: pd.DataFrame, metric: str):
    """The ranking's default trade-off, the metric against Ea, with its Pareto set; None for a weighted score.

    Uses the ranking's ``pareto`` column only when it refers to these two figures (the default of
    ``ranking.rank``), so the marked set is the one optimal on the plotted axes.
    """
    if metric == "score":
        return None
    other = "tof" if metric == "ea" else metric
    info = ranking.METRICS[other]
    frame = catalysts.assign(ea_kj=from_si(catalysts["ea"].to_numpy(float), "kJ/mol"))
    front = ranked.index[ranked["pareto"].astype(bool)]
    return charts.pareto_chart(frame, "ea_kj", info.column, front, x_title="Ea [kJ/mol]",
                               y_title=f"{info.title} [{info.unit}]")


def render_report(results: Results, ranked: pd.DataFrame, top_k: int, points: pd.DataFrame, db_label: str,
                  content_hash: str, metric: str = "tof", created: datetime | None = None) -> str:
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
        Ranking metric, shown with the table.
    created : datetime, optional
        Time stamp printed on the page (now, UTC, when None).

    Returns
    -------
    str
    """
    created = created or datetime.now(timezone.utc)
    settings = results.settings
    table = exports.shortlist_table(ranked, results, top_k, metric=metric)
    ranked_ids = [cid for cid, r in zip(ranked.index, ranked["rank"]) if np.isfinite(r)]
    shortlist = [cid for cid, r in zip(ranked.index, ranked["rank"]) if np.isfinite(r) and r <= top_k]
    t_ref_c = float(from_si(settings.reference_temperature, "degC"))

    numbers = itertools.count()

    def chart(chart_obj, caption):
        return _chart_block(chart_obj, next(numbers), caption)

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
        pareto = _pareto_figure(results.catalysts, ranked, metric)
        if pareto is not None:
            figures.append(chart(pareto, "Activity against temperature sensitivity; the Pareto set is the "
                                         "catalysts no other catalyst beats on both."))
        enhancement_ids = [c for c in ranked_ids if np.isfinite(results.catalysts.loc[c, "enhancement_ref"])]
        if enhancement_ids:
            figures.append(chart(charts.enhancement_chart(results.catalysts, enhancement_ids,
                                                          threshold=settings.min_enhancement),
                                 "Enhancement over the blank at the reference temperature; dashed line: the "
                                 "minimum the diagnostics ask for."))
    traces = []
    for cid in shortlist:
        trial_ids = list(results.trials.index[results.trials["catalyst_id"] == cid])[:charts.MAX_TRACES]
        both = alt.hconcat(charts.trace_chart(results.trials, points, trial_ids, title=f"{cid}: conversion"),
                           charts.residual_chart(results.trials, points, trial_ids, title=f"{cid}: residuals"))
        traces.append(chart(both, f"{cid}: readings (thinned for display) with the fitted rate law of each trial, "
                                  "and the residuals of those fits."))

    meta = pd.DataFrame([
        ("created", created.strftime("%Y-%m-%d %H:%M UTC")),
        ("software", f"catalog {__version__}"),
        ("database", db_label),
        ("data stamp", results.data_stamp),
        ("data SHA-256", content_hash),
        ("analysis run", results.run_key),
        ("catalysts / trials analysed", f"{len(results.catalysts)} / {len(results.trials)}"),
    ], columns=["item", "value"])
    first = table[list(exports.REQUIRED_COLUMNS)]
    # Every catalyst flag (their codes appear in the ranking table) and the trial flags of the shortlist.
    shortlist_trials = set(results.trials.index[results.trials["catalyst_id"].isin(shortlist)])
    flags = results.flags
    relevant = flags[(flags["scope"] == "catalyst") | flags["record_id"].isin(shortlist_trials)]
    blank = results.blank
    blank_text = ("No blank trials with two or more temperatures: no enhancement figures." if not blank else
                  f"Blank model: Ea = {from_si(blank['ea'], 'kJ/mol'):.1f} kJ/mol "
                  f"(95 % {from_si(blank['ea_low'], 'kJ/mol'):.1f}–{from_si(blank['ea_high'], 'kJ/mol'):.1f}) "
                  f"from {blank['n']} trials between {from_si(blank['t_min'], 'degC'):.1f} and "
                  f"{from_si(blank['t_max'], 'degC'):.1f} °C.")
    caution = f'<div class="caution" role="note"><strong>Safety caution.</strong> {_e(CAUTION)}</div>'
    methods = "".join(f"<h3>{_e(h)}</h3><p>{_e(p)}</p>" for h, p in _METHODS)
    bundle = vl_convert.javascript_bundle(vl_version=_vegalite_version())

    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>Catalyst screening report</title>
<style>{_STYLE}</style>
<script type="text/javascript">
{bundle}
</script>
</head>
<body>
<h1>Catalyst screening report</h1>
<p class="small">Generated {_e(created.strftime("%Y-%m-%d"))} by catalog {_e(__version__)}.</p>
{caution}
<section id="provenance"><h2>Provenance</h2><div class="meta">{_table(meta)}</div></section>
<section id="settings"><h2>Settings</h2>{_table(_settings_table(settings))}</section>
<section id="ranking"><h2>Ranking</h2>
<p>Ranked on <code>{_e(metric)}</code> at {t_ref_c:.1f} °C; intervals are 95 %; the shortlist is the top {top_k}.
Empty cells are figures that could not be computed from the data.</p>
<div class="wide">{_table(first)}</div>
<details><summary>All columns</summary><div class="wide">{_table(table)}</div></details>
<p>{_e(blank_text)}</p>
{''.join(figures)}
</section>
<section id="traces"><h2>Traces of the shortlisted catalysts</h2>
{''.join(traces) or '<p>No catalyst has a rank.</p>'}
</section>
<section id="hazards"><h2>Hazard screening</h2>
{caution}
<div class="wide">{_table(_hazard_table(results, shortlist))}</div>
</section>
<section id="flags"><h2>Flags</h2>
<p>Flags are warnings; they never change a figure. Listed: every catalyst flag and the trial flags of the
shortlisted catalysts.</p>
{_flag_section(relevant)}
</section>
<section id="methods"><h2>Methods</h2>{methods}</section>
</body>
</html>
"""


def write_report(db: str | os.PathLike | None, path: str | os.PathLike, settings: Settings,
                 ranked: pd.DataFrame | None = None, top_k: int = 3, metric: str = "tof") -> Path:
    """Analyse (or read the cached analysis of) the campaign in ``db`` and write the report to ``path``.

    Parameters
    ----------
    db : str, PathLike or None
        The campaign database.
    path : str or PathLike
        Output ``.html`` file.
    settings : Settings
    ranked : DataFrame, optional
        A ranking already made (e.g. with the user's weights and exclusions); by default
        ``ranking.rank(results.catalysts, metric=metric, top_k=top_k)``.
    top_k : int
        Shortlist size.
    metric : str
        Ranking metric when ``ranked`` is not given.

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
    results = get_results(db, settings)
    if ranked is None:
        ranked = ranking.rank(results.catalysts, metric=metric, top_k=top_k)
    catalysts, trials, points = store.load_campaign(db)
    page = render_report(results, ranked, top_k, points, str(store.resolve_path(db)),
                         data_hash(catalysts, trials, points), metric=metric)
    try:
        path.write_text(page, encoding="utf-8")
    except OSError as exc:
        raise CatalogError(f"could not write '{path}': {exc.strerror or exc}") from exc
    return path
