"""Benchmark of ensemble execution: 16 members of the demo file, 2 workers vs one after the other.

Run from the repository root::

    /work/venv/bin/python tests/perf/bench_ensemble.py            # median of 3, with the variants
    /work/venv/bin/python tests/perf/bench_ensemble.py --quick    # one run each, no variants

The input is the demo restart (``initgen.demo.write_demo_restart``, 120 x 80 cells, 8 soil
layers) and the recipe is the shipped ``recipes/demo-warm-cold-pairs.yaml`` with 8 scales x 2
signs = 16 members (energy mode, correlated noise). Both runs go through
``initgen.outputs.ensemble.run`` in the same process: ``workers=1`` writes the members one after the
other in this process; ``workers=2`` uses two local worker processes. Runs alternate (serial,
parallel, serial, ...) so that machine load affects both alike; each figure is the median
wall-clock time, pool start-up included.

Prints ``name: value`` lines: ``ensemble_serial_s``, ``ensemble_parallel_s``,
``ensemble_parallel_vs_serial_ratio`` (target <= 0.65 on 2 free cores) and, without --quick,
the variants that decided the defaults: ``parallel_<method>_s`` per start method (fork,
forkserver, spawn) and ``parallel_rebuild_s`` (every worker rebuilds the shared arrays from
the recipe instead of receiving them). ``cpu_reference_ratio`` is the same comparison for
perfectly parallel numpy work, measured right after: on a machine whose other processes keep
the cores busy it is near 1, and no ensemble ratio can be better than it.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import yaml

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from initgen.outputs import ensemble  # noqa: E402
from initgen.outputs.members import members
from initgen.demo import write_demo_restart  # noqa: E402
from initgen.config.recipe import load_recipe  # noqa: E402
from initgen.io.shipped import shipped_file  # noqa: E402

SCALES = [0.25, 0.5, 0.75, 1.0, 1.25, 1.5, 1.75, 2.0]


def setup(tmp: Path):
    text = shipped_file("recipes", "demo-warm-cold-pairs.yaml").read_text()
    data = yaml.safe_load(text)
    data["members"]["scales"] = SCALES
    (tmp / "r.yaml").write_text(yaml.safe_dump(data, sort_keys=False))
    shutil.copy(shipped_file("masks", "demo-highland.geojson"), tmp / "demo-highland.geojson")
    write_demo_restart(tmp / "demo.nc")
    recipe = load_recipe(tmp / "r.yaml")
    assert len(members(recipe)) == 16
    return recipe, tmp / "demo.nc"


def timed(recipe, src, out, **kw) -> float:
    if out.exists():
        shutil.rmtree(out)
    t0 = time.perf_counter()
    res = ensemble.run(recipe, [src], out, None, **kw)
    dt = time.perf_counter() - t0
    assert res.exit_code == 0, [r["message"] for r in res.failed]
    return dt


def _cpu_work(_):
    x = np.random.default_rng(0).standard_normal((400, 1024))
    for _ in range(10):
        np.cos(x).sum()
    return 0


def cpu_reference_ratio() -> float:
    """What 2 processes give on perfectly parallel numpy work right now (machine load included)."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    t0 = time.perf_counter()
    for i in range(16):
        _cpu_work(i)
    serial = time.perf_counter() - t0
    with ProcessPoolExecutor(2, mp_context=multiprocessing.get_context(ensemble.start_method())) as pool:
        t0 = time.perf_counter()
        list(pool.map(_cpu_work, range(16)))
        parallel = time.perf_counter() - t0
    return parallel / serial


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="one run each, no variants")
    args = ap.parse_args()
    repeats = 1 if args.quick else 3
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        recipe, src = setup(tmp)
        timed(recipe, src, tmp / "warm", workers=1)  # warm the caches and imports
        configs = {"serial": dict(workers=1), "parallel": dict(workers=2)}
        if not args.quick:
            for m in ("fork", "forkserver", "spawn"):
                configs[f"parallel_{m}"] = dict(workers=2, method=m)
            configs["parallel_rebuild"] = dict(workers=2, share="rebuild")
        times = {k: [] for k in configs}
        for _ in range(repeats):
            for name, kw in configs.items():
                times[name].append(timed(recipe, src, tmp / name, **kw))
        med = {k: statistics.median(v) for k, v in times.items()}
        print(f"cpu_count: {os.cpu_count()}")
        print("members: 16")
        print(f"default_start_method: {ensemble.start_method()}")
        print(f"ensemble_serial_s: {med['serial']:.3f}")
        print(f"ensemble_parallel_s: {med['parallel']:.3f}")
        print(f"ensemble_parallel_vs_serial_ratio: {med['parallel'] / med['serial']:.3f}")
        for k in configs:
            if k not in ("serial", "parallel"):
                print(f"{k}_s: {med[k]:.3f}")
                print(f"{k}_vs_serial_ratio: {med[k] / med['serial']:.3f}")
        print(f"load_average_1min: {os.getloadavg()[0]:.2f}")
        print(f"cpu_reference_ratio: {cpu_reference_ratio():.3f}")


if __name__ == "__main__":
    main()
