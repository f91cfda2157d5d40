"""Benchmark of the persistence estimate's conduction solver (conduction.conduct).

Run from the repository root::

    /work/venv/bin/python tests/perf/bench_conduction.py

Columns of 8 and 20 layers (thicknesses growing with depth, Johansen-like conductivities and
de Vries-like heat capacities varying per column), the default horizons 7, 15, 30, 60 days and
the persistence module's time steps (at least STEPS_PER_INTERVAL per interval, at most
MAX_STEP_DAYS each). Prints ``name: value`` lines: milliseconds per thousand columns (median
of 5, wall clock and process CPU) for 1 000 and 20 000 columns, and ``load_average_1min``.
"""

from __future__ import annotations

import os
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from initgen.science import conduction  # noqa: E402
from initgen.engine.persistence import MAX_STEP_DAYS, STEPS_PER_INTERVAL  # noqa: E402


def case(ncol, nlay, seed=0):
    rng = np.random.default_rng(seed)
    edges = np.concatenate([[0.0], 0.02 * (1.45 ** np.arange(nlay)).cumsum()])
    dz = np.diff(edges)
    z = 0.5 * (edges[1:] + edges[:-1])
    T0 = -3.0 * np.exp(-z / rng.uniform(0.05, 1.0, (ncol, 1)))
    C = rng.uniform(1.8e6, 3.0e6, (ncol, nlay))
    k = rng.uniform(0.3, 2.0, (ncol, nlay))
    return T0, dz, C, k


def main():
    times = np.array([7, 15, 30, 60]) * 86400.0
    for nlay in (8, 20):
        for ncol in (1000, 20000):
            T0, dz, C, k = case(ncol, nlay)
            wall, cpu = [], []
            for _ in range(5):
                t0, c0 = time.perf_counter(), time.process_time()
                conduction.conduct(T0, dz, C, k, times, min_steps=STEPS_PER_INTERVAL,
                                   max_step_s=MAX_STEP_DAYS * 86400.0)
                wall.append(time.perf_counter() - t0)
                cpu.append(time.process_time() - c0)
            per = 1000.0 / ncol * 1e3
            print(f"conduct_{nlay}layers_{ncol}cols_ms_per_1000_columns: {statistics.median(wall) * per:.2f}")
            print(f"conduct_{nlay}layers_{ncol}cols_cpu_ms_per_1000_columns: {statistics.median(cpu) * per:.2f}")
    print(f"load_average_1min: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
