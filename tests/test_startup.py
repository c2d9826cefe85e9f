"""Packaging habits and lean start-up: ``python -m catalog``, the version from package metadata, ``py.typed``, and
each command loading only the libraries it uses (a check of which modules are imported, not of timings; those
live in benchmarks/startup.py).

Real DuckDB file in tmp_path holding the sample campaign shipped with the repository (invented data).
"""

from __future__ import annotations

import importlib.metadata
import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import catalog
from catalog import store
from catalog.analysis import results
from catalog.analysis.settings import Settings
from catalog.ingest.sources import read_source

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("scipy.constants", "scipy.special", "scipy.stats", "scipy.optimize", "altair", "openpyxl", "vl_convert", "streamlit", "pint")


#: Stands for the package version having been looked up (``catalog.__version__`` is resolved on first use).
VERSION = "catalog.__version__"
#: Modules of the import and correction paths, which reading commands have no use for.
WRITE_PATH = ("catalog.store.importer", "catalog.store.staging", "catalog.store.corrections", "catalog.ingest.tables",
              "catalog.ingest.validate", "catalog.store.integrity")


def _loaded_by(*argv: str, watched: tuple[str, ...] = HEAVY) -> set[str]:
    """Which of the watched modules (the heavy libraries unless told) a command loads, run in a fresh interpreter
    exactly as ``catalog ARGV`` would run it."""
    code = ("import json, sys\nimport catalog\nfrom catalog.cli import main\ncode = main(sys.argv[1:])\n"
            f"loaded = [m for m in {watched!r} if m in sys.modules or m == {VERSION!r} and '__version__' in "
            "vars(catalog)]\nprint(json.dumps(loaded))\nsys.exit(code)")
    out = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    return set(json.loads(out.stdout.strip().splitlines()[-1]))


@pytest.fixture(scope="module")
def sample_db(tmp_path_factory):
    db = tmp_path_factory.mktemp("startup") / "sample.duckdb"
    loaded = _loaded_by("import", str(ROOT / "sample_campaign"), "--db", str(db), "--quiet")
    return db, loaded


def test_python_dash_m_catalog_prints_the_version_from_the_package_metadata():
    out = subprocess.run([sys.executable, "-m", "catalog", "--version"], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0
    assert out.stdout.strip() == f"catalog {importlib.metadata.version('catalog')}" == f"catalog {catalog.__version__}"


def test_the_package_ships_its_type_marker():
    # PEP 561: a py.typed file in the package tells type checkers to use its inline hints.
    assert (Path(catalog.__file__).parent / "py.typed").is_file()


def test_import_loads_no_fitting_plotting_or_spreadsheet_library(sample_db):
    # The sample's headers use the reference spellings, answered from units.KNOWN_CONVERTERS without pint.
    assert sample_db[1] == set()


def test_import_loads_neither_pandas_pyarrow_nor_periodictable(tmp_path):
    # The campaign is read with the csv module, checked as numpy columns and written through DuckDB: importing
    # pandas alone costs about as long as DuckDB takes to read the trace file; the metals are checked against
    # catalog.core.elements, not periodictable's mass tables. Checked for a new store and for a second import of the
    # same trials (other bytes, so not a duplicate), which compares them with the stored ones.
    db = tmp_path / "lean.duckdb"
    lean = ("pandas", "pyarrow", "periodictable")
    assert _loaded_by("import", str(ROOT / "sample_campaign"), "--db", str(db), "--quiet", watched=lean) == set()
    again = shutil.copytree(ROOT / "sample_campaign", tmp_path / "again")
    with (again / "catalysts.csv").open("a", encoding="utf-8") as handle:
        handle.write("\n")
    assert _loaded_by("import", str(again), "--db", str(db), "--quiet", watched=lean) == set()


@pytest.mark.parametrize("command", [["trials"], ["imports"], ["history"]])
def test_listing_commands_load_no_heavy_library(sample_db, command):
    assert _loaded_by(*command, "--db", str(sample_db[0])) == set()


def test_a_cold_analysis_loads_no_optimiser_statistics_or_constants_library(tmp_path):
    # The batch fits run on numpy alone; scipy.optimize stays with the per-trial reference fits, scipy.stats,
    # scipy.special and scipy.constants are never needed by the package (Student-t quantiles and tails come from
    # catalog.core.stats, constants are literals).
    db = tmp_path / "cold.duckdb"
    store.import_campaign(db, read_source(ROOT / "sample_campaign"))  # a store of its own: nothing cached yet
    assert _loaded_by("analyse", "--db", str(db), "--quiet") == set()


def test_a_warm_rank_loads_no_heavy_library(sample_db):
    results.get_results(sample_db[0], Settings())  # the cold analysis, here, so the command finds it cached
    # The display units come from units.KNOWN_CONVERTERS (pint's own answers, checked in test_import), so not even
    # pint loads; nothing fits, plots or writes a workbook.
    assert _loaded_by("rank", "--db", str(sample_db[0]), "--quiet") == set()



@pytest.mark.parametrize("command", [["trials"], ["rank", "--quiet"]])
def test_reading_commands_load_neither_the_import_path_nor_the_version(sample_db, command):
    # The import and correction modules load on first use of their names, the version only when shown.
    results.get_results(sample_db[0], Settings())  # rank reads a cached run, as a warm rank does
    assert _loaded_by(*command, "--db", str(sample_db[0]), watched=(*WRITE_PATH, VERSION)) == set()
