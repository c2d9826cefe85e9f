"""catalog.core.kinetics: recovery of known kinetics, textbook half-lives, fallbacks and invariances of fit_trace."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from support import synthetic_trace

from catalog.core.kinetics import fit_trace
from catalog.core.rate_laws import MODELS, TraceFit, model_curve


@pytest.mark.parametrize("order,kappa", [("zero", 1.6), ("first", 4.0), ("second", 12.0)])
def test_recovers_each_order_by_aic(order, kappa):
    # invented data, 1 % noise: the generating law must win and r0 must sit within 3 standard errors
    for seed in range(5):
        t, amount, r0 = synthetic_trace(order, np.random.default_rng(seed), kappa=kappa, offset=1e-4)
        fit = fit_trace(t, amount, n_max=2.5e-3)
        assert fit.model == order
        assert abs(fit.r0 - r0) < 3 * fit.r0_se
        assert fit.plateau == pytest.approx(2e-3, rel=0.03)
        assert fit.plateau_ratio == pytest.approx(fit.plateau / 2.5e-3)
        assert fit.final_conversion == pytest.approx(fit.final_amount / 2.5e-3)
        assert fit.r2 > 0.99
        assert set(fit.aic) == set(MODELS)
        assert min(fit.aic, key=fit.aic.get) == order


def test_r0_interval_coverage():
    # the nominal 95 % interval r0 +- 1.96 se should hold most of the time (binomial: 95 of 120 expected 114)
    rng = np.random.default_rng(11)
    hits = 0
    for _ in range(120):
        t, amount, r0 = synthetic_trace("first", rng, n=30, noise=0.02)
        fit = fit_trace(t, amount)
        hits += abs(fit.r0 - r0) <= 1.96 * fit.r0_se
    assert hits >= 100


def test_slow_nearly_linear_trace_keeps_r0():
    # 10 % conversion over the trace (k t_end = -ln 0.9): noise 0.5 % of the rise; the plateau is far outside
    for seed in range(6):
        t, amount, r0 = synthetic_trace("first", np.random.default_rng(seed), kappa=-math.log(0.9),
                                        noise=0.0005, offset=3e-4)
        fit = fit_trace(t, amount)
        assert fit.r0 == pytest.approx(r0, rel=0.04)
        assert abs(fit.r0 - r0) < 3 * fit.r0_se
        assert 0 < fit.r0_se < 0.05 * r0


def test_offset_of_thirty_percent_recovered():
    t, amount, r0 = synthetic_trace("first", np.random.default_rng(3), offset=0.3 * 2e-3, noise=0.005)
    fit = fit_trace(t, amount)
    assert fit.model == "first"
    assert fit.offset == pytest.approx(6e-4, abs=3 * 0.005 * 2e-3)
    assert fit.plateau == pytest.approx(2e-3, rel=0.01)
    assert fit.r0 == pytest.approx(r0, rel=0.03)
    assert np.allclose(model_curve(fit, t), amount, atol=4 * 0.005 * 2e-3)


def test_first_order_half_life_textbook():
    # k = 3.46e-5 1/s: N2O5 decomposition at 298.15 K (Daniels and Johnston, J. Am. Chem. Soc. 43, 53 (1921)).
    # First order: P = P_inf (1 - exp(-k t)) and t_1/2 = ln 2 / k (Atkins, Physical Chemistry: from memory).
    k, plateau = 3.46e-5, 1.5e-3
    half = math.log(2) / k
    t = np.linspace(0.0, 4 * half, 40)
    fit = fit_trace(t, plateau * (1 - np.exp(-k * t)), n_max=plateau)
    assert fit.model == "first" and fit.k_unit == "1/s"
    assert fit.k == pytest.approx(k, rel=1e-7)
    assert fit.half_life == pytest.approx(half, rel=1e-7)  # 2.0033e4 s
    assert fit.r0 == pytest.approx(k * plateau, rel=1e-7)
    assert fit.plateau_ratio == pytest.approx(1.0, rel=1e-7)
    assert abs(fit.offset) < 1e-12


def test_second_order_half_life_textbook():
    # Second order in A: 1/[A] = 1/[A]0 + k t, so t_1/2 = 1/(k [A]0) (Atkins, Physical Chemistry: from memory).
    # On an amount basis P = n0 - n_A = n0 (k n0 t)/(1 + k n0 t); k in 1/(mol s).
    k, n0 = 40.0, 2.5e-3  # t_1/2 = 10 s
    t = np.linspace(0.0, 150.0, 50)
    n_a = 1.0 / (1.0 / n0 + k * t)
    fit = fit_trace(t, 1e-4 + (n0 - n_a), n_max=n0)
    assert fit.model == "second" and fit.k_unit == "1/(mol*s)"
    assert fit.k == pytest.approx(k, rel=1e-7)
    assert fit.half_life == pytest.approx(1.0 / (k * n0), rel=1e-7)
    assert fit.r0 == pytest.approx(k * n0**2, rel=1e-7)
    assert fit.offset == pytest.approx(1e-4, rel=1e-7)


def test_zero_order_half_life_textbook():
    # Zero order: [A] = [A]0 - k t until A is used up, so t_1/2 = [A]0/(2k) (Atkins, Physical Chemistry: from memory)
    k, n0 = 2e-6, 1e-3  # used up at 500 s, t_1/2 = 250 s
    t = np.linspace(0.0, 900.0, 37)
    fit = fit_trace(t, np.minimum(k * t, n0), n_max=n0)
    assert fit.model == "zero" and fit.k_unit == "mol/s"
    assert fit.k == pytest.approx(k, rel=1e-9) and fit.r0 == fit.k
    assert fit.half_life == pytest.approx(n0 / (2 * k), rel=1e-9)
    assert fit.plateau == pytest.approx(n0, rel=1e-9)


def test_zero_order_without_plateau_is_a_line():
    rng = np.random.default_rng(4)
    t = np.linspace(0.0, 600.0, 30)
    fit = fit_trace(t, 5e-4 + 3e-7 * t + rng.normal(0, 1e-6, t.size))
    assert fit.model == "zero"
    assert np.isnan(fit.plateau) and np.isnan(fit.half_life)
    assert fit.r0 == pytest.approx(3e-7, rel=0.02)


def test_fallback_initial_slope_and_none():
    few = fit_trace([0.0, 10.0, 20.0, 30.0], [1.0, 2.0, 2.9, 3.5])
    assert few.model == "initial_slope" and few.n_points == 4
    assert few.r0 == pytest.approx(np.polyfit([0, 10, 20, 30], [1.0, 2.0, 2.9, 3.5], 1)[0])
    assert math.isnan(few.k) and few.k_unit == ""
    assert few.final_amount == pytest.approx(3.5 - few.offset)
    # two distinct times only: no rate law can be fitted
    assert fit_trace([0, 0, 0, 5, 5, 5], [0, 0.1, 0, 1, 1.1, 1]).model == "initial_slope"
    # complete before the second reading: first order runs into its curvature bound
    step = np.r_[0.0, np.ones(10)]
    assert fit_trace(np.arange(11.0), step, models=("first",)).model == "initial_slope"
    # non-finite and negative-time points are left out
    dropped = fit_trace([-1.0, 0.0, np.nan, 1.0, 2.0], [5.0, 0.0, 1.0, np.inf, 2.0])
    assert dropped.model == "none" and dropped.n_points == 2
    assert math.isnan(dropped.r0)
    assert np.isnan(model_curve(dropped, [0.0, 1.0])).all()


def test_poor_model_shows_in_runs_z():
    # a first-order trace forced through the zero-order law leaves long runs of one-signed residuals
    t, amount, _ = synthetic_trace("first", np.random.default_rng(2), noise=0.002)
    good, forced = fit_trace(t, amount), fit_trace(t, amount, models=("zero",))
    assert forced.runs_z < -3 < good.runs_z
    assert abs(good.late_residual_z) < 3


def test_rejects_mismatched_input():
    with pytest.raises(ValueError):
        fit_trace([0.0, 1.0], [0.0])
    with pytest.raises(ValueError):
        fit_trace([0.0, 1.0], [0.0, 1.0], models=("third",))


finite = st.floats(allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 25).flatmap(lambda n: st.tuples(st.lists(finite, min_size=n, max_size=n),
                                                      st.lists(finite, min_size=n, max_size=n))))
def test_never_raises_on_finite_input(data):
    t, amount = data
    fit = fit_trace(t, amount)
    assert isinstance(fit, TraceFit)
    assert fit.model in MODELS + ("initial_slope", "none")
    if fit.n_points < 5:
        assert fit.model in ("initial_slope", "none")


def _noisy(order, seed):
    return synthetic_trace(order, np.random.default_rng(seed), n=40, offset=2e-4, noise=0.01)[:2]


@settings(max_examples=25, deadline=None)
@given(st.sampled_from(MODELS), st.integers(0, 10_000), st.floats(1e-6, 1e6))
def test_r0_scales_with_amounts(order, seed, scale):
    t, amount = _noisy(order, seed)
    base, scaled = fit_trace(t, amount), fit_trace(t, scale * amount)
    assert scaled.model == base.model
    assert scaled.r0 == pytest.approx(scale * base.r0, rel=1e-6)
    assert scaled.r0_se == pytest.approx(scale * base.r0_se, rel=1e-6)


@settings(max_examples=25, deadline=None)
@given(st.sampled_from(MODELS), st.integers(0, 10_000), st.floats(-1e-2, 1e-2))
def test_shift_changes_only_offset(order, seed, shift):
    t, amount = _noisy(order, seed)
    base, shifted = fit_trace(t, amount), fit_trace(t, amount + shift)
    assert shifted.model == base.model
    assert shifted.offset == pytest.approx(base.offset + shift, abs=1e-8 * 2e-3)  # 1e-8 of the plateau
    for name in ("r0", "r0_se", "k", "plateau", "half_life", "r2", "final_amount"):
        assert getattr(shifted, name) == pytest.approx(getattr(base, name), rel=1e-6, nan_ok=True)
