"""The campaign store: the only package that speaks SQL.

One DuckDB file holds every catalyst, trial and trace point in SI units, with the provenance of each import, the
history of every correction, and cached analysis results. Values always travel as bound parameters or registered
tables (DataFrames, or dicts of numpy columns on the import path); no value is ever formatted into SQL text. The
schema is built by numbered migrations recorded in ``schema_migrations``.

Modules, by job: :mod:`~catalog.store.db` (path, connection, locks, transactions, migrations),
:mod:`~catalog.store.schema` (the tables), :mod:`~catalog.store.importer` and :mod:`~catalog.store.staging`
(import), :mod:`~catalog.store.queries` (reads), :mod:`~catalog.store.cache` (fits and analysis runs),
:mod:`~catalog.store.corrections` (correct, exclude, include, history, purge), :mod:`~catalog.store.backup`.
Callers use the names below, ``from catalog import store; store.import_campaign(...)``.
"""

from importlib import import_module

from catalog.store.backup import BACKUP_MANIFEST, backup, restore
from catalog.store.db import DEFAULT_DB, ENV_DB, connect, resolve_path, session

__all__ = [
    "BACKUP_MANIFEST", "DEFAULT_DB", "ENV_DB", "PURGED", "Change", "ImportReport", "PointArrays", "PointBlock",
    "RunWriter",
    "backup", "connect", "correct", "data_stamp", "exclude", "history", "import_campaign", "include",
    "list_catalysts", "list_imports", "list_trials", "load_block", "load_campaign", "load_fits", "load_point_arrays",
    "load_points", "load_records", "load_run", "load_trace", "point_blocks", "purge", "purge_import", "resolve_path",
    "restore", "run_frames", "save_run", "session", "table_counts",
]

#: Names loaded on first use, by module: the import and correction paths bring the campaign rules (~35 ms of
#: imports) that reading commands such as rank and trials never use; the reads and the cache bring pandas (~1 s),
#: which the import never uses.
_LAZY = {name: module for module, names in (
    ("catalog.store.cache", ("RunWriter", "load_fits", "load_run", "run_frames", "save_run")),
    ("catalog.store.corrections", ("PURGED", "Change", "correct", "exclude", "history", "include", "purge",
                                   "purge_import")),
    ("catalog.store.importer", ("ImportReport", "import_campaign")),
    ("catalog.store.queries", ("PointArrays", "PointBlock", "data_stamp", "list_catalysts", "list_imports",
                               "list_trials", "load_block", "load_campaign", "load_point_arrays", "load_points",
                               "load_records", "load_trace", "point_blocks", "table_counts")),
) for name in names}


def __getattr__(name: str):
    if name not in _LAZY:
        raise AttributeError(f"module 'catalog.store' has no attribute {name!r}")
    value = getattr(import_module(_LAZY[name]), name)
    globals()[name] = value
    return value
