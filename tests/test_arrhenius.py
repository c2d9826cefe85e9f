"""Reference checks for catalog.core.arrhenius: published Arrhenius data, mechanism-file kinetics, CODATA, coverage."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from scipy.constants import R, calorie

from catalog.core.arrhenius import (
    TooFewTemperatures,
    enhancement,
    eyring_frequency,
    fit_arrhenius,
    fit_eyring,
    predict,
)

# Fogler, Elements of Chemical Reaction Engineering, Example 3-1: decomposition of benzene diazonium chloride.
FOGLER_T = np.array([313.0, 319.0, 323.0, 328.0, 333.0])
FOGLER_K = np.array([0.00043, 0.00103, 0.00180, 0.00355, 0.00717])

# GRI-Mech 3.0 (Smith et al. 1999), O + H2 <=> H + OH: k = A T^b exp(-Ea/RT), cm³/(mol s), Ea in cal/mol.
GRI_A, GRI_B, GRI_EA = 3.87e4, 2.7, 6260.0 * calorie  # thermochemical calorie, 4.184 J


def gri_k(T):
    return GRI_A * T**GRI_B * np.exp(-GRI_EA / (R * T))


def test_fogler_example_3_1_plain_least_squares():
    # Source: Fogler, Example 3-1 data table (read). Plain least squares of ln k on 1/T gives Ea = 121.5 kJ/mol and
    # ln A = 38.93 (computed independently from the table); we agree to 4 significant digits in Ea (rel. 5e-4) and to
    # ±0.01 in ln A (our value 38.925). The book's graphical answer, 116 kJ/mol, is within 5 %.
    fit = fit_arrhenius(FOGLER_T, FOGLER_K)
    assert fit.ea == pytest.approx(121.5e3, rel=5e-4)
    assert fit.ln_a == pytest.approx(38.93, abs=0.01)
    assert fit.ea == pytest.approx(116e3, rel=0.05)
    assert fit.n_points == 5 and fit.n_temperatures == 5 and fit.dof == 3


def test_plain_fit_matches_scipy_linregress():
    # Source: scipy.stats.linregress (general-purpose reference library): slope, intercept and their standard
    # errors of ln k on 1/T; Ea = -R·slope. Agreement to rel. 1e-10.
    ref = stats.linregress(1.0 / FOGLER_T, np.log(FOGLER_K))
    fit = fit_arrhenius(FOGLER_T, FOGLER_K)
    assert fit.ea == pytest.approx(-R * ref.slope, rel=1e-10)
    assert fit.ea_se == pytest.approx(R * ref.stderr, rel=1e-10)
    assert fit.ln_a_se == pytest.approx(ref.intercept_stderr, rel=1e-10)
    assert fit.r2 == pytest.approx(ref.rvalue**2, rel=1e-10)
    t = stats.t.ppf(0.975, 3)
    assert fit.ea_high - fit.ea == pytest.approx(t * R * ref.stderr, rel=1e-10)


def test_weighted_fit_matches_numpy_polyfit_with_birge_scaling():
    # Source: numpy.polyfit with w = 1/σ (general-purpose reference library). cov='unscaled' is (XᵀWX)⁻¹; our
    # covariance is that times max(1, χ²/ν). Agreement to rel. 1e-9.
    rel_se = np.array([0.02, 0.05, 0.03, 0.08, 0.04])
    x, y, sigma = 1.0 / FOGLER_T, np.log(FOGLER_K), rel_se
    coef, cov = np.polyfit(x, y, 1, w=1.0 / sigma, cov="unscaled")
    chi2 = np.sum(((y - np.polyval(coef, x)) / sigma) ** 2)
    scale = max(1.0, chi2 / 3)
    fit = fit_arrhenius(FOGLER_T, FOGLER_K, k_se=rel_se * FOGLER_K)
    assert fit.ea == pytest.approx(-R * coef[0], rel=1e-9)
    assert fit.ea_se == pytest.approx(R * np.sqrt(cov[0, 0] * scale), rel=1e-9)
    assert fit.birge == pytest.approx(np.sqrt(chi2 / 3), rel=1e-9)


def test_birge_scaling_only_widens():
    # Stated errors 10x too large: the interval stays at the stated-error width and is not narrowed.
    big = fit_arrhenius(FOGLER_T, FOGLER_K, k_se=0.5 * FOGLER_K)
    huge = fit_arrhenius(FOGLER_T, FOGLER_K, k_se=5.0 * FOGLER_K)
    assert big.birge < 1 and huge.birge < 1
    assert huge.ea_se == pytest.approx(10 * big.ea_se, rel=1e-9)


def test_daniels_johnston_n2o5():
    # Source: Daniels and Johnston, J. Am. Chem. Soc. 43, 53 (1921), N2O5 decomposition. The 298.15, 318.15 and
    # 338.15 K values were read (also in Zumdahl, Chemistry 9th ed., problem 12.67); the 273.15, 308.15 and
    # 328.15 K values are from memory. The six-point plain fit gives Ea = 103.0 kJ/mol, A = 3.9e13 1/s (computed);
    # compare to 4 significant digits in Ea (rel. 5e-4) and 2 in A (rel. 0.02).
    T = np.array([298.15, 318.15, 338.15, 273.15, 308.15, 328.15])
    k = np.array([3.46e-5, 4.98e-4, 4.87e-3, 7.87e-7, 1.35e-4, 1.50e-3])
    six = fit_arrhenius(T, k)
    assert six.ea == pytest.approx(103.0e3, rel=5e-4)
    assert np.exp(six.ln_a) == pytest.approx(3.9e13, rel=0.02)
    # The three read points alone: within 1 % of the six-point Ea, and inside its 95 % interval.
    three = fit_arrhenius(T[:3], k[:3])
    assert three.ea == pytest.approx(six.ea, rel=0.01)
    assert six.ea_low < three.ea < six.ea_high
    # A first-order straight-line data set shows no significant curvature.
    assert six.curvature_p > 0.05


def test_gri_mech_local_apparent_activation_energy():
    # Source: GRI-Mech 3.0 (Smith et al. 1999), O + H2 <=> H + OH, A = 3.87e4, b = 2.7, Ea = 6260 cal/mol (read);
    # k(1000 K) = 2.0875e11 cm³/(mol s) (read; cantera agrees), checked to 5 digits. Over 990-1010 K the apparent
    # Ea is d ln k / d(-1/RT) = Ea + b·R·T = 48.64 kJ/mol (computed); rel. 1e-4.
    assert gri_k(1000.0) == pytest.approx(2.0875e11, rel=5e-5)
    T = np.linspace(990.0, 1010.0, 5)
    fit = fit_arrhenius(T, gri_k(T))
    assert fit.ea == pytest.approx(48.64e3, rel=1e-4)


def test_curvature_is_detected_over_a_wide_range():
    # The same GRI-Mech rate over 300-2000 K is far from straight in 1/T (T^2.7 factor): the curvature test rejects
    # straightness at the 1 % level.
    T = np.linspace(300.0, 2000.0, 8)
    k = gri_k(T) * np.exp(np.random.default_rng(1).normal(0.0, 0.01, T.size))
    assert fit_arrhenius(T, k).curvature_p < 0.01
    assert np.isnan(fit_arrhenius(T[:3], k[:3]).curvature_p)


def test_doubling_per_ten_kelvin_rule():
    # Rule of thumb (common practice, no source): a rate that doubles per 10 K near room temperature has
    # Ea ≈ 51-53 kJ/mol.
    for t0 in (293.15, 298.15):
        fit = fit_arrhenius([t0, t0 + 10.0], [1.0, 2.0])
        assert 51e3 <= fit.ea <= 53e3


def test_one_temperature_has_no_activation_energy():
    with pytest.raises(TooFewTemperatures, match="one temperature"):
        fit_arrhenius([323.15, 323.15, 323.151], [1e-3, 1.1e-3, 0.9e-3])
    # A non-positive rate at the second temperature leaves only one usable temperature.
    with pytest.raises(ValueError):
        fit_arrhenius([300.0, 310.0], [1e-3, 0.0])


def test_bad_points_are_dropped_and_counted():
    T = np.append(FOGLER_T, [320.0, 330.0, np.nan])
    k = np.append(FOGLER_K, [-1e-3, np.inf, 1e-3])
    fit = fit_arrhenius(T, k)
    assert fit.n_dropped == 3 and fit.n_points == 5
    assert fit.ea == pytest.approx(fit_arrhenius(FOGLER_T, FOGLER_K).ea, rel=1e-12)


def test_predict_reproduces_data_and_flags_extrapolation():
    fit = fit_arrhenius(FOGLER_T, FOGLER_K)
    inside = predict(fit, 323.0)
    assert inside.low < inside.value < inside.high
    assert inside.value == pytest.approx(0.00180, rel=0.05)
    assert not inside.extrapolated
    outside = predict(fit, np.array([300.0, 350.0]))
    assert outside.extrapolated.tolist() == [True, True]
    # Intervals widen away from the data.
    width = np.log(outside.high / outside.low)
    assert np.all(width > np.log(inside.high / inside.low))


def test_enhancement_over_blank():
    # Blank: Arrhenius with Ea 90 kJ/mol; catalysed rate 50x the blank at 330 K inside the blank's range.
    T = np.repeat([310.0, 320.0, 330.0, 340.0], 2)
    noise = np.exp(np.random.default_rng(7).normal(0.0, 0.02, T.size))
    blank = fit_arrhenius(T, 1e12 * np.exp(-90e3 / (R * T)) * noise)
    r_cat = 50 * 1e12 * np.exp(-90e3 / (R * 330.0))
    e = enhancement(r_cat, 0.02 * r_cat, blank, 330.0)
    assert e.low < 50 < e.high
    assert e.ratio == pytest.approx(50, rel=0.05)
    assert not e.extrapolated
    assert enhancement(r_cat, 0.02 * r_cat, blank, 360.0).extrapolated


def test_eyring_frequency_at_298_15_k():
    # Source: CODATA via scipy.constants: k_B·T/h at 298.15 K = 6.2124e12 1/s (computed); 5 digits, rel. 5e-5.
    assert eyring_frequency(298.15) == pytest.approx(6.2124e12, rel=5e-5)


def test_eyring_enthalpy_is_ea_minus_rt():
    # Transition-state theory relation for a unimolecular step, Ea = ΔH‡ + RT (IUPAC Gold Book, "energy of
    # activation"; from memory). Over a 10 K window ΔH‡ = Ea − R·T with T inside the window: check with R·T_mean
    # to rel. 1e-4 (error is R·ΔT/2 at most ≈ 40 J/mol).
    T = np.linspace(300.0, 310.0, 6)
    ea = 100e3
    fit = fit_eyring(T, 1e13 * np.exp(-ea / (R * T)))
    assert fit.dh == pytest.approx(ea - R * T.mean(), rel=1e-4)


def test_eyring_recovers_known_activation_parameters():
    # Rate constants generated from the Eyring equation itself with ΔH‡ = 75 kJ/mol, ΔS‡ = -40 J/(mol K).
    T = np.linspace(290.0, 350.0, 7)
    k = eyring_frequency(T) * np.exp(-40.0 / R) * np.exp(-75e3 / (R * T))
    fit = fit_eyring(T, k, k_se=0.03 * k)
    assert fit.dh == pytest.approx(75e3, rel=1e-9)
    assert fit.ds == pytest.approx(-40.0, rel=1e-7)
    assert fit.dh_low < fit.dh < fit.dh_high and fit.ds_low < fit.ds < fit.ds_high


def _coverage(rng, weighted):
    ea_true, ln_a_true, sigma = 80e3, 25.0, 0.05
    T = np.repeat(np.linspace(300.0, 340.0, 5), 3)
    hits = 0
    for _ in range(400):
        k = np.exp(ln_a_true - ea_true / (R * T) + rng.normal(0.0, sigma, T.size))
        fit = fit_arrhenius(T, k, k_se=sigma * k if weighted else None)
        hits += fit.ea_low <= ea_true <= fit.ea_high
    return hits / 400


def test_interval_coverage_plain():
    # Known-truth simulation: 5 temperatures × 3 replicates, Gaussian noise in ln k; 95 % intervals must cover the
    # true Ea in 92-98 % of 400 seeded repeats (binomial sd ≈ 1.1 %).
    assert 0.92 <= _coverage(np.random.default_rng(20240611), weighted=False) <= 0.98


def test_interval_coverage_weighted():
    # Same with the true σ stated. The extra-scatter term only widens and the t quantile is kept even when the
    # stated errors explain the scatter, so this is conservative by design: coverage at least nominal, at most 99.5 %.
    assert 0.94 <= _coverage(np.random.default_rng(11), weighted=True) <= 0.995


@settings(max_examples=60, deadline=None)
@given(
    temps=st.lists(st.floats(250.0, 900.0), min_size=3, max_size=10, unique=True),
    ea=st.floats(1e3, 250e3),
    ln_a=st.floats(-10.0, 40.0),
    seed=st.integers(0, 2**32 - 1),
    weighted=st.booleans(),
)
def test_fit_is_finite_and_interval_contains_estimate(temps, ea, ln_a, seed, weighted):
    T = np.array(temps)
    if np.unique(np.round(T / 0.01)).size < 2:
        return
    noise = np.random.default_rng(seed).normal(0.0, 0.1, T.size)
    k = np.exp(ln_a - ea / (R * T) + noise)
    fit = fit_arrhenius(T, k, k_se=0.1 * k if weighted else None)
    for v in (fit.ea, fit.ea_se, fit.ea_low, fit.ea_high, fit.ln_a, fit.ln_a_low, fit.ln_a_high):
        assert np.isfinite(v)
    assert fit.ea_low <= fit.ea <= fit.ea_high
    assert fit.ln_a_low <= fit.ln_a <= fit.ln_a_high
    p = predict(fit, T.mean())
    assert p.low <= p.value <= p.high


def test_interval_coverage_heterogeneous_errors_with_replicate_scatter():
    # The screening case: stated per-trial errors differ 20-fold between instruments, but the true trial-to-trial
    # scatter (4 % in k) is common to all. A covariance merely scaled by chi2/nu lets the few precise points carry
    # the fit and covers too rarely; the Paule-Mandel extra variance (Paule and Mandel, J. Res. Natl. Bur. Stand. 87,
    # 377 (1982): from memory) restores about nominal coverage. 400 seeded repeats, binomial sd ≈ 1.1 %.
    rng = np.random.default_rng(7)
    T = np.repeat([298.15, 308.15, 318.15, 328.15], 2)
    stated = np.tile([0.001, 0.02], 4)
    ea_true, hits = 55e3, 0
    for _ in range(400):
        ln_k = 25.0 - ea_true / (R * T) + rng.normal(0.0, 0.04, T.size) + rng.normal(0.0, stated)
        fit = fit_arrhenius(T, np.exp(ln_k), k_se=stated * np.exp(ln_k))
        hits += fit.ea_low <= ea_true <= fit.ea_high
    assert 0.92 <= hits / 400 <= 0.99


def test_curvature_is_detected_with_extra_scatter():
    # A strongly bent ln k(1/T) (two channels, 30 and 120 kJ/mol, summed) with 2 % stated errors and 3 % real
    # scatter: the F test must still see the bend once the extra variance enters both fits (seeded synthetic data).
    rng = np.random.default_rng(3)
    T = np.repeat(np.linspace(290.0, 380.0, 8), 2)
    k = np.exp(12 - 30e3 / (R * T)) + np.exp(44 - 120e3 / (R * T))  # the channels cross near 335 K
    k = k * np.exp(rng.normal(0.0, 0.03, T.size))
    fit = fit_arrhenius(T, k, k_se=0.02 * k)
    assert fit.curvature_p < 1e-3
