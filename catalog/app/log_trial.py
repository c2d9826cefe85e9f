"""Log-a-trial page: one trial's conditions and trace, previewed, checked by the importer, saved and analysed."""

from __future__ import annotations

import tempfile
from datetime import datetime
from pathlib import Path

import altair as alt
import pandas as pd
import streamlit as st

from catalog import store
from catalog.app import common
from catalog.app.trials import show_trial
from catalog.core.measurements import MEASUREMENTS
from catalog.errors import Problem, ValidationError
from catalog.ingest import sources, upload

NEW_CATALYST = "New catalyst…"
#: Shown unit → spelling written into a `name [unit]` header.
UNIT_SPELLING = {"°C": "degC", "µm": "um", "m²/g": "m^2/g", "µmol/g": "umol/g"}
_WHERE = {sources.TRIALS_FILE: "form", sources.CATALYSTS_FILE: "new catalyst",
          sources.TRACES_FILE: "trace (row 2 = first reading)"}
_CATALYST_HEADER = ["catalyst_id", "metal", "metal_loading [wt%]", "dispersion [%]", "support", "description"]


def next_trial_id(existing) -> str:
    """The first free id of the form T0001, T0002, … after the number of stored trials."""
    taken = set(existing)
    n = len(taken) + 1
    while f"T{n:04d}" in taken:
        n += 1
    return f"T{n:04d}"


def _cell(value) -> str:
    if value is None:
        return ""
    return repr(float(value)) if isinstance(value, float | int) else str(value)


def _number(label: str, units: tuple[str, ...] | None, key: str, value=None, help: str | None = None):
    """A number field with its unit chooser beside it; returns (value or None, header unit spelling or None)."""
    if not units:
        return st.number_input(label, value=value, key=key, help=help, format="%g"), None
    left, right = st.columns([3, 1], vertical_alignment="bottom")
    number = left.number_input(label, value=value, key=key, help=help, format="%g")
    unit = right.selectbox(f"unit of {label.lower()}", units, key=f"{key}_unit", label_visibility="collapsed")
    return number, UNIT_SPELLING.get(unit, unit)


def _read_trace(file, pasted: str) -> upload.PastedTrace:
    if file is not None:
        return upload.read_trace_upload(common.uploads([file])[0])
    return upload.parse_trace_text(pasted or "", "pasted trace")


def _preview_chart(rows: list[tuple[str, str]], time_unit: str, signal_unit: str) -> alt.Chart | None:
    """The readings as they will be stored, before saving; None when no line holds two numbers."""
    frame = pd.DataFrame(rows, columns=["time", "signal"]).apply(pd.to_numeric, errors="coerce").dropna()
    if frame.empty:
        return None
    return alt.Chart(frame).mark_circle(size=22).encode(
        x=alt.X("time:Q", title=f"time [{time_unit}]"),
        y=alt.Y("signal:Q", title=f"signal [{signal_unit}]", scale=alt.Scale(zero=False))).properties(
        height=220, title=f"Preview of the trace ({len(frame)} readings)")


def _conditions(measurement: str, catalyst_id: str | None) -> list[tuple[str, object, str | None]]:
    fields: list[tuple[str, object, str | None]] = []

    def add(name, label, units, value=None, help=None):
        number, unit = _number(label, units, f"log_{name}", value, help)
        fields.append((name, number, unit))

    add("temperature", "Temperature", ("°C", "K"), common.DEFAULT_REFERENCE_C)
    if catalyst_id is not None:
        add("catalyst_mass", "Catalyst mass", ("mg", "g"), 10.0)
    add("limiting_amount", "Limiting reactant", ("mmol", "mol"), 1.0)
    add("product_ratio", "Product per limiting reactant (required)", None, None,
        "Moles of the measured product formed per mole of limiting reactant, from the balanced equation (e.g. 3 "
        "for three H₂ per ammonia borane). TOF and conversion scale with it, so there is no default.")
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
    return fields


def _new_catalyst() -> tuple[str, list[list[str]]]:
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
    return catalyst_id, [[catalyst_id, metal, _cell(loading), _cell(dispersion), support, description]]


def render() -> None:
    db = common.database()
    st.title("Log a trial")
    st.caption("One trial's conditions and trace. It is checked by the same importer as a campaign upload, "
               "written only when every check passes, and analysed at once.")
    catalysts = common.registry(db)
    # After a save the id field moves on to a free id, so a second trial is never logged under the first one's id.
    if st.session_state.pop("log_id_reset", False) or "log_id" not in st.session_state:
        st.session_state["log_id"] = next_trial_id(store.list_trials(db)["trial_id"])
    form, outcome = st.columns([3, 2], gap="large")
    with form:
        trial_id = st.text_input("Trial id", key="log_id")
        choice = st.selectbox("Catalyst", [common.BLANK_LABEL, *catalysts["catalyst_id"], NEW_CATALYST],
                              key="log_catalyst", index=1 if len(catalysts) else 0)
        catalyst_rows: list[list[str]] = []
        catalyst_id = None if choice == common.BLANK_LABEL else choice
        if choice == NEW_CATALYST:
            catalyst_id, catalyst_rows = _new_catalyst()
        measurement = st.selectbox("Measurement", list(MEASUREMENTS), key="log_measurement",
                                   format_func=lambda m: MEASUREMENTS[m].label)
        fields = _conditions(measurement, catalyst_id)
        operator = st.text_input("Operator", key="log_operator").strip()
        a, b = st.columns(2)
        day = a.date_input("Started on", value=datetime.now().date(), key="log_day")
        clock = b.time_input("at", value=datetime.now().time().replace(second=0, microsecond=0), key="log_time")
        notes = st.text_input("Notes", key="log_notes")
        st.markdown("**Trace**: two columns, time and signal")
        a, b = st.columns(2)
        time_unit = a.selectbox("Time unit", ("s", "min", "h"), key="log_time_unit")
        signal_unit = b.selectbox("Signal unit", MEASUREMENTS[measurement].units, key=f"log_signal_unit_{measurement}")
        file = st.file_uploader("Upload the trace (CSV or .xlsx)", type=["csv", "txt", "xlsx"], key="log_trace_file")
        pasted = st.text_area("…or paste it (one reading per line: time, value; a decimal comma needs ';' or a tab "
                              "between the columns)", key="log_trace_text", height=140)
        trace, trace_error = None, None
        if file is not None or (pasted or "").strip():
            try:
                trace = _read_trace(file, pasted)
            except ValidationError as exc:
                trace_error = exc
        if trace is not None:
            for note in trace.notes:
                st.caption(f"Note: {note}")
            preview = _preview_chart(trace.rows, time_unit, signal_unit)
            if preview is not None:
                common.chart(preview)
        save = st.button("Check and save the trial", type="primary", key="log_save")

    with outcome:
        if save:
            started = f"{day.isoformat()}T{clock.strftime('%H:%M')}"
            header = ["trial_id", "catalyst_id", "measurement", "signal_unit", "operator", "started_at", "notes"]
            row = [trial_id.strip(), catalyst_id or "", measurement, signal_unit, operator, started, notes]
            # The previous trial's result would read as this submission's: it goes whatever the outcome.
            st.session_state.pop("logged_trial", None)
            if _save(db, header, row, fields, trace, trace_error, time_unit, catalyst_rows, operator):
                st.session_state["log_id_reset"] = True
                st.rerun()
        logged = st.session_state.get("logged_trial")
        if logged:
            res = common.get_results(db)
            if logged["id"] in res.trials.index:
                st.success(f"Trial {common.text(logged['id'])} saved and analysed.")
                for note in logged["notes"]:
                    st.caption(f"Note: {common.text(note)}")
                show_trial(db, res, logged["id"], compact=True)


def _save(db, header, row, fields, trace, trace_error, time_unit, catalyst_rows, operator) -> bool:
    """Write the form as a one-trial campaign through the importer; True when saved, else problems are shown."""
    if trace_error is not None:
        common.show_problems(trace_error.problems)
        return False
    if trace is None or not trace.rows:
        common.show_problems([Problem("trace", None, None, "no readings: upload a file or paste time, value lines")])
        return False
    values = {name: value for name, value, _ in fields}
    if values.get("product_ratio") is None:
        common.show_problems([Problem("form", None, "product_ratio", "say how many moles of the measured product "
                                      "one mole of limiting reactant gives; TOF and conversion depend on it")])
        return False
    for name, value, unit in fields:
        header.append(f"{name} [{unit}]" if unit else name)
        row.append(_cell(value))
    trial_id = row[0]
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / sources.CATALYSTS_FILE).write_text(upload.csv_text(_CATALYST_HEADER, catalyst_rows),
                                                     encoding="utf-8")
        (folder / sources.TRIALS_FILE).write_text(upload.csv_text(header, [row]), encoding="utf-8")
        (folder / sources.TRACES_FILE).write_text(
            upload.csv_text(["trial_id", f"time [{time_unit}]", "value"], [[trial_id, t, v] for t, v in trace.rows]),
            encoding="utf-8")
        try:
            report = store.import_campaign(db, sources.read_source(folder), who=operator or None)
        except ValidationError as exc:
            common.show_problems(exc.problems, _WHERE)
            return False
    if report.duplicate_of is not None:
        st.info(f"This exact trial was already saved (import #{report.duplicate_of}); nothing new was written.")
        return False
    st.session_state["logged_trial"] = {"id": trial_id, "notes": [*trace.notes, *report.notes]}
    st.cache_data.clear()
    return True


if __name__ == "__main__":
    render()
