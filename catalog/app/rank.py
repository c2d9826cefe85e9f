"""Rank page: the ranked shortlist with intervals, flags and the trade-off set, and its downloads."""

from __future__ import annotations

import tempfile
from pathlib import Path

import pandas as pd
import streamlit as st

from catalog.analysis import diagnostics, ranking, results
from catalog.app import common
from catalog.present import exports, labels, report, tradeoff
from catalog.present.numbers import format_interval, format_number
from catalog.units import celsius, from_si

#: Shortlisted rows are tinted so the eye finds them first.
SHORTLIST_TINT = "background-color: rgba(46, 125, 50, 0.14)"
_MIME = {".csv": "text/csv", ".xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
         ".parquet": "application/vnd.apache.parquet"}


def score_explanation(weights: dict[str, float]) -> str:
    """How the weighted score is built, with these weights, in words and one equation."""
    total = sum(weights.values())
    parts = ", ".join(f"{common.figure_title(k)} × {format_number(w / total, digits=2)}" for k, w in weights.items())
    return ("**How the score is built.** Each figure is put on a common scale: its value (the logarithm for "
            "figures spanning decades, such as TOF) minus the mean over the ranked catalysts, divided by its standard "
            "deviation, with the sign turned where lower is better. The score is the weighted sum "
            "$S = \\sum_i w_i z_i$; 0 is an average catalyst, +1 is one standard deviation better. The interval "
            "and the rank range come from random draws within every figure's uncertainty. Relative weights: "
            f"{common.text(parts)}.")


def rank_table(ranked: pd.DataFrame, res: results.Results, metric: str, top_k: int,
               front_words: str) -> pd.DataFrame:
    """The ranking for display: figure with its interval (rounded together), rank range, P(top-k), flags, notes.

    Missing figures are empty cells; flags are shown by title.
    """
    cats = res.catalysts.reindex(ranked.index)
    if metric == "score":
        head, values = "weighted score (95 % interval)", ranked[["value", "value_low", "value_high"]]
    else:
        head = f"{common.figure_title(metric)} (95 % interval)"
        values = common.figure_values(cats, metric)
    ea = from_si(cats[["ea", "ea_low", "ea_high"]].to_numpy(float), "kJ/mol")
    enh = cats[["enhancement_ref", "enhancement_ref_low", "enhancement_ref_high"]].to_numpy(float)
    yes = {True: "yes", False: ""}
    warned = tradeoff.transport_warnings(cats)
    return pd.DataFrame({
        "rank": pd.array(ranked["rank"].round(), dtype="Int64"),
        "catalyst": ranked.index.astype(str),
        head: [common.blank(format_interval(*row)) for row in values.to_numpy(float)],
        "rank range": [f"{lo:.0f}–{hi:.0f}" if pd.notna(lo) else "" for lo, hi in
                       zip(ranked["rank_low"], ranked["rank_high"], strict=True)],
        f"P(top {top_k})": [common.blank(format_number(p, digits=2)) for p in ranked["p_top_k"]],
        # Context a chemist reads beside any figure: temperature sensitivity and the gain over the blank.
        "apparent Ea [kJ/mol]": [common.blank(format_interval(*row)) for row in ea],
        f"{labels.ENHANCEMENT_SHORT} [×]": [common.blank(format_interval(*row)) for row in enh],
        "flags": [labels.flags_text(f, with_codes=False) for f in cats["flags"].fillna("")],
        "left out": ranked["excluded"].astype(bool).map(yes).to_numpy(),
        "ranked last": ranked["demoted"].astype(bool).map(yes).to_numpy(),
        # A transport-limited catalyst can sit on the front only because mass transfer flattened its figures.
        front_words: ["yes ⚠ transport warning" if on and cid in warned else yes[bool(on)]
                      for cid, on in zip(ranked.index.astype(str), ranked["pareto"], strict=True)],
        "note": ranked["note"].fillna("").astype(str).to_numpy(),
    })


def _controls():
    """The ranking choices in one row above the table, so the table gets the page's full width."""
    a, b, c, d = st.columns([1.3, 1.6, 1.6, 0.8], gap="medium")
    with a:
        T_ref = common.temperature_input("rank_T")
    names = [*ranking.METRICS, "score"]
    metric = b.selectbox("Rank by", names, key="rank_metric",
                         format_func=lambda n: "weighted score of several figures" if n == "score"
                         else common.figure_title(n, short=False))
    codes = list(diagnostics.FLAG_CODES)
    exclude = c.multiselect("Leave out catalysts flagged", codes, key="rank_exclude",
                            format_func=labels.flag_title, placeholder="none",
                            help="Left-out catalysts stay in the table, unranked, with the reason")
    demote = c.multiselect("Rank last when flagged", [c for c in codes if c not in exclude], key="rank_demote",
                           format_func=labels.flag_title, placeholder="none")
    weights = None
    if metric == "score":
        with b.container(border=True):
            st.caption("Weights of the score (0 leaves a figure out)")
            given = {n: st.number_input(common.figure_title(n), value=1.0 if n in ("tof", "enhancement") else 0.0,
                                        min_value=0.0, step=0.5, key=f"rank_w_{n}", format="%g")
                     for n in ranking.METRICS}
        weights = {k: v for k, v in given.items() if v > 0}
    return T_ref, metric, weights, exclude, demote, d


def render() -> None:
    db = common.database()
    st.title("Rank and export")
    T_ref, metric, weights, exclude, demote, size_slot = _controls()
    res = common.get_results(db, T_ref)
    n_cat = max(1, len(res.catalysts))
    top_k = int(size_slot.number_input("Shortlist size", min_value=1, max_value=n_cat, value=min(3, n_cat),
                                       key="rank_top"))
    if res.catalysts.empty:
        st.info("No catalysed trials yet.")
        return
    if metric == "score" and not weights:
        st.info("Give at least one figure a weight above 0.")
        return
    axes = None if metric == "score" else tradeoff.trade_off_axes(res.catalysts, metric)
    front_words = ("Pareto set (weighted figures)" if axes is None else
                   f"Pareto set ({labels.FIGURES[axes[0]][1]} vs {labels.FIGURES[axes[1]][1]})")
    ranked = ranking.rank(res.catalysts, metric=metric, weights=weights or None, top_k=top_k,
                          exclude_flags=tuple(exclude), demote_flags=tuple(demote), pareto_metrics=axes)
    label = "weighted score" if metric == "score" else labels.FIGURES[metric][0]
    st.subheader(f"Ranking on the {label} ({format_number(float(celsius(T_ref)), 'degC')})")
    shown = rank_table(ranked, res, metric, top_k, front_words)
    # Columns that say nothing for this ranking are dropped; the flags column never is.
    shown = shown.drop(columns=[c for c in ("left out", "ranked last", "note") if not shown[c].any()])
    listed = shown["rank"].fillna(top_k + 1).to_numpy() <= top_k
    styled = shown.style.apply(lambda r: [SHORTLIST_TINT if listed[r.name] else ""] * len(r), axis=1)
    st.dataframe(styled, hide_index=True, width="stretch", height=min(35 * (len(ranked) + 1) + 3, 600),
                 column_config={"rank": st.column_config.NumberColumn("rank", pinned=True, width="small"),
                                "catalyst": st.column_config.TextColumn("catalyst", pinned=True),
                                "flags": st.column_config.TextColumn("flags", width="large"),
                                "note": st.column_config.TextColumn("note", width="large")})
    warned = tradeoff.transport_warnings(res.catalysts.loc[ranked.index[listed]])
    for cid, why in warned.items():
        st.warning(f"Shortlisted **{common.text(cid)}** carries a transport warning ({common.text(why)}): its "
                   "rate may measure mass transfer rather than the catalyst.", icon=":material/warning:")
    st.caption(f"Tinted rows: the shortlist (top {top_k}). Intervals are 95 %. Rank range: where the catalyst "
               f"lands in 95 % of random draws from every catalyst's uncertainty; P(top {top_k}): the share of "
               "draws in which it makes the shortlist. Pareto set: no other catalyst is better on both figures. "
               "Flags are always listed, also for left-out catalysts. Empty cell: not computable.")
    if metric == "score":
        st.markdown(score_explanation(weights))
    downloads(db, res, ranked, metric, top_k)
    if res.catalysts["max_adiabatic_rise"].notna().any() or res.trials["pressure_rise_max"].notna().any():
        common.caution()


@st.cache_data(max_entries=8, show_spinner="Writing the shortlist…")
def _shortlist_files(_ranked: pd.DataFrame, _res: results.Results, metric: str, top_k: int,
                     key: str) -> dict[str, bytes]:
    # key (run key + ranking fingerprint) stands in for the unhashed frames.
    frame = exports.shortlist_table(_ranked, _res, top_k, metric=metric, currency=common.CURRENCY)
    out = {}
    with tempfile.TemporaryDirectory() as tmp:
        for suffix in exports.FORMATS:
            path = Path(tmp) / f"shortlist{suffix}"
            exports.write_table(frame, path, results=_res)
            out[suffix] = path.read_bytes()
    return out


def downloads(db: str, res: results.Results, ranked: pd.DataFrame, metric: str, top_k: int) -> None:
    """Shortlist as CSV, Excel and Parquet, and the HTML report (prepared on request: it takes a few seconds)."""
    fingerprint = int(pd.util.hash_pandas_object(ranked.reset_index().astype(str), index=False).sum())
    key = f"{res.run_key}|{metric}|{top_k}|{fingerprint}"
    files = _shortlist_files(ranked, res, metric, top_k, key)
    st.markdown("**Download**")
    cols = st.columns(4)
    for col, (suffix, data) in zip(cols, files.items(), strict=False):
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
                                           metric=metric, currency=common.CURRENCY, results=res)
                st.session_state["rank_report"] = (key, path.read_bytes())
            st.rerun()


if __name__ == "__main__":
    render()
