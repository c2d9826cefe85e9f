"""What every page of the workbench shares: the database, cached results, safe text, problems, flags, cautions.

No SQL and no physics here: figures come from :func:`catalog.analysis.results.get_results` (cached in the store
and, per database, data stamp and settings, in Streamlit); every write goes through the same importer as the CLI.
"""

from __future__ import annotations

import os
import re
import tempfile
from pathlib import Path

import pandas as pd
import streamlit as st

from catalog import store
from catalog.analysis import diagnostics, ranking, results
from catalog.analysis.settings import Settings
from catalog.core import hazard
from catalog.datasets import demo, synth
from catalog.errors import CatalogError, Problem
from catalog.ingest import sources
from catalog.ingest.upload import Upload
from catalog.present import labels
from catalog.present.numbers import MISSING
from catalog.units import from_si, kelvin

DEFAULT_REFERENCE_C = 35.0
BLANK_LABEL = "(blank, no catalyst)"
#: Currency written for prices (the ranking's neutral 'money'); the CLI reads the same variable.
CURRENCY = os.environ.get("CATALOG_CURRENCY") or None

# Characters that start or end markdown syntax (links, images, emphasis, code, headings, lists, html, math).
_MARKDOWN = re.compile(r"([\\`*_{}\[\]()<>#+\-.!|~$=:])")


def text(value) -> str:
    """User text (ids, notes, header names, messages quoting them) escaped so markdown shows it literally.

    Every character that could open a link, an image, emphasis or html is backslash-escaped, so an id such as
    ``![b](http://host/x.png)`` is shown as those characters and nothing is fetched.
    """
    return _MARKDOWN.sub(r"\\\1", str(value))


def blank(value) -> str:
    """A formatted figure for a table cell: missing figures are an empty cell."""
    return "" if value == MISSING else value


# --------------------------------------------------------------------------------------------------- data access


def database() -> str:
    """The database this app works on: ``$CATALOG_DB``, else ``catalog.duckdb`` in the working directory."""
    return str(store.resolve_path(None))


def seed_if_new(db: str) -> bool:
    """Import the demo campaign into a database that has never held data; True when it did."""
    if Path(db).exists():
        counts = store.table_counts(db)
        # A history row means someone removed data on purpose (e.g. the demo): never re-seed then.
        if counts["imports"] or counts["trials"] or len(store.history(db)):
            return False
    with tempfile.TemporaryDirectory() as tmp:
        # The seeded generator makes the same files as sample_campaign/ (tested), so an installed package needs no
        # data folder beside it.
        folder = Path(tmp) / "demo"
        synth.write_campaign(demo.demo_campaign(), folder)
        store.import_campaign(db, sources.read_source(folder), demo=True, who="catalog demo")
    return True


@st.cache_data(show_spinner="Analysing the trials…", max_entries=16)
def _cached_results(db: str, stamp: str, reference_temperature: float) -> results.Results:
    # db and stamp key the cache: another database or any change to the data is another entry.
    return results.get_results(db, Settings(reference_temperature=reference_temperature))


def get_results(db: str, reference_temperature: float = Settings.reference_temperature) -> results.Results:
    """Results for the database at this reference temperature (K), from the Streamlit cache when current."""
    return _cached_results(db, store.data_stamp(db), float(reference_temperature))


@st.cache_data(max_entries=16)
def _cached_catalysts(db: str, stamp: str) -> pd.DataFrame:
    return store.list_catalysts(db)


def registry(db: str) -> pd.DataFrame:
    """Every stored catalyst (SI), one row each, in id order."""
    return _cached_catalysts(db, store.data_stamp(db))


@st.cache_data(max_entries=64)
def _cached_traces(db: str, stamp: str, trial_ids: tuple[str, ...]) -> pd.DataFrame:
    frames = [store.load_trace(db, tid).assign(trial_id=tid) for tid in trial_ids]
    if not frames:
        return pd.DataFrame({"trial_id": pd.Series(dtype=str), "t": pd.Series(dtype=float),
                             "value": pd.Series(dtype=float)})
    return pd.concat(frames, ignore_index=True)[["trial_id", "t", "value"]]


def traces(db: str, res: results.Results, trial_ids) -> pd.DataFrame:
    """Long-form readings (trial_id, t, value; SI) of some trials, loaded one trial at a time and cached."""
    return _cached_traces(db, res.data_stamp, tuple(trial_ids))


def figure_title(key: str, short: bool = True) -> str:
    """A ranking figure's one name with its display unit, e.g. 'TOF [s⁻¹]'."""
    return labels.figure_name(key, short=short, currency=CURRENCY)


def figure_values(catalysts: pd.DataFrame, key: str) -> pd.DataFrame:
    """A ranking figure's value, 95 % low and high per catalyst, in the display unit of :func:`figure_title`."""
    values = ranking.metric_values(catalysts, key)[["value", "value_low", "value_high"]]
    unit = labels.FIGURES[key][2]
    if unit is None or "money" in unit or unit == ranking.METRICS[key].unit:
        return values
    spelled = unit.replace(" ", "*").replace("m2", "m^2")
    return pd.DataFrame({c: from_si(values[c].to_numpy(float), spelled) for c in values}, index=values.index)


def uploads(files) -> list[Upload]:
    """Streamlit's uploaded files as plain (name, bytes) for :mod:`catalog.ingest.upload`."""
    return [Upload(f.name, f.getvalue()) for f in files]


# --------------------------------------------------------------------------------------------------- widgets


def temperature_input(key: str) -> float:
    """The reference-temperature control (°C or K), returning kelvin.

    Switching the unit converts the number shown (35 °C becomes 308.15 K), so the temperature stays the same.
    """
    unit_key, last_key = f"{key}_unit", f"{key}_last_unit"
    unit = st.session_state.get(unit_key, "°C")
    last = st.session_state.get(last_key, unit)
    if unit != last and st.session_state.get(key) is not None:
        value = float(st.session_state[key])
        st.session_state[key] = round(value + 273.15 if unit == "K" else value - 273.15, 2)
    st.session_state[last_key] = unit
    if st.session_state.get(key) is None:
        st.session_state[key] = DEFAULT_REFERENCE_C if unit == "°C" else DEFAULT_REFERENCE_C + 273.15
    left, right = st.columns([2, 1], vertical_alignment="bottom")
    value = left.number_input("Reference temperature", step=5.0, key=key, format="%g",
                              help=f"TOF, {labels.ENHANCEMENT} and rates per mass are compared at this "
                                   "temperature (Arrhenius fit of each catalyst's trials)")
    right.radio("unit of the reference temperature", ("°C", "K"), key=unit_key, horizontal=True,
                label_visibility="collapsed")
    return float(value) if unit == "K" else kelvin(float(value))


# --------------------------------------------------------------------------------------------------- messages


def flags_table(res: results.Results, scope: str, ids) -> pd.DataFrame:
    """Every flag of these records: plain title first, the code beside it, details and why it matters."""
    flags = res.flags
    mine = flags[(flags["scope"] == scope) & flags["record_id"].isin(list(ids))]
    why = [diagnostics.FLAG_CODES.get(c, (c, ""))[1] for c in mine["code"]]
    return pd.DataFrame({
        "record": mine["record_id"].astype(str).to_numpy(),
        "flag": [labels.flag_title(c) for c in mine["code"]],
        "code": mine["code"].to_numpy(),
        "severity": mine["severity"].to_numpy(),
        "details": mine["message"].to_numpy(),
        "why it matters": why,
    })


def show_flags(res: results.Results, scope: str, ids, empty: str) -> None:
    table = flags_table(res, scope, ids)
    if table.empty:
        st.caption(empty)
    else:
        st.dataframe(table, hide_index=True, width="stretch",
                     column_config={"details": st.column_config.TextColumn(width="large"),
                                    "why it matters": st.column_config.TextColumn(width="large")})


def show_problems(problems: list[Problem], where: dict[str, str] | None = None) -> None:
    """Every validation problem, located; ``where`` renames files (e.g. the generated trial file → 'form')."""
    where = where or {}
    table = pd.DataFrame({
        "where": [where.get(p.file, p.file) for p in problems],
        "row": [str(p.row) if p.row is not None else "" for p in problems],
        "column": [p.column or "" for p in problems],
        "problem": [p.message for p in problems],
    })
    st.error(f"{len(problems)} problem(s) found; nothing was written.")
    st.dataframe(table, hide_index=True, width="stretch",
                 column_config={"problem": st.column_config.TextColumn(width="large")})


def show_error(exc: CatalogError) -> None:
    """A user-facing error as text (its message may quote ids, file or header names)."""
    st.error(text(exc))


def caution() -> None:
    """The safety caution, shown wherever a hazard figure is."""
    st.warning(f"**Safety.** {hazard.CAUTION}", icon=":material/warning:")


def demo_banner(db: str) -> None:
    """A visible mark on every page while demo data is in the database; removing it asks for confirmation."""
    imports = store.list_imports(db)
    demo = imports[imports["is_demo"].astype(bool)]
    if demo.empty:
        return
    left, right = st.columns([5, 1], vertical_alignment="center")
    left.info("**Demo data.** This database holds an invented screening campaign (hydrogen release from ammonia "
              "borane over supported metals) so every page has something to show. No experiment produced these "
              "numbers.", icon=":material/science:")
    with right.popover("Remove demo data"):
        st.markdown("Delete the demo import and every catalyst, trial and trace point it brought in? "
                    "Your own imports stay. This cannot be undone.")
        if st.button("Yes, remove the demo data", key="purge_demo", type="primary"):
            for import_id in demo["import_id"]:
                store.purge_import(db, int(import_id), "catalog app")
            st.cache_data.clear()
            st.rerun()


def chart(figure, key: str | None = None) -> None:
    """Draw an Altair chart across its column, always as SVG.

    SVG (rather than the canvas Streamlit switches to for large data) keeps every mark a node of the page, which
    screen readers and the browser test can find.
    """
    spec_height = getattr(figure, "height", None)
    # The height is passed to Streamlit as well: left to the spec, layered charts were drawn squashed in the app.
    height = int(spec_height) + 60 if isinstance(spec_height, int | float) else "content"
    st.altair_chart(figure.properties(usermeta={"embedOptions": {"renderer": "svg"}}), width="stretch",
                    height=height, key=key)
