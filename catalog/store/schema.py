"""The store's schema: the tables, built by numbered migrations recorded in ``schema_migrations``.

A released migration is never edited; a change to the schema is a new, higher-numbered migration. (Migration 1
takes the catalyst and trial columns from the import contract in :mod:`catalog.ingest.columns`, so a new contract
column also needs a migration that adds it to existing files.)
"""

from __future__ import annotations

from catalog.ingest.columns import CATALYST_COLUMNS, TRIAL_COLUMNS

CATALYST_FIELDS = [c.name for c in CATALYST_COLUMNS]
TRIAL_FIELDS = [c.name for c in TRIAL_COLUMNS]

_SQL_TYPES = {"number": "DOUBLE", "text": "VARCHAR", "id": "VARCHAR", "bool": "BOOLEAN", "datetime": "TIMESTAMP"}


def _columns_sql(columns, key: str) -> str:
    parts = []
    for c in columns:
        sql_type = _SQL_TYPES[c.kind]
        parts.append(f"{c.name} {sql_type}{' PRIMARY KEY' if c.name == key else ''}")
    return ",\n    ".join(parts)


class SchemaMismatch(RuntimeError):
    """A frame does not fit the table it is written to: a programming error (a figure without a declared column)."""


# The analysis cache, declared once: (name, SQL type) in column order. The DDL is generated from these and every
# write is checked against them, so a figure the analysis adds without declaring it here fails loudly instead of
# vanishing. The cache is disposable: changing a declaration needs a new migration that rebuilds the cache tables
# (``drop_cache_tables() + create_cache_tables()``, as migration 5 does), and a bump of the matching schema number
# in :mod:`catalog.analysis.settings`. (The order is the one migrations 3 and 4 left in files made before 5.)

#: Kinetic fit of one trial, reused across runs while its fit version is current.
TRIAL_FIT: tuple[tuple[str, str], ...] = (
    ("model", "VARCHAR"), ("r0", "DOUBLE"), ("r0_se", "DOUBLE"), ("k", "DOUBLE"), ("k_se", "DOUBLE"),
    ("k_unit", "VARCHAR"), ("half_life", "DOUBLE"), ("offset", "DOUBLE"), ("plateau", "DOUBLE"),
    ("plateau_se", "DOUBLE"), ("n_max", "DOUBLE"), ("plateau_ratio", "DOUBLE"), ("final_amount", "DOUBLE"),
    ("final_conversion", "DOUBLE"), ("r2", "DOUBLE"), ("rmse", "DOUBLE"), ("n_points", "INTEGER"),
    ("late_residual_z", "DOUBLE"), ("runs_z", "DOUBLE"), ("aic_zero", "DOUBLE"), ("aic_first", "DOUBLE"),
    ("aic_second", "DOUBLE"), ("plateau_fixed", "BOOLEAN"), ("model_weight", "DOUBLE"), ("leak_cut", "INTEGER"),
    ("max_rate", "DOUBLE"), ("induction_z", "DOUBLE"),
)
#: Summary of one analysis run, with the blank Arrhenius model.
ANALYSIS_RUN: tuple[tuple[str, str], ...] = (
    ("settings", "VARCHAR"), ("data_stamp", "VARCHAR"), ("code_version", "VARCHAR"), ("created_at", "TIMESTAMP"),
    ("blank_ea", "DOUBLE"), ("blank_ea_low", "DOUBLE"), ("blank_ea_high", "DOUBLE"), ("blank_ln_a", "DOUBLE"),
    ("blank_t_min", "DOUBLE"), ("blank_t_max", "DOUBLE"), ("blank_n", "INTEGER"),
)
#: Figures of one trial in one run (its conditions live in ``trials``, its fit in ``trial_fits``).
TRIAL_RESULT: tuple[tuple[str, str], ...] = (
    ("rate", "DOUBLE"), ("rate_se", "DOUBLE"), ("blank_rate", "DOUBLE"), ("blank_extrapolated", "BOOLEAN"),
    ("enhancement", "DOUBLE"), ("enhancement_low", "DOUBLE"), ("enhancement_high", "DOUBLE"), ("sites", "DOUBLE"),
    ("site_basis", "VARCHAR"), ("tof", "DOUBLE"), ("tof_se", "DOUBLE"), ("ton", "DOUBLE"),
    ("rate_per_mass", "DOUBLE"), ("rate_per_area", "DOUBLE"), ("photon_flux", "DOUBLE"),
    ("quantum_yield", "DOUBLE"), ("weisz_prater", "DOUBLE"), ("mears", "DOUBLE"), ("adiabatic_rise", "DOUBLE"),
    ("hazard_band", "VARCHAR"), ("pressure_rise_max", "DOUBLE"), ("flags", "VARCHAR"),
    ("blank_undetected", "BOOLEAN"), ("enhancement_bound", "BOOLEAN"),
)
#: Figures of one catalyst in one run, with the catalyst facts the ranking shows.
CATALYST_RESULT: tuple[tuple[str, str], ...] = (
    ("n_trials", "INTEGER"), ("n_temperatures", "INTEGER"), ("n_arrhenius", "INTEGER"), ("t_min", "DOUBLE"),
    ("t_max", "DOUBLE"), ("site_basis", "VARCHAR"), ("models", "VARCHAR"), ("ea", "DOUBLE"), ("ea_se", "DOUBLE"),
    ("ea_low", "DOUBLE"), ("ea_high", "DOUBLE"), ("ln_a", "DOUBLE"), ("ln_a_low", "DOUBLE"),
    ("ln_a_high", "DOUBLE"), ("dh", "DOUBLE"), ("dh_low", "DOUBLE"), ("dh_high", "DOUBLE"), ("ds", "DOUBLE"),
    ("ds_low", "DOUBLE"), ("ds_high", "DOUBLE"), ("curvature_p", "DOUBLE"), ("birge", "DOUBLE"),
    ("r2_arrhenius", "DOUBLE"), ("tof_ref", "DOUBLE"), ("tof_ref_low", "DOUBLE"), ("tof_ref_high", "DOUBLE"),
    ("tof_ref_extrapolated", "BOOLEAN"), ("delta_ea_blank", "DOUBLE"),
    ("enhancement_ref", "DOUBLE"), ("enhancement_ref_low", "DOUBLE"), ("enhancement_ref_high", "DOUBLE"),
    ("blank_extrapolated", "BOOLEAN"), ("rate_per_mass_ref", "DOUBLE"), ("rate_per_area_ref", "DOUBLE"),
    ("ton_max", "DOUBLE"), ("replicate_cv", "DOUBLE"), ("order", "DOUBLE"), ("order_low", "DOUBLE"),
    ("order_high", "DOUBLE"), ("order_temperature", "DOUBLE"), ("median_sites", "DOUBLE"),
    ("min_enhancement", "DOUBLE"), ("max_weisz_prater", "DOUBLE"), ("max_mears", "DOUBLE"),
    ("max_adiabatic_rise", "DOUBLE"), ("metal", "VARCHAR"), ("support", "VARCHAR"), ("metal_loading", "DOUBLE"),
    ("dispersion", "DOUBLE"), ("price_per_gram", "DOUBLE"), ("description", "VARCHAR"), ("flags", "VARCHAR"),
    ("tof_ref_log_se", "DOUBLE"), ("tof_ref_dof", "DOUBLE"), ("ea_dof", "DOUBLE"),
    ("enhancement_ref_log_se", "DOUBLE"), ("enhancement_ref_bound", "BOOLEAN"), ("weisz_prater_limit", "DOUBLE"),
)
#: One diagnostic flag raised in one run, on a trial or a catalyst.
FLAG: tuple[tuple[str, str], ...] = (
    ("scope", "VARCHAR NOT NULL"), ("record_id", "VARCHAR NOT NULL"), ("code", "VARCHAR NOT NULL"),
    ("severity", "VARCHAR"), ("message", "VARCHAR"), ("value", "DOUBLE"), ("threshold", "DOUBLE"),
)

#: Each cache table: its key columns, then its declared columns.
CACHE_TABLES: dict[str, tuple[tuple[tuple[str, str], ...], tuple[tuple[str, str], ...]]] = {
    "trial_fits": ((("trial_id", "VARCHAR PRIMARY KEY"), ("fit_version", "VARCHAR NOT NULL")), TRIAL_FIT),
    "analysis_runs": ((("run_key", "VARCHAR PRIMARY KEY"),), ANALYSIS_RUN),
    "trial_results": ((("run_key", "VARCHAR NOT NULL"), ("trial_id", "VARCHAR NOT NULL")), TRIAL_RESULT),
    "catalyst_results": ((("run_key", "VARCHAR NOT NULL"), ("catalyst_id", "VARCHAR NOT NULL")), CATALYST_RESULT),
    "flags": ((("run_key", "VARCHAR NOT NULL"),), FLAG),
}


def cache_columns(table: str) -> list[str]:
    """Every column of a cache table, keys first, in table order."""
    keys, declared = CACHE_TABLES[table]
    return [name for name, _ in keys + declared]


def create_cache_tables() -> str:
    """DDL of the cache tables as declared (names are quoted: ``order`` and ``offset`` are SQL words)."""
    return "".join(
        f"CREATE TABLE {table} ({', '.join(f'{_quoted(name)} {sql_type}' for name, sql_type in keys + declared)});\n"
        for table, (keys, declared) in CACHE_TABLES.items()
    )


def _quoted(name: str) -> str:
    return f'"{name}"'


def drop_cache_tables() -> str:
    """DDL that removes the cache tables (their rows are recomputed on the next analysis)."""
    return "".join(f"DROP TABLE IF EXISTS {table};\n" for table in CACHE_TABLES)



MIGRATIONS: tuple[tuple[int, str, str], ...] = (
    (
        1,
        "campaign tables: imports, catalysts, trials, trace points",
        f"""
CREATE TABLE imports (
    import_id INTEGER PRIMARY KEY,
    source VARCHAR,
    files VARCHAR,
    content_hash VARCHAR,
    imported_at TIMESTAMP,
    imported_by VARCHAR,
    n_catalysts INTEGER,
    n_trials INTEGER,
    n_points BIGINT,
    n_skipped INTEGER,
    is_demo BOOLEAN,
    notes VARCHAR
);
CREATE TABLE catalysts (
    {_columns_sql(CATALYST_COLUMNS, "catalyst_id")},
    import_id INTEGER,
    excluded BOOLEAN DEFAULT false
);
CREATE TABLE trials (
    {_columns_sql(TRIAL_COLUMNS, "trial_id")},
    import_id INTEGER,
    excluded BOOLEAN DEFAULT false
);
CREATE TABLE trace_points (
    trial_id VARCHAR NOT NULL,
    t DOUBLE NOT NULL,
    value DOUBLE NOT NULL
);
""",
    ),
    (
        2,
        "history of corrections and exclusions",
        """
CREATE TABLE history (
    change_id INTEGER PRIMARY KEY,
    table_name VARCHAR NOT NULL,
    record_id VARCHAR NOT NULL,
    column_name VARCHAR NOT NULL,
    old_value VARCHAR,
    new_value VARCHAR,
    changed_by VARCHAR,
    changed_at TIMESTAMP,
    reason VARCHAR
);
""",
    ),
    (
        3,
        "analysis cache: kinetic fits per trial, results per analysis run, flags",
        """
CREATE TABLE trial_fits (
    trial_id VARCHAR PRIMARY KEY, fit_version VARCHAR NOT NULL,
    model VARCHAR, r0 DOUBLE, r0_se DOUBLE, k DOUBLE, k_se DOUBLE, k_unit VARCHAR, half_life DOUBLE, "offset" DOUBLE,
    plateau DOUBLE, plateau_se DOUBLE, n_max DOUBLE, plateau_ratio DOUBLE, final_amount DOUBLE,
    final_conversion DOUBLE, r2 DOUBLE, rmse DOUBLE, n_points INTEGER, late_residual_z DOUBLE, runs_z DOUBLE,
    aic_zero DOUBLE, aic_first DOUBLE, aic_second DOUBLE
);
CREATE TABLE analysis_runs (
    run_key VARCHAR PRIMARY KEY, settings VARCHAR, data_stamp VARCHAR, code_version VARCHAR, created_at TIMESTAMP,
    blank_ea DOUBLE, blank_ea_low DOUBLE, blank_ea_high DOUBLE, blank_ln_a DOUBLE, blank_t_min DOUBLE,
    blank_t_max DOUBLE, blank_n INTEGER
);
CREATE TABLE trial_results (
    run_key VARCHAR NOT NULL, trial_id VARCHAR NOT NULL,
    rate DOUBLE, rate_se DOUBLE, blank_rate DOUBLE, blank_extrapolated BOOLEAN, enhancement DOUBLE,
    enhancement_low DOUBLE, enhancement_high DOUBLE, sites DOUBLE, site_basis VARCHAR, tof DOUBLE, tof_se DOUBLE,
    ton DOUBLE, rate_per_mass DOUBLE, rate_per_area DOUBLE, photon_flux DOUBLE, quantum_yield DOUBLE,
    weisz_prater DOUBLE, mears DOUBLE, adiabatic_rise DOUBLE, hazard_band VARCHAR, pressure_rise_max DOUBLE,
    flags VARCHAR
);
CREATE TABLE catalyst_results (
    run_key VARCHAR NOT NULL, catalyst_id VARCHAR NOT NULL,
    n_trials INTEGER, n_temperatures INTEGER, n_arrhenius INTEGER, t_min DOUBLE, t_max DOUBLE, site_basis VARCHAR,
    models VARCHAR, ea DOUBLE, ea_se DOUBLE, ea_low DOUBLE, ea_high DOUBLE, ln_a DOUBLE, ln_a_low DOUBLE,
    ln_a_high DOUBLE, dh DOUBLE, dh_low DOUBLE, dh_high DOUBLE, ds DOUBLE, ds_low DOUBLE, ds_high DOUBLE,
    curvature_p DOUBLE, birge DOUBLE, r2_arrhenius DOUBLE, tof_ref DOUBLE, tof_ref_low DOUBLE, tof_ref_high DOUBLE,
    tof_ref_extrapolated BOOLEAN, delta_ea_blank DOUBLE, enhancement_ref DOUBLE, enhancement_ref_low DOUBLE,
    enhancement_ref_high DOUBLE, blank_extrapolated BOOLEAN, rate_per_mass_ref DOUBLE, rate_per_area_ref DOUBLE,
    ton_max DOUBLE, replicate_cv DOUBLE, "order" DOUBLE, order_low DOUBLE, order_high DOUBLE,
    order_temperature DOUBLE, median_sites DOUBLE, min_enhancement DOUBLE, max_weisz_prater DOUBLE,
    max_mears DOUBLE, max_adiabatic_rise DOUBLE, metal VARCHAR, support VARCHAR, metal_loading DOUBLE,
    dispersion DOUBLE, price_per_gram DOUBLE, description VARCHAR, flags VARCHAR
);
CREATE TABLE flags (
    run_key VARCHAR NOT NULL, scope VARCHAR NOT NULL, record_id VARCHAR NOT NULL, code VARCHAR NOT NULL,
    severity VARCHAR, message VARCHAR, value DOUBLE, threshold DOUBLE
);
""",
    ),
    (
        4,
        "rate fits: fixed plateau, model weight, leak cut, induction; blank bounds and log-scale errors",
        """
ALTER TABLE trial_fits ADD COLUMN plateau_fixed BOOLEAN;
ALTER TABLE trial_fits ADD COLUMN model_weight DOUBLE;
ALTER TABLE trial_fits ADD COLUMN leak_cut INTEGER;
ALTER TABLE trial_fits ADD COLUMN max_rate DOUBLE;
ALTER TABLE trial_fits ADD COLUMN induction_z DOUBLE;
ALTER TABLE trial_results ADD COLUMN blank_undetected BOOLEAN;
ALTER TABLE trial_results ADD COLUMN enhancement_bound BOOLEAN;
ALTER TABLE catalyst_results ADD COLUMN tof_ref_log_se DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN tof_ref_dof DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN ea_dof DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN enhancement_ref_log_se DOUBLE;
ALTER TABLE catalyst_results ADD COLUMN enhancement_ref_bound BOOLEAN;
ALTER TABLE catalyst_results ADD COLUMN weisz_prater_limit DOUBLE;
""",
    ),
    # Released migrations above stay as they were; from here on the cache is built from the declarations.
    (5, "analysis cache rebuilt from the result declarations", drop_cache_tables() + create_cache_tables()),
)

