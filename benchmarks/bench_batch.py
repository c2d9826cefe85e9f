"""Timing and memory of catalog.core.batch.fit_traces on invented campaign-sized data.

Run: ``python benchmarks/bench_batch.py [trials] [points] [repeats]`` (default 10,000 trials x 200 points, 3
repeats). Times the fit on one thread (``workers=1``) and on the default threads, alternately, and prints the
median wall and CPU time of each, the peak resident memory and how many trials each model took. The threads only
help when a core is idle: the CPU idle share during the runs is printed beside them. Invented data, timing only.
"""

from __future__ import annotations

import resource
import statistics
import sys
import time

import numpy as np

from catalog.core.batch import default_workers, fit_traces


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


def _cpu_idle() -> tuple[int, int]:
    """(idle, total) jiffies of the whole machine so far, from /proc/stat; (0, 0) where there is none."""
    try:
        with open("/proc/stat") as f:
            fields = [int(v) for v in f.readline().split()[1:]]
    except OSError:
        return 0, 0
    return fields[3] + fields[4], sum(fields)


def main() -> None:
    trials = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    points = int(sys.argv[2]) if len(sys.argv) > 2 else 200
    repeats = int(sys.argv[3]) if len(sys.argv) > 3 else 3
    trial, t, amount, n_max = synthetic_campaign(trials, points)
    settings = sorted({1, default_workers()})
    wall, cpu = {w: [] for w in settings}, {w: [] for w in settings}
    idle0 = _cpu_idle()
    for _ in range(repeats):
        for workers in settings:
            start, start_cpu = time.perf_counter(), time.process_time()
            fits = fit_traces(trial, t, amount, n_max, workers=workers)
            wall[workers].append(time.perf_counter() - start)
            cpu[workers].append(time.process_time() - start_cpu)
    idle1 = _cpu_idle()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    idle = (idle1[0] - idle0[0]) / max(idle1[1] - idle0[1], 1)
    print(f"{trials} trials x {points} points, median of {repeats}; machine CPU idle {idle:.0%} during the runs")
    for workers in settings:
        print(f"  workers={workers}: {statistics.median(wall[workers]):.2f} s wall, "
              f"{statistics.median(cpu[workers]):.2f} s CPU")
    print(f"peak RSS {peak:.0f} MiB")
    print(fits["model"].value_counts().to_string())


if __name__ == "__main__":
    main()
