"""The `catalog` command: a thin shell over the store and the analysis core.

Every sub-command catches :class:`~catalog.errors.CatalogError` and prints its message; a user never sees a
traceback for something they can fix. Set ``CATALOG_DEBUG=1`` to see tracebacks of internal errors.
"""

from __future__ import annotations

import argparse
import os
import sys

import pandas as pd

from catalog import __version__, store
from catalog.campaign import read_source
from catalog.errors import CatalogError

EXIT_USER_ERROR = 2
EXIT_INTERNAL = 3


def _progress(message: str) -> None:
    print(f"  … {message}", file=sys.stderr, flush=True)


def cmd_import(args: argparse.Namespace) -> int:
    source = read_source(args.folder)
    report = store.import_campaign(args.db, source, demo=args.demo, who=args.who,
                                   progress=None if args.quiet else _progress)
    db = store.resolve_path(args.db)
    for note in report.notes:
        print(f"note: {note}")
    if report.duplicate_of is not None:
        return 0
    print(f"import #{report.import_id} into {db}: {report.n_catalysts} catalysts, {report.n_trials} trials, "
          f"{report.n_points} trace points written")
    if report.skipped_catalysts or report.skipped_trials:
        print(f"skipped as already stored and identical: {len(report.skipped_catalysts)} catalysts, "
              f"{len(report.skipped_trials)} trials")
    return 0


def cmd_trials(args: argparse.Namespace) -> int:
    trials = store.list_trials(args.db)
    if trials.empty:
        print(f"{store.resolve_path(args.db)}: no trials stored yet")
        return 0
    shown = pd.DataFrame({
        "trial": trials["trial_id"],
        "catalyst": trials["catalyst_id"].fillna("(blank)"),
        "T [°C]": (trials["temperature"] - 273.15).round(2),
        "measurement": trials["measurement"],
        "mass [mg]": (trials["catalyst_mass"] * 1e6).round(3),
        "points": trials["n_points"],
        "span [min]": (trials["duration"] / 60).round(1),
        "operator": trials["operator"].fillna(""),
        "excluded": trials["excluded"].map({True: "yes", False: ""}),
    })
    if args.catalyst:
        shown = shown[shown["catalyst"] == args.catalyst]
    with pd.option_context("display.max_rows", None, "display.width", 200):
        print(shown.to_string(index=False, na_rep=""))
    counts = store.table_counts(args.db)
    print(f"\n{counts['trials']} trials, {counts['catalysts']} catalysts, {counts['trace_points']} trace points "
          f"from {counts['imports']} import(s)")
    return 0


def cmd_imports(args: argparse.Namespace) -> int:
    imports = store.list_imports(args.db)
    if imports.empty:
        print("no imports yet")
        return 0
    cols = ["import_id", "imported_at", "imported_by", "source", "n_catalysts", "n_trials", "n_points", "n_skipped",
            "is_demo", "content_hash"]
    out = imports[cols].copy()
    out["content_hash"] = out["content_hash"].str.slice(0, 12)
    print(out.to_string(index=False))
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="catalog",
        description="Catalyst screening results database: import trials, analyse kinetics, rank candidates.",
    )
    parser.add_argument("--version", action="version", version=f"catalog {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def add(name: str, func, help_text: str) -> argparse.ArgumentParser:
        p = sub.add_parser(name, help=help_text, description=help_text)
        p.add_argument("--db", help=f"database file (default: ${store.ENV_DB}, else {store.DEFAULT_DB})")
        p.set_defaults(func=func)
        return p

    p = add("import", cmd_import, "import a campaign folder (three CSV files) or an .xlsx workbook")
    p.add_argument("folder", help="campaign folder or .xlsx workbook")
    p.add_argument("--who", help="name recorded with the import (default: your login name)")
    p.add_argument("--demo", action="store_true", help="mark the import as demo data")
    p.add_argument("--quiet", action="store_true", help="no progress messages")

    p = add("trials", cmd_trials, "list the stored trials")
    p.add_argument("--catalyst", help="only this catalyst")

    add("imports", cmd_imports, "list the imports with their provenance")
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except CatalogError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("interrupted; nothing half-written (imports are all-or-nothing)", file=sys.stderr)
        return 130
    except Exception as exc:  # the last line of defence: no traceback for users
        if os.environ.get("CATALOG_DEBUG"):
            raise
        print(f"internal error: {type(exc).__name__}: {exc}\n(set CATALOG_DEBUG=1 for details and please report it)",
              file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
