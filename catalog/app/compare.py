"""Compare page: the chosen catalysts' traces on shared axes, Arrhenius plots, TOF, rate enhancement, trade-offs."""

from __future__ import annotations

import altair as alt
import numpy as np
import pandas as pd
import streamlit as st

from catalog.analysis import ranking, results
from catalog.app import common
from catalog.present import charts, labels, trace_charts, tradeoff
from catalog.present.numbers import format_interval, format_number
from catalog.units import celsius, from_si

#: Readings drawn per trial in the overlay (the fitted line shows the shape; more dots only crowd it).
OVERLAY_POINTS = 40


def overlay_chart(res: results.Results, points: pd.DataFrame, trial_ids: list[str]) -> alt.LayerChart:
    """Conversion against time of every chosen trial on one pair of axes, coloured by catalyst.

    Conversion :math:`X = (n - a)/n_\\max` (product formed over the most the limiting reactant can give) puts
    trials of different charges on one scale; dots are readings, lines the fitted rate laws.
    """
    observed, fitted = trace_charts.trace_frames(res.trials, points, trial_ids, normalise=True)
    observed = observed.groupby("trial_id", group_keys=False).apply(
        lambda g: g.iloc[np.unique(np.linspace(0, len(g) - 1, min(len(g), OVERLAY_POINTS)).round().astype(int))])
    colour = alt.Color("catalyst_id:N", title="catalyst", scale=alt.Scale(scheme=charts.CATEGORY_SCHEME),
                       legend=alt.Legend(labelLimit=charts.LABEL_LIMIT))
    tips = [alt.Tooltip("catalyst_id:N", title="catalyst"), alt.Tooltip("trial_id:N", title="trial"),
            alt.Tooltip("temperature_c:Q", title="T [°C]", format=".1f"),
            alt.Tooltip("time_min:Q", title="time [min]", format=".3g")]
    x = alt.X("time_min:Q", title="time [min]")
    y = alt.Y("progress:Q", title="conversion")
    dots = alt.Chart(observed).mark_circle(size=16, opacity=0.5).encode(
        x=x, y=y, color=colour, detail="trial_id:N",
        tooltip=[*tips, alt.Tooltip("progress:Q", title="conversion", format=".3f")])
    lines = alt.Chart(fitted).mark_line(strokeWidth=1.3).encode(x=x, y="progress:Q", color=colour,
                                                                 detail="trial_id:N", tooltip=tips)
    return alt.layer(dots, lines).properties(height=380, title="Conversion against time, all chosen catalysts")


def _rows_height(n: int) -> int:
    # Streamlit stretches a chart to the column width but would squash a step height: give each catalyst a row.
    return 34 * max(n, 1) + 40


def _trace_tab(db: str, res: results.Results, chosen: list[str]) -> None:
    ids: list[str] = []
    share = max(1, trace_charts.MAX_TRACES // len(chosen))
    for cid in chosen:
        ids += list(res.trials.index[res.trials["catalyst_id"] == cid])[:share]
    if not ids:
        st.info("These catalysts have no trials with a trace.")
        return
    common.chart(overlay_chart(res, common.traces(db, res, ids), ids))
    st.caption("Shared axes; colour is the catalyst, hover a dot for its trial and temperature. Conversion = "
               "product formed / the most the limiting reactant can give. "
               f"At most {share} trials per catalyst are drawn.")


def _arrhenius_tab(res: results.Results, chosen: list[str]) -> None:
    common.chart(charts.arrhenius_chart(res, chosen))
    sub = res.catalysts.loc[chosen]
    ea = from_si(sub[["ea", "ea_low", "ea_high", "dh"]].to_numpy(float), "kJ/mol")
    st.dataframe(pd.DataFrame({
        "catalyst": [str(c) for c in chosen],
        "apparent Ea [kJ/mol] (95 % interval)": [common.blank(format_interval(*row[:3])) for row in ea],
        "ΔH‡ [kJ/mol]": [common.blank(format_number(v)) for v in ea[:, 3]],
        "ΔS‡ [J mol⁻¹ K⁻¹]": [common.blank(format_number(v)) for v in sub["ds"]],
        "temperatures": sub["n_temperatures"].to_numpy(),
        "trials in the fit": sub["n_arrhenius"].to_numpy(),
        "flags": [labels.flags_text(f, with_codes=False) for f in sub["flags"]],
    }), hide_index=True, width="stretch", column_config={"flags": st.column_config.TextColumn(width="large")})
    st.caption("Filled points are in the fit; open points are trials of the same catalyst kept out of it "
               "(another initial concentration, or illuminated). Bands: 95 % confidence of the fitted line.")


def _tradeoff_tab(res: results.Results, chosen: list[str]) -> None:
    cats = res.catalysts.loc[chosen]
    names = [n for n in ranking.METRICS if n != "ea"]  # a low Ea is not a merit: transport control lowers it
    default_x, default_y = tradeoff.trade_off_axes(cats)
    a, b = st.columns(2)
    x = a.selectbox("Across", names, index=names.index(default_x), key="compare_x", format_func=common.figure_title)
    y = b.selectbox("Up", names, index=names.index(default_y), key="compare_y", format_func=common.figure_title)
    frame = pd.DataFrame({"x": common.figure_values(cats, x)["value"], "y": common.figure_values(cats, y)["value"]})
    front = ranking.pareto_front(cats, x, y)
    logs = {k: ranking.METRICS[k].log_scale for k in (x, y)}
    common.chart(charts.pareto_chart(frame, "x", "y", list(front.index[front]), common.figure_title(x),
                                     common.figure_title(y), warnings=tradeoff.transport_warnings(cats),
                                     log_x=logs[x], log_y=logs[y]))
    warned = tradeoff.transport_warnings(cats)
    st.caption("Only the chosen catalysts are drawn. Filled and joined: catalysts that no other chosen catalyst "
               "beats on both figures at once. ⚠ triangle: the rate may be limited by mass transfer, not by the "
               "catalyst, so its place on the front is not to be trusted.")
    for cid, why in warned.items():
        st.warning(f"{common.text(cid)}: {common.text(why)}", icon=":material/warning:")


def render() -> None:
    db = common.database()
    st.title("Compare catalysts")
    top = st.columns([1, 3], gap="large")
    with top[0]:
        T_ref = common.temperature_input("compare_T")
    res = common.get_results(db, T_ref)
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
    t_text = format_number(float(celsius(T_ref)), "degC")
    tabs = st.tabs(["Traces", "Arrhenius", f"TOF at {t_text}", labels.ENHANCEMENT_SHORT.capitalize(), "Trade-offs",
                    "Flags"])
    with tabs[0]:
        _trace_tab(db, res, chosen)
    with tabs[1]:
        _arrhenius_tab(res, chosen)
    with tabs[2]:
        common.chart(charts.tof_bar_chart(cats, T_ref, chosen).properties(height=_rows_height(len(chosen))))
        st.caption("Bars: TOF at the reference temperature from each catalyst's Arrhenius fit; whiskers: 95 % "
                   "interval. Pale bars are extrapolated outside the temperatures measured for that catalyst.")
    with tabs[3]:
        if cats.loc[chosen, "enhancement_ref"].notna().any():
            common.chart(charts.enhancement_chart(cats, chosen, threshold=res.settings.min_enhancement).properties(
                height=_rows_height(len(chosen))))
            st.caption(f"{labels.ENHANCEMENT.capitalize()}: the catalysed rate over the blank rate at the same "
                       f"temperature. Dashed line: {res.settings.min_enhancement:g}×, below which a trial is "
                       "flagged as blank-dominated.")
        else:
            st.info(f"No blank trials, so no {labels.ENHANCEMENT}.")
    with tabs[4]:
        _tradeoff_tab(res, chosen)
    with tabs[5]:
        common.show_flags(res, "catalyst", chosen, "No catalyst-level flags for these catalysts.")
        common.show_flags(res, "trial", res.trials.index[res.trials["catalyst_id"].isin(chosen)],
                          "No trial-level flags for these catalysts.")
    hot = cats.loc[chosen, "max_adiabatic_rise"].dropna()
    if not hot.empty:
        st.caption("Largest adiabatic temperature rise among these catalysts' trials: "
                   + ", ".join(f"{common.text(c)} {format_number(v, 'K')}" for c, v in hot.items()))
        common.caution()


if __name__ == "__main__":
    render()
