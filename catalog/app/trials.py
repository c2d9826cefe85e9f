"""Trials page: filter the trial list and open one trial (figures, raw signal, fit, residuals, flags, hazards)."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd
import streamlit as st

from catalog.analysis import results
from catalog.app import common
from catalog.core.measurements import MEASUREMENTS
from catalog.present import labels, trace_charts
from catalog.present.numbers import format_number, format_pm, unit_label
from catalog.units import celsius, from_si

_RATE_LAWS = {"zero": "zero order", "first": "first order", "second": "second order"}


def raw_signal_chart(points: pd.DataFrame, measurement: str) -> alt.Chart:
    """The stored readings of one trial in the measurement's usual unit, as recorded (before any conversion).

    Field names are plain identifiers: a name with square brackets would be read by Vega-Lite as nested-field
    access and draw nothing. Units go in the axis titles.
    """
    unit = MEASUREMENTS[measurement].reference_unit
    data = pd.DataFrame({"time_min": from_si(points["t"].to_numpy(float), "min"),
                         "signal": from_si(points["value"].to_numpy(float), unit)})
    shown = unit_label(unit)
    return alt.Chart(data).mark_circle(size=18).encode(
        x=alt.X("time_min:Q", title="time [min]"),
        y=alt.Y("signal:Q", title=f"signal [{shown}]", scale=alt.Scale(zero=False)),
        tooltip=[alt.Tooltip("time_min:Q", title="time [min]", format=".3g"),
                 alt.Tooltip("signal:Q", title=f"signal [{shown}]", format=".4g")]).properties(
        title=f"Raw signal: {labels.measurement_words(measurement)}", height=300)


def trial_table(trials: pd.DataFrame) -> pd.DataFrame:
    """The trial list in display units and plain words, flags always shown by title."""
    tof = [format_pm(v, s) for v, s in zip(trials["tof"], trials["tof_se"], strict=True)]
    return pd.DataFrame({
        "trial": trials.index.astype(str),
        "catalyst": trials["catalyst_id"].fillna(common.BLANK_LABEL).astype(str).to_numpy(),
        "T [°C]": np.round(celsius(trials["temperature"].to_numpy(float)), 1),
        "measurement": [labels.measurement_words(m) for m in trials["measurement"]],
        "mass [mg]": [common.blank(format_number(v)) for v in from_si(trials["catalyst_mass"].to_numpy(float), "mg")],
        "rate law": [_RATE_LAWS.get(m, str(m)) for m in trials["model"]],
        "r0 [µmol/min]": [common.blank(format_number(v)) for v in from_si(trials["r0"].to_numpy(float), "umol/min")],
        "TOF [s⁻¹]": [common.blank(t) for t in tof],
        f"{labels.ENHANCEMENT_SHORT} [×]": [common.blank(format_number(v)) for v in trials["enhancement"]],
        "R²": [common.blank(format_number(v, digits=4)) for v in trials["r2"]],
        "operator": trials["operator"].fillna("").astype(str).to_numpy(),
        "started": trials["started_at"].dt.strftime("%Y-%m-%d %H:%M").fillna("").to_numpy(),
        "flags": [labels.flags_text(f, with_codes=False) for f in trials["flags"]],
    })


def figures(row: pd.Series) -> list[tuple[str, str]]:
    """The headline figures of one trial as (card label with unit, value), short enough for a narrow card."""
    model = _RATE_LAWS.get(row["model"], str(row["model"]))
    return [
        ("Temperature [°C]", format_number(float(celsius(row["temperature"])))),
        ("Initial rate r0 [µmol/min]", format_number(float(from_si(row["r0"], "umol/min")))),
        ("TOF [s⁻¹]", format_pm(row["tof"], row["tof_se"])),
        ("Rate law", model),
        (f"{labels.ENHANCEMENT_SHORT.capitalize()} [×]", format_number(row["enhancement"])),
        ("Fit R²", format_number(row["r2"], digits=4)),
    ]


def show_trial(db: str, res: results.Results, trial_id: str, compact: bool = False) -> None:
    """One trial: its figures, raw signal, product formed with the fitted rate law, residuals, flags, hazards."""
    row = res.trials.loc[trial_id]
    if compact:
        # A narrow column cuts a card's value off ("2.09440 ± …"): a two-column table wraps instead.
        st.markdown("| figure | value |\n|---|---|\n" + "\n".join(
            f"| {label} | {common.text(value)} |" for label, value in figures(row)))
    else:
        cols = st.columns(3)
        for i, (label, value) in enumerate(figures(row)):
            cols[i % 3].metric(label, value, help=labels.ENHANCEMENT if "enhancement" in label else None)
    if row["flags"]:
        st.warning("Flags on this trial: " + common.text(labels.flags_text(row["flags"])))
    points = common.traces(db, res, [trial_id])
    fit = trace_charts.trace_chart(res.trials, points, [trial_id], normalise=False,
                             title="Product formed (dots) and fitted rate law (line)").properties(height=300)
    resid = trace_charts.residual_chart(res.trials, points, [trial_id], normalise=False).properties(height=200)
    if compact:
        common.chart(fit)
        common.chart(resid)
    else:
        a, b = st.columns(2)
        with a:
            common.chart(raw_signal_chart(points, row["measurement"]))
        with b:
            common.chart(fit)
        common.chart(resid)
    common.show_flags(res, "trial", [trial_id], "No flags on this trial.")
    rise, band, burst = row["adiabatic_rise"], row["hazard_band"], row["pressure_rise_max"]
    if pd.notna(rise) or pd.notna(burst):
        parts = []
        if pd.notna(rise):
            parts.append(f"adiabatic temperature rise {format_number(rise, 'K')} (band: {band})")
        if pd.notna(burst):
            parts.append(f"largest pressure rise in the closed headspace {format_number(from_si(burst, 'kPa'), 'kPa')}")
        st.markdown("**Hazard screening**: " + "; ".join(parts))
        common.caution()
    if not compact:
        with st.expander("All stored figures of this trial (SI units)"):
            st.dataframe(row.astype(str).replace({"nan": "", "None": "", "<NA>": "", "NaT": ""}).rename(
                "value").to_frame(), width="stretch")


def _filtered(trials: pd.DataFrame) -> pd.DataFrame:
    """The filter controls and the trials they keep."""
    with st.expander("Filter", expanded=True):
        a, b, c = st.columns(3)
        names = [common.BLANK_LABEL, *sorted(trials["catalyst_id"].dropna().unique())]
        chosen = a.multiselect("Catalyst", names, key="trials_catalyst", placeholder="all catalysts")
        kinds = b.multiselect("Measurement", list(MEASUREMENTS), key="trials_measurement",
                              format_func=labels.measurement_words, placeholder="all")
        operators = c.multiselect("Operator", sorted(trials["operator"].dropna().unique()), key="trials_operator",
                                  placeholder="all")
        t_c = celsius(trials["temperature"].to_numpy(float))
        low, high = float(np.floor(t_c.min())), float(np.ceil(t_c.max()))
        span = a.slider("Temperature [°C]", low, max(high, low + 1), (low, max(high, low + 1)), key="trials_T")
        started = trials["started_at"].dropna()
        days = None
        if not started.empty:
            days = b.date_input("Started between", (started.min().date(), started.max().date()), key="trials_days")
        codes = sorted({c for f in trials["flags"] for c in f.split(";") if c})
        fixed = ("any", "flagged only", "not flagged")
        flag_choice = c.selectbox("Flags", [*fixed, *codes], key="trials_flags",
                                  format_func=lambda c: c if c in fixed else labels.flag_title(c))
    keep = (t_c >= span[0]) & (t_c <= span[1])
    if chosen:
        keep &= trials["catalyst_id"].fillna(common.BLANK_LABEL).isin(chosen).to_numpy()
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
        keep &= trials["flags"].str.split(";").apply(lambda found: flag_choice in found).to_numpy()
    return trials[keep]


def render() -> None:
    db = common.database()
    st.title("Trials")
    res = common.get_results(db)
    trials = res.trials
    if trials.empty:
        st.info("No trials yet: import a campaign or log a trial.")
        return
    shown = _filtered(trials)
    st.caption(f"{len(shown):,} of {len(trials):,} trials. Times are as entered; TOF is turnovers of the limiting "
               "reactant per active site per second, after the blank rate is subtracted; "
               f"{labels.ENHANCEMENT_SHORT} is the {labels.ENHANCEMENT}.")
    st.dataframe(trial_table(shown), hide_index=True, width="stretch", height=320,
                 column_config={"flags": st.column_config.TextColumn(width="large")})
    if shown.empty:
        return
    st.subheader("One trial")
    trial_id = st.selectbox("Open trial", list(shown.index), key="trials_open")
    show_trial(db, res, trial_id)


if __name__ == "__main__":
    render()
