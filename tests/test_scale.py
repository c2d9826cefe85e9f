"""Campaign-scale path end to end: batch fits agree with the per-trial reference, and re-analysis is incremental.

Invented data (catalog.datasets.bulk.write_bulk_campaign, the benchmark's generator at a small size); real DuckDB files in
tmp_path. No timings here: those live in benchmarks/bench.py.
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest

from catalog import store
from catalog.analysis import per_trial, results
from catalog.analysis.per_trial import trace_amounts
from catalog.analysis.settings import FIT_VERSION, Settings
from catalog.core import kinetics
from catalog.core.measurements import condition_arrays, to_amount
from catalog.datasets.bulk import write_bulk_campaign
from catalog.ingest import sources

N_TRIALS = 60
# Forty readings keep the generator's 0.1 s time rounding strictly increasing even for its fastest trials.
N_POINTS = 40


@pytest.fixture(scope="module")
def bulk(tmp_path_factory):
    folder = tmp_path_factory.mktemp("bulk") / "campaign"
    write_bulk_campaign(folder, N_TRIALS, N_POINTS, seed=3, chunk=25)
    return folder


def test_stored_rates_match_the_per_trial_reference(bulk, tmp_path):
    db = tmp_path / "scale.duckdb"
    store.import_campaign(db, sources.read_source(bulk))
    res = results.get_results(db, Settings())
    assert res.computed and len(res.trials) == N_TRIALS

    _, trials, points = store.load_campaign(db)
    trials = trials.set_index("trial_id")
    amount = trace_amounts(trials, points)
    for trial_id, at in points.groupby("trial_id").indices.items():
        row = trials.loc[trial_id]
        ref = kinetics.fit_trace(points["t"].to_numpy()[at], amount[at],
                                 n_max=row["limiting_amount"] * row["product_ratio"])
        stored = res.trials.loc[trial_id]
        # Both paths minimise the same objective and differ only in how the minimum is found (grid + Newton per
        # trial or all at once), so the initial rate agrees to the optimiser's precision; same 1e-6 as test_batch.
        assert stored["model"] == ref.model, trial_id
        assert stored["r0"] == pytest.approx(ref.r0, rel=1e-6), trial_id
        assert stored["n_points"] == N_POINTS


def test_amounts_in_blocks_and_of_interleaved_points_equal_each_trial_converted_alone(bulk, tmp_path, monkeypatch):
    # The measurement kinds of the bulk campaign (three at this size), converted a block of trials at a time (here one trial per
    # block) and from points of interleaved trials, against each trial through the registry on its own (the
    # converters' references are in test_signals.py). Element-wise arithmetic: the same doubles, exactly.
    db = tmp_path / "amounts.duckdb"
    store.import_campaign(db, sources.read_source(bulk))
    _, trials, points = store.load_campaign(db)
    trials = trials.set_index("trial_id")
    assert trials["measurement"].nunique() >= 3
    expected = np.empty(len(points))
    for trial_id, at in points.groupby("trial_id").indices.items():
        one = trials.loc[[trial_id]]
        kind = one["measurement"].iloc[0]
        value = points["value"].to_numpy()[at]
        expected[at] = to_amount(kind, value - value[0], **condition_arrays(kind, one))
    monkeypatch.setattr(per_trial, "AMOUNT_BLOCK_POINTS", 7)
    assert np.array_equal(trace_amounts(trials, points), expected)
    interleaved = points.sort_values("t", kind="stable")
    assert interleaved["trial_id"].iloc[0] != interleaved["trial_id"].iloc[1]
    assert np.array_equal(trace_amounts(trials, interleaved), expected[interleaved.index.to_numpy()])


def _first_trials(source, target, n: int) -> None:
    """Copy a campaign folder keeping only its first ``n`` trials, line for line (so the kept rows are identical)."""
    target.mkdir()
    shutil.copy(source / sources.CATALYSTS_FILE, target / sources.CATALYSTS_FILE)
    lines = (source / sources.TRIALS_FILE).read_text(encoding="utf-8").splitlines(keepends=True)
    (target / sources.TRIALS_FILE).write_text("".join(lines[: n + 1]), encoding="utf-8")
    keep = {line.split(",", 1)[0] for line in lines[1 : n + 1]}
    traces = (source / sources.TRACES_FILE).read_text(encoding="utf-8").splitlines(keepends=True)
    (target / sources.TRACES_FILE).write_text(
        traces[0] + "".join(line for line in traces[1:] if line.split(",", 1)[0] in keep), encoding="utf-8")


def test_reanalysis_after_new_trials_fits_only_the_new_ones(bulk, tmp_path):
    first, added = 45, N_TRIALS - 45
    part = tmp_path / "first"
    _first_trials(bulk, part, first)
    db = tmp_path / "grow.duckdb"
    store.import_campaign(db, sources.read_source(part))
    messages = []
    results.get_results(db, Settings(), progress=messages.append)
    assert f"fitting {first} trace(s), reusing 0 cached fit(s)" in messages
    before = store.load_fits(db, FIT_VERSION)
    assert len(before) == first

    report = store.import_campaign(db, sources.read_source(bulk))
    assert (report.n_trials, len(report.skipped_trials)) == (added, first)
    messages.clear()
    res = results.get_results(db, Settings(), progress=messages.append)
    assert res.computed and len(res.trials) == N_TRIALS
    assert f"fitting {added} trace(s), reusing {first} cached fit(s)" in messages
    after = store.load_fits(db, FIT_VERSION)
    assert len(after) == N_TRIALS
    # The earlier fits were reused as stored, not redone.
    kept = after.loc[before.index, ["r0", "k", "rmse"]].to_numpy(float)
    np.testing.assert_array_equal(kept, before[["r0", "k", "rmse"]].to_numpy(float))
