"""catalog.core.batch: the vectorised fits agree with the per-trial reference catalog.core.kinetics.fit_trace."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from support import synthetic_trace

from catalog.core.batch import COLUMNS, curve_values, fit_traces
from catalog.core.kinetics import fit_trace
from catalog.core.rate_laws import MODELS, model_curve

NUMERIC = [c for c in COLUMNS if c not in ("model", "k_unit", "n_points")]


def _campaign(seed=0, trials=54):
    """Invented traces of all three orders with mixed lengths, offsets, noise and curvature; a few fallbacks."""
    rng = np.random.default_rng(seed)
    traces = []
    for i in range(trials):
        order = MODELS[i % 3]
        n = int(rng.integers(12, 120))
        kappa = rng.uniform(0.8, 2.5) if order == "zero" else rng.uniform(0.3, 15.0)
        t, amount, _ = synthetic_trace(order, rng, n=n, t_end=rng.uniform(60, 7200), plateau=rng.uniform(1e-4, 1e-2),
                                       kappa=kappa, offset=rng.uniform(-1e-3, 1e-3), noise=rng.uniform(0.002, 0.03))
        traces.append((t, amount, rng.uniform(1e-4, 1e-2)))
    traces[5] = (traces[5][0][:4], traces[5][1][:4], np.nan)  # too short: initial slope
    traces[7] = (traces[7][0][:2], traces[7][1][:2], 1e-3)  # hopeless: none
    t, amount, n_max = traces[9]
    amount = amount.copy()
    amount[[3, 10]] = np.nan  # dropped points
    traces[9] = (np.r_[-5.0, t], np.r_[0.0, amount], n_max)  # a negative time, dropped too
    return traces


def _long(traces):
    trial = np.concatenate([np.full(len(t), i) for i, (t, _, _) in enumerate(traces)])
    t = np.concatenate([t for t, _, _ in traces])
    amount = np.concatenate([a for _, a, _ in traces])
    return trial, t, amount, np.array([m for _, _, m in traces])


@pytest.fixture(scope="module")
def campaign():
    traces = _campaign()
    refs = [fit_trace(t, a, m) for t, a, m in traces]
    return traces, refs, fit_traces(*_long(traces))


def test_agrees_with_reference(campaign):
    traces, refs, df = campaign
    assert list(df.columns) == list(COLUMNS)
    assert df.index.name == "trial" and len(df) == len(traces)
    assert {"zero", "first", "second", "initial_slope", "none"} <= set(df["model"])
    for i, ref in enumerate(refs):
        row = df.loc[i]
        assert row["model"] == ref.model and row["k_unit"] == ref.k_unit and row["n_points"] == ref.n_points
        # both paths find the same least-squares minimum; r0 to 1e-6 relative (brief asks ~1e-4)
        assert row["r0"] == pytest.approx(ref.r0, rel=1e-6, nan_ok=True)
        for name in NUMERIC:
            want = ref.aic.get(name[4:], np.nan) if name.startswith("aic_") else getattr(ref, name)
            # the diagnostics are z-scores that can be ~0 by construction: compare those absolutely
            tol = 1e-6 if name.endswith("_z") else 0.0
            assert row[name] == pytest.approx(want, rel=1e-5, abs=tol, nan_ok=True), name


def test_curve_values_match_reference_curves(campaign):
    traces, refs, df = campaign
    trial, t, _, _ = _long(traces)
    fitted = curve_values(df, trial, t)
    for i, ((ti, _, _), ref) in enumerate(zip(traces, refs, strict=False)):
        # Two fits (batch and scipy) of one trace agree to ~1e-7 in their parameters (r0 to 1e-6 above), so their
        # curves agree to that relative to the curve's size, not to 1e-12 absolute where a curve crosses zero.
        want = model_curve(ref, ti)
        np.testing.assert_allclose(fitted[trial == i], want, rtol=1e-6, atol=1e-9 * np.abs(want).max())


def test_chunking_and_order_do_not_matter(campaign):
    traces, _, df = campaign
    trial, t, amount, n_max = _long(traces)
    small = fit_traces(trial, t, amount, n_max, chunk_points=500)
    # fixed-plateau fits minimise the RSS itself (golden section), which places a flat minimum only to about
    # sqrt(machine epsilon): chunk padding changes the summation order, so agreement is to 1e-7, not 1e-9
    pd.testing.assert_frame_equal(small, df, rtol=1e-7)
    shuffle = np.random.default_rng(1).permutation(trial.size)
    shuffled = fit_traces(trial[shuffle], t[shuffle], amount[shuffle], n_max)
    assert (shuffled["model"] == df["model"]).all()
    np.testing.assert_allclose(shuffled["r0"], df["r0"], rtol=1e-9)


def test_threads_give_the_plain_loop_bit_for_bit(campaign):
    # an invariant of the implementation (each chunk is fitted alone), not a computed figure: no source needed
    traces, _, _ = campaign
    trial, t, amount, n_max = _long(traces)
    serial = fit_traces(trial, t, amount, n_max, chunk_points=500, workers=1)
    for workers in (2, 3):
        pd.testing.assert_frame_equal(fit_traces(trial, t, amount, n_max, chunk_points=500, workers=workers), serial,
                                      check_exact=True)
    with pytest.raises(ValueError, match="workers"):
        fit_traces(trial, t, amount, n_max, workers=0)


def test_trials_without_points_and_empty_input():
    df = fit_traces(np.array([1, 1, 1], dtype=int), [0.0, 1.0, 2.0], [0.0, 1.0, 2.0], [np.nan, np.nan, np.nan])
    assert list(df["model"]) == ["none", "initial_slope", "none"]
    assert list(df["n_points"]) == [0, 3, 0]
    assert len(fit_traces(np.array([], dtype=int), [], [], [])) == 0


def test_models_subset():
    traces = _campaign(seed=2, trials=12)
    df = fit_traces(*_long(traces), models=("first",))
    for i, (t, a, m) in enumerate(traces):
        ref = fit_trace(t, a, m, models=("first",))
        assert df.loc[i, "model"] == ref.model
        assert df.loc[i, "r0"] == pytest.approx(ref.r0, rel=1e-6, nan_ok=True)
    assert df["aic_zero"].isna().all() and df["aic_second"].isna().all()


def test_rejects_bad_codes():
    with pytest.raises(ValueError):
        fit_traces(np.array([0, 2]), [0.0, 1.0], [0.0, 1.0], [1.0, 1.0])
    with pytest.raises(ValueError):
        fit_traces(np.array([0.5, 1.0]), [0.0, 1.0], [0.0, 1.0], [1.0, 1.0])
    with pytest.raises(ValueError):
        fit_traces(np.array([0, 0]), [0.0, 1.0], [0.0], [1.0])


def test_covariance_matches_numpy_inverse():
    # reference: numpy.linalg.inv and numpy.linalg.cond (LAPACK) on random J^T J of 1-3 columns, conditioned from
    # 1 to 1e14; the closed forms must agree to rounding x condition and make the same rcond < 1e-12 decision
    from catalog.core.rate_laws import covariance

    rng = np.random.default_rng(3)
    for p in (1, 2, 3):
        jac = rng.normal(size=(400, 30, p))
        if p > 1:  # near-collinear columns for a spread of conditions, ~1/delta^2
            jac[:, :, -1] = jac[:, :, 0] + np.geomspace(1.0, 1e-8, 400)[:, None] * jac[:, :, -1]
        jac *= np.geomspace(1e-3, 1e3, p)  # column scales: equilibration must take them out
        jtj = np.einsum("mki,mkj->mij", jac, jac)
        s2 = rng.uniform(0.5, 2.0, 400)
        got = covariance(jtj, s2)
        d = np.sqrt(np.diagonal(jtj, axis1=1, axis2=2))
        a = jtj / (d[:, :, None] * d[:, None, :])
        cond = np.linalg.cond(a)
        clear = (cond < 1e11) | (cond > 1e13)  # away from the threshold, where rounding decides either way
        assert (np.isnan(got[:, 0, 0]) == (cond > 1e12))[clear].all()
        ok = cond < 1e10
        want = np.linalg.inv(a[ok]) / (d[ok, :, None] * d[ok, None, :]) * s2[ok, None, None]
        scale = np.sqrt(np.einsum("mii,mjj->mij", np.abs(want), np.abs(want)))
        assert (np.abs(got[ok] - want) / scale <= 1e-15 * cond[ok, None, None] + 1e-14).all()
        assert ok.sum() > 100 and (~ok).sum() > (50 if p > 1 else -1)


def test_noise_free_traces_recover_the_generating_rate():
    # Near-exact traces take the residual grid scan (the sums' rounding would matter there): r0 must come back as the
    # generating formula's dP/dt(0) = r0 for the law that made the trace, and the batch must agree with the
    # per-trial reference. Source: the integrated rate laws themselves (first order P = a + r0/k (1 - e^{-kt}),
    # second order P = a + r0 t/(1 + bt)).
    t = np.linspace(0.0, 3600.0, 40)
    traces, want = [], []
    for kappa in (0.3, 2.0, 9.0):
        k = kappa / t[-1]
        traces.append((t, 1e-4 + 2e-3 * -np.expm1(-k * t), np.nan))
        want.append(("first", 2e-3 * k))
        traces.append((t, 1e-4 + 2e-3 * k * t / (1 + k * t), np.nan))
        want.append(("second", 2e-3 * k))
    df = fit_traces(*_long(traces))
    for i, ((model, r0), (ti, a, m)) in enumerate(zip(want, traces, strict=True)):
        ref = fit_trace(ti, a, m)
        assert df.loc[i, "model"] == model == ref.model
        assert df.loc[i, "r0"] == pytest.approx(r0, rel=1e-6)
        assert df.loc[i, "r0"] == pytest.approx(ref.r0, rel=1e-6)
