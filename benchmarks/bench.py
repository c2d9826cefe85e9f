"""Campaign-scale benchmark: import, analysis, ranking and warm re-read against two yardsticks on the same files.

Run::

    python benchmarks/bench.py --trials 10000 --points 200 [--workdir DIR] [--skip-baseline] [--baseline-trials N]

A clean synthetic campaign with known kinetics (:func:`catalog.datasets.bulk.write_bulk_campaign`) is written to the work
folder, then each phase runs in its own Python process so that its peak resident memory (``ru_maxrss``) is its own:

- ``read_csv``: DuckDB reading the trace file into an in-memory table and nothing else, the floor for an import;
- ``import``: :func:`catalog.ingest.sources.read_source` + :func:`catalog.store.import_campaign` into a fresh store file;
- ``analysis``: :func:`catalog.analysis.results.get_results` on the cold store (every trial fitted, results stored);
- ``rank``: :func:`catalog.analysis.results.get_results` again (now a cached read, the data a ranking page shows) and
  :func:`catalog.analysis.ranking.rank` on the catalyst table;
- ``baseline``: the per-trial loop a practitioner would write: pandas reads the CSV files, ``scipy.optimize.curve_fit``
  fits a first-order rise with offset to every trial, then ``np.polyfit`` of ln k against 1/T per catalyst.

Wall times are measured inside each process after its imports. Timings live here only, never in the tests.
Invented data, timing only.
"""

from __future__ import annotations

import argparse
import importlib.util
import itertools
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
from scipy.optimize import OptimizeWarning, curve_fit

from catalog import store
from catalog.analysis import results
from catalog.analysis.settings import Settings
from catalog.datasets import bulk
from catalog.ingest import sources

# Targets of the campaign-scale issue, as ratios measured in one run on the same files.
END_TO_END_TARGET = 0.1      # (import + analysis + rank) / per-trial curve_fit loop
IMPORT_TARGET = 3.0          # import / DuckDB read_csv of the trace file
MEMORY_TARGET_GIB = 3.0      # peak resident memory of import and of analysis at 100,000 x 200 points
WARM_TARGET_S = 1.0          # cached re-read of the ranking data
CAMPAIGN = "campaign"
STORE = "store.duckdb"


def _peak_mib() -> float:
    """Peak resident memory of this process in MiB (Linux reports ru_maxrss in KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


# --------------------------------------------------------------------------------------------------- phases
# Each phase runs in a fresh process, returns a dict of numbers, and never prints (the parent formats).


def phase_read_csv(work: Path) -> dict:
    """DuckDB's own CSV reader loading the trace file into an in-memory table: the floor for any import."""
    con = duckdb.connect()
    start = time.perf_counter()
    con.execute("CREATE TABLE raw AS SELECT * FROM read_csv(?)", [str(work / CAMPAIGN / sources.TRACES_FILE)])
    elapsed = time.perf_counter() - start
    con.close()
    return {"seconds": elapsed}


def phase_import(work: Path) -> dict:
    """Read, validate and store the campaign in a fresh store file."""
    (work / STORE).unlink(missing_ok=True)
    start = time.perf_counter()
    source = sources.read_source(work / CAMPAIGN)
    report = store.import_campaign(work / STORE, source)
    return {"seconds": time.perf_counter() - start, "trials": report.n_trials, "points": report.n_points}


def phase_analysis(work: Path) -> dict:
    """Cold analysis of every trial, with the time spent in each step that get_results reports."""
    marks = []
    start = time.perf_counter()
    res = results.get_results(work / STORE, Settings(),
                              progress=lambda message: marks.append((time.perf_counter() - start, message)))
    elapsed = time.perf_counter() - start
    steps = [(message, (marks[i + 1][0] if i + 1 < len(marks) else elapsed) - at)
             for i, (at, message) in enumerate(marks)]
    return {"seconds": elapsed, "computed": res.computed, "steps": steps, "trials": len(res.trials)}


def phase_rank(work: Path) -> dict:
    """Warm re-read of the results (a query) and the ranking of the catalyst table, when ranking exists."""
    start = time.perf_counter()
    res = results.get_results(work / STORE, Settings())
    warm = time.perf_counter() - start
    out = {"warm_seconds": warm, "computed": res.computed, "rank_seconds": None}
    # The ranking module is developed alongside this benchmark; without it the rest still runs.
    if importlib.util.find_spec("catalog.analysis.ranking") is not None:
        from catalog.analysis import ranking

        start = time.perf_counter()
        ranking.rank(res.catalysts, metric="tof")
        out["rank_seconds"] = time.perf_counter() - start
    return out


def _first_order_rise(t, a, k, c):
    """y = a (1 - exp(-k t)) + c: the per-trial model of the baseline loop."""
    return a * -np.expm1(-k * t) + c


def phase_baseline(work: Path, limit: int) -> dict:
    """The per-trial curve_fit loop, on the first ``limit`` trials; reading and Arrhenius always on everything."""
    start = time.perf_counter()
    folder = work / CAMPAIGN
    traces = pd.read_csv(folder / sources.TRACES_FILE)
    trials = pd.read_csv(folder / sources.TRIALS_FILE)
    read = time.perf_counter() - start
    trial_col, time_col, value_col = traces.columns[:3]
    rates = {}
    failed = 0
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OptimizeWarning)
        for trial_id, group in itertools.islice(traces.groupby(trial_col, sort=False), limit):
            t = group[time_col].to_numpy(float)
            y = group[value_col].to_numpy(float)
            guess = (y[-1] - y[0], 3.0 / t[-1], y[0])  # the rise, ~3 time constants over the trace, first reading
            try:
                params, _ = curve_fit(_first_order_rise, t, y, p0=guess, maxfev=5000)
                rates[trial_id] = params[1]
            except RuntimeError:
                failed += 1
    fits = time.perf_counter() - start
    start = time.perf_counter()
    k = trials.set_index("trial_id").join(pd.Series(rates, name="k"), how="inner").dropna(subset=["catalyst_id"])
    k = k[k["k"] > 0]
    for _, group in k.groupby("catalyst_id"):
        if group["temperature [degC]"].nunique() >= 2:
            np.polyfit(1.0 / (group["temperature [degC]"] + 273.15), np.log(group["k"]), 1)
    arrhenius = time.perf_counter() - start
    return {"read": read, "fits": fits, "arrhenius": arrhenius, "fitted": len(rates) + failed, "failed": failed,
            "trials": len(trials)}


PHASES = {"read_csv": phase_read_csv, "import": phase_import, "analysis": phase_analysis, "rank": phase_rank,
          "baseline": phase_baseline}


def _child(phase: str, work: Path, limit: int) -> None:
    try:
        out = PHASES[phase](work, limit) if phase == "baseline" else PHASES[phase](work)
    except Exception as exc:  # the parent shows why a phase failed and goes on with the others
        out = {"error": f"{type(exc).__name__}: {exc}"}
    out["peak_mib"] = _peak_mib()
    print(json.dumps(out))


def _run(phase: str, work: Path, limit: int = 0) -> dict:
    """Run one phase in a fresh interpreter; its last stdout line is the phase's JSON."""
    proc = subprocess.run([sys.executable, __file__, "--phase", phase, "--workdir", str(work),
                           "--baseline-trials", str(limit)], capture_output=True, text=True)
    if proc.returncode != 0:
        return {"error": proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else f"exit {proc.returncode}"}
    return json.loads(proc.stdout.strip().splitlines()[-1])


# --------------------------------------------------------------------------------------------------- report


def _row(name: str, seconds: float | None, trials: int, points: int, peak: float | None = None) -> str:
    if seconds is None:
        return f"{name:<34} {'-':>9}"
    rate = f"{trials / seconds:>11,.0f} {points / seconds:>13,.0f}" if trials and seconds > 0 else " " * 25
    memory = f"{peak:>10,.0f}" if peak is not None else ""
    return f"{name:<34} {seconds:>9.2f} {rate} {memory}"


def _verdict(ok: bool) -> str:
    return "met" if ok else "MISSED"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--trials", type=int, default=10_000, help="trials in the synthetic campaign")
    parser.add_argument("--points", type=int, default=200, help="readings per trial")
    parser.add_argument("--workdir", type=Path, help="folder for the campaign and store (kept); default: a "
                        "temporary folder, removed afterwards")
    parser.add_argument("--skip-baseline", action="store_true", help="do not run the per-trial curve_fit loop")
    parser.add_argument("--baseline-trials", type=int, default=10_000,
                        help="fit at most this many trials in the curve_fit loop and extrapolate the rest "
                             "(linear in trials); default 10000")
    parser.add_argument("--seed", type=int, default=0, help="seed of the synthetic campaign")
    parser.add_argument("--phase", choices=PHASES, help=argparse.SUPPRESS)  # one phase, in a child process
    args = parser.parse_args(argv)

    if args.phase:
        _child(args.phase, args.workdir, args.baseline_trials)
        return 0

    work = args.workdir or Path(tempfile.mkdtemp(prefix="catalog-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    n, points = args.trials, args.trials * args.points
    try:
        print(f"catalog benchmark: {n:,} trials x {args.points} points = {points:,} trace points; "
              f"{os.cpu_count()} CPU cores, load average {os.getloadavg()[0]:.1f} at start; "
              f"Python {sys.version.split()[0]}, DuckDB {duckdb.__version__}, pandas {pd.__version__}")
        start = time.perf_counter()
        made = bulk.write_bulk_campaign(work / CAMPAIGN, n, args.points, seed=args.seed)
        size = (work / CAMPAIGN / sources.TRACES_FILE).stat().st_size
        print(f"synthetic campaign: {time.perf_counter() - start:.1f} s, {made['trials']:,} trials "
              f"({made['blank_trials']:,} blanks), trace file {size / 2**20:,.0f} MiB in {work}")

        raw = _run("read_csv", work)
        imported = _run("import", work)
        analysed = _run("analysis", work) if "error" not in imported else {"error": "no store"}
        ranked = _run("rank", work) if "error" not in analysed else {"error": "no results"}
        base = None
        if not args.skip_baseline:
            base = _run("baseline", work, min(args.baseline_trials, n))

        print()
        print(f"{'phase':<34} {'wall s':>9} {'trials/s':>11} {'points/s':>13} {'peak MiB':>10}")
        for name, out in (("DuckDB read_csv of traces (raw)", raw), ("import (validate + store)", imported),
                          ("analysis, cold (fit all + store)", analysed)):
            if "error" in out:
                print(f"{name:<34} failed: {out['error']}")
                continue
            print(_row(name, out["seconds"], n if name != "DuckDB read_csv of traces (raw)" else 0,
                       points, out["peak_mib"]))
            for step, seconds in out.get("steps", ()):
                print(f"    {step:<52} {seconds:>6.2f} s")
        if "error" in ranked:
            print(f"{'ranking':<34} failed: {ranked['error']}")
        else:
            print(_row("warm re-read (get_results, cached)", ranked["warm_seconds"], 0, 0, ranked["peak_mib"]))
            if ranked["rank_seconds"] is None:
                print(f"{'ranking.rank':<34} skipped: catalog.analysis.ranking is not available")
            else:
                print(_row("ranking.rank (catalyst table)", ranked["rank_seconds"], 0, 0))

        end_to_end = None
        if not any("error" in out for out in (imported, analysed, ranked)):
            end_to_end = imported["seconds"] + analysed["seconds"] + (ranked["rank_seconds"] or 0.0)
            print(_row("end to end (import+analysis+rank)", end_to_end, n, points))

        loop = None
        if base is not None:
            if "error" in base:
                print(f"{'curve_fit loop (baseline)':<34} failed: {base['error']}")
            else:
                scale = base["trials"] / max(base["fitted"], 1)
                loop = base["read"] + base["fits"] * scale + base["arrhenius"]
                how = (f"measured on all {base['fitted']:,} trials" if base["fitted"] == base["trials"] else
                       f"EXTRAPOLATED: fits timed on {base['fitted']:,} trials, x{scale:.1f}")
                print(_row("curve_fit loop (baseline)", loop, n, points, base["peak_mib"]))
                print(f"    read CSV {base['read']:.2f} s, fits {base['fits']:.2f} s ({how}), "
                      f"Arrhenius {base['arrhenius']:.2f} s; {base['failed']} fit(s) did not converge")

        print()
        print("ratios against the targets (same files, same run):")
        if end_to_end is not None and loop is not None:
            ratio = end_to_end / loop
            print(f"  end-to-end / curve_fit loop      = {ratio:.2f} (target <= {END_TO_END_TARGET}) "
                  f"{_verdict(ratio <= END_TO_END_TARGET)}")
        if "error" not in imported and "error" not in raw:
            ratio = imported["seconds"] / raw["seconds"]
            print(f"  import / DuckDB read_csv         = {ratio:.2f} (target <= {IMPORT_TARGET}) "
                  f"{_verdict(ratio <= IMPORT_TARGET)}")
        peaks = [out["peak_mib"] / 1024 for out in (imported, analysed) if "error" not in out]
        if peaks:
            print(f"  peak memory import / analysis    = {' / '.join(f'{p:.2f}' for p in peaks)} GiB "
                  f"(target <= {MEMORY_TARGET_GIB} GiB at 100,000 x 200) {_verdict(max(peaks) <= MEMORY_TARGET_GIB)}")
        if "error" not in ranked:
            print(f"  warm re-read of ranking data     = {ranked['warm_seconds']:.2f} s (target < {WARM_TARGET_S} s) "
                  f"{_verdict(ranked['warm_seconds'] < WARM_TARGET_S)}")
    finally:
        if args.workdir is None:
            shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
