"""Start-up cost of each `catalog` command: module import time and which heavy libraries it loads.

Run::

    python benchmarks/startup.py [--campaign FOLDER] [--repeat 3]

Each command runs as a user types it, in a fresh interpreter with ``-X importtime``, against a store made from the
sample campaign in a temporary folder. Printed per command: the best whole-process wall time, the summed import time
of the modules it loaded, and which of the heavy libraries (scipy.constants, scipy.stats, scipy.optimize, altair,
openpyxl, vl_convert, streamlit, pint) it loaded. Timings live here only, never in the tests.
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("scipy.constants", "scipy.stats", "scipy.optimize", "altair", "openpyxl", "vl_convert", "streamlit", "pint")
_LINE = re.compile(r"^import time:\s+(\d+)\s+\|\s+(\d+)\s+\|(\s*)(\S+)")


def _commands(campaign: Path, db: Path, work: Path) -> list[tuple[str, list[str]]]:
    return [
        ("--version", ["--version"]),
        ("import", ["import", str(campaign), "--db", str(db), "--quiet"]),
        ("trials", ["trials", "--db", str(db)]),
        ("imports", ["imports", "--db", str(db)]),
        ("history", ["history", "--db", str(db)]),
        ("analyse (cold)", ["analyse", "--db", str(db), "--quiet"]),
        ("rank (warm)", ["rank", "--db", str(db), "--quiet"]),
        ("rank --out .csv", ["rank", "--db", str(db), "--quiet", "--out", str(work / "short.csv")]),
        ("rank --out .xlsx", ["rank", "--db", str(db), "--quiet", "--out", str(work / "short.xlsx")]),
        ("report", ["report", "--db", str(db), "--quiet", "--out", str(work / "report.html")]),
    ]


def measure(argv: list[str], env: dict) -> tuple[float, float, set[str], int]:
    """Wall seconds, summed top-level import seconds, heavy libraries loaded, exit code of one run."""
    start = time.perf_counter()
    proc = subprocess.run([sys.executable, "-X", "importtime", "-m", "catalog", *argv], env=env, cwd=ROOT,
                          capture_output=True, text=True)
    wall = time.perf_counter() - start
    imported, loaded = 0, set()
    for line in proc.stderr.splitlines():
        match = _LINE.match(line)
        if match is None:
            continue
        name = match.group(4)
        if len(match.group(3)) == 1:  # a top-level import: its cumulative time includes everything below it
            imported += int(match.group(2))
        loaded.update(heavy for heavy in HEAVY if name == heavy or name.startswith(heavy + "."))
    return wall, imported / 1e6, loaded, proc.returncode


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--campaign", type=Path, default=ROOT / "sample_campaign", help="campaign folder to import")
    parser.add_argument("--repeat", type=int, default=3, help="runs per command; the best is shown (default 3)")
    args = parser.parse_args(argv)

    work = Path(tempfile.mkdtemp(prefix="catalog-startup-"))
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    try:
        print(f"start-up per command ({os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f}); "
              f"best of {args.repeat}")
        print(f"{'command':<18} {'wall s':>7} {'imports s':>9}  heavy libraries loaded")
        for name, command in _commands(args.campaign, work / "store.duckdb", work):
            runs = []
            for _ in range(1 if name in ("import", "analyse (cold)") else args.repeat):
                runs.append(measure(command, env))
            wall, imported, loaded, code = min(runs, key=lambda run: run[0])
            heavy = ", ".join(h for h in HEAVY if h in loaded) or "-"
            print(f"{name:<18} {wall:>7.2f} {imported:>9.2f}  {heavy}" + (f"  (exit {code})" if code else ""))
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
