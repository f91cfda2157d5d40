"""Benchmark of initgen.science.regions taper weights (a script; pytest does not collect it).

Run:  /work/venv/bin/python tests/perf/bench_regions.py [--quick]

Case: a 400-vertex invented highland (lon ~73-102 E, lat ~27-40 N, about 3000 x 1300 km)
with a 300 km raised-cosine taper outside it, on
  * a global regular grid (0.1 degree: 3600 x 1800 = 6.48 M cells; --quick: 0.25 degree),
  * a rotated (curvilinear) 1000 x 1000 grid at 0.05 degree around the highland
    (--quick: 500 x 500 at 0.1 degree),
  * 2 M random points in lon 55-120 E, lat 15-52 N (--quick: 0.5 M).
Every timing is the median of 3 runs, each starting from a cold shape cache (the shape is
wrapped, its boundary sampled and the k-d tree built inside the timed call).

Printed lines are ``name: value``. Targets: weights_regular_s <= 2, weights_peak_mb <= 600,
naive_every_point_vs_fast_speedup >= 30 (the baseline the target names: a shapely distance from
every grid point; ``naive_vs_fast_speedup`` is against a stronger baseline that already
restricts the distances to the widened bounding box), weights_curvilinear_1000x1000_s <= 2, weights_points_2M_s <= 2,
max_rel_err_vs_pyproj <= 0.005.

Naive baseline (``naive_*`` lines), the straightforward way to get the same weights:
shapely.contains_xy for every grid point (prepared polygon), then shapely.distance from every
grid point in the same widened bounding box to the polygon boundary, in km, after projecting
points and polygon with pyproj to an azimuthal equidistant projection centred on the region.
It is run in full on the whole grid, not sampled. A second, sampled baseline (``bruteforce_*``
lines) is the great-circle (haversine) distance from each bbox point to every 1 km boundary
sample without a spatial index, timed on a random sample of bbox points and scaled linearly.
"""

import argparse
import json
import os
import resource
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import shapely  # noqa: E402
from pyproj import Geod, Transformer  # noqa: E402

from initgen.science import geodesy  # noqa: E402
from initgen.science.regions.mask import _candidates
from initgen.science.regions.boundary import _in_arc
from initgen.science.regions.boundary import _shape_cached
from initgen.science.regions.boundary import _shape_of
from initgen.science.regions.mask import _spacing_km
from initgen.science.regions.mask import boundary_distance_km
from initgen.science.regions.shapes import polygon
from initgen.science.regions.mask import taper_weight

WIDTH_KM = 300.0


def highland_vertices(n=400):
    """An invented wobbly highland, lon ~73-102, lat ~27-40 (n vertices)."""
    th = np.linspace(0, 2 * np.pi, n, endpoint=False)
    r = 1 + 0.12 * np.sin(3 * th) + 0.07 * np.cos(7 * th + 1) + 0.04 * np.sin(13 * th)
    return np.column_stack([87.5 + 14.2 * r * np.cos(th), 33.5 + 5.3 * r * np.sin(th)])


def global_grid(res):
    nlon, nlat = int(round(360 / res)), int(round(180 / res))
    lon1 = -180.0 + res * (np.arange(nlon) + 0.5)
    lat1 = -90.0 + res * (np.arange(nlat) + 0.5)
    lon, lat = np.meshgrid(lon1, lat1)
    return lon, lat


def rotated_grid(n, step, centre=(87.5, 33.5), twist=25.0):
    r = step * (np.arange(n) - n / 2)
    rlon, rlat = np.meshgrid(r, r)
    x = np.cos(np.radians(rlat)) * np.cos(np.radians(rlon))
    y = np.cos(np.radians(rlat)) * np.sin(np.radians(rlon))
    z = np.sin(np.radians(rlat))
    g = np.radians(twist)
    y, z = y * np.cos(g) - z * np.sin(g), y * np.sin(g) + z * np.cos(g)
    b = np.radians(centre[1])
    x, z = x * np.cos(b) - z * np.sin(b), x * np.sin(b) + z * np.cos(b)
    lon = np.degrees(np.arctan2(y, x)) + centre[0]
    return (lon + 180.0) % 360.0 - 180.0, np.degrees(np.arcsin(np.clip(z, -1, 1)))


def timed(fn, repeat=3):
    """Median wall time of ``repeat`` cold runs, and the last result."""
    times = []
    out = None
    for _ in range(repeat):
        _shape_cached.cache_clear()          # cold: no cached shape or k-d tree
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), out


def bbox_points(lon, lat, geom, max_km):
    """Flat indices of the grid points in the boundary's bbox widened by max_km (as rg)."""
    tree = _shape_of(geom).tree(_spacing_km(max_km))
    lat_lo, lat_hi, arc, margin = _candidates(tree, max_km)
    flon, flat = lon.ravel(), lat.ravel()
    cand = (flat >= lat_lo) & (flat <= lat_hi)
    idx = np.flatnonzero(cand)
    return idx[_in_arc(flon[idx], *arc, margin=margin)]


def aeqd_transformer(geom):
    c = geom.centroid
    return Transformer.from_crs(
        "EPSG:4326", f"+proj=aeqd +lat_0={c.y} +lon_0={c.x} +R={geodesy.EARTH_RADIUS_KM * 1e3}",
        always_xy=True)


def naive_weights(lon, lat, geom, width_km, idx, to_aeqd):
    """Straightforward weights: contains_xy everywhere + shapely.distance in AEQD km."""
    shapely.prepare(geom)
    inside = shapely.contains_xy(geom, lon, lat)
    bx, by = to_aeqd.transform(*np.asarray(geom.exterior.coords).T)
    boundary = shapely.LineString(np.column_stack([bx, by]))
    px, py = to_aeqd.transform(lon.ravel()[idx], lat.ravel()[idx])
    d_km = shapely.distance(shapely.points(px, py), boundary) / 1e3
    w = inside.astype(np.float64).ravel()
    outside = ~inside.ravel()[idx]
    w[idx[outside]] = np.where(d_km[outside] < width_km,
                               0.5 * (1 + np.cos(np.pi * d_km[outside] / width_km)), 0.0)
    return w.reshape(lon.shape), d_km


def bruteforce_distance_km(plon, plat, geom):
    """Great-circle distance to every 1 km boundary sample (no spatial index)."""
    tree = _shape_of(geom).tree(1.0)
    b = tree.xyz
    out = np.empty(len(plon))
    p = geodesy.lonlat_to_unit(plon, plat)
    for k in range(0, len(p), 256):
        chord = np.sqrt(((p[k:k + 256, None, :] - b[None, :, :]) ** 2).sum(-1)).min(axis=1)
        out[k:k + 256] = geodesy.chord_to_km(chord)
    return out


def reference_wgs84_km(lon, lat, geom):
    """pyproj.Geod WGS84: min geodesic distance to the boundary sampled every ~0.2 km."""
    c = np.asarray(geom.exterior.coords)
    pts = []
    for (x0, y0), (x1, y1) in zip(c[:-1], c[1:]):
        k = max(1, int(np.ceil(max(abs(x1 - x0), abs(y1 - y0)) / 0.002)))
        t = np.arange(k) / k
        pts.append(np.column_stack([x0 + t * (x1 - x0), y0 + t * (y1 - y0)]))
    b = np.vstack(pts)
    geod = Geod(ellps="WGS84")
    out = np.empty(len(lon))
    for i, (x, y) in enumerate(zip(lon, lat)):
        h = geodesy.great_circle_km(x, y, b[:, 0], b[:, 1])
        near = h <= h.min() * 1.02 + 5.0
        _, _, m = geod.inv(np.full(near.sum(), x), np.full(near.sum(), y), b[near, 0], b[near, 1])
        out[i] = m.min() / 1e3
    return out


def peak_rss_mb():
    """Peak resident set size of this process (VmHWM; ru_maxrss where /proc is missing).

    ru_maxrss alone is not used on Linux because a child started by a large parent can
    inherit the parent's high-water mark across exec.
    """
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return float(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def child_memory(res):
    """Run in a subprocess: peak memory of one regular-grid weights computation."""
    geom = polygon(highland_vertices())
    lon, lat = global_grid(res)
    base_rss = peak_rss_mb()
    tracemalloc.start()
    w = taper_weight(lon, lat, geom, WIDTH_KM, "outside", regular=True)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss = peak_rss_mb()
    print(json.dumps({"peak_rss_mb": rss, "rss_before_call_mb": base_rss,
                      "call_alloc_peak_mb": peak / 2**20, "sum": float(w.sum())}))


def load_note():
    try:
        with open("/proc/loadavg") as fh:
            return fh.read().split()[0]
    except OSError:
        return "n/a"


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller grids, fewer samples")
    ap.add_argument("--child-memory", type=float, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child_memory is not None:
        child_memory(args.child_memory)
        return

    res = 0.25 if args.quick else 0.1
    n_curv, step_curv = (500, 0.1) if args.quick else (1000, 0.05)
    n_pts = 500_000 if args.quick else 2_000_000
    n_err = 40 if args.quick else 200
    n_brute = 300 if args.quick else 1000

    geom = polygon(highland_vertices())
    lon, lat = global_grid(res)
    print(f"grid: {lat.shape[1]} x {lat.shape[0]} = {lon.size / 1e6:.2f} M cells "
          f"({res} degree), polygon {len(highland_vertices())} vertices, taper {WIDTH_KM} km")
    print(f"cpus: {os.cpu_count()}, load average at start: {load_note()}")

    # --- fast regular-grid weights
    t_reg, w = timed(lambda: taper_weight(lon, lat, geom, WIDTH_KM, "outside", regular=True))
    print(f"weights_regular_s: {t_reg:.3f}")
    t_axes, w_axes = timed(lambda: taper_weight(lon[0], lat[:, 0], geom, WIDTH_KM,
                                                   "outside", regular=True))
    assert np.array_equal(w, w_axes)
    print(f"weights_regular_from_axes_s: {t_axes:.3f}")

    # --- peak memory, in a fresh process
    out = subprocess.run([sys.executable, __file__, "--child-memory", str(res)],
                         capture_output=True, text=True, check=True)
    mem = json.loads(out.stdout.strip().splitlines()[-1])
    print(f"weights_peak_mb: {mem['peak_rss_mb']:.0f}")
    print(f"weights_peak_note: peak RSS (VmHWM) of a fresh process that imports numpy, "
          f"scipy, shapely, pyproj, builds the two {lon.nbytes / 2**20:.0f} MB coordinate "
          f"arrays ({mem['rss_before_call_mb']:.0f} MB peak before the call) and computes "
          f"the weights once")
    print(f"weights_call_alloc_peak_mb: {mem['call_alloc_peak_mb']:.0f} (tracemalloc, "
          f"during the call only, output array included)")

    # --- naive baseline, full (not sampled)
    idx = bbox_points(lon, lat, geom, WIDTH_KM)
    to_aeqd = aeqd_transformer(geom)                  # set-up not timed (favours the baseline)
    to_aeqd.transform(0.0, 0.0)
    t0 = time.perf_counter()
    w_naive, d_naive = naive_weights(lon, lat, geom, WIDTH_KM, idx, to_aeqd)
    t_naive = time.perf_counter() - t0
    t_fast_d, d_fast = timed(lambda: boundary_distance_km(lon.ravel()[idx],
                                                             lat.ravel()[idx], geom, WIDTH_KM))
    t0 = time.perf_counter()
    shapely.contains_xy(geom, lon, lat)
    t_naive_mask = time.perf_counter() - t0
    print(f"naive_method: shapely.contains_xy on all {lon.size} points + shapely.distance "
          f"(pyproj AEQD, km) from all {idx.size} points of the widened bbox; full run, "
          f"compared with the whole taper_weight call")
    print(f"naive_weights_s: {t_naive:.3f}")
    print(f"naive_mask_only_s: {t_naive_mask:.3f}")
    print(f"naive_vs_fast_speedup: {t_naive / t_reg:.1f}")
    print(f"naive_max_abs_weight_diff: {np.max(np.abs(w_naive - w)):.4f}")
    print(f"distance_bbox_points: {idx.size}")
    print(f"fast_distance_bbox_s: {t_fast_d:.3f}")
    print(f"naive_distance_vs_fast_distance_speedup: "
          f"{(t_naive - t_naive_mask) / t_fast_d:.1f}")

    # --- the baseline as the scale target words it: a shapely distance from every grid point to
    # the boundary (AEQD km), no bounding box. Timed on a random sample of grid points and scaled
    # linearly to the whole grid (shapely.distance costs the same per point), plus the full mask.
    rng_all = np.random.default_rng(1)
    n_all = min(lon.size, 200_000)
    pick_all = rng_all.choice(lon.size, size=n_all, replace=False)
    bx, by = to_aeqd.transform(*np.asarray(geom.exterior.coords).T)
    boundary = shapely.LineString(np.column_stack([bx, by]))
    t0 = time.perf_counter()
    px, py = to_aeqd.transform(lon.ravel()[pick_all], lat.ravel()[pick_all])
    shapely.distance(shapely.points(px, py), boundary)
    t_sample = time.perf_counter() - t0
    t_every = t_naive_mask + t_sample * lon.size / n_all
    print(f"naive_every_point_method: shapely.contains_xy on all {lon.size} points + shapely.distance "
          f"(pyproj AEQD, km) from every grid point, timed on {n_all} random points and scaled x"
          f"{lon.size / n_all:.1f}")
    print(f"naive_every_point_s: {t_every:.2f}")
    print(f"naive_every_point_vs_fast_speedup: {t_every / t_reg:.0f}")

    # --- brute-force great-circle baseline, sampled and scaled
    rng = np.random.default_rng(0)
    sample = rng.choice(idx, size=min(n_brute, idx.size), replace=False)
    _shape_of(geom).tree(1.0)
    t0 = time.perf_counter()
    d_brute = bruteforce_distance_km(lon.ravel()[sample], lat.ravel()[sample], geom)
    t_brute = (time.perf_counter() - t0) * idx.size / sample.size
    print(f"bruteforce_method: haversine-equivalent chord to all 1 km boundary samples, "
          f"{sample.size} random bbox points timed, scaled to {idx.size}")
    print(f"bruteforce_distance_s: {t_brute:.2f}")
    print(f"bruteforce_vs_fast_distance_speedup: {t_brute / t_fast_d:.0f}")
    both = np.isfinite(d_fast[np.searchsorted(idx, sample)])
    diff = np.abs(d_brute[both] - d_fast[np.searchsorted(idx, sample)][both])
    print(f"bruteforce_max_abs_diff_km: {diff.max():.4f} (its 1 km samples vs exact arcs)")

    # --- accuracy against pyproj WGS84 (points 10..300 km from the boundary, both sides)
    d_grid = boundary_distance_km(lon, lat, geom, WIDTH_KM, regular=True).ravel()
    zone = np.flatnonzero((d_grid >= 10) & (d_grid <= WIDTH_KM))
    pick = rng.choice(zone, size=min(n_err, zone.size), replace=False)
    ref = reference_wgs84_km(lon.ravel()[pick], lat.ravel()[pick], geom)
    err = np.abs(d_grid[pick] / ref - 1)
    print(f"max_rel_err_vs_pyproj: {err.max():.5f}")
    print(f"mean_rel_err_vs_pyproj: {err.mean():.5f}")
    err_naive = np.abs(d_naive[np.searchsorted(idx, pick)] / ref - 1)
    print(f"naive_max_rel_err_vs_pyproj: {err_naive.max():.5f}")

    # --- curvilinear and point lists
    clon, clat = rotated_grid(n_curv, step_curv)
    t_curv, wc = timed(lambda: taper_weight(clon, clat, geom, WIDTH_KM, "outside"))
    print(f"curvilinear_grid: {n_curv} x {n_curv} rotated, {step_curv} degree, "
          f"{np.count_nonzero((wc > 0) & (wc < 1))} points in the taper")
    print(f"weights_curvilinear_1000x1000_s: {t_curv:.3f}")
    plon = rng.uniform(55, 120, n_pts)
    plat = rng.uniform(15, 52, n_pts)
    t_pts, wp = timed(lambda: taper_weight(plon, plat, geom, WIDTH_KM, "outside"))
    print(f"points: {n_pts} random in lon 55..120, lat 15..52, "
          f"{np.count_nonzero((wp > 0) & (wp < 1))} in the taper")
    print(f"weights_points_2M_s: {t_pts:.3f}")
    print(f"load average at end: {load_note()}")


if __name__ == "__main__":
    main()
