"""Tests for catalog.analysis.diagnostics: each flag on a hand-built case, silence on clean data, the demo's known
problems."""

from __future__ import annotations

import numpy as np
import pandas as pd
import periodictable
import pytest
from scipy.constants import R

from catalog import store
from catalog.analysis import diagnostics
from catalog.analysis.per_catalyst import catalyst_figures
from catalog.analysis.per_trial import blank_limits
from catalog.analysis.pipeline import Analysis, analyse
from catalog.analysis.settings import TRIAL_FIT_COLUMNS, Settings
from catalog.core import arrhenius, hazard, transport
from catalog.datasets import known_truth, synth
from catalog.datasets.demo import demo_campaign
from catalog.ingest import sources

TRANSPORT = {"transport-ea", "weisz-prater", "mears", "loading-slope"}
DEACTIVATION = {"deactivation", "late-shortfall", "plateau-short"}


def _analysed(campaign_data, folder) -> Analysis:
    synth.write_campaign(campaign_data, folder / "campaign")
    db = folder / "campaign.duckdb"
    store.import_campaign(db, sources.read_source(folder / "campaign"))
    return analyse(*store.load_campaign(db), Settings())


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    result = _analysed(demo_campaign(), tmp_path_factory.mktemp("demo"))
    return result, diagnostics.evaluate(result, Settings())


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    result = _analysed(known_truth.known_kinetics_campaign(), tmp_path_factory.mktemp("clean"))
    return result, diagnostics.evaluate(result, Settings())


# --- hand-built tables -------------------------------------------------------------------------------------------

CLEAN_TRIAL = dict(catalyst_id="X-1", temperature=308.15, model="first", r2=0.9995, runs_z=0.4, late_residual_z=0.2,
                   plateau_ratio=1.0, final_conversion=0.95, enhancement=150.0, weisz_prater=0.01, mears=0.01,
                   adiabatic_rise=np.nan, pressure_rise_max=np.nan)

CLEAN_CATALYST = dict(n_temperatures=4, ea=60e3, ea_low=55e3, ea_high=65e3, replicate_cv=0.05, enhancement_ref=150.0,
                      curvature_p=0.5, max_weisz_prater=0.01, max_mears=0.01, max_adiabatic_rise=np.nan, tof_ref=1.0,
                      tof_ref_low=0.95, tof_ref_high=1.05, tof_ref_extrapolated=False, t_min=298.15, t_max=328.15,
                      rate_per_mass_ref=0.02, metal="Pd", support="Al2O3", dispersion=0.25, metal_loading=0.01)


def _result(trial_rows=(), catalyst_rows=()) -> Analysis:
    trials = pd.DataFrame([CLEAN_TRIAL | r for r in trial_rows],
                          index=pd.Index([f"T{i:03d}" for i in range(len(trial_rows))], name="trial_id"))
    catalysts = pd.DataFrame([CLEAN_CATALYST | r for r in catalyst_rows],
                             index=pd.Index([f"C{i:02d}" for i in range(len(catalyst_rows))], name="catalyst_id"))
    return Analysis(trials, catalysts, None, Settings())


def _codes(flags: pd.DataFrame, scope: str | None = None) -> set[str]:
    return set(flags["code"] if scope is None else flags.loc[flags["scope"] == scope, "code"])


def test_clean_hand_built_records_raise_nothing():
    flags = diagnostics.evaluate(_result([{}], [{}]), Settings())
    assert flags.empty
    assert list(flags.columns) == list(diagnostics.FLAG_COLUMNS)


@pytest.mark.parametrize("change, code", [
    ({"r2": 0.95}, "poor-fit"),
    ({"runs_z": -4.5}, "residual-pattern"),
    ({"model": "initial_slope"}, "fit-fallback"),
    ({"model": "none", "r2": np.nan}, "fit-fallback"),
    ({"late_residual_z": -4.0}, "late-shortfall"),
    # Levelled off at 60 % of full conversion: the trace reached 59 %, i.e. its own plateau.
    ({"plateau_ratio": 0.60, "final_conversion": 0.59}, "plateau-short"),
    ({"enhancement": 1.4}, "blank-dominated"),
    ({"weisz_prater": 2.5}, "weisz-prater"),
    ({"mears": 0.4}, "mears"),
    ({"adiabatic_rise": 80.0}, "thermal-hazard"),
    ({"pressure_rise_max": 250e3}, "pressure-build-up"),
])
def test_each_trial_flag_fires_on_its_case(change, code):
    flags = diagnostics.evaluate(_result([change]), Settings())
    assert _codes(flags, "trial") == {code}
    row = flags[flags["scope"] == "trial"].iloc[0]
    assert row["severity"] == diagnostics.FLAG_SEVERITY[code]
    assert row["record_id"] == "T000"


def test_slow_trial_with_extrapolated_short_plateau_is_not_deactivation():
    # The fitted plateau is 60 % but the trace only got to 20 %: the plateau is a guess, not an observation.
    flags = diagnostics.evaluate(_result([{"plateau_ratio": 0.60, "final_conversion": 0.20}]), Settings())
    assert flags.empty


def test_blank_trials_get_fit_flags_but_no_catalyst_flags():
    flags = diagnostics.evaluate(_result([{"catalyst_id": None, "r2": 0.9, "plateau_ratio": 0.5,
                                           "final_conversion": 0.5, "late_residual_z": -5.0}]), Settings())
    assert _codes(flags) == {"poor-fit"}


@pytest.mark.parametrize("change, code", [
    ({"ea": 12e3, "ea_low": 9e3, "ea_high": 15e3}, "transport-ea"),
    ({"max_weisz_prater": 4.0}, "weisz-prater"),
    ({"max_mears": 0.5}, "mears"),
    ({"replicate_cv": 0.35}, "replicate-spread"),
    ({"enhancement_ref": 1.5}, "blank-dominated"),
    ({"n_temperatures": 1, "ea": np.nan, "t_min": 308.15, "t_max": 308.15}, "single-temperature"),
    ({"n_temperatures": 3, "ea": np.nan}, "no-ea"),
    ({"n_temperatures": 2}, "few-temperatures"),
    ({"tof_ref_extrapolated": True, "t_min": 318.15}, "ref-outside-range"),
    ({"curvature_p": 0.0005}, "arrhenius-curvature"),
    ({"max_adiabatic_rise": 80.0}, "thermal-hazard"),
])
def test_each_catalyst_flag_fires_on_its_case(change, code):
    flags = diagnostics.evaluate(_result(catalyst_rows=[change]), Settings())
    assert _codes(flags, "catalyst") == {code}
    assert flags.iloc[0]["severity"] == diagnostics.FLAG_SEVERITY[code]


def test_messages_carry_the_numbers():
    flags = diagnostics.evaluate(_result([{"r2": 0.9512}], [{"ea": 12.3e3, "ea_low": 9e3, "ea_high": 15e3}]),
                                 Settings())
    by_code = flags.set_index("code")
    assert "0.9512" in by_code.loc["poor-fit", "message"]
    assert "12.3 kJ/mol" in by_code.loc["transport-ea", "message"]
    assert by_code.loc["transport-ea", "value"] == pytest.approx(12.3e3)
    assert by_code.loc["transport-ea", "threshold"] == Settings().low_ea


def test_thresholds_come_from_settings():
    result = _result([{"r2": 0.97}])
    # the catalyst's only trial fits poorly, so the catalyst row carries the roll-up too
    assert _codes(diagnostics.evaluate(result, Settings())) == {"poor-fit", "trial-fit-quality"}
    assert diagnostics.evaluate(result, Settings(min_r2=0.95)).empty


def test_low_band_rise_is_not_flagged():
    # Below 50 K (the low band; Stoessel 2008, from memory) the estimate stays in the tables without a flag.
    assert diagnostics.evaluate(_result([{"adiabatic_rise": 12.0}]), Settings()).empty


@pytest.mark.parametrize("rise, band", [(50.0, "medium"), (120.0, "medium"), (350.0, "high")])
def test_thermal_bands_and_caution(rise, band):
    # Bands: low < 50 K, medium 50-200 K, high > 200 K (Stoessel, Thermal Safety of Chemical Processes, 2008; from
    # memory).
    flags = diagnostics.evaluate(_result([{"adiabatic_rise": rise}]), Settings())
    message = flags.iloc[0]["message"]
    assert f"{band} band" in message
    assert hazard.CAUTION in message
    assert flags.iloc[0]["severity"] == "caution"


def test_pressure_message_in_kilopascal_with_caution():
    flags = diagnostics.evaluate(_result([{"pressure_rise_max": 254_000.0}]), Settings())
    assert "254 kPa" in flags.iloc[0]["message"]
    assert hazard.CAUTION in flags.iloc[0]["message"]


def test_deactivation_rollup_rule():
    # One of three trials: a stray trial, not the catalyst. Two of three: a pattern. One of one: a majority.
    bad = {"late_residual_z": -5.0}
    one_of_three = diagnostics.evaluate(_result([bad, {}, {}]), Settings())
    two_of_three = diagnostics.evaluate(_result([bad, bad, {}]), Settings())
    one_of_one = diagnostics.evaluate(_result([bad]), Settings())
    assert "deactivation" not in _codes(one_of_three, "catalyst")
    assert "deactivation" in _codes(two_of_three, "catalyst")
    assert "deactivation" in _codes(one_of_one, "catalyst")
    assert two_of_three.loc[two_of_three["code"] == "deactivation", "value"].iloc[0] == pytest.approx(2 / 3)


@pytest.mark.parametrize("code, bad", [("deactivation", {"late_residual_z": -5.0}),
                                       ("trial-fit-quality", {"runs_z": -4.5})])
def test_rollup_among_many_trials_needs_a_share_not_just_two(code, bad):
    # Every per-trial check has a false-alarm rate, so two flagged trials among hundreds are chance (a clean invented
    # campaign of 10^4 trials gave 2 of ~480 per catalyst); up to 20 trials two still make a pattern
    # (ROLLUP_MIN_FRACTION = 0.10, common practice, no source).
    assert code in _codes(diagnostics.evaluate(_result([bad] * 2 + [{}] * 18), Settings()), "catalyst")
    assert code not in _codes(diagnostics.evaluate(_result([bad] * 2 + [{}] * 98), Settings()), "catalyst")
    assert code in _codes(diagnostics.evaluate(_result([bad] * 10 + [{}] * 90), Settings()), "catalyst")


def test_registry_covers_every_code_with_severity_and_cautions():
    assert set(diagnostics.FLAG_CODES) == set(diagnostics.FLAG_SEVERITY)
    assert set(diagnostics.FLAG_SEVERITY.values()) <= {"warning", "caution", "note"}
    for code, (title, explanation) in diagnostics.FLAG_CODES.items():
        assert code == code.lower() and " " not in code
        assert title and len(explanation) > 40
        if diagnostics.FLAG_SEVERITY[code] == "caution":
            assert hazard.CAUTION in explanation


# --- transport physics -------------------------------------------------------------------------------------------

def _pore_limited(T, ea_true, phi_ref, T_ref=298.15):
    """Observed first-order rate constants with internal diffusion: k_obs = k·η(φ), φ ∝ √k (D_eff fixed)."""
    k = np.exp(-ea_true / R * (1 / T - 1 / T_ref))
    phi = phi_ref * np.sqrt(k)
    return k * transport.effectiveness_sphere(phi), phi


def test_strong_pore_diffusion_halves_apparent_ea_and_low_ea_check_misses_it():
    # Under strong pore diffusion η → 3/φ with φ ∝ √k, so k_obs ∝ √k and Ea_app → Ea/2
    # (Thiele, Ind. Eng. Chem. 31, 916 (1939)); with φ from 300 to about 1100 the fitted value is 50.1 kJ/mol
    # (computed from η above). Tolerance 1 %: the correction is of order 1/φ.
    T = np.linspace(298.15, 320.15, 6)
    k_obs, phi = _pore_limited(T, 100e3, 300.0)
    assert phi.min() == pytest.approx(300.0) and phi.max() > 1000
    fit = arrhenius.fit_arrhenius(T, k_obs)
    assert fit.ea == pytest.approx(50e3, rel=0.01)
    # 50 kJ/mol sits well above the ~20 kJ/mol rule of thumb (common practice, no source): the low-Ea check alone
    # does not catch pore-diffusion control, which is why Weisz-Prater and the loading series exist.
    row = {"ea": fit.ea, "ea_low": fit.ea_low, "ea_high": fit.ea_high}
    assert diagnostics.evaluate(_result(catalyst_rows=[row]), Settings()).empty
    assert _codes(diagnostics.evaluate(_result(catalyst_rows=[row]), Settings(low_ea=60e3))) == {"transport-ea"}


def _loading_rows(phi_first):
    """Pd/Al2O3 at 25 % dispersion, 1, 2 and 5 wt%; k_v ∝ sites, so φ ∝ √(sites per mass)."""
    molar_mass_pd = periodictable.Pd.mass / 1e3  # kg/mol (IUPAC standard atomic weight via periodictable)
    loading = np.array([0.01, 0.02, 0.05])
    sites = loading * 0.25 / molar_mass_pd  # mol/kg
    eta = transport.effectiveness_sphere(phi_first * np.sqrt(sites / sites[0])) if phi_first else np.ones(3)
    tof = 2.0 * eta
    return [{"metal_loading": w, "rate_per_mass_ref": t * s, "tof_ref": t, "tof_ref_low": 0.95 * t,
             "tof_ref_high": 1.05 * t, "description": "Pd on alumina, loading series"}
            for w, s, t in zip(loading, sites, tof, strict=False)]


def test_unrelated_catalysts_sharing_metal_and_support_are_no_series():
    # Regression (issue 11, item 6): two different preparations that happen to share metal, support and dispersion
    # were taken as a loading series and flagged although both were clean.
    rows = _loading_rows(60.0)
    for i, row in enumerate(rows):
        row["description"] = f"preparation {i}"
    assert diagnostics.loading_series(_result(catalyst_rows=rows).catalysts).empty
    rows[0]["description"] = rows[1]["description"] = rows[2]["description"] = float("nan")
    assert diagnostics.loading_series(_result(catalyst_rows=rows).catalysts).empty


def test_loading_series_slope_half_under_pore_diffusion_flags_every_member():
    # Rate ∝ sites under kinetic control (slope 1); ∝ √sites under strong pore diffusion (slope 1/2) (Koros and
    # Nowak, Chem. Eng. Sci. 22, 470 (1967); Madon and Boudart, Ind. Eng. Chem. Fundam. 21, 438 (1982): from memory).
    flags = diagnostics.evaluate(_result(catalyst_rows=_loading_rows(60.0)), Settings())
    slope = flags[flags["code"] == "loading-slope"]
    assert set(slope["record_id"]) == {"C00", "C01", "C02"}
    assert slope["value"].iloc[0] == pytest.approx(0.5, abs=0.05)
    assert slope["threshold"].iloc[0] == pytest.approx(1 - Settings().loading_slope_tolerance)
    assert "3 loadings" in slope["message"].iloc[0]


def test_loading_series_quiet_under_kinetic_control_and_across_dispersions():
    rows = _loading_rows(None)
    assert diagnostics.evaluate(_result(catalyst_rows=rows), Settings()).empty
    assert diagnostics.loading_series(_result(catalyst_rows=rows).catalysts)["slope"].iloc[0] == pytest.approx(1.0)
    # Different dispersions (25 % vs 50 %) are not a loading series: nothing to compare.
    limited = _loading_rows(60.0)
    limited[1]["dispersion"] = 0.50
    limited[2]["dispersion"] = 0.75
    assert diagnostics.loading_series(_result(catalyst_rows=limited).catalysts).empty


# --- whole campaigns ---------------------------------------------------------------------------------------------

def test_clean_campaign_only_carries_hazard_cautions(clean):
    result, flags = clean
    assert _codes(flags) <= {"thermal-hazard", "pressure-build-up"}
    # Every closed-vessel trial gets the pressure caution, and only those.
    closed = set(result.trials.index[result.trials["measurement"] == "pressure"])
    assert set(flags.loc[flags["code"] == "pressure-build-up", "record_id"]) == closed


def test_demo_known_problems_are_flagged(demo):
    _, flags = demo
    cat = flags[flags["scope"] == "catalyst"]
    has = lambda cid: set(cat.loc[cat["record_id"] == cid, "code"])  # noqa: E731
    assert {"transport-ea", "weisz-prater"} <= has("RuAl-04")
    assert "deactivation" in has("CoSi-08")
    assert "single-temperature" in has("RhAl-03")
    assert "replicate-spread" in has("NiCe-09")


def test_demo_clean_catalysts_have_no_transport_or_deactivation_flags(demo):
    result, flags = demo
    clean_ids = ["PtC-01", "RuC-02", "PdAl-05", "PdAl-06", "PdAl-07", "PtCe-12"]
    trial_ids = set(result.trials.index[result.trials["catalyst_id"].isin(clean_ids)])
    mine = flags[flags["record_id"].isin(set(clean_ids) | trial_ids)]
    assert not (_codes(mine) & (TRANSPORT | DEACTIVATION))
    # The Pd loading series is there and passes: slope near 1.
    series = diagnostics.loading_series(result.catalysts)
    assert set(series.index) == {"PdAl-05", "PdAl-06", "PdAl-07"}
    assert series["slope"].iloc[0] == pytest.approx(1.0, abs=Settings().loading_slope_tolerance)


def test_demo_flags_are_well_formed(demo):
    _, flags = demo
    assert list(flags.columns) == list(diagnostics.FLAG_COLUMNS)
    assert set(flags["code"]) <= set(diagnostics.FLAG_CODES)
    assert set(flags["scope"]) <= {"trial", "catalyst"}
    assert (flags["severity"] == flags["code"].map(diagnostics.FLAG_SEVERITY)).all()
    assert np.isfinite(flags["value"]).all() and np.isfinite(flags["threshold"]).all()
    hazards = flags[flags["severity"] == "caution"]
    assert len(hazards) and hazards["message"].str.contains(hazard.CAUTION, regex=False).all()


def test_catalyst_rows_do_not_depend_on_the_order_of_the_trial_rows(demo_db):
    # Each catalyst's trials are taken by position from columns read once: dealing the trial table out round-robin
    # (catalysts and blanks interleaved, each catalyst's own trials still in order, since that order sets the
    # rounding of its sums) must give the same catalyst table to the last bit.
    catalysts, trials, points = store.load_campaign(demo_db)
    result = analyse(catalysts, trials, points, Settings())
    fits = result.trials[list(TRIAL_FIT_COLUMNS)]
    turn = result.trials.groupby("catalyst_id", dropna=False).cumcount()
    shuffled = result.trials.assign(turn=turn).sort_values("turn", kind="stable").drop(columns="turn")
    assert list(shuffled["catalyst_id"].iloc[:12]) != list(result.trials["catalyst_id"].iloc[:12])
    again = catalyst_figures(shuffled, catalysts.set_index("catalyst_id"), result.blank, Settings(),
                             blank_limits(trials.set_index("trial_id"), fits))
    pd.testing.assert_frame_equal(again, result.catalysts, check_exact=True)
