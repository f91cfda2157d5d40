"""Benchmark of the soil physics: 10 million layer cells through the two modes.

Run from the repository root::

    /work/venv/bin/python tests/perf/bench_soil.py           # 10 M cells, median of 3
    /work/venv/bin/python tests/perf/bench_soil.py --quick   # 1 M cells, one run

The state is a realistic worst case: 10 soil layers x 1 M columns (layer thickness per layer,
freezing-curve parameters and solid heat capacity per column, broadcast), temperatures around
freezing (250-290 K at the surface, damped with depth), water 10-100 % of porosity in phase
equilibrium, and every cell perturbed (surface anomaly -5..+5 K, e-folding depth 1 m), so
about half the cells are solved on the freezing curve.

Prints ``name: value`` lines: ``energy_mode_10M_s``, ``temperature_mode_10M_s`` (median
wall-clock seconds, scaled to 10 M cells in quick mode and marked so), the same as process
CPU seconds (``*_cpu_s``; numpy runs these on one core, so CPU time is the figure that does
not depend on other load on the machine), ``load_average_1min``, ``peak_mb`` (largest
extra memory traced by ``tracemalloc`` during one energy-mode call, outputs included) and
``maxrss_mb`` (peak resident size of the process, inputs included).
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import sys
import time
import tracemalloc

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from initgen.science.soil import properties
from initgen.science.soil.modes import apply_energy_mode
from initgen.science.soil.modes import apply_temperature_mode
from initgen.science.soil.freezing import equilibrate_phase
from initgen.science.constants import T_FREEZE  # noqa: E402


def make_state(ncol, nlay=10, seed=1):
    rng = np.random.default_rng(seed)
    rows = list(properties.CLAPP_HORNBERGER_1978.values())
    pick = rng.integers(0, len(rows), ncol)
    phi = np.array([r.porosity for r in rows])[pick][None, :]
    psi = np.array([r.psi_sat_m for r in rows])[pick][None, :]
    b = np.array([r.b for r in rows])[pick][None, :]
    cs = rng.uniform(2.13e6, 2.39e6, ncol)[None, :]
    dz = np.geomspace(0.02, 1.0, nlay)[:, None]
    depth = (np.cumsum(dz[:, 0]) - 0.5 * dz[:, 0])[:, None]
    damp = np.exp(-depth)
    Ts = rng.uniform(250.0, 290.0, ncol)[None, :]
    T = 276.0 + (Ts - 276.0) * damp
    W = rng.uniform(0.1, 1.0, (nlay, ncol)) * phi
    liq, ice = equilibrate_phase(T, W, 0.0, phi, psi, b)
    dT = rng.uniform(-5.0, 5.0, ncol)[None, :] * damp
    return T, liq, ice, dT, dz, phi, psi, b, cs


def timed(fn, args, repeat):
    """Median wall-clock and process CPU seconds of ``repeat`` calls."""
    wall, cpu = [], []
    for _ in range(repeat):
        c0, t0 = time.process_time(), time.perf_counter()
        fn(*args)
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return statistics.median(wall), statistics.median(cpu)


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="1 M cells, one run (scaled to 10 M)")
    a = p.parse_args(argv)
    ncol, repeat = (100_000, 1) if a.quick else (1_000_000, 3)
    state = make_state(ncol)
    ncell = state[0].size
    scale = 1e7 / ncell
    note = " (scaled from %d cells)" % ncell if a.quick else ""
    t_e, c_e = (t * scale for t in timed(apply_energy_mode, state, repeat))
    t_t, c_t = (t * scale for t in timed(apply_temperature_mode, state, repeat))
    tracemalloc.start()
    apply_energy_mode(*state)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    print(f"cells: {ncell}")
    print(f"energy_mode_10M_s: {t_e:.3f}{note}")
    print(f"temperature_mode_10M_s: {t_t:.3f}{note}")
    print(f"energy_mode_10M_cpu_s: {c_e:.3f}{note}")
    print(f"temperature_mode_10M_cpu_s: {c_t:.3f}{note}")
    print(f"load_average_1min: {os.getloadavg()[0]:.2f}")
    print(f"peak_mb: {peak / 2**20:.1f}")
    print(f"maxrss_mb: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.1f}")
    on_curve = (state[0] < T_FREEZE) & (state[2] > 0)
    print(f"fraction_frozen_cells: {on_curve.mean():.3f}")


if __name__ == "__main__":
    main()
