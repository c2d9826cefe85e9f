"""Tests for the seeded synthetic campaign generator (catalog.datasets.synth) and the committed demo files."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import periodictable
import pytest
import scipy.constants

from catalog.datasets import bulk, known_truth, synth
from catalog.datasets.demo import demo_campaign

SAMPLE = Path(__file__).resolve().parents[1] / "sample_campaign"

# The v1 campaign contract headers, spelled out here rather than imported so a change in synth cannot hide.
V1_CATALYSTS = (
    "catalyst_id,metal,metal_loading [wt%],dispersion [%],site_density [umol/g],surface_area [m^2/g],"
    "description,support,batch,price_per_gram"
)
V1_TRIALS = (
    "trial_id,catalyst_id,temperature [degC],measurement,signal_unit,catalyst_mass [mg],limiting_amount [mmol],"
    "product_ratio,gas_pressure [kPa],gas_temperature [degC],gas_molar_mass [g/mol],headspace_volume [mL],"
    "liquid_volume [mL],initial_concentration [mol/L],particle_size [um],light_wavelength [nm],light_power [mW],"
    "operator,started_at,notes,collected_over_water,effective_diffusivity [m^2/s],particle_density [g/cm^3],"
    "reaction_enthalpy [kJ/mol],heat_capacity [J/K]"
)
V1_TRACES = "trial_id,time [s],value"


@pytest.fixture(scope="module")
def demo():
    return demo_campaign()


@pytest.fixture(scope="module")
def exact():
    return known_truth.known_kinetics_campaign(noise=0.0, n_points=60)


def _frames(c):
    return (c.catalysts, c.trials, c.traces, c.truth, c.trial_truth)


def test_same_seed_gives_identical_frames(demo):
    for a, b in zip(_frames(demo), _frames(demo_campaign()), strict=True):
        pd.testing.assert_frame_equal(a, b)
    same = known_truth.known_kinetics_campaign(seed=3)
    for a, b in zip(_frames(same), _frames(known_truth.known_kinetics_campaign(seed=3)), strict=True):
        pd.testing.assert_frame_equal(a, b)


def test_other_seed_changes_the_noise(demo):
    assert not demo.traces["value"].equals(demo_campaign(seed=7).traces["value"])


def test_demo_has_the_promised_shape(demo):
    trials, truth = demo.trials, demo.truth
    assert len(demo.catalysts) >= 10
    assert set(trials["measurement"]) == {"gas_volume", "mass_loss", "pressure", "concentration"}
    assert set(truth["problem"]) == {"", "deactivating", "transport", "single_temperature", "poor_replicates",
                                     "blank"}
    blanks = trials[trials["catalyst_id"].isna()]
    assert sorted(blanks["temperature [degC]"].round().unique()) == [25.0, 35.0, 45.0, 55.0]
    points = demo.traces.groupby("trial_id").size()
    assert points.between(40, 150).all() and len(points) == len(trials)
    assert trials["trial_id"].is_unique and demo.catalysts["catalyst_id"].is_unique
    single = truth.loc[truth["problem"] == "single_temperature", "catalyst_id"].item()
    assert trials.loc[trials["catalyst_id"] == single, "temperature [degC]"].round().nunique() == 1
    transport = truth.loc[truth["problem"] == "transport", "catalyst_id"].item()
    assert (trials.loc[trials["catalyst_id"] == transport, "particle_size [um]"] >= 400).all()
    assert trials["light_wavelength [nm]"].notna().sum() >= 1
    assert trials["reaction_enthalpy [kJ/mol]"].notna().sum() >= 1


def test_demo_ids_are_plain(demo):
    ids = pd.concat([demo.trials["trial_id"], demo.catalysts["catalyst_id"]])
    assert ids.str.fullmatch(r"[A-Za-z0-9-]+").all()


def test_clean_plateau_is_stoichiometric(demo):
    # A catalyst changes how fast the plateau is reached, not the plateau (common practice, no source).
    tt = demo.trial_truth.merge(demo.trials[["trial_id", "limiting_amount [mmol]"]], on="trial_id")
    tt = tt.merge(demo.truth[["catalyst_id", "problem"]], on="catalyst_id", how="left")
    clean = tt["problem"].fillna("") != "deactivating"
    expected = tt["product_ratio"] * tt["limiting_amount [mmol]"] * 1e-3
    np.testing.assert_allclose(tt.loc[clean, "plateau_true"], expected[clean], rtol=1e-12)
    assert (tt.loc[~clean, "plateau_true"] < 0.95 * expected[~clean]).all()


def test_noise_free_trace_approaches_the_plateau(exact):
    # Last reading of a noise-free trace at 4.5 half-lives: 1 - 2**-4.5 = 0.956 of the plateau (exact arithmetic).
    last = exact.traces.groupby("trial_id").tail(1).set_index("trial_id")["value"]
    first = exact.traces.groupby("trial_id").head(1).set_index("trial_id")["value"]
    tt = exact.trial_truth.set_index("trial_id")
    tr = exact.trials.set_index("trial_id")
    conc = tr.index[(tr["measurement"] == "concentration") & tr["catalyst_id"].notna()]
    rise = (last - first)[conc]  # mmol/L, numerically mol/m³
    amount = rise * tr.loc[conc, "liquid_volume [mL]"] * 1e-6
    np.testing.assert_allclose(amount / tt.loc[conc, "plateau_true"], 1 - 2**-4.5, atol=0.003)


def test_h2_molar_mass_from_periodictable():
    # IUPAC standard atomic weight of H via periodictable; 2.016 g/mol in the IUPAC abridged table.
    assert synth.M_H2 == pytest.approx(2 * periodictable.H.mass * 1e-3, rel=1e-12)
    assert synth.M_H2 * 1e3 == pytest.approx(2.016, abs=5e-4)


def test_burette_signal_is_ideal_gas_volume(exact):
    # Ideal-gas law V = nRT/p with R from scipy.constants (CODATA 2022, exact); dry burettes only.
    tr = exact.trials.set_index("trial_id")
    tt = exact.trial_truth.set_index("trial_id")
    dry = tr.index[(tr["measurement"] == "gas_volume") & (tr["collected_over_water"] == "false")]
    assert len(dry) > 0
    traces = exact.traces.set_index("trial_id")
    for trial in dry:
        t = traces.loc[trial, "time [s]"].to_numpy()
        v = traces.loc[trial, "value"].to_numpy()
        k = tt.loc[trial, "k_obs0"]
        n = tt.loc[trial, "plateau_true"] * -np.expm1(-k * t)
        T = tr.loc[trial, "gas_temperature [degC]"] + scipy.constants.zero_Celsius
        p = tr.loc[trial, "gas_pressure [kPa]"] * 1e3
        expected_mL = n * scipy.constants.R * T / p * 1e6
        # Readings are rounded to 0.01 mL; the dead volume is the first reading.
        np.testing.assert_allclose(v - v[0], expected_mL, atol=0.011)


def test_burette_over_water_uses_dry_partial_pressure(exact):
    # Dalton: the hydrogen partial pressure is p - p_w(T); p_w at 20-24 °C is 2.3-3.0 kPa (IAPWS-95 tables, read
    # in /work/shared/reference-values.md: 2339.3 Pa at 20 °C, 3169.9 Pa at 25 °C), so the wet volume is 2-3 % larger.
    tr = exact.trials.set_index("trial_id")
    tt = exact.trial_truth.set_index("trial_id")
    wet = tr.index[(tr["measurement"] == "gas_volume") & (tr["collected_over_water"] == "true")
                   & tr["catalyst_id"].notna()]
    assert len(wet) > 0
    traces = exact.traces.groupby("trial_id")["value"]
    for trial in wet:
        rise_mL = traces.get_group(trial).iloc[-1] - traces.get_group(trial).iloc[0]
        t_end = exact.traces.loc[exact.traces["trial_id"] == trial, "time [s]"].iloc[-1]
        n = tt.loc[trial, "plateau_true"] * -np.expm1(-tt.loc[trial, "k_obs0"] * t_end)
        T = tr.loc[trial, "gas_temperature [degC]"] + scipy.constants.zero_Celsius
        dry_mL = n * scipy.constants.R * T / (tr.loc[trial, "gas_pressure [kPa]"] * 1e3) * 1e6
        assert 1.02 < rise_mL / dry_mL < 1.035


def test_true_tof_follows_arrhenius(exact):
    # TOF(T) / TOF_ref = exp(-Ea/R (1/T - 1/T_ref)), R from scipy.constants (CODATA); noise = 0 removes scatter.
    tt = exact.trial_truth.merge(exact.truth, on="catalyst_id")
    expected = tt["tof_ref"] * np.exp(-tt["ea_J_per_mol"] / scipy.constants.R * (1 / tt["temperature_K"]
                                                                               - 1 / tt["t_ref_K"]))
    np.testing.assert_allclose(tt["tof_true"], expected, rtol=1e-12)
    np.testing.assert_allclose(tt["tof_product_true"], tt["tof_true"] * tt["product_ratio"], rtol=1e-12)
    np.testing.assert_allclose(tt["r0_true"] - tt["r0_blank_true"], tt["tof_product_true"] * tt["sites_mol"],
                               rtol=1e-9)


def test_known_kinetics_truth_is_well_separated(exact):
    truth = exact.truth[exact.truth["catalyst_id"] != "blank"]
    tof = np.sort(truth["tof_ref"].to_numpy())
    assert (tof[1:] / tof[:-1] >= 1.9).all()
    assert truth["ea_J_per_mol"].between(35e3, 75e3).all()
    assert set(exact.trials["measurement"]) == {"gas_volume", "mass_loss", "pressure", "concentration"}


def test_loading_series_rate_scales_with_sites(demo):
    # Same TOF at constant dispersion, so rate ∝ sites (Koros-Nowak criterion; Madon and Boudart 1982: from memory).
    tt = demo.trial_truth[demo.trial_truth["catalyst_id"].str.startswith("PdAl")]
    rate = tt["r0_true"] - tt["r0_blank_true"]
    per_site = rate / (tt["sites_mol"] * tt["product_ratio"])
    np.testing.assert_allclose(per_site, tt["tof_true"], rtol=1e-9)
    truth = demo.truth.set_index("catalyst_id")
    assert truth.loc[["PdAl-05", "PdAl-06", "PdAl-07"], "tof_ref"].nunique() == 1


def test_written_files_have_exact_v1_headers(tmp_path, demo):
    synth.write_campaign(demo, tmp_path)
    for name, header in (("catalysts.csv", V1_CATALYSTS), ("trials.csv", V1_TRIALS), ("traces.csv", V1_TRACES)):
        assert (tmp_path / name).read_text(encoding="utf-8").split("\n", 1)[0] == header
    back = pd.read_csv(tmp_path / "traces.csv")
    np.testing.assert_array_equal(back["value"].to_numpy(), demo.traces["value"].to_numpy())


def test_committed_sample_matches_generator(tmp_path, demo):
    synth.write_campaign(demo, tmp_path)
    for name in ("catalysts.csv", "trials.csv", "traces.csv"):
        assert (SAMPLE / name).read_bytes() == (tmp_path / name).read_bytes(), f"rerun make_sample.py ({name})"


def test_bulk_writer_row_counts(tmp_path):
    summary = bulk.write_bulk_campaign(tmp_path, n_trials=23, n_points=7, seed=1, chunk=10)
    assert summary["trials"] == 23 and summary["trace_rows"] == 23 * 7
    traces = pd.read_csv(tmp_path / "traces.csv")
    trials = pd.read_csv(tmp_path / "trials.csv")
    assert list(traces.columns) == V1_TRACES.split(",")
    assert (tmp_path / "trials.csv").read_text(encoding="utf-8").split("\n", 1)[0] == V1_TRIALS
    assert len(traces) == 23 * 7 and len(trials) == 23
    assert traces.groupby("trial_id").size().eq(7).all()
    assert set(traces["trial_id"]) == set(trials["trial_id"])
    assert len(summary["truth"]) == summary["catalysts"]
