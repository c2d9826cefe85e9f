"""The yardstick: the per-trial script a practitioner writes with pandas and scipy, run as a whole process.

Run::

    python benchmarks/curve_fit_per_trial.py CAMPAIGN_FOLDER [--out rates.csv]

pandas reads the trial and trace files, ``scipy.optimize.curve_fit`` fits a first-order rise with offset,
``y = a (1 - exp(-k t)) + c``, to every trial's raw signal, then ``np.polyfit`` of ln k against 1/T gives an
apparent activation energy per catalyst, and the per-catalyst table is written as CSV (a practitioner keeps the
answer). Prints one line of counts. No catalog code is imported: this is what the package is measured against.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.constants import R, zero_Celsius
from scipy.optimize import OptimizeWarning, curve_fit


def first_order_rise(t, a, k, c):
    """y = a (1 - exp(-k t)) + c."""
    return a * -np.expm1(-k * t) + c


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("folder", type=Path)
    parser.add_argument("--out", type=Path, help="per-catalyst CSV (default: rates.csv beside the campaign)")
    args = parser.parse_args(argv)

    traces = pd.read_csv(args.folder / "traces.csv")
    trials = pd.read_csv(args.folder / "trials.csv")
    trial_col, time_col, value_col = traces.columns[:3]
    rates, failed = {}, 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OptimizeWarning)
        for trial_id, group in traces.groupby(trial_col, sort=False):
            t = group[time_col].to_numpy(float)
            y = group[value_col].to_numpy(float)
            guess = (y[-1] - y[0], 3.0 / t[-1], y[0])  # the rise, ~3 time constants over the trace, first reading
            try:
                params, _ = curve_fit(first_order_rise, t, y, p0=guess, maxfev=5000)
                rates[trial_id] = params[1]
            except RuntimeError:
                failed += 1
    k = trials.set_index("trial_id").join(pd.Series(rates, name="k"), how="inner").dropna(subset=["catalyst_id"])
    k = k[k["k"] > 0]
    rows = []
    for catalyst, group in k.groupby("catalyst_id"):
        temperature = group["temperature [degC]"] + zero_Celsius
        if temperature.nunique() >= 2:
            slope, intercept = np.polyfit(1.0 / temperature, np.log(group["k"]), 1)
            rows.append({"catalyst_id": catalyst, "ea_kJ_per_mol": -slope * R / 1e3, "ln_A": intercept,
                         "n_trials": len(group)})
    out = args.out or args.folder.parent / "rates.csv"
    pd.DataFrame(rows).to_csv(out, index=False)
    print(f"{len(rates) + failed} trials fitted ({failed} did not converge), {len(rows)} catalysts written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
