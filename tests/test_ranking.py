"""Tests for catalog.analysis.ranking: Monte Carlo rank intervals, P(top-k), weighted scores, flags and the Pareto set."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from catalog.analysis import ranking
from catalog.errors import CatalogError

Z = stats.norm.ppf(0.975)


def _table(rows: dict) -> pd.DataFrame:
    """Catalyst table from {id: {column: value}}; TOF given as (median, sigma of ln) becomes a 95 % interval."""
    out = {}
    for cid, row in rows.items():
        row = dict(row)
        if "tof" in row:
            median, sigma = row.pop("tof")
            row |= {"tof_ref": median, "tof_ref_low": median * np.exp(-Z * sigma),
                    "tof_ref_high": median * np.exp(Z * sigma)}
        out[cid] = row
    return pd.DataFrame.from_dict(out, orient="index").rename_axis("catalyst_id")


def test_same_seed_same_output_other_seed_tiny_differences():
    table = _table({"A": {"tof": (3.0, 0.3)}, "B": {"tof": (2.5, 0.3)}, "C": {"tof": (2.0, 0.4)}})
    first = ranking.rank(table, top_k=1)
    pd.testing.assert_frame_equal(first, ranking.rank(table, top_k=1))
    other = ranking.rank(table, top_k=1, seed=7)
    difference = (first["p_top_k"] - other["p_top_k"]).abs()
    assert 0 < difference.max() < 0.05  # Monte Carlo error of 4000 draws is about 0.008
    assert list(first["rank"]) == list(other["rank"])  # the point ranking does not depend on the draws


def test_well_separated_pair_by_hand():
    # A: TOF 10 with 95 % interval 9-11; B: TOF 1 (0.9-1.1). Their log-intervals are ~23 sigma apart, so A is first
    # in every draw: P(A top-1) = 1, rank intervals [1, 1] and [2, 2].
    table = pd.DataFrame({"tof_ref": [10.0, 1.0], "tof_ref_low": [9.0, 0.9], "tof_ref_high": [11.0, 1.1]},
                         index=pd.Index(["A", "B"], name="catalyst_id"))
    out = ranking.rank(table, top_k=1)
    assert list(out.index) == ["A", "B"]
    assert out.loc["A", "p_top_k"] == 1.0 and out.loc["B", "p_top_k"] == 0.0
    assert (out.loc["A", "rank_low"], out.loc["A", "rank_high"]) == (1, 1)
    assert (out.loc["B", "rank_low"], out.loc["B", "rank_high"]) == (2, 2)
    assert (out.loc["A", "value_low"], out.loc["A", "value_high"]) == (9.0, 11.0)


def test_identical_candidates_split_top_spot():
    # Exchangeable candidates: P(top-1) = 1/2 each by symmetry; 0.03 is about 4 Monte Carlo standard errors.
    out = ranking.rank(_table({"A": {"tof": (5.0, 0.2)}, "B": {"tof": (5.0, 0.2)}}), top_k=1)
    assert out["p_top_k"].to_numpy() == pytest.approx([0.5, 0.5], abs=0.03)
    assert out["p_top_k"].sum() == pytest.approx(1.0)
    assert set(out["rank_low"]) == {1} and set(out["rank_high"]) == {2}


def test_probability_a_beats_b_matches_normal_difference():
    # ln A ~ N(ln a, σa²), ln B ~ N(ln b, σb²) independent: ln A − ln B ~ N(ln a − ln b, σa² + σb²), so
    # P(A > B) = Φ((ln a − ln b)/√(σa² + σb²)) (difference of independent normals; e.g. Papoulis, Probability,
    # Random Variables and Stochastic Processes: from memory). Tolerance: 4 Monte Carlo standard errors.
    a, sa, b, sb = 3.0, 0.3, 2.0, 0.4
    expected = stats.norm.cdf((np.log(a) - np.log(b)) / np.hypot(sa, sb))
    n = 20000
    out = ranking.rank(_table({"A": {"tof": (a, sa)}, "B": {"tof": (b, sb)}}), top_k=1, n_draws=n)
    assert out.loc["A", "p_top_k"] == pytest.approx(expected, abs=4 * np.sqrt(expected * (1 - expected) / n))


def test_metric_values_recover_log_sigma_and_ea_se():
    table = _table({"A": {"tof": (4.0, 0.25), "ea": 60e3, "ea_se": 2e3, "ea_low": 50e3, "ea_high": 70e3}})
    tof = ranking.metric_values(table, "tof")
    assert tof.loc["A", "sigma"] == pytest.approx(0.25)
    assert tof.loc["A", "centre"] == pytest.approx(np.log(4.0))
    ea = ranking.metric_values(table, "ea")
    assert ea.loc["A", "sigma"] == 2e3  # the standard error wins over the interval


def test_ea_ranks_lower_first_and_cost_lower_first():
    table = pd.DataFrame({"ea": [70e3, 40e3, 55e3], "ea_se": [1e3, 1e3, 1e3], "price_per_gram": [5.0, 50.0, 1.0]},
                         index=pd.Index(["A", "B", "C"], name="catalyst_id"))
    assert list(ranking.rank(table, "ea").index) == ["B", "C", "A"]
    by_cost = ranking.rank(table, "cost")
    assert list(by_cost.index) == ["C", "A", "B"]
    assert list(by_cost["p_top_k"]) == [1.0, 1.0, 1.0]  # exact prices, three candidates, top 3


def test_missing_values_rank_last_and_are_kept():
    table = _table({"A": {"tof": (1.0, 0.1)}, "B": {"tof": (np.nan, 0.1)}, "C": {"tof": (2.0, 0.1)}})
    out = ranking.rank(table)
    assert list(out.index) == ["C", "A", "B"]
    assert list(out["rank"].iloc[:2]) == [1, 2] and np.isnan(out.loc["B", "rank"])
    assert np.isnan(out.loc["B", "p_top_k"]) and "no value for tof" in out.loc["B", "note"]


def test_exclusion_keeps_every_catalyst_and_demotion_goes_last():
    table = _table({"A": {"tof": (9.0, 0.1)}, "B": {"tof": (5.0, 0.1)}, "C": {"tof": (2.0, 0.1)},
                    "D": {"tof": (1.0, 0.1)}})
    table["flags"] = ["transport-ea;weisz-prater", "deactivation", "", "poor-fit"]
    out = ranking.rank(table, exclude_flags=["weisz-prater"], demote_flags=["deactivation"], top_k=1)
    assert set(out.index) == set(table.index)
    assert list(out.index) == ["C", "D", "B", "A"]
    assert list(out["rank"].iloc[:3]) == [1, 2, 3] and np.isnan(out.loc["A", "rank"])
    assert out.loc["A", "excluded"] and not out.loc["A", "demoted"] and "weisz-prater" in out.loc["A", "note"]
    assert out.loc["B", "demoted"] and "deactivation" in out.loc["B", "note"]
    assert out.loc["B", "p_top_k"] == 0.0  # demoted in every draw too
    assert out.loc["B", "value"] == 5.0  # its figure is still shown


def test_flag_options_need_known_codes_and_a_flags_column():
    table = _table({"A": {"tof": (1.0, 0.1)}})
    with pytest.raises(CatalogError):
        ranking.rank(table, exclude_flags=["deactivation"])  # no flags column
    table["flags"] = ""
    with pytest.raises(CatalogError):
        ranking.rank(table, exclude_flags=["not-a-code"])
    with pytest.raises(CatalogError):
        ranking.rank(table, metric="speed")
    with pytest.raises(CatalogError):
        ranking.rank(table, metric="score")


def test_weighted_score_by_hand():
    # Exact figures (no intervals): score = Σ w·(g − mean g)/sd(g), g = ln TOF and g = −Ea (lower Ea better).
    table = pd.DataFrame({"tof_ref": [1.0, np.e, np.e**2], "ea": [60e3, 40e3, 50e3]},
                         index=pd.Index(["A", "B", "C"], name="catalyst_id"))
    out = ranking.rank(table, "score", weights={"tof": 2.0, "ea": 1.0}, n_draws=200)
    g_tof = np.array([0.0, 1.0, 2.0])
    g_ea = -np.array([60e3, 40e3, 50e3])
    expected = 2 * (g_tof - g_tof.mean()) / g_tof.std(ddof=1) + (g_ea - g_ea.mean()) / g_ea.std(ddof=1)
    assert out.loc[["A", "B", "C"], "value"].to_numpy() == pytest.approx(expected)
    assert list(out.index) == ["C", "B", "A"]
    assert (out["value_low"] == out["value"]).all()  # exact inputs: a zero-width Monte Carlo interval
    # Pareto on the weighted metrics: B (best Ea) and C (best TOF) are not dominated; A is worse on both than C.
    assert dict(out["pareto"]) == {"A": False, "B": True, "C": True}


def test_score_shares_tof_deviates_across_derived_metrics():
    # Enhancement and rate per mass are functions of TOF: drawn with one deviate, A always beats B on both when its
    # TOF does, so the score's P(top-1) equals the TOF's.
    rows = {cid: {"tof": (m, 0.3), "rate_per_mass_ref": m * 0.1} for cid, m in (("A", 2.0), ("B", 1.5))}
    table = _table(rows)
    by_tof = ranking.rank(table, "tof", top_k=1)
    by_score = ranking.rank(table, "score", weights={"tof": 1.0, "rate_per_mass": 1.0}, top_k=1)
    assert by_score.loc["A", "p_top_k"] == pytest.approx(by_tof.loc["A", "p_top_k"])


def test_pareto_front_by_hand():
    table = pd.DataFrame({"tof_ref": [10.0, 5.0, 4.0, 10.0, np.nan], "ea": [60e3, 40e3, 50e3, 70e3, 30e3],
                          "price_per_gram": [50.0, 5.0, 4.0, 60.0, 1.0]},
                         index=pd.Index(list("ABCDE"), name="catalyst_id"))
    # C is beaten by B (higher TOF, lower Ea); D by A (same TOF, lower Ea); E has no TOF.
    front = ranking.pareto_front(table, "tof", "ea")
    assert list(front.index[front]) == ["A", "B"]
    # TOF against price: A (best TOF), B, C (cheapest with a TOF) trade off; D costs more than A for the same TOF.
    front = ranking.pareto_front(table, "tof", "cost")
    assert list(front.index[front]) == ["A", "B", "C"]


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(0.01, 100.0), min_size=1, max_size=8))
def test_ranks_are_a_permutation(values):
    table = pd.DataFrame({"tof_ref": values, "tof_ref_low": np.multiply(values, 0.8),
                          "tof_ref_high": np.multiply(values, 1.25)},
                         index=pd.Index([f"K{i}" for i in range(len(values))], name="catalyst_id"))
    out = ranking.rank(table, n_draws=50, top_k=2)
    assert sorted(out["rank"]) == list(range(1, len(values) + 1))
    assert (out["rank_low"] <= out["rank_high"]).all()
    assert out["p_top_k"].sum() == pytest.approx(min(2, len(values)))
