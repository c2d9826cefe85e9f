"""A large clean campaign written chunk by chunk, for the benchmark and the scale tests (invented data)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv
from scipy.constants import zero_Celsius

from catalog.datasets.demo import DEMO_TEMPERATURES
from catalog.datasets.synth import (
    BLANK_DURATION,
    MODE_NAMES,
    T_REF_K,
    TRACE_HEADERS,
    TRIAL_HEADERS,
    arrhenius,
    catalyst_frame,
    converted,
    instrument_columns,
    noisy,
    rate_constants,
    round_to,
    signal,
)


def write_bulk_campaign(directory, n_trials: int, n_points: int = 200, seed: int = 0, chunk: int = 5000) -> dict:
    """Write a large clean campaign for benchmarks, generating and appending the trace table chunk by chunk.

    Twenty stable catalysts (TOF_ref log-uniform over 0.3-5 1/s, Ea uniform over 35-75 kJ/mol) and about 5 %
    blanks at 25-55 °C; 85 % of trials read a gas burette, 5 % each the balance, the sealed reactor and the
    analyser. Kinetics follow the module's first-order model; each trial spans 4.5 half-lives with ``n_points``
    evenly spaced readings. Only one chunk of traces (``chunk × n_points`` rows) is held in memory at a time.

    Parameters
    ----------
    directory : str or path-like
        Output folder (created if missing); receives catalysts.csv, trials.csv and traces.csv.
    n_trials : int
        Number of trials.
    n_points : int, default 200
        Readings per trace.
    seed : int, default 0
        Seed of the numpy random generator.
    chunk : int, default 5000
        Trials generated and written per step.

    Returns
    -------
    dict
        ``catalysts``, ``trials``, ``blank_trials``, ``trace_rows`` (counts) and ``truth`` (per-catalyst
        DataFrame with the columns of :attr:`Campaign.truth`).
    """
    folder = Path(directory)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    n_cat = 20
    metals = np.array(("Pt", "Ru", "Rh", "Pd"))[np.arange(n_cat) % 4]
    loading = round_to(rng.uniform(0.5, 10.0, n_cat), 0.1)
    dispersion = round_to(rng.uniform(10.0, 70.0, n_cat), 1.0)
    ids = np.array([f"C{i + 1:03d}" for i in range(n_cat)])
    catalysts = catalyst_frame(
        {"catalyst_id": ids[i], "metal": metals[i], "metal_loading [wt%]": loading[i],
         "dispersion [%]": dispersion[i], "surface_area [m^2/g]": 150.0, "support": "Al2O3",
         # one preparation each: their TOFs are drawn independently, so a shared description would declare
         # loading series that the data (rightly) fail
         "description": f"bulk benchmark catalyst {ids[i]}", "batch": "BULK", "price_per_gram": 10.0}
        for i in range(n_cat)
    )
    tof_ref = np.exp(rng.uniform(np.log(0.3), np.log(5.0), n_cat))
    ea = rng.uniform(35e3, 75e3, n_cat)
    truth = pd.DataFrame({"catalyst_id": ids, "ea_J_per_mol": ea, "tof_ref": tof_ref, "t_ref_K": T_REF_K,
                          "k_blank_ref": np.nan, "tau_s": np.inf, "order": 1.0, "problem": ""})

    which = rng.integers(0, n_cat, n_trials)
    catalysed = rng.random(n_trials) >= 0.05
    modes = rng.choice(np.array(MODE_NAMES), n_trials, p=(0.85, 0.05, 0.05, 0.05))
    modes = np.where(catalysed, modes, "gas_volume")
    n_lim, liquid = np.full(n_trials, 1.0), np.full(n_trials, 10.0)  # standard charge, as in the demo
    cols, baseline = instrument_columns(rng, modes, n_lim, liquid)
    temp_c = rng.choice(np.array(DEMO_TEMPERATURES), n_trials)
    mass = np.where(catalysed, round_to(rng.uniform(5.0, 30.0, n_trials), 0.1), np.nan)
    tof_std = tof_ref[which] * arrhenius(temp_c + zero_Celsius, ea[which])
    plan = pd.DataFrame({
        "trial_id": np.char.add("B", np.char.zfill(np.arange(1, n_trials + 1).astype(str), 7)),
        "catalyst_id": pd.array(np.where(catalysed, ids[which], None), dtype="str"),
        "temperature [degC]": temp_c,
        "catalyst_mass [mg]": mass,
        **cols,
        "_metal": np.where(catalysed, metals[which], None),
        "_loading": loading[which],
        "_dispersion": dispersion[which],
        "_site_density": np.nan,
        "_tof_std": tof_std,
    })
    plan["notes"] = np.where(catalysed, None, "uncatalysed blank")
    for header in TRIAL_HEADERS:
        if header not in plan:
            plan[header] = np.nan
    plan.loc[:, list(TRIAL_HEADERS)].to_csv(folder / "trials.csv", index=False, encoding="utf-8",
                                            lineterminator="\n")
    catalysts.to_csv(folder / "catalysts.csv", index=False, encoding="utf-8", lineterminator="\n")

    _, k_blank, k_cat0 = rate_constants(plan)
    # At least one second per reading, so readings rounded to 0.1 s never repeat a time on a very fast trial.
    duration = np.where(catalysed, np.maximum(round_to(4.5 * np.log(2) / (k_blank + k_cat0), 1.0), n_points),
                        BLANK_DURATION)
    ratio = plan["product_ratio"].to_numpy(float)
    mode_index = plan["measurement"].map({m: i for i, m in enumerate(MODE_NAMES)}).to_numpy(int)
    over_water = cols["collected_over_water"] == "true"
    trial_ids = plan["trial_id"].to_numpy(str)
    grid = np.linspace(0.0, 1.0, n_points)
    schema = pa.schema([("trial_id", pa.string()), ("time [s]", pa.float64()), ("value", pa.float64())])
    # The header is written by hand because Arrow quotes header names even when they need no quotes.
    options = pa_csv.WriteOptions(include_header=False, quoting_style="none")  # plain generated ids, nothing to quote
    with open(folder / "traces.csv", "wb") as sink, pa_csv.CSVWriter(sink, schema, write_options=options) as writer:
        sink.write((",".join(TRACE_HEADERS) + "\n").encode())
        for start in range(0, n_trials, chunk):
            part = slice(start, min(start + chunk, n_trials))
            rows = np.arange(n_trials)[part]
            t = round_to(duration[rows, None] * grid, 0.1)
            n = (ratio[rows] * n_lim[rows] * 1e-3)[:, None] * converted(
                t, k_blank[rows, None], k_cat0[rows, None], np.inf)
            mode = np.broadcast_to(mode_index[rows, None], t.shape)
            clean = signal(
                mode, n, baseline[rows, None], temp_c[rows, None] + zero_Celsius,
                cols["gas_pressure [kPa]"][rows, None], cols["gas_temperature [degC]"][rows, None],
                over_water[rows, None], cols["headspace_volume [mL]"][rows, None],
                liquid[rows, None],
            )
            values = noisy(rng, mode, clean, 1.0)
            writer.write_table(pa.table({
                "trial_id": pa.array(np.repeat(trial_ids[rows], n_points)),
                "time [s]": t.ravel(),
                "value": values.ravel(),
            }, schema=schema))
    return {
        "catalysts": n_cat,
        "trials": n_trials,
        "blank_trials": int((~catalysed).sum()),
        "trace_rows": n_trials * n_points,
        "truth": truth,
    }
