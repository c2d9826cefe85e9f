"""Timing and memory of catalog.core.batch.fit_traces on invented campaign-sized data.

Run: ``python benchmarks/bench_batch.py [trials] [points]`` (default 10,000 trials x 200 points). Prints the wall
time, the peak resident memory and how many trials each model took. Invented data, timing only.
"""

from __future__ import annotations

import resource
import sys
import time

import numpy as np

from catalog.core.batch import fit_traces


def synthetic_campaign(trials: int, points: int, seed: int = 0):
    """Long-form traces: first, second and zero order in turn, 30 % offsets, 1 % noise; uniform 0-1800 s."""
    rng = np.random.default_rng(seed)
    t = np.tile(np.linspace(0.0, 1800.0, points), trials)
    trial = np.repeat(np.arange(trials), points)
    plateau = rng.uniform(1e-3, 5e-3, trials)
    kappa = rng.uniform(0.3, 8.0, trials)
    x = (kappa[trial] * t / 1800.0)
    order = trial % 3
    shape = np.select([order == 0, order == 1], [1 - np.exp(-x), x / (1 + x)], np.minimum(x / 1.5, 1.0))
    amount = plateau[trial] * (0.3 + shape) + rng.normal(0.0, 0.01, t.size) * plateau[trial]
    return trial, t, amount, 1.1 * plateau


def main() -> None:
    trials = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    points = int(sys.argv[2]) if len(sys.argv) > 2 else 200
    trial, t, amount, n_max = synthetic_campaign(trials, points)
    start = time.perf_counter()
    fits = fit_traces(trial, t, amount, n_max)
    elapsed = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"{trials} trials x {points} points: {elapsed:.2f} s, peak RSS {peak:.0f} MiB")
    print(fits["model"].value_counts().to_string())


if __name__ == "__main__":
    main()
