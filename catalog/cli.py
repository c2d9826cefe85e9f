"""The `catalog` command: a thin shell over the store and the analysis core.

Every sub-command catches :class:`~catalog.errors.CatalogError` and prints its message; a user never sees a
traceback for something they can fix. Set ``CATALOG_DEBUG=1`` to see tracebacks of internal errors.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import textwrap
from pathlib import Path

from catalog import store
from catalog.errors import CatalogError
from catalog.ingest.columns import CATALYST_COLUMNS, TRIAL_COLUMNS
from catalog.ingest.sources import read_source
from catalog.units import UnitProblem, celsius, from_si, parse_temperature

# The analysis, the ranking and the screen text are imported by the commands that use them: they bring pandas
# (~1 s of imports), which the import command and the listing of changes have no use for.

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
    import pandas as pd

    from catalog.present import labels

    trials = store.list_trials(args.db)
    if trials.empty:
        print(f"{store.resolve_path(args.db)}: no trials stored yet")
        return 0
    shown = pd.DataFrame({
        "trial": trials["trial_id"],
        "catalyst": trials["catalyst_id"].fillna("(blank)"),
        "T [°C]": celsius(trials["temperature"]).round(2),
        "measurement": trials["measurement"].map(labels.measurement_words),
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


#: Record kinds as typed on the command line, and the store table each names.
_RECORD_TABLES = {"trial": "trials", "catalyst": "catalysts"}


_SPECS = {"trials": {c.name: c for c in TRIAL_COLUMNS}, "catalysts": {c.name: c for c in CATALYST_COLUMNS}}


def _shown(table: str, column: str, text: str | None) -> str:
    """A stored (SI) value in the column's display unit, e.g. '308.35' K as '35.2 degC'."""
    if text is None or (isinstance(text, float) and math.isnan(text)):
        return "(empty)"
    spec = _SPECS.get(table, {}).get(column)
    if spec is None or spec.kind != "number" or spec.unit in (None, "dimensionless"):
        return str(text)
    try:
        return f"{float(from_si(float(text), spec.unit)):.6g} {spec.unit}"
    except ValueError:
        return str(text)


def _say_change(change: store.Change) -> None:
    noun = change.table.removesuffix("s")
    print(f"change #{change.change_id} recorded: {noun} '{change.record_id}', {change.column}: "
          f"{_shown(change.table, change.column, change.old_value)} -> "
          f"{_shown(change.table, change.column, change.new_value)}")


def cmd_correct(args: argparse.Namespace) -> int:
    change = store.correct(args.db, _RECORD_TABLES[args.kind], args.id, args.column, args.value,
                           who=args.who, reason=args.reason)
    _say_change(change)
    return 0


def cmd_exclude(args: argparse.Namespace) -> int:
    _say_change(store.exclude(args.db, _RECORD_TABLES[args.kind], args.id, who=args.who, reason=args.reason))
    return 0


def cmd_include(args: argparse.Namespace) -> int:
    _say_change(store.include(args.db, _RECORD_TABLES[args.kind], args.id, who=args.who, reason=args.reason))
    return 0


def cmd_history(args: argparse.Namespace) -> int:
    import pandas as pd

    changes = store.history(args.db, args.id)
    if changes.empty:
        print("no changes recorded" + (f" for '{args.id}'" if args.id else ""))
        return 0
    shown = changes.rename(columns={"change_id": "#", "table_name": "table", "record_id": "id",
                                    "column_name": "column", "old_value": "was", "new_value": "now",
                                    "changed_by": "by", "changed_at": "when (UTC)"})
    for column in ("was", "now"):
        shown[column] = [_shown(t, c, v) if v is not None else None
                         for t, c, v in zip(changes["table_name"], changes["column_name"], shown[column],
                                            strict=True)]
    # A purged record's JSON can be long; the full text stays in the database.
    for column in ("was", "now", "reason"):
        shown[column] = shown[column].fillna("").str.slice(0, 60)
    with pd.option_context("display.max_rows", None, "display.width", 200, "display.max_colwidth", 62):
        print(shown.to_string(index=False))
    return 0


def cmd_purge(args: argparse.Namespace) -> int:
    if not args.yes:
        if not sys.stdin.isatty():
            raise CatalogError("purge deletes for good; with no terminal to ask on, confirm with --yes")
        typed = input(f"purge deletes {args.kind} '{args.id}' for good (exclude can be undone); "
                      "type the id to confirm: ")
        if typed.strip() != args.id:
            raise CatalogError("the id typed does not match; nothing deleted")
    _say_change(store.purge(args.db, _RECORD_TABLES[args.kind], args.id, who=args.who, reason=args.reason))
    return 0


def cmd_backup(args: argparse.Namespace) -> int:
    manifest = store.backup(args.db, args.folder)
    print(f"backup of {manifest['source']} written to {args.folder}: "
          + ", ".join(f"{name} {n}" for name, n in manifest["tables"].items()))
    return 0


def cmd_restore(args: argparse.Namespace) -> int:
    manifest = store.restore(args.folder, args.db, force=args.force)
    print(f"{store.resolve_path(args.db)} restored from the backup of {manifest['created_at']} (UTC): "
          + ", ".join(f"{name} {n}" for name, n in manifest["tables"].items()))
    return 0


def _settings(args: argparse.Namespace):
    from catalog.analysis.settings import Settings

    try:
        kelvin = parse_temperature(args.temperature)
    except UnitProblem as exc:
        raise CatalogError(f"--temperature: {exc}") from exc
    return Settings(reference_temperature=kelvin)


def _codes(text: str | None) -> tuple[str, ...]:
    return tuple(c.strip() for c in (text or "").replace(";", ",").split(",") if c.strip())


def _weights(text: str | None) -> dict[str, float] | None:
    from catalog.analysis import ranking

    if not text:
        return None
    weights = {}
    for part in text.split(","):
        name, _, value = part.partition("=")
        try:
            weights[name.strip()] = float(value) if value.strip() else 1.0
        except ValueError as exc:
            raise CatalogError(f"--weights: '{part}' is not NAME=NUMBER (e.g. tof=2,enhancement=1)") from exc
    unknown = set(weights) - set(ranking.METRICS)
    if unknown:
        raise CatalogError(f"--weights: unknown metric(s) {', '.join(sorted(unknown))}; "
                           f"choose from {', '.join(ranking.METRICS)}")
    return weights


def _ranked(args: argparse.Namespace):
    from catalog.analysis import ranking, results
    from catalog.present import exports, tradeoff  # exports: only rank and report format a shortlist

    # Every option is checked before the analysis runs, so a typo costs nothing.
    settings = _settings(args)
    if args.metric not in (*ranking.METRICS, "score"):
        raise CatalogError(f"--metric: '{args.metric}' is not one of {', '.join((*ranking.METRICS, 'score'))}")
    weights = _weights(args.weights)
    if args.metric == "score" and not weights:
        raise CatalogError("--metric score needs --weights, e.g. --weights tof=2,enhancement=1")
    if args.top < 1:
        raise CatalogError("--top must be at least 1")
    wanted = exports.FORMATS if args.command == "rank" else (".html", ".htm")
    if args.out and Path(args.out).suffix.lower() not in wanted:
        raise CatalogError(f"--out: '{args.out}' should end in {', '.join(wanted)}")
    found = results.get_results(args.db, settings, progress=None if args.quiet else _progress)
    if found.catalysts.empty:
        raise CatalogError(f"{store.resolve_path(args.db)}: no catalysed trials to rank yet")
    # The Pareto column compares activity with price (or stability): a low Ea is not a merit.
    trade_off = None if args.metric == "score" else tradeoff.trade_off_axes(found.catalysts, args.metric)
    ranked = ranking.rank(found.catalysts, metric=args.metric, weights=weights, top_k=args.top,
                          exclude_flags=_codes(args.exclude), demote_flags=_codes(args.demote),
                          n_draws=args.draws, seed=args.seed, pareto_metrics=trade_off)
    return found, ranked


def cmd_rank(args: argparse.Namespace) -> int:
    import pandas as pd

    from catalog.core import hazard
    from catalog.present import exports, labels, screen  # exports: only rank and report format a shortlist

    found, ranked = _ranked(args)
    table = exports.shortlist_table(ranked, found, args.top, metric=args.metric, currency=args.currency)
    t_ref_c = float(celsius(found.settings.reference_temperature))
    print(screen.rank_screen(table, args.top, args.metric, t_ref_c=t_ref_c, currency=args.currency))
    print(textwrap.fill(f"\nranked on {labels.FIGURES[args.metric][0]} ({t_ref_c:.2f} °C); 95 % intervals; "
                        f"P(top {args.top}) from {args.draws} Monte Carlo draws (seed {args.seed})",
                        width=screen.SCREEN_WIDTH, replace_whitespace=False))
    if (found.trials.get("hazard_band", pd.Series(dtype=object)).isin(["medium", "high"]).any()
            or found.trials.get("pressure_rise_max", pd.Series(dtype=float)).notna().any()):
        print(textwrap.fill(f"caution: {hazard.CAUTION}", width=screen.SCREEN_WIDTH, subsequent_indent="  "))
    if args.out:
        path = exports.write_table(table, args.out, results=found)
        print(f"shortlist with all {len(table.columns)} columns written to {path}")
    else:
        print(f"(the screen shows the main columns; --out FILE writes all {len(table.columns)})")
    return 0


def cmd_analyse(args: argparse.Namespace) -> int:
    from catalog.analysis import results
    from catalog.present import labels
    from catalog.present.numbers import format_interval

    found = results.get_results(args.db, _settings(args), progress=None if args.quiet else _progress)
    state = "computed now" if found.computed else "read from the cache (data and settings unchanged)"
    print(f"{len(found.trials)} trials and {len(found.catalysts)} catalysts analysed; results {state}")
    if found.blank:
        b = found.blank
        ea = [from_si(b[k], "kJ/mol") for k in ("ea", "ea_low", "ea_high")]
        print(f"blank (uncatalysed) model: Ea = {format_interval(*ea, 'kJ/mol')} (95 %) from {b['n']} trials, "
              f"{celsius(b['t_min']):.1f}–{celsius(b['t_max']):.1f} °C")
    else:
        print(f"no blank model: the {labels.ENHANCEMENT} and blank-corrected TOF need uncatalysed trials at two or "
              "more temperatures")
    counts = found.flags.groupby(["scope", "code"]).size()
    for (scope, code), n in counts.items():
        print(f"  {n} {scope} flag(s): {labels.flag_title(code)} ({code})")
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    from catalog.present import report  # deferred: the report brings altair and vl-convert (~0.5 s of imports)

    found, ranked = _ranked(args)
    path = report.write_report(args.db, args.out, found.settings, ranked=ranked, top_k=args.top, metric=args.metric,
                               currency=args.currency, results=found)
    print(f"report written to {path} (self-contained; opens offline)")
    return 0


class _MetricNames:
    """The ranking metrics as a help text shows them, looked up only when a help text is shown."""

    def __str__(self) -> str:
        from catalog.analysis import ranking

        return ", ".join(ranking.METRICS)


class _Version(argparse.Action):
    """``--version``: the version is looked up only when asked for (the metadata search is start-up cost)."""

    def __call__(self, parser, namespace, values, option_string=None):
        from catalog import __version__

        print(f"catalog {__version__}")
        parser.exit()


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="catalog",
        description="Catalyst screening results database: import trials, analyse kinetics, rank candidates.",
    )
    parser.add_argument("--version", action=_Version, nargs=0, help="show program's version number and exit")
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

    def record_arguments(p: argparse.ArgumentParser) -> None:
        p.add_argument("kind", choices=list(_RECORD_TABLES), help="what to change: trial or catalyst")
        p.add_argument("id", help="the trial or catalyst id")

    def change_arguments(p: argparse.ArgumentParser) -> None:
        p.add_argument("--reason", help="why, recorded in the history")
        p.add_argument("--who", help="name recorded with the change (default: your login name)")

    p = add("correct", cmd_correct, "correct one value of a trial or catalyst; the old value stays in the history")
    record_arguments(p)
    p.add_argument("column", help="column name as in the import files, e.g. temperature, catalyst_mass, notes")
    p.add_argument("value", help="new value as typed in an import cell, e.g. '35 degC', '12.5 mg'; '' clears it")
    change_arguments(p)

    p = add("exclude", cmd_exclude, "leave a trial or catalyst out of analysis (undo with include)")
    record_arguments(p)
    change_arguments(p)

    p = add("include", cmd_include, "take an excluded trial or catalyst back into analysis")
    record_arguments(p)
    change_arguments(p)

    p = add("history", cmd_history, "list recorded corrections, exclusions and purges")
    p.add_argument("id", nargs="?", help="only changes to this trial or catalyst")

    p = add("purge", cmd_purge, "delete a trial (with its trace) or an unused catalyst for good; asks first")
    record_arguments(p)
    change_arguments(p)
    p.add_argument("--yes", action="store_true", help="do not ask for confirmation")

    p = add("backup", cmd_backup, "write a consistent copy of the database into a new folder")
    p.add_argument("folder", help="new or empty folder for the backup")

    p = add("restore", cmd_restore, "rebuild the database file from a backup folder")
    p.add_argument("folder", help="folder written by 'catalog backup'")
    p.add_argument("--force", action="store_true", help="replace a database that already holds data")

    def analysis_options(p: argparse.ArgumentParser) -> None:
        p.add_argument("--temperature", "-T", default="35",
                       help="reference temperature: a number in °C, or with a unit such as '310 K' (default 35)")
        p.add_argument("--quiet", action="store_true", help="no progress messages")

    p = add("analyse", cmd_analyse, "fit every trace and cache the figures (rank and report do this when needed)")
    analysis_options(p)

    for name, func, help_text in (
        ("rank", cmd_rank, "rank the catalysts and optionally write the shortlist (.csv, .xlsx or .parquet)"),
        ("report", cmd_report, "write a self-contained HTML report of the ranking, fits and flags"),
    ):
        p = add(name, func, help_text)
        analysis_options(p)
        metric = p.add_argument("--metric", default="tof",
                                help="what to rank by: %(metrics)s, or score (weighted, needs --weights); default tof")
        metric.metrics = _MetricNames()
        p.add_argument("--weights", help="for --metric score: NAME=WEIGHT pairs, e.g. tof=2,enhancement=1")
        p.add_argument("--top", type=int, default=3, help="size of the shortlist for P(top k) (default 3)")
        p.add_argument("--exclude", help="flag codes that exclude a catalyst from the ranking (comma-separated)")
        p.add_argument("--demote", help="flag codes that move a catalyst below all unflagged ones")
        p.add_argument("--draws", type=int, default=4000, help="Monte Carlo draws for rank intervals (default 4000)")
        p.add_argument("--seed", type=int, default=20261201, help="Monte Carlo seed (default 20261201)")
        p.add_argument("--currency", default=os.environ.get("CATALOG_CURRENCY"),
                       help="currency of the catalysts' price_per_gram, shown with prices, e.g. EUR "
                            "(default: $CATALOG_CURRENCY)")
        p.add_argument("--out", required=(name == "report"),
                       help="output file; the extension picks the format" if name == "rank" else "HTML file to write")
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except CatalogError as exc:
        from catalog.present import screen

        print(f"error: {screen.condense(str(exc))}", file=sys.stderr)
        return EXIT_USER_ERROR
    except BrokenPipeError:
        # The reader of our output went away (e.g. `| head`): not an error; keep Python from complaining at exit.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
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
