"""Campaign-scale benchmark: whole processes as a user runs them, phases in process, and the yardsticks.

Run::

    python benchmarks/bench.py --trials 10000 --points 200          # the issue's size
    python benchmarks/bench.py --quick                              # 1,000 x 100, small scaling table
    python benchmarks/bench.py --scaling 1000,10000,100000          # add the linear-cost table

A clean synthetic campaign with known kinetics (:func:`catalog.datasets.bulk.write_bulk_campaign`) is written to a
work folder. Then, each in a fresh process so that its wall time and peak resident memory are its own:

Whole processes (what a user waits for; ``python -m catalog`` is the ``catalog`` script):
  - ``catalog import FOLDER`` into a new store file, then ``catalog rank`` (cold: fits everything), and
    ``catalog rank`` again (warm: cached);
  - DuckDB's raw ``read_csv`` of the trace file into a database file, in a bare Python process;
  - ``benchmarks/curve_fit_per_trial.py``: the per-trial pandas + scipy ``curve_fit`` script a practitioner writes.
Phases (timed inside a process after its imports):
  - the raw ``read_csv`` into a database file; :func:`catalog.store.import_campaign`; a cold
    :func:`catalog.analysis.results.get_results` with its reported steps; the rank page data warm (cached
    ``get_results`` + :func:`catalog.analysis.ranking.rank`); and the plain-numpy fit floor of the same traces
    (:mod:`numpy_floor`, data already in arrays).

The ratios against the targets of the speed issue are printed last. Timings live here only, never in the tests.
Invented data, timing only.
"""

from __future__ import annotations

import argparse
import compileall
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from importlib.metadata import version
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
HERE = Path(__file__).resolve().parent
CAMPAIGN = "campaign"

# Targets of the speed issue: ratios in one run on the same files.
WHOLE_TARGET, WHOLE_AIM = 0.2, 0.12   # (catalog import + catalog rank) / curve_fit script, whole processes
IMPORT_TARGET, IMPORT_AIM = 2.0, 1.5  # import / DuckDB raw read_csv into a database file
FLOOR_TARGET = 2.0                    # cold analysis in process / plain numpy fit
WARM_TARGET_S = 0.3                   # rank page data for the campaign, warm

RAW_READ = ("import sys, duckdb\n"
            "con = duckdb.connect(sys.argv[1])\n"
            "con.execute('CREATE TABLE raw AS SELECT * FROM read_csv(?)', [sys.argv[2]])\n"
            "con.close()\n")


def _env() -> dict:
    # Run this checkout's package, whatever an editable install elsewhere points at.
    return dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, (str(ROOT), os.environ.get("PYTHONPATH")))))


def run(argv: list[str]) -> dict:
    """Run one whole process; its wall seconds, peak resident MiB (its own, via wait4) and last stdout line."""
    start = time.perf_counter()
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        proc = subprocess.Popen([sys.executable, *argv], cwd=ROOT, env=_env(), stdout=out, stderr=err)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - start
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0), err.seek(0)
        lines, problem = out.read().strip().splitlines(), err.read().strip().splitlines()
    result = {"seconds": wall, "peak_mib": usage.ru_maxrss / 1024, "last": lines[-1] if lines else ""}
    if proc.returncode != 0:
        result["error"] = problem[-1] if problem else f"exit {proc.returncode}"
    return result


# --------------------------------------------------------------------------------------------------- phases
# Each phase runs in a fresh process (``--phase``), prints one JSON line, and times only its own work.


def phase_read_csv(work: Path) -> dict:
    import duckdb

    target = work / "raw_phase.duckdb"
    target.unlink(missing_ok=True)
    start = time.perf_counter()
    con = duckdb.connect(str(target))
    con.execute("CREATE TABLE raw AS SELECT * FROM read_csv(?)", [str(work / CAMPAIGN / "traces.csv")])
    con.close()
    return {"seconds": time.perf_counter() - start}


def phase_import(work: Path) -> dict:
    from catalog import store
    from catalog.ingest import sources

    target = work / "phase.duckdb"
    target.unlink(missing_ok=True)
    marks = [(0.0, "reading the source files (and their SHA-256)")]
    start = time.perf_counter()
    source = sources.read_source(work / CAMPAIGN)
    store.import_campaign(target, source, progress=lambda message: marks.append((time.perf_counter() - start,
                                                                                  message)))
    elapsed = time.perf_counter() - start
    return {"seconds": elapsed, "steps": _steps(marks, elapsed)}


def phase_analysis(work: Path) -> dict:
    from catalog.analysis import results
    from catalog.analysis.settings import Settings

    marks = []
    start = time.perf_counter()
    res = results.get_results(work / "phase.duckdb", Settings(),
                              progress=lambda message: marks.append((time.perf_counter() - start, message)))
    elapsed = time.perf_counter() - start
    return {"seconds": elapsed, "computed": res.computed, "steps": _steps(marks, elapsed)}


def _steps(marks: list[tuple[float, str]], elapsed: float) -> list[tuple[str, float]]:
    """Each progress message with the seconds until the next one (the last: until the end)."""
    return [(message, (marks[i + 1][0] if i + 1 < len(marks) else elapsed) - at)
            for i, (at, message) in enumerate(marks)]


def phase_warm(work: Path) -> dict:
    from catalog.analysis import ranking, results
    from catalog.analysis.settings import Settings

    start = time.perf_counter()
    res = results.get_results(work / "phase.duckdb", Settings())
    ranking.rank(res.catalysts, metric="tof")
    return {"seconds": time.perf_counter() - start, "computed": res.computed}


def phase_floor(work: Path) -> dict:
    import duckdb
    import numpy as np
    from numpy_floor import fit_floor

    # The floor gets its data for free: the traces (trial-major in the file, equal length) in arrays, untimed.
    points = json.loads((work / "meta.json").read_text())["points"]
    data = duckdb.connect().execute("SELECT * FROM read_csv(?)", [str(work / CAMPAIGN / "traces.csv")]).fetchnumpy()
    t, y = (np.asarray(data[name], dtype=float).reshape(-1, points) for name in list(data)[1:3])
    start = time.perf_counter()
    fits = fit_floor(t, y)
    return {"seconds": time.perf_counter() - start, "fitted": int(np.isfinite(fits["r0"]).sum())}


def phase_make(work: Path) -> dict:
    from catalog.datasets.bulk import write_bulk_campaign

    meta = json.loads((work / "meta.json").read_text())
    made = write_bulk_campaign(work / CAMPAIGN, meta["trials"], meta["points"], seed=meta["seed"])
    return {"trials": made["trials"], "blank_trials": made["blank_trials"]}


PHASES = {"make": phase_make, "read_csv": phase_read_csv, "import": phase_import, "analysis": phase_analysis,
          "warm": phase_warm, "floor": phase_floor}


def _child(phase: str, work: Path) -> None:
    sys.path.insert(0, str(HERE))
    try:
        out = PHASES[phase](work)
    except Exception as exc:  # the parent shows why a phase failed and goes on with the others
        out = {"error": f"{type(exc).__name__}: {exc}"}
    out["peak_mib"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps(out))


def phase(name: str, work: Path) -> dict:
    got = run([__file__, "--phase", name, "--workdir", str(work)])
    return got if "error" in got else json.loads(got["last"])


# --------------------------------------------------------------------------------------------------- runs


def make_campaign(work: Path, trials: int, points: int, seed: int) -> dict:
    """Write the campaign in a child process: the parent stays small, because a child's peak resident memory
    (``ru_maxrss``) starts from its parent's size at the fork."""
    work.mkdir(parents=True, exist_ok=True)
    (work / "meta.json").write_text(json.dumps({"trials": trials, "points": points, "seed": seed}))
    return phase("make", work)


def whole_processes(work: Path) -> dict:
    """``catalog import`` into a new store, then ``catalog rank`` cold and warm, as a user types them."""
    db = work / "store.duckdb"
    db.unlink(missing_ok=True)
    out = {"import": run(["-m", "catalog", "import", str(work / CAMPAIGN), "--db", str(db), "--quiet"])}
    out["rank"] = run(["-m", "catalog", "rank", "--db", str(db), "--quiet"])
    out["rank_warm"] = run(["-m", "catalog", "rank", "--db", str(db), "--quiet"])
    return out


def _line(name: str, got: dict, trials: int = 0) -> str:
    if "error" in got:
        return f"  {name:<48} failed: {got['error']}"
    rate = f"{trials / got['seconds']:>10,.0f}" if trials else " " * 10
    peak = f"{got['peak_mib']:>9,.0f}" if "peak_mib" in got else ""
    return f"  {name:<48} {got['seconds']:>8.2f} {rate} {peak}"


def _ratio(name: str, numerator: dict, denominator: dict, target: float, aim: float | None = None) -> str:
    if "error" in numerator or "error" in denominator:
        why = "skipped" if "skipped" in (numerator.get("error"), denominator.get("error")) else "a run failed"
        return f"  {name:<52} not measured ({why})"
    value = numerator["seconds"] / denominator["seconds"]
    goal = f"target <= {target}" + (f", aim {aim}" if aim else "")
    return f"  {name:<52} {value:>6.2f}  ({goal}) {'met' if value <= target else 'MISSED'}"


def scaling_table(work: Path, sizes: list[int], points: int, seed: int, known: dict) -> list[str]:
    """Whole-process import + cold rank at each size: cost per trial, and the marginal cost per added trial
    (the slope between sizes, free of the fixed start-up), relative to the first slope."""
    rows = [f"  {'trials':>8} {'points':>11} {'import s':>9} {'rank s':>8} {'total s':>8} {'us/trial':>9} "
            f"{'marginal':>9} {'vs first':>8} {'peak MiB imp/rank':>18}"]
    previous, first = None, None
    for n in sizes:
        if n in known:
            got = known[n]
        else:
            folder = work / f"scale-{n}"
            make_campaign(folder, n, points, seed)
            got = whole_processes(folder)
            shutil.rmtree(folder, ignore_errors=True)
        if "error" in got["import"] or "error" in got["rank"]:
            rows.append(f"  {n:>8,} failed: {got['import'].get('error') or got['rank'].get('error')}")
            continue
        total = got["import"]["seconds"] + got["rank"]["seconds"]
        marginal = (total - previous[1]) / (n - previous[0]) * 1e6 if previous else None
        first = first or marginal
        slope = f"{marginal:>9.0f} {marginal / first:>8.2f}" if marginal else f"{'':>9} {'':>8}"
        previous = (n, total)
        rows.append(f"  {n:>8,} {n * points:>11,} {got['import']['seconds']:>9.2f} {got['rank']['seconds']:>8.2f} "
                    f"{total:>8.2f} {total / n * 1e6:>9.0f} {slope} "
                    f"{got['import']['peak_mib']:>8,.0f} / {got['rank']['peak_mib']:>6,.0f}")
    return rows


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--trials", type=int, default=10_000, help="trials in the synthetic campaign (10000)")
    parser.add_argument("--points", type=int, default=200, help="readings per trial (200)")
    parser.add_argument("--quick", action="store_true",
                        help="a check of the benchmark itself: 1,000 x 100 and a 250/500/1,000 scaling table")
    parser.add_argument("--scaling", help="comma-separated trial counts for the linear-cost table, e.g. "
                        "1000,10000,100000 (default: none; --quick: 250,500,1000)")
    parser.add_argument("--skip-baseline", action="store_true", help="do not run the curve_fit script")
    parser.add_argument("--workdir", type=Path, help="folder for the campaign and stores (kept); default: a "
                        "temporary folder, removed afterwards")
    parser.add_argument("--seed", type=int, default=0, help="seed of the synthetic campaign")
    parser.add_argument("--phase", choices=PHASES, help=argparse.SUPPRESS)  # one phase, in a child process
    args = parser.parse_args(argv)
    if args.phase:
        _child(args.phase, args.workdir)
        return 0
    if args.quick:
        args.trials, args.points = 1_000, 100
        args.scaling = args.scaling or "250,500,1000"
    sizes = [int(n) for n in args.scaling.split(",")] if args.scaling else []

    work = args.workdir or Path(tempfile.mkdtemp(prefix="catalog-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    n = args.trials
    try:
        print(f"catalog benchmark: {n:,} trials x {args.points} points = {n * args.points:,} trace points; "
              f"{os.cpu_count()} CPU cores, load average {os.getloadavg()[0]:.1f} at start; Python "
              f"{sys.version.split()[0]}, DuckDB {version('duckdb')}, pandas {version('pandas')}, numpy "
              f"{version('numpy')}")
        start = time.perf_counter()
        made = make_campaign(work, n, args.points, args.seed)
        if "error" in made:
            print(f"could not write the campaign: {made['error']}")
            return 1
        size = (work / CAMPAIGN / "traces.csv").stat().st_size
        print(f"synthetic campaign: {time.perf_counter() - start:.1f} s, {made['trials']:,} trials "
              f"({made['blank_trials']:,} blanks), trace file {size / 2**20:,.0f} MiB in {work}")

        # Bytecode first, as a regular install leaves it: otherwise the first timed process of each command pays
        # for compiling the modules changed since the last run (seen as +1-1.5 s on a freshly edited checkout).
        compileall.compile_dir(ROOT / "catalog", quiet=1)
        user = whole_processes(work)
        (work / "raw.duckdb").unlink(missing_ok=True)  # a kept --workdir holds the last run's file
        raw = run(["-c", RAW_READ, str(work / "raw.duckdb"), str(work / CAMPAIGN / "traces.csv")])
        script = ({"error": "skipped"} if args.skip_baseline
                  else run([str(HERE / "curve_fit_per_trial.py"), str(work / CAMPAIGN), "--out", str(work / "r.csv")]))
        phases = {name: phase(name, work) for name in PHASES if name != "make"}
        load_end = os.getloadavg()[0]

        print(f"\nwhole processes{'':<35} {'wall s':>8} {'trials/s':>10} {'peak MiB':>9}")
        failed = [got for got in (user["import"], user["rank"]) if "error" in got]
        both = failed[0] if failed else {"seconds": user["import"]["seconds"] + user["rank"]["seconds"]}
        for name, got, per in (("catalog import", user["import"], n), ("catalog rank (cold: fits everything)",
                               user["rank"], n), ("catalog import + catalog rank", both, n),
                               ("catalog rank again (warm)", user["rank_warm"], 0),
                               ("DuckDB raw read_csv into a file (python -c)", raw, 0),
                               ("per-trial curve_fit script", script, n)):
            print(_line(name, got, per))
        print(f"\nphases in process (after imports){'':<17} {'wall s':>8} {'trials/s':>10} {'peak MiB':>9}")
        for name, label, per in (("read_csv", "DuckDB read_csv into a database file", 0),
                                 ("import", "store.import_campaign (read + validate + store)", n),
                                 ("analysis", "get_results, cold (fit all + store)", n),
                                 ("warm", "rank page data, warm (get_results + rank)", 0),
                                 ("floor", "plain numpy fit floor (3 rate laws + SE)", n)):
            print(_line(label, phases[name], per))
            for step, seconds in phases[name].get("steps", ()):
                print(f"      {step:<46} {seconds:>8.2f}")

        print(f"\nratios against the targets (same files, same run; load average {load_end:.1f} at the end):")
        print(_ratio("import + rank / curve_fit script (whole processes)", both, script, WHOLE_TARGET, WHOLE_AIM))
        print(_ratio("import / DuckDB raw read_csv (whole processes)", user["import"], raw, IMPORT_TARGET, IMPORT_AIM))
        print(_ratio("import / DuckDB raw read_csv (in process)", phases["import"], phases["read_csv"],
                     IMPORT_TARGET, IMPORT_AIM))
        print(_ratio("cold analysis / numpy floor (in process)", phases["analysis"], phases["floor"], FLOOR_TARGET))
        warm = phases["warm"]
        if "error" not in warm:
            print(f"  {'rank page data, warm':<52} {warm['seconds']:>6.2f} s (target < {WARM_TARGET_S} s) "
                  f"{'met' if warm['seconds'] < WARM_TARGET_S else 'MISSED'}")
        peaks = {k: v["peak_mib"] for k, v in (*user.items(), *phases.items()) if "peak_mib" in v}
        print(f"  {'peak memory, largest process':<52} {max(peaks.values()):>6,.0f} MiB "
              f"({max(peaks, key=peaks.get)}); see the scaling table for growth with trials")

        if sizes:
            print(f"\ncost against trials ({args.points} points each; whole-process catalog import + catalog rank):")
            known = {n: user} if n in sizes else {}
            print("\n".join(scaling_table(work, sizes, args.points, args.seed, known)))
            print(f"  load average {os.getloadavg()[0]:.1f} at the end")
    finally:
        if args.workdir is None:
            shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
