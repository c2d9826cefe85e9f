"""Helpers shared by several test modules: small invented campaigns, table snapshots and synthetic traces.

Test modules import from here, never from each other. Everything is invented data for the tests only.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

from catalog import store
from catalog.datasets.demo import demo_campaign
from catalog.datasets.synth import write_campaign as write_files
from catalog.ingest import sources

CATALYSTS = """catalyst_id,metal,metal_loading [wt%],dispersion [%],site_density [umol/g],surface_area [m^2/g],support
PdC-A,Pd,5,25,,900,carbon
RuAl-B,Ru,1.5,40,,180,alumina
CoSi-C,Co,10,,35,250,silica
"""
TRIALS = """trial_id,catalyst_id,temperature [degC],measurement,signal_unit,catalyst_mass [mg],limiting_amount [mmol],product_ratio,gas_molar_mass [g/mol],headspace_volume [mL],liquid_volume [mL],operator,started_at
R1,PdC-A,30,gas_volume,mL,12.5,0.8,3,,,,ana,2026-10-01T09:00
R2,RuAl-B,40,mass_loss,g,20,0.8,3,2.016,,,ben,2026-10-01T11:00
R3,CoSi-C,50,pressure,kPa,15,0.8,3,,60,,ana,
R4,,50,concentration,mmol/L,,0.8,1,,,25,ben,
"""


def trace_rows() -> str:
    rows = ["trial_id,time [s],value"]
    t = np.arange(0, 600, 60.0)
    for trial, base, span in (("R1", 1.2, 20.0), ("R2", 31.4, -0.004), ("R3", 101.3, 8.0), ("R4", 0.0, 30.0)):
        for ti in t:
            rows.append(f"{trial},{ti:g},{base + span * (1 - np.exp(-ti / 200)):.6f}")
    return "\n".join(rows) + "\n"


def write_campaign(folder: Path, catalysts=CATALYSTS, trials=TRIALS, traces=None) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "catalysts.csv").write_text(catalysts, encoding="utf-8")
    (folder / "trials.csv").write_text(trials, encoding="utf-8")
    (folder / "traces.csv").write_text(traces if traces is not None else trace_rows(), encoding="utf-8")
    return folder


def snapshot(db: Path) -> dict[str, pd.DataFrame]:
    if not db.exists():
        return {}
    con = duckdb.connect(str(db), read_only=True)
    try:
        return {t: con.execute(f"SELECT * FROM {t} ORDER BY ALL").df() for t in ("imports", "catalysts", "trials", "trace_points")}
    finally:
        con.close()


def replace_cell(text: str, line: int, column: str, value: str) -> str:
    lines = text.splitlines()
    header = lines[0].split(",")
    col = [i for i, h in enumerate(header) if h.split(" [")[0] == column][0]
    cells = lines[line - 1].split(",")
    cells[col] = value
    lines[line - 1] = ",".join(cells)
    return "\n".join(lines) + "\n"


def synthetic_trace(order, rng, n=60, t_end=1800.0, plateau=2e-3, kappa=4.0, offset=0.0, noise=0.01):
    """Invented trace of known kinetics (recovery tests only): returns t, amount and the true r0.

    ``kappa`` is the curvature over the trace (k t_end, b t_end, or t_end / tau for zero order); ``noise`` is the
    Gaussian noise as a fraction of the plateau.
    """
    t = np.linspace(0.0, t_end, n)
    x = kappa * t / t_end
    if order == "zero":
        shape, r0 = np.minimum(x, 1.0), plateau * kappa / t_end
    elif order == "first":
        shape, r0 = -np.expm1(-x), plateau * kappa / t_end
    else:
        shape, r0 = x / (1 + x), plateau * kappa / t_end
    return t, offset + plateau * shape + rng.normal(0.0, noise * plateau, n), r0


def import_demo(folder: Path, name: str = "demo.duckdb") -> Path:
    """Write the invented demo campaign into ``folder`` and import it into a fresh database file there."""
    write_files(demo_campaign(), folder)
    db = folder / name
    store.import_campaign(db, sources.read_source(folder))
    return db
