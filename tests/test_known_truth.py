"""Acceptance: seeded known-truth campaigns with traps go through import, analysis and diagnostics.

The campaigns (catalog.datasets.known_truth) are invented data with known truth; recovering it is the check and
the analysis never sees the truth. Targets (issue 11): on clean catalysts TOF at T_ref within 2 %, enhancement
within 5 %, Ea within 1.5 kJ/mol for >= 90 %, the exact TOF rank order, every trap flagged on its catalyst row and
no clean catalyst flagged. Ea inside its own 95 % interval: the intervals are nominal 95 % (97.9 % of 288 clean
catalysts of seeds 100-147 when this was written; 66 of 72 at seeds 0-11), so over the 72 clean catalysts of 12
campaigns the count inside is about Binomial(72, 0.95); we require >= 90 % (65 of 72), which a true 95 % rate
misses with probability < 2 % (binomial tail; common practice). A strict >= 95 % holds in 4 of the 5 twelve-seed
blocks measured (seeds 0-11: 91.7 %).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from catalog import store
from catalog.analysis import results
from catalog.analysis.settings import Settings
from catalog.datasets.known_truth import TRAPS, known_truth_campaign
from catalog.datasets.synth import write_campaign
from catalog.ingest import sources

R = 8.314462618  # J/(mol K), CODATA 2018 exact (scipy.constants.R)
T_REF = 308.15
#: safety cautions are not findings about the catalyst
CAUTIONS = {"thermal-hazard", "pressure-build-up"}


def _true_enhancement(truth) -> pd.Series:
    """(blank + TOF N) / blank at T_REF for each catalyst's median sites, from the generator's truth (1 mmol)."""
    cat = truth.truth.set_index("catalyst_id")
    blank = cat.loc["blank"]
    k_b = blank["k_blank_ref"] * np.exp(-blank["ea_J_per_mol"] / R * (1 / T_REF - 1 / blank["t_ref_K"]))
    trials = truth.trial_truth
    out = {}
    for cid, group in trials[trials["catalyst_id"] != ""].groupby("catalyst_id"):
        row = cat.loc[cid]
        tof = row["tof_ref"] * np.exp(-row["ea_J_per_mol"] / R * (1 / T_REF - 1 / row["t_ref_K"]))
        out[cid] = 1 + tof * group["sites_mol"].median() / (k_b * 1e-3)
    return pd.Series(out)


def _run(tmp_path, seed):
    truth = known_truth_campaign(seed=seed, minutes=bool(seed % 2))
    folder = tmp_path / f"q{seed}"
    write_campaign(truth, folder)
    db = tmp_path / f"q{seed}.duckdb"
    store.import_campaign(db, sources.read_source(folder))
    got = results.get_results(db, Settings(reference_temperature=T_REF))
    want = truth.truth.set_index("catalyst_id").drop(index="blank")
    flags = got.flags[got.flags["scope"] == "catalyst"].groupby("record_id")["code"].agg(set)
    table = pd.DataFrame({
        "problem": want["problem"],
        "tof_err": got.catalysts.loc[want.index, "tof_ref"] / want["tof_ref"] - 1,
        "enh_err": got.catalysts.loc[want.index, "enhancement_ref"] / _true_enhancement(truth)[want.index] - 1,
        "ea_err": (got.catalysts.loc[want.index, "ea"] - want["ea_J_per_mol"]) / 1e3,
        "ea_in": (got.catalysts.loc[want.index, "ea_low"] <= want["ea_J_per_mol"])
        & (want["ea_J_per_mol"] <= got.catalysts.loc[want.index, "ea_high"]),
        "flags": [flags.get(cid, set()) - CAUTIONS for cid in want.index],
        "tof_true": want["tof_ref"], "tof_got": got.catalysts.loc[want.index, "tof_ref"],
    })
    return table.assign(seed=seed)


def _check_campaign(table):
    clean = table[table["problem"] == ""]
    assert (clean["tof_err"].abs() <= 0.02).all(), clean
    assert (clean["enh_err"].abs() <= 0.05).all(), clean
    assert all(not f for f in clean["flags"]), clean
    for _, row in table[table["problem"] != ""].iterrows():
        assert TRAPS[row["problem"]] in row["flags"], row
    # the induction trap's r0 is the slow start, not the catalyst (it is flagged); every other rank is exact
    ranked = table[table["problem"] != "induction"]
    assert list(ranked["tof_got"].sort_values().index) == list(ranked["tof_true"].sort_values().index)


def test_one_known_truth_campaign(tmp_path):
    _check_campaign(_run(tmp_path, seed=1))  # odd seed: trace times in minutes


@pytest.mark.slow
def test_twelve_known_truth_campaigns(tmp_path):
    tables = [_run(tmp_path, seed) for seed in range(12)]
    for table in tables:
        _check_campaign(table)
    clean = pd.concat(tables).query("problem == ''")
    assert len(clean) == 72
    assert (clean["ea_err"].abs() <= 1.5).mean() >= 0.90
    assert clean["ea_in"].mean() >= 0.90


def test_flat_blank_gives_an_enhancement_lower_bound(tmp_path):
    # Edge case: the blanks at and below the reference temperature read flat (only noise). Their rates are not
    # detected, so the enhancement at T_REF is a lower bound on the catalyst row, never a number.
    truth = known_truth_campaign(seed=4)
    trials = truth.trials.set_index("trial_id")
    flat = trials.index[trials["catalyst_id"].isna() & (trials["temperature [degC]"] <= 35.0)]
    traces = truth.traces.copy()
    rng = np.random.default_rng(0)
    at = traces["trial_id"].isin(flat)
    first = traces[at].groupby("trial_id")["value"].transform("first")
    traces.loc[at, "value"] = np.round(first + rng.normal(0.0, 0.05, at.sum()), 2)  # burette noise 0.05 mL
    folder = tmp_path / "flat"
    write_campaign(type(truth)(truth.catalysts, truth.trials, traces, truth.truth, truth.trial_truth), folder)
    db = tmp_path / "flat.duckdb"
    store.import_campaign(db, sources.read_source(folder))
    got = results.get_results(db, Settings(reference_temperature=T_REF))
    cats = got.catalysts
    assert cats["enhancement_ref"].isna().all()
    assert (cats["enhancement_ref_low"] > 1).all()
    flags = got.flags
    assert set(flags.loc[flags["code"] == "blank-not-detected", "record_id"]) == set(flat)
    assert set(flags.loc[flags["code"] == "enhancement-bound", "record_id"]) == set(cats.index)
