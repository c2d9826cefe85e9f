"""The browser workbench: log trials, import campaigns, browse trials, compare catalysts, rank and export.

A Streamlit shell over the core. Every figure comes from :func:`catalog.analysis.results.get_results` (cached in the store
and, per database, data stamp and settings, in Streamlit); every write goes through the same importer as the
command line. This module only calls the core and formats: no SQL, no physics.

Pages are thin scripts in ``catalog/webapp_pages`` (so they can be opened by URL and in tests); each calls one
``page_*`` function here. ``app.py`` at the repository root calls :func:`run`.
"""

from __future__ import annotations

import csv
import io
import re
import tempfile
import zipfile
from datetime import datetime
from pathlib import Path

import altair as alt
import numpy as np
import pandas as pd
import streamlit as st

from catalog import store
from catalog.analysis import diagnostics, ranking, results
from catalog.analysis.settings import Settings
from catalog.core import hazard
from catalog.datasets import synth, demo
from catalog.errors import CatalogError, Problem, ValidationError
from catalog.core.measurements import MEASUREMENTS
from catalog.ingest import sources, validate
from catalog.present import charts, exports, report
from catalog.units import celsius, from_si, kelvin

PAGE_DIR = Path(__file__).with_name("webapp_pages")
SAMPLE_FOLDER = Path(__file__).resolve().parent.parent / "sample_campaign"

#: Largest upload accepted, bytes (the three files together, or the archive).
UPLOAD_LIMIT = 200 * 1024 * 1024
#: Largest total size of the members read out of a zip archive, bytes (guards against archives that expand hugely).
UNZIPPED_LIMIT = 2 * UPLOAD_LIMIT
DEFAULT_REFERENCE_C = 35.0

BLANK_LABEL = "(blank, no catalyst)"
NEW_CATALYST = "New catalyst…"

#: Plain words for the four kinds of trace.
MEASUREMENT_LABELS = {
    "gas_volume": "gas volume (burette)",
    "mass_loss": "mass loss (balance)",
    "pressure": "headspace pressure (closed vessel)",
    "concentration": "product concentration (analyser)",
}
#: Units offered for each measurement's signal, first is the default.
SIGNAL_UNITS = {
    "gas_volume": ("mL", "L"),
    "mass_loss": ("g", "mg"),
    "pressure": ("kPa", "bar", "Pa"),
    "concentration": ("mmol/L", "mol/L"),
}
#: Shown unit → spelling written into a `name [unit]` header.
UNIT_SPELLING = {"°C": "degC", "µm": "um", "m²/g": "m^2/g", "µmol/g": "umol/g"}



# --------------------------------------------------------------------------------------------------- data access


def database() -> str:
    """The database this app works on: ``$CATALOG_DB``, else ``catalog.duckdb`` in the working directory."""
    return str(store.resolve_path(None))


def _seed_if_new(db: str) -> bool:
    """Import the demo campaign into a database that has never held data; True when it did."""
    if Path(db).exists():
        counts = store.table_counts(db)
        # A history row means someone removed data on purpose (e.g. the demo): never re-seed then.
        if counts["imports"] or counts["trials"] or len(store.history(db)):
            return False
    with tempfile.TemporaryDirectory() as tmp:
        folder = SAMPLE_FOLDER
        if not (folder / sources.TRACES_FILE).is_file():
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


# --------------------------------------------------------------------------------------------------- formatting


def flag_words(code: str) -> tuple[str, str]:
    """(title, explanation) of a flag code; an unknown code is shown as itself, never dropped."""
    return diagnostics.FLAG_CODES.get(code, (code, ""))


def flags_table(res: results.Results, scope: str, ids) -> pd.DataFrame:
    """Every flag of these records, with the title and explanation of its code."""
    flags = res.flags
    mine = flags[(flags["scope"] == scope) & flags["record_id"].isin(list(ids))]
    words = [flag_words(c) for c in mine["code"]]
    return pd.DataFrame({
        "record": mine["record_id"].to_numpy(),
        "flag": mine["code"].to_numpy(),
        "what it means": [w[0] for w in words],
        "severity": mine["severity"].to_numpy(),
        "details": mine["message"].to_numpy(),
        "why it matters": [w[1] for w in words],
    })


def show_flags(res: results.Results, scope: str, ids, empty: str) -> None:
    table = flags_table(res, scope, ids)
    if table.empty:
        st.caption(empty)
    else:
        st.dataframe(table, hide_index=True, width="stretch")


def show_problems(problems: list[Problem], where: dict[str, str] | None = None) -> None:
    """Every validation problem, located; ``where`` renames files (e.g. the generated trial file → 'form')."""
    where = where or {}
    table = pd.DataFrame({
        "where": [where.get(p.file, p.file) for p in problems],
        "row": [p.row if p.row is not None else "" for p in problems],
        "column": [p.column or "" for p in problems],
        "problem": [p.message for p in problems],
    })
    st.error(f"{len(problems)} problem(s) found; nothing was written.")
    st.dataframe(table, hide_index=True, width="stretch")


def caution() -> None:
    """The safety caution, shown wherever a hazard figure is."""
    st.warning(f"**Safety.** {hazard.CAUTION}", icon=":material/warning:")


def trial_table(trials: pd.DataFrame) -> pd.DataFrame:
    """The trial list in display units, flags always shown."""
    return pd.DataFrame({
        "trial": trials.index,
        "catalyst": trials["catalyst_id"].fillna(BLANK_LABEL).to_numpy(),
        "T [°C]": np.round(celsius(trials["temperature"]), 2),
        "measurement": trials["measurement"].map(MEASUREMENT_LABELS).to_numpy(),
        "mass [mg]": np.round(from_si(trials["catalyst_mass"].to_numpy(float), "mg"), 3),
        "model": trials["model"].to_numpy(),
        "r0 [µmol/min]": from_si(trials["r0"].to_numpy(float), "umol/min"),
        "TOF [1/s]": trials["tof"].to_numpy(float),
        "× blank": trials["enhancement"].to_numpy(float),
        "R²": trials["r2"].to_numpy(float),
        "operator": trials["operator"].fillna("").to_numpy(),
        "started": trials["started_at"].to_numpy(),
        "flags": trials["flags"].replace("", "—").to_numpy(),
    })


# --------------------------------------------------------------------------------------------------- charts


def raw_signal_chart(points: pd.DataFrame, measurement: str) -> alt.Chart:
    """The stored readings of one trial in the measurement's usual unit, as recorded (before any conversion)."""
    unit = MEASUREMENTS[measurement].reference_unit
    data = pd.DataFrame({"time [min]": from_si(points["t"].to_numpy(float), "min"),
                         f"signal [{unit}]": from_si(points["value"].to_numpy(float), unit)})
    return alt.Chart(data).mark_circle(size=18).encode(
        x="time [min]:Q", y=alt.Y(f"signal [{unit}]:Q", scale=alt.Scale(zero=False))).properties(
        title=f"Raw signal: {MEASUREMENT_LABELS[measurement]}", height=300)


# --------------------------------------------------------------------------------------------------- shell


def demo_banner(db: str) -> None:
    """A visible mark on every page while demo data is in the database, with the button that removes it."""
    imports = store.list_imports(db)
    demo = imports[imports["is_demo"].astype(bool)]
    if demo.empty:
        return
    text = ("**Demo data.** This database holds an invented screening campaign (hydrogen release from ammonia "
            "borane) so every page has something to show. No experiment produced these numbers.")
    left, right = st.columns([5, 1], vertical_alignment="center")
    left.info(text, icon=":material/science:")
    if right.button("Remove demo data", key="purge_demo",
                                  help="Deletes the demo import and everything in it"):
        for import_id in demo["import_id"]:
            store.purge_import(db, int(import_id), "catalog app")
        st.cache_data.clear()
        st.rerun()


def run() -> None:
    """Start the workbench (called by ``app.py``)."""
    st.set_page_config(page_title="catalog: screening workbench", page_icon=":material/science:", layout="wide")
    db = database()
    try:
        _seed_if_new(db)
    except CatalogError as exc:
        st.error(f"The database could not be opened or seeded: {exc}")
        st.stop()
    pages = [
        st.Page(PAGE_DIR / "overview.py", title="Overview", icon=":material/home:", default=True),
        st.Page(PAGE_DIR / "log_trial.py", title="Log a trial", icon=":material/edit_note:"),
        st.Page(PAGE_DIR / "import_campaign.py", title="Import a campaign", icon=":material/upload_file:"),
        st.Page(PAGE_DIR / "trials.py", title="Trials", icon=":material/table_rows:"),
        st.Page(PAGE_DIR / "compare.py", title="Compare catalysts", icon=":material/show_chart:"),
        st.Page(PAGE_DIR / "rank.py", title="Rank and export", icon=":material/format_list_numbered:"),
    ]
    page = st.navigation(pages)
    st.sidebar.caption(f"Database: `{db}`")
    try:
        demo_banner(db)
        page.run()
    except CatalogError as exc:
        st.error(str(exc))


# --------------------------------------------------------------------------------------------------- pages


def page_overview() -> None:
    db = database()
    st.title("Catalyst screening workbench")
    counts = store.table_counts(db)
    cols = st.columns(4)
    for col, (label, key) in zip(cols, (("Catalysts", "catalysts"), ("Trials", "trials"),
                                        ("Trace points", "trace_points"), ("Imports", "imports"))):
        col.metric(label, f"{counts[key]:,}")
    st.markdown(
        "- **Log a trial**: enter one trial's conditions and its trace; it is checked like any import and "
        "analysed at once.\n"
        "- **Import a campaign**: the three CSV files, a zip of the folder, or one .xlsx workbook; checked and "
        "previewed before anything is written.\n"
        "- **Trials**: filter the trials and open one to see its trace, fitted rate law and residuals.\n"
        "- **Compare catalysts**: traces, Arrhenius plots, TOF and rate over the blank side by side.\n"
        "- **Rank and export**: a ranked shortlist with intervals, downloadable as a table or an HTML report."
    )
    st.subheader("Imports")
    imports = store.list_imports(db)
    if imports.empty:
        st.caption("Nothing imported yet.")
    else:
        shown = imports[["import_id", "imported_at", "imported_by", "source", "n_catalysts", "n_trials", "n_points",
                         "n_skipped", "is_demo"]].rename(columns={
            "import_id": "import", "imported_at": "when (UTC)", "imported_by": "by", "n_catalysts": "catalysts",
            "n_trials": "trials", "n_points": "points", "n_skipped": "skipped", "is_demo": "demo"})
        st.dataframe(shown, hide_index=True, width="stretch")
    caution()


# ----- log a trial


def _number(label: str, units: tuple[str, ...] | None, key: str, value=None, help: str | None = None):
    """A number field with its unit chooser beside it; returns (value or None, header unit spelling or None)."""
    if not units:
        return st.number_input(label, value=value, key=key, help=help, format="%g"), None
    left, right = st.columns([3, 1], vertical_alignment="bottom")
    number = left.number_input(label, value=value, key=key, help=help, format="%g")
    unit = right.selectbox(f"unit of {label.lower()}", units, key=f"{key}_unit", label_visibility="collapsed")
    return number, UNIT_SPELLING.get(unit, unit)


def _csv_text(header: list[str], rows: list[list]) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return out.getvalue()


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    return str(value)


_NUMBER_TEXT = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def parse_trace_text(text: str) -> list[tuple[str, str]]:
    """Two columns (time, value) from pasted or uploaded text: comma, semicolon, tab or space separated.

    A first line whose first cell is not a number is taken as a header and skipped. Cells stay text, so the importer
    reports a bad cell with its row like any other.
    """
    rows = []
    for line in text.splitlines():
        if not line.strip():
            continue
        cells = [c.strip().strip('"') for c in re.split(r"[,;\t]|\s+", line.strip()) if c.strip()]
        rows.append((cells[0] if cells else "", cells[1] if len(cells) > 1 else ""))
    if rows and not _NUMBER_TEXT.match(rows[0][0]):
        rows = rows[1:]
    return rows


def _uploaded_trace(upload) -> list[tuple[str, str]]:
    data = upload.getvalue()
    if upload.name.lower().endswith((".xlsx", ".xlsm")):
        try:
            sheet = pd.read_excel(io.BytesIO(data), header=None, dtype=str, keep_default_na=False, engine="openpyxl")
        except Exception as exc:  # openpyxl raises many types for a damaged workbook
            raise ValidationError([Problem(upload.name, None, None, f"cannot be read as an .xlsx workbook: {exc}")])
        text = "\n".join(",".join(str(v) for v in row[:2]) for row in sheet.itertuples(index=False))
        return parse_trace_text(text)
    try:
        return parse_trace_text(data.decode("utf-8-sig"))
    except UnicodeDecodeError:
        raise ValidationError([Problem(upload.name, None, None, "not UTF-8 text")])


def _next_trial_id(existing) -> str:
    taken = set(existing)
    n = len(taken) + 1
    while f"T{n:04d}" in taken:
        n += 1
    return f"T{n:04d}"


def page_log_trial() -> None:
    db = database()
    st.title("Log a trial")
    st.caption("One trial's conditions and trace. It is checked by the same importer as a campaign upload, "
               "written only when every check passes, and analysed at once.")
    res = get_results(db)
    catalysts = registry(db)
    form, outcome = st.columns([3, 2], gap="large")
    with form:
        trial_id = st.text_input("Trial id", value=_next_trial_id(store.list_trials(db)["trial_id"]), key="log_id")
        choice = st.selectbox("Catalyst", [BLANK_LABEL, *catalysts["catalyst_id"], NEW_CATALYST], key="log_catalyst",
                              index=1 if len(catalysts) else 0)
        catalyst_rows: list[list] = []
        catalyst_header = ["catalyst_id", "metal", "metal_loading [wt%]", "dispersion [%]", "support", "description"]
        catalyst_id = None if choice == BLANK_LABEL else choice
        if choice == NEW_CATALYST:
            with st.container(border=True):
                st.markdown("**New catalyst**")
                a, b = st.columns(2)
                catalyst_id = a.text_input("Catalyst id", key="log_new_id").strip()
                metal = b.text_input("Metal (element symbol)", key="log_new_metal").strip()
                loading = a.number_input("Metal loading [wt%]", value=None, key="log_new_loading", format="%g")
                dispersion = b.number_input("Dispersion [%]", value=None, key="log_new_dispersion", format="%g",
                                            help="Fraction of metal atoms at the surface")
                support = a.text_input("Support", key="log_new_support").strip()
                description = b.text_input("Description", key="log_new_description").strip()
                catalyst_rows = [[catalyst_id, metal, _cell(loading), _cell(dispersion), support, description]]
        measurement = st.selectbox("Measurement", list(MEASUREMENTS), key="log_measurement",
                                   format_func=MEASUREMENT_LABELS.get)
        fields: list[tuple[str, object, str | None]] = []

        def add(name, label, units, value=None, help=None):
            number, unit = _number(label, units, f"log_{name}", value, help)
            fields.append((name, number, unit))

        add("temperature", "Temperature", ("°C", "K"), DEFAULT_REFERENCE_C)
        if catalyst_id is not None:
            add("catalyst_mass", "Catalyst mass", ("mg", "g"), 10.0)
        add("limiting_amount", "Limiting reactant", ("mmol", "mol"), 1.0)
        add("product_ratio", "Product per limiting reactant", None, 1.0,
            "Moles of the measured product formed per mole of limiting reactant")
        add("liquid_volume", "Liquid volume", ("mL", "L"), 10.0)
        add("initial_concentration", "Initial concentration", ("mol/L", "mmol/L"))
        if measurement == "gas_volume":
            add("gas_pressure", "Gas pressure at the burette", ("kPa", "bar"), None, "Empty: 101.325 kPa")
            add("gas_temperature", "Gas temperature at the burette", ("°C", "K"), None, "Empty: 25 °C")
        if measurement == "mass_loss":
            add("gas_molar_mass", "Molar mass of the gas lost", ("g/mol",), 2.016)
        if measurement == "pressure":
            add("headspace_volume", "Headspace volume", ("mL", "L"), None, "Free gas volume of the closed vessel")
        with st.expander("More conditions (particles, heat, light)"):
            add("particle_size", "Particle size", ("µm", "mm"))
            add("reaction_enthalpy", "Reaction enthalpy", ("kJ/mol",), None,
                "Per mole of limiting reactant, negative when heat is released (for the adiabatic-rise estimate)")
            add("heat_capacity", "Heat capacity of the reactor contents", ("J/K",))
            add("light_wavelength", "Light wavelength", ("nm",))
            add("light_power", "Light power", ("mW",))
        operator = st.text_input("Operator", key="log_operator").strip()
        a, b = st.columns(2)
        day = a.date_input("Started on", value=datetime.now().date(), key="log_day")
        clock = b.time_input("at", value=datetime.now().time().replace(second=0, microsecond=0), key="log_time")
        notes = st.text_input("Notes", key="log_notes")

        st.markdown("**Trace**: two columns, time and signal")
        a, b = st.columns(2)
        time_unit = a.selectbox("Time unit", ("s", "min", "h"), key="log_time_unit")
        signal_unit = b.selectbox("Signal unit", SIGNAL_UNITS[measurement], key=f"log_signal_unit_{measurement}")
        upload = st.file_uploader("Upload the trace (CSV or .xlsx)", type=["csv", "txt", "xlsx"], key="log_trace_file")
        pasted = st.text_area("…or paste it (one reading per line: time, value)", key="log_trace_text", height=140)
        save = st.button("Check and save the trial", type="primary", key="log_save")

    with outcome:
        if save:
            _save_logged_trial(db, trial_id.strip(), catalyst_id, measurement, signal_unit, time_unit, fields,
                               operator, f"{day.isoformat()}T{clock.strftime('%H:%M')}", notes, upload, pasted,
                               catalyst_header, catalyst_rows)
        logged = st.session_state.get("logged_trial")
        if logged:
            res = get_results(db)
            if logged in res.trials.index:
                st.success(f"Trial {logged} saved and analysed.")
                show_trial(db, res, logged, compact=True)


def _save_logged_trial(db, trial_id, catalyst_id, measurement, signal_unit, time_unit, fields, operator, started,
                       notes, upload, pasted, catalyst_header, catalyst_rows) -> None:
    try:
        rows = _uploaded_trace(upload) if upload is not None else parse_trace_text(pasted or "")
    except ValidationError as exc:
        show_problems(exc.problems)
        return
    if not rows:
        show_problems([Problem("trace", None, None, "no readings: upload a file or paste time, value lines")])
        return
    header = ["trial_id", "catalyst_id", "measurement", "signal_unit", "operator", "started_at", "notes"]
    row = [trial_id, catalyst_id or "", measurement, signal_unit, operator, started, notes]
    for name, value, unit in fields:
        header.append(f"{name} [{unit}]" if unit else name)
        row.append(_cell(None if value is None else float(value)))
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / sources.CATALYSTS_FILE).write_text(_csv_text(catalyst_header, catalyst_rows), encoding="utf-8")
        (folder / sources.TRIALS_FILE).write_text(_csv_text(header, [row]), encoding="utf-8")
        (folder / sources.TRACES_FILE).write_text(
            _csv_text(["trial_id", f"time [{time_unit}]", "value"], [[trial_id, t, v] for t, v in rows]),
            encoding="utf-8")
        try:
            report = store.import_campaign(db, sources.read_source(folder), who=operator or None)
        except ValidationError as exc:
            show_problems(exc.problems, {sources.TRIALS_FILE: "form", sources.CATALYSTS_FILE: "new catalyst",
                                         sources.TRACES_FILE: "trace (row 2 = first reading)"})
            return
    for note in report.notes:
        st.caption(f"Note: {note}")
    if report.duplicate_of is not None:
        st.info(f"This exact trial was already saved (import #{report.duplicate_of}); nothing new was written.")
    st.session_state["logged_trial"] = trial_id


# ----- import a campaign


def _stage_upload(files, folder: Path) -> Path:
    """Write the uploaded files under fixed names inside ``folder``; return what to read (folder or workbook).

    User-supplied names only pick which fixed name a file gets; no user path is ever used.
    """
    total = sum(f.size for f in files)
    if total > UPLOAD_LIMIT:
        raise CatalogError(f"the upload is {total / 2**20:.0f} MB; the limit is {UPLOAD_LIMIT / 2**20:.0f} MB")
    names = [f.name.lower() for f in files]
    if len(files) == 1 and names[0].endswith((".xlsx", ".xlsm")):
        target = folder / "campaign.xlsx"
        target.write_bytes(files[0].getvalue())
        return target
    campaign_dir = folder / "campaign"
    campaign_dir.mkdir()
    fixed = (sources.CATALYSTS_FILE, sources.TRIALS_FILE, sources.TRACES_FILE)
    wanted = {name.split(".")[0]: name for name in fixed}
    if len(files) == 1 and names[0].endswith(".zip"):
        try:
            archive = zipfile.ZipFile(io.BytesIO(files[0].getvalue()))
        except zipfile.BadZipFile as exc:
            raise CatalogError(f"{files[0].name}: not a readable zip archive ({exc})") from exc
        with archive:
            members = {}
            for info in archive.infolist():
                base = info.filename.replace("\\", "/").rsplit("/", 1)[-1].lower()
                if base in wanted.values() and not info.is_dir() and "__macosx" not in info.filename.lower():
                    members.setdefault(base, info)
            if sum(i.file_size for i in members.values()) > UNZIPPED_LIMIT:
                raise CatalogError(f"{files[0].name}: the files inside are larger than "
                                   f"{UNZIPPED_LIMIT / 2**20:.0f} MB")
            for base, info in members.items():
                (campaign_dir / base).write_bytes(archive.read(info))
        return campaign_dir
    for upload, name in zip(files, names):
        stem = next((key for key in wanted if key in name), None)
        if stem is None or not name.endswith(".csv"):
            raise CatalogError(f"{upload.name}: expected catalysts.csv, trials.csv and traces.csv "
                               "(or one .zip or .xlsx)")
        (campaign_dir / wanted[stem]).write_bytes(upload.getvalue())
    return campaign_dir


def _trace_preview(source: sources.CampaignSource) -> tuple[pd.DataFrame, int]:
    if source.traces.csv_path is not None:
        head = pd.read_csv(source.traces.csv_path, nrows=5, dtype=str, keep_default_na=False)
        with source.traces.csv_path.open("rb") as handle:
            lines = sum(block.count(b"\n") for block in iter(lambda: handle.read(1 << 20), b""))
        with source.traces.csv_path.open("rb") as handle:
            handle.seek(-1, 2)
            ends_with_newline = handle.read(1) == b"\n"
        return head, lines - (1 if ends_with_newline else 0)
    return source.traces.frame.head(5), len(source.traces.frame)


def page_import() -> None:
    db = database()
    st.title("Import a campaign")
    st.caption("Upload the three CSV files (catalysts.csv, trials.csv, traces.csv), a zip of the campaign folder, "
               f"or one .xlsx workbook with those three sheets; up to {UPLOAD_LIMIT / 2**20:.0f} MB. Everything is "
               "checked and previewed first; nothing is written until you press the button, and then all or nothing.")
    files = st.file_uploader("Campaign files", type=["csv", "zip", "xlsx"], accept_multiple_files=True,
                             key="import_files", max_upload_size=UPLOAD_LIMIT // 2**20)
    if not files:
        return
    who = st.text_input("Imported by", key="import_who", help="Recorded with the import; empty: the server's login")
    with tempfile.TemporaryDirectory() as tmp:
        try:
            source = sources.read_source(_stage_upload(files, Path(tmp)))
        except ValidationError as exc:
            show_problems(exc.problems)
            return
        except CatalogError as exc:
            st.error(str(exc))
            return
        checked_catalysts = validate.check_catalysts(source.catalysts)
        known = set(checked_catalysts.frame["catalyst_id"].dropna()) | set(registry(db)["catalyst_id"])
        checked_trials = validate.check_trials(source.trials, known)
        trace_head, n_points = _trace_preview(source)
        st.subheader("What will be written")
        cols = st.columns(3)
        cols[0].metric("Catalysts", len(source.catalysts.frame))
        cols[1].metric("Trials", len(source.trials.frame))
        cols[2].metric("Trace points", f"{n_points:,}")
        for label, frame in (("catalysts", source.catalysts.frame), ("trials", source.trials.frame),
                             ("traces", trace_head)):
            st.markdown(f"First rows of **{label}**")
            st.dataframe(frame.head(5), hide_index=True, width="stretch")
        notes = checked_catalysts.notes + checked_trials.notes
        if notes:
            st.markdown("**How the units were read**")
            st.markdown("\n".join(f"- {n}" for n in notes))
        problems = checked_catalysts.problems + checked_trials.problems
        if problems:
            show_problems(problems)
            st.caption("Fix these in the files and upload them again.")
            return
        st.success("The catalysts and trials tables pass every check; the trace points are checked as they are "
                   "written.")
        if st.button("Write to database", type="primary", key="import_write"):
            try:
                report = store.import_campaign(db, source, who=who.strip() or None)
            except ValidationError as exc:
                show_problems(exc.problems)
                return
            if report.duplicate_of is not None:
                st.info(report.notes[0] if report.notes else "Already imported; nothing written.")
                return
            st.success(f"Import #{report.import_id}: {report.n_catalysts} catalysts, {report.n_trials} trials, "
                       f"{report.n_points:,} trace points written.")
            if report.skipped_catalysts or report.skipped_trials:
                st.caption(f"Already stored and identical, so skipped: {len(report.skipped_catalysts)} catalysts, "
                           f"{len(report.skipped_trials)} trials.")


# ----- trials


def show_trial(db: str, res: results.Results, trial_id: str, compact: bool = False) -> None:
    """One trial: its figures, raw signal, product formed with the fitted rate law, residuals, flags, hazards."""
    row = res.trials.loc[trial_id]
    # Three per row: six metric values side by side get cut off at a laptop width.
    cols = st.columns(3)
    figures = [
        ("Temperature", f"{celsius(row['temperature']):.1f} °C"),
        ("Initial rate r0", f"{from_si(row['r0'], 'umol/min'):.3g} µmol/min"),
        ("TOF", "—" if pd.isna(row["tof"]) else f"{row['tof']:.3g} 1/s ± {row['tof_se']:.2g}"),
        ("Rate law", f"{row['model']} order" if row["model"] in ("zero", "first", "second") else str(row["model"])),
        ("Rate over the blank", "—" if pd.isna(row["enhancement"]) else f"× {row['enhancement']:.3g}"),
        ("R²", f"{row['r2']:.4f}" if pd.notna(row["r2"]) else "—"),
    ]
    for i, (label, value) in enumerate(figures):
        cols[i % len(cols)].metric(label, value)
    if row["flags"]:
        st.warning("Flags on this trial: " + ", ".join(f"{c} ({flag_words(c)[0]})" for c in row["flags"].split(";")))
    points = traces(db, res, [trial_id])
    fit = charts.trace_chart(res.trials, points, [trial_id], normalise=False,
                             title="Product formed (dots) and fitted rate law (line)").properties(height=300)
    resid = charts.residual_chart(res.trials, points, [trial_id], normalise=False).properties(height=200)
    if compact:
        st.altair_chart(fit, width="stretch")
        st.altair_chart(resid, width="stretch")
    else:
        a, b = st.columns(2)
        a.altair_chart(raw_signal_chart(points, row["measurement"]), width="stretch")
        b.altair_chart(fit, width="stretch")
        st.altair_chart(resid, width="stretch")
    show_flags(res, "trial", [trial_id], "No flags on this trial.")
    rise, band, burst = row["adiabatic_rise"], row["hazard_band"], row["pressure_rise_max"]
    if pd.notna(rise) or pd.notna(burst):
        parts = []
        if pd.notna(rise):
            parts.append(f"adiabatic temperature rise {rise:.0f} K (band: {band})")
        if pd.notna(burst):
            parts.append(f"largest pressure rise in the closed headspace {from_si(burst, 'kPa'):.0f} kPa")
        st.markdown("**Hazard screening**: " + "; ".join(parts))
        caution()
    if not compact:
        with st.expander("All stored figures of this trial (SI units)"):
            st.dataframe(row.astype(str).rename("value").to_frame(), width="stretch")


def page_trials() -> None:
    db = database()
    st.title("Trials")
    res = get_results(db)
    trials = res.trials
    if trials.empty:
        st.info("No trials yet: import a campaign or log a trial.")
        return
    with st.expander("Filter", expanded=True):
        a, b, c = st.columns(3)
        names = [BLANK_LABEL, *sorted(trials["catalyst_id"].dropna().unique())]
        chosen = a.multiselect("Catalyst", names, key="trials_catalyst", placeholder="all catalysts")
        kinds = b.multiselect("Measurement", list(MEASUREMENTS), key="trials_measurement",
                              format_func=MEASUREMENT_LABELS.get, placeholder="all")
        operators = c.multiselect("Operator", sorted(trials["operator"].dropna().unique()), key="trials_operator",
                                  placeholder="all")
        t_c = celsius(trials["temperature"])
        low, high = float(np.floor(t_c.min())), float(np.ceil(t_c.max()))
        span = a.slider("Temperature [°C]", low, max(high, low + 1), (low, max(high, low + 1)), key="trials_T")
        started = trials["started_at"].dropna()
        days = None
        if not started.empty:
            days = b.date_input("Started between", (started.min().date(), started.max().date()), key="trials_days")
        codes = sorted({c for f in trials["flags"] for c in f.split(";") if c})
        flag_choice = c.selectbox("Flags", ["any", "flagged only", "not flagged", *codes], key="trials_flags",
                                  format_func=lambda c: c if c in ("any", "flagged only", "not flagged")
                                  else f"{c}: {flag_words(c)[0]}")
    keep = (t_c >= span[0]) & (t_c <= span[1])
    if chosen:
        keep &= trials["catalyst_id"].fillna(BLANK_LABEL).isin(chosen).to_numpy()
    if kinds:
        keep &= trials["measurement"].isin(kinds).to_numpy()
    if operators:
        keep &= trials["operator"].isin(operators).to_numpy()
    if days is not None and len(days) == 2:
        day = trials["started_at"].dt.date
        keep &= (trials["started_at"].isna() | ((day >= days[0]) & (day <= days[1]))).to_numpy()
    if flag_choice == "flagged only":
        keep &= (trials["flags"] != "").to_numpy()
    elif flag_choice == "not flagged":
        keep &= (trials["flags"] == "").to_numpy()
    elif flag_choice != "any":
        keep &= trials["flags"].str.split(";").apply(lambda codes: flag_choice in codes).to_numpy()
    shown = trials[keep]
    st.caption(f"{len(shown):,} of {len(trials):,} trials. Times are as entered; TOF is turnovers of the limiting "
               "reactant per active site per second, after the blank rate is subtracted.")
    st.dataframe(trial_table(shown), hide_index=True, width="stretch", height=320)
    if shown.empty:
        return
    st.subheader("One trial")
    trial_id = st.selectbox("Open trial", list(shown.index), key="trials_open")
    show_trial(db, res, trial_id)


# ----- compare


def _temperature_input(key: str) -> float:
    """The reference-temperature control (°C or K), returning kelvin."""
    value = st.number_input("Reference temperature", value=DEFAULT_REFERENCE_C, step=5.0, key=key, format="%g",
                            help="TOF, rate over the blank and rates per mass are compared at this temperature")
    unit = st.radio("unit of the reference temperature", ("°C", "K"), key=f"{key}_unit", horizontal=True,
                    label_visibility="collapsed")
    return float(value) if unit == "K" else kelvin(float(value))


def _metric_title(name: str) -> str:
    metric = ranking.METRICS[name]
    unit = "kJ/mol" if metric.unit == "J/mol" else metric.unit
    return metric.title + ("" if unit == "-" else f" [{unit}]")


def _metric_display(catalysts: pd.DataFrame, name: str) -> np.ndarray:
    values = ranking.metric_values(catalysts, name)["value"].to_numpy(float)
    return from_si(values, "kJ/mol") if ranking.METRICS[name].unit == "J/mol" else values


def page_compare() -> None:
    db = database()
    st.title("Compare catalysts")
    top = st.columns([1, 3], gap="large")
    with top[0]:
        T_ref = _temperature_input("compare_T")
    res = get_results(db, T_ref)
    cats = res.catalysts
    if cats.empty:
        st.info("No catalysed trials yet.")
        return
    order = list(cats["tof_ref"].sort_values(ascending=False, na_position="last").index)
    with top[1]:
        chosen = st.multiselect("Catalysts", list(cats.index), default=order[:4], key="compare_catalysts")
    if not chosen:
        st.info("Pick one or more catalysts.")
        return
    tabs = st.tabs(["Traces", "Arrhenius", f"TOF at {celsius(T_ref):.1f} °C", "Rate over the blank", "Trade-offs",
                    "Flags"])
    with tabs[0]:
        st.caption("Each catalyst's trials, conversion against time, coloured by temperature; lines are the fitted "
                   "rate laws. Conversion = product formed / the most the limiting reactant can give.")
        grid = st.columns(2)
        for n, cid in enumerate(chosen):
            ids = list(res.trials.index[res.trials["catalyst_id"] == cid])
            shown = ids[:charts.MAX_TRACES]
            title = cid if len(shown) == len(ids) else f"{cid} (first {len(shown)} of {len(ids)} trials)"
            chart = charts.trace_chart(res.trials, traces(db, res, shown), shown, normalise=True, title=title)
            grid[n % 2].altair_chart(chart, width="stretch")
    with tabs[1]:
        st.altair_chart(charts.arrhenius_chart(res, chosen), width="stretch")
        sub = cats.loc[chosen]
        st.dataframe(pd.DataFrame({
            "catalyst": chosen,
            "Ea [kJ/mol]": from_si(sub["ea"].to_numpy(float), "kJ/mol"),
            "Ea 95 % low": from_si(sub["ea_low"].to_numpy(float), "kJ/mol"),
            "Ea 95 % high": from_si(sub["ea_high"].to_numpy(float), "kJ/mol"),
            "ΔH‡ [kJ/mol]": from_si(sub["dh"].to_numpy(float), "kJ/mol"),
            "ΔS‡ [J/(mol K)]": sub["ds"].to_numpy(float),
            "temperatures": sub["n_temperatures"].to_numpy(),
            "trials in the fit": sub["n_arrhenius"].to_numpy(),
            "flags": [f.replace(";", ", ") or "—" for f in sub["flags"]],
        }), hide_index=True, width="stretch")
        st.caption("Filled points are in the fit; open points are trials of the same catalyst kept out of it "
                   "(another initial concentration, or illuminated). Bands: 95 % confidence of the fitted line.")
    with tabs[2]:
        st.altair_chart(charts.tof_bar_chart(cats, T_ref, chosen), width="stretch")
        st.caption("Pale bars are extrapolated outside the temperatures measured for that catalyst.")
    with tabs[3]:
        if cats.loc[chosen, "enhancement_ref"].notna().any():
            st.altair_chart(charts.enhancement_chart(cats, chosen, threshold=res.settings.min_enhancement),
                            width="stretch")
            st.caption(f"Dashed line: {res.settings.min_enhancement:g}× the blank, below which a trial is flagged "
                       "as blank-dominated.")
        else:
            st.info("No blank trials, so no rate over the blank.")
    with tabs[4]:
        a, b = st.columns(2)
        names = list(ranking.METRICS)
        x = a.selectbox("Across", names, index=names.index("tof"), key="compare_x", format_func=_metric_title)
        y = b.selectbox("Up", names, index=names.index("cost"), key="compare_y", format_func=_metric_title)
        frame = pd.DataFrame({"x": _metric_display(cats, x), "y": _metric_display(cats, y)}, index=cats.index)
        front = ranking.pareto_front(cats, x, y)
        st.altair_chart(charts.pareto_chart(frame, "x", "y", list(front.index[front]), _metric_title(x),
                                            _metric_title(y)), width="stretch")
        st.caption("Filled and joined: catalysts that no other catalyst beats on both figures at once.")
    with tabs[5]:
        show_flags(res, "catalyst", chosen, "No catalyst-level flags for these catalysts.")
        show_flags(res, "trial", res.trials.index[res.trials["catalyst_id"].isin(chosen)],
                   "No trial-level flags for these catalysts.")
    hot = cats.loc[chosen, "max_adiabatic_rise"].dropna()
    if not hot.empty:
        st.caption("Largest adiabatic temperature rise among these catalysts' trials: "
                   + ", ".join(f"{c} {v:.0f} K" for c, v in hot.items()))
        caution()


# ----- rank


def page_rank() -> None:
    db = database()
    st.title("Rank and export")
    controls, table = st.columns([1.3, 3], gap="large")
    with controls:
        T_ref = _temperature_input("rank_T")
        res = get_results(db, T_ref)
        names = [*ranking.METRICS, "score"]
        metric = st.selectbox("Rank by", names, key="rank_metric",
                              format_func=lambda n: "weighted score of several figures" if n == "score"
                              else _metric_title(n))
        weights = None
        if metric == "score":
            st.caption("Weights of the score (0 leaves a figure out)")
            given = {n: st.number_input(ranking.METRICS[n].title, value=1.0 if n in ("tof", "enhancement") else 0.0,
                                        min_value=0.0, step=0.5, key=f"rank_w_{n}", format="%g")
                     for n in ranking.METRICS}
            weights = {k: v for k, v in given.items() if v > 0}
        n_cat = max(1, len(res.catalysts))
        top_k = int(st.number_input("Shortlist size", min_value=1, max_value=n_cat, value=min(3, n_cat),
                                    key="rank_top"))
        codes = list(diagnostics.FLAG_CODES)
        exclude = st.multiselect("Leave out catalysts flagged", codes, key="rank_exclude",
                                 format_func=lambda c: flag_words(c)[0], placeholder="none",
                                 help="Left-out catalysts stay in the table, unranked, with the reason")
        demote = st.multiselect("Rank last when flagged", [c for c in codes if c not in exclude], key="rank_demote",
                                format_func=lambda c: flag_words(c)[0], placeholder="none")
    with table:
        if res.catalysts.empty:
            st.info("No catalysed trials yet.")
            return
        if metric == "score" and not weights:
            st.info("Give at least one figure a weight above 0.")
            return
        ranked = ranking.rank(res.catalysts, metric=metric, weights=weights or None, top_k=top_k,
                              exclude_flags=tuple(exclude), demote_flags=tuple(demote))
        label = "weighted score" if metric == "score" else ranking.METRICS[metric].title
        st.subheader(f"Ranking: {label} ({celsius(T_ref):.1f} °C)")
        shown = rank_table(ranked, res, metric, top_k)
        # Columns that say nothing for this ranking are dropped; the flags column never is, and is drawn wide.
        shown = shown.drop(columns=[c for c in ("left out", "ranked last", "note") if not shown[c].any()])
        st.dataframe(shown, hide_index=True, width="stretch", height=min(35 * (len(ranked) + 1) + 3, 600),
                     column_config={"flags": st.column_config.TextColumn("flags", width="large"),
                                    "note": st.column_config.TextColumn("note", width="medium")})
        st.caption(f"Intervals are 95 %. Rank range: where the catalyst lands in 95 % of random draws from every "
                   f"catalyst's uncertainty; P(top {top_k}): the share of draws in which it makes the shortlist. "
                   "Flags are always listed, also for left-out catalysts.")
        downloads(db, res, ranked, metric, top_k)
    if res.catalysts["max_adiabatic_rise"].notna().any() or res.trials["pressure_rise_max"].notna().any():
        caution()


def rank_table(ranked: pd.DataFrame, res: results.Results, metric: str, top_k: int) -> pd.DataFrame:
    """The ranking for display: value and interval in display units, rank range, P(top-k), flags and notes."""
    head = "score" if metric == "score" else _metric_title(metric).replace(" at the reference temperature", "")
    in_kj = metric != "score" and ranking.METRICS[metric].unit == "J/mol"
    convert = (lambda v: from_si(v, "kJ/mol")) if in_kj else (lambda v: v)
    flags = res.catalysts["flags"].reindex(ranked.index).fillna("")
    # The ranking's Pareto set: the metric against Ea (Ea against TOF when ranking by Ea), or the weighted figures.
    front = ("Pareto set (weighted figures)" if metric == "score" else
             "Pareto set (Ea and TOF)" if metric == "ea" else f"Pareto set ({metric} and Ea)")
    yes = {True: "yes", False: ""}
    return pd.DataFrame({
        "rank": pd.array(ranked["rank"].round(), dtype="Int64"),
        "catalyst": ranked.index.to_numpy(),
        head: convert(ranked["value"].to_numpy(float)),
        "95 % low": convert(ranked["value_low"].to_numpy(float)),
        "95 % high": convert(ranked["value_high"].to_numpy(float)),
        "rank range": [f"{lo:.0f}–{hi:.0f}" if pd.notna(lo) else "" for lo, hi in
                       zip(ranked["rank_low"], ranked["rank_high"])],
        f"P(top {top_k})": ranked["p_top_k"].to_numpy(float),
        # Context a chemist reads beside any metric: temperature sensitivity and the gain over the blank.
        "Ea [kJ/mol]": from_si(res.catalysts["ea"].reindex(ranked.index).to_numpy(float), "kJ/mol"),
        "rate / blank": res.catalysts["enhancement_ref"].reindex(ranked.index).to_numpy(float),
        "flags": [", ".join(flag_words(c)[0] for c in f.split(";")) if f else "—" for f in flags],
        "left out": ranked["excluded"].astype(bool).map(yes).to_numpy(),
        "ranked last": ranked["demoted"].astype(bool).map(yes).to_numpy(),
        front: ranked["pareto"].astype(bool).map(yes).to_numpy(),
        "note": ranked["note"].fillna("").to_numpy(),
    })


@st.cache_data(max_entries=8, show_spinner="Writing the shortlist…")
def _shortlist_files(_ranked: pd.DataFrame, _res: results.Results, metric: str, top_k: int,
                     key: str) -> dict[str, bytes]:
    # key (run key + ranking fingerprint) stands in for the unhashed frames.
    frame = exports.shortlist_table(_ranked, _res, top_k, metric=metric)
    out = {}
    with tempfile.TemporaryDirectory() as tmp:
        for suffix in exports.FORMATS:
            path = Path(tmp) / f"shortlist{suffix}"
            exports.write_table(frame, path, results=_res)
            out[suffix] = path.read_bytes()
    return out


_MIME = {".csv": "text/csv", ".xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
         ".parquet": "application/vnd.apache.parquet"}


def downloads(db: str, res: results.Results, ranked: pd.DataFrame, metric: str, top_k: int) -> None:
    """Shortlist as CSV, Excel and Parquet, and the HTML report (prepared on request: it takes a few seconds)."""
    fingerprint = int(pd.util.hash_pandas_object(ranked.reset_index().astype(str), index=False).sum())
    key = f"{res.run_key}|{metric}|{top_k}|{fingerprint}"
    files = _shortlist_files(ranked, res, metric, top_k, key)
    st.markdown("**Download**")
    cols = st.columns(4)
    for col, (suffix, data) in zip(cols, files.items()):
        col.download_button(f"Shortlist ({suffix[1:]})", data, file_name=f"shortlist{suffix}", mime=_MIME[suffix],
                            key=f"rank_dl{suffix}", on_click="ignore")
    with cols[3]:
        ready = st.session_state.get("rank_report")
        if ready is not None and ready[0] == key:
            st.download_button("Report (html)", ready[1], file_name="catalyst-report.html", mime="text/html",
                               key="rank_dl_report", on_click="ignore", type="primary")
        elif st.button("Prepare the HTML report", key="rank_report_make"):
            with st.spinner("Writing the report…"), tempfile.TemporaryDirectory() as tmp:
                path = report.write_report(db, Path(tmp) / "report.html", res.settings, ranked=ranked, top_k=top_k,
                                           metric=metric)
                st.session_state["rank_report"] = (key, path.read_bytes())
            st.rerun()
