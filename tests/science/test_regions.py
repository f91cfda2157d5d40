"""Tests for initgen.science.regions: shapes, hard masks, boundary distances and taper weights.

External references used (each named beside its check):
- regionmask 0.13 ``mask_3D`` (hard masks, same polygon or its own SREX / Giorgi regions);
- pyproj.Geod: WGS84 ellipsoid (accuracy target 0.5 %) and a sphere of R = 6371 km
  (``Geod(a=6371e3, f=0)``, checks the method itself);
- scipy.signal.windows.tukey (the taper shape).
"""

import json
import warnings

import numpy as np
import pytest
import regionmask
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import Geod
from scipy.signal.windows import tukey

from initgen.science.regions import mask as mask_mod
from initgen.science.regions.mask import boundary_distance_km
from initgen.science.regions.shapes import box
from initgen.science.regions.factors import check_coverage
from initgen.science.regions.shapes import combine
from initgen.science.regions.factors import elevation_ramp
from initgen.science.regions.mask import hard_mask
from initgen.science.regions.factors import land_weight
from initgen.science.regions.shapes import polygon
from initgen.science.regions.shapes import published
from initgen.io.readers import read_geojson
from initgen.science.regions.mask import taper_weight
from initgen.errors import InputError, InputWarning
from initgen.science.geodesy import EARTH_RADIUS_KM as R

from clikit import DATA

# regionmask 0.13 uses affine "*" internally; not ours to fix
pytestmark = pytest.mark.filterwarnings("ignore:Use `@` matmul:PendingDeprecationWarning")

WGS84 = Geod(ellps="WGS84")
SPHERE = Geod(a=R * 1e3, f=0.0)


# ------------------------------------------------------------------------- helpers

def highland_vertices(n=400):
    """An invented wobbly highland, lon ~73-103, lat ~27-39 (n vertices)."""
    th = np.linspace(0, 2 * np.pi, n, endpoint=False)
    r = 1 + 0.12 * np.sin(3 * th) + 0.07 * np.cos(7 * th + 1) + 0.04 * np.sin(13 * th)
    return np.column_stack([87.5 + 14.2 * r * np.cos(th), 33.5 + 5.3 * r * np.sin(th)])


HIGHLAND = polygon(highland_vertices())


def regular(lon1, lat1):
    return np.meshgrid(np.asarray(lon1, float), np.asarray(lat1, float))


def regionmask_mask(geom, lon, lat):
    """regionmask's own hard mask for one polygon (1-D axes or 2-D coordinates)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return regionmask.Regions([geom]).mask_3D(lon, lat, drop=False).values[0]


def rotated_grid(n=60, m=50, centre=(87.5, 33.5), step=0.5, twist=25.0):
    """A rotated lon/lat grid: 2-D geographic lon/lat of a regular grid in rotated coordinates.

    The rotated grid is centred on the rotated equator and meridian, twisted by ``twist``
    degrees and moved so its centre lands on ``centre``.
    """
    rlon, rlat = np.meshgrid(step * (np.arange(n) - n / 2), step * (np.arange(m) - m / 2))
    x = np.cos(np.radians(rlat)) * np.cos(np.radians(rlon))
    y = np.cos(np.radians(rlat)) * np.sin(np.radians(rlon))
    z = np.sin(np.radians(rlat))
    g = np.radians(twist)                     # twist about the x axis
    y, z = y * np.cos(g) - z * np.sin(g), y * np.sin(g) + z * np.cos(g)
    b = np.radians(centre[1])                 # tilt up to the centre latitude
    x, z = x * np.cos(b) - z * np.sin(b), x * np.sin(b) + z * np.cos(b)
    lon = np.degrees(np.arctan2(y, x)) + centre[0]
    lat = np.degrees(np.arcsin(np.clip(z, -1, 1)))
    return (lon + 180.0) % 360.0 - 180.0, lat


def sample_rings(geom, step_deg=0.002):
    """Densely sampled boundary of a shapely polygon (straight lon/lat edges)."""
    out = []
    for ring in shapely.get_rings(shapely.get_parts(geom)):
        c = np.asarray(ring.coords)
        for (x0, y0), (x1, y1) in zip(c[:-1], c[1:]):
            k = max(1, int(np.ceil(max(abs(x1 - x0), abs(y1 - y0)) / step_deg)))
            t = np.arange(k) / k
            out.append(np.column_stack([x0 + t * (x1 - x0), y0 + t * (y1 - y0)]))
    return np.vstack(out)


def reference_distance_km(lon, lat, boundary, geod):
    """min over the sampled boundary of pyproj geodesic distance (km) from each point."""
    bl, bb = np.radians(boundary[:, 0]), np.radians(boundary[:, 1])
    out = np.empty(len(lon))
    for k, (x, y) in enumerate(zip(lon, lat)):
        # cheap spherical pre-selection of candidates, then the reference on those only
        xr, yr = np.radians(x), np.radians(y)
        c = np.sin(yr) * np.sin(bb) + np.cos(yr) * np.cos(bb) * np.cos(bl - xr)
        ang = np.arccos(np.clip(c, -1, 1))
        near = ang <= ang.min() * 1.02 + 5.0 / R
        _, _, m = geod.inv(np.full(near.sum(), x), np.full(near.sum(), y),
                           boundary[near, 0], boundary[near, 1])
        out[k] = m.min() / 1e3
    return out


def tail(width_km, d):
    return 0.5 * (1 + np.cos(np.pi * np.clip(d / width_km, 0, 1)))


# ------------------------------------------------------------------------- hard masks

GRID_180 = (np.arange(-180.0, 180.0, 1.0), np.arange(-90.0, 90.1, 1.0))   # points on edges
GRID_360 = (np.arange(0.5, 360.0, 1.0), np.arange(-89.5, 90.0, 1.0))      # 0..360, centres

SHAPES = {
    "box_on_grid_lines": box(-10, 20, 30, 50),
    "highland": HIGHLAND,
    "srex_TIB": regionmask.defined_regions.srex[["TIB"]].polygons[0],
    "dateline_box": box(170, -170, -10, 10),
    "north_cap": box(-180, 180, 80, 90),
    "south_cap": box(-180, 180, -90, -75),
    "ring_around_pole": polygon([[0, 70], [90, 75], [180, 70], [270, 75]]),
    "box_0_360": box(300, 350, -40, -20),
}


@pytest.mark.parametrize("grid", [GRID_180, GRID_360], ids=["lon-180..180", "lon0..360"])
@pytest.mark.parametrize("name", sorted(SHAPES))
def test_hard_mask_equals_regionmask(name, grid):
    geom = SHAPES[name]
    lon1, lat1 = grid
    lon, lat = regular(lon1, lat1)
    expected = regionmask_mask(geom, lon1, lat1)
    assert expected.any()
    # reference: regionmask 0.13 mask_3D for the same polygon (rasterised, regular grid)
    np.testing.assert_array_equal(hard_mask(lon, lat, geom, regular=True), expected)
    # reference: regionmask 0.13 mask_3D for the same polygon
    np.testing.assert_array_equal(hard_mask(lon, lat, geom), expected)
    np.testing.assert_array_equal(hard_mask(lon1, lat1, geom, regular=True), expected)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), res=st.sampled_from([0.25, 0.5, 1.0]),
       half=st.booleans(), snap=st.booleans(), hole=st.booleans())
def test_random_polygons_mask_equals_regionmask(seed, res, half, snap, hole):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(3, 40))
    th = np.sort(rng.uniform(0, 2 * np.pi, n))
    r = rng.uniform(2, 25, n)
    cx, cy = rng.uniform(-140, 140), rng.uniform(-60, 60)
    v = np.column_stack([cx + 1.5 * r * np.cos(th), cy + r * np.sin(th)])
    if snap:                                   # vertices and edges on grid lines
        v = np.round(v * 2) / 2
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        geom = polygon(v)
    if hole:
        geom = geom.difference(shapely.Point(cx, cy).buffer(1.5))
    off = res / 2 if half else 0.0
    lon1 = -180 + off + res * np.arange(round(360 / res))
    lat1 = -90 + off + res * np.arange(round(180 / res) + (not half))
    lon, lat = regular(lon1, lat1)
    expected = regionmask_mask(geom, lon1, lat1)
    # reference: regionmask 0.13 mask_3D for the same polygon
    np.testing.assert_array_equal(hard_mask(lon, lat, geom, regular=True), expected)
    # reference: regionmask 0.13 mask_3D for the same polygon
    np.testing.assert_array_equal(hard_mask(lon, lat, geom), expected)


@pytest.mark.parametrize("set_name, abbrev", [("srex", "CEU"), ("srex", "ALA"), ("srex", "SAU"),
                                              ("giorgi", "NEU"), ("giorgi", "SSA")])
def test_published_region_mask_equals_regionmask(set_name, abbrev):
    lon1, lat1 = np.arange(-179.75, 180, 0.5), np.arange(-89.75, 90, 0.5)
    lon, lat = regular(lon1, lat1)
    geom = published(set_name, abbrev)
    regions = getattr(regionmask.defined_regions, set_name)
    number = regions.map_keys(abbrev)
    expected = regions.mask_3D(lon1, lat1).sel(region=number).values
    # reference: regionmask 0.13 defined_regions.<set>.mask_3D, region selected by abbrev
    np.testing.assert_array_equal(hard_mask(lon, lat, geom, regular=True), expected)
    # reference: same regionmask mask, point-by-point method
    np.testing.assert_array_equal(hard_mask(lon, lat, geom), expected)


def test_curvilinear_mask_equals_regionmask():
    lon, lat = rotated_grid(n=120, m=90, centre=(12.0, 50.0), step=0.25)
    geom = published("srex", "CEU")
    expected = regionmask_mask(geom, lon, lat)
    assert 50 < expected.sum() < expected.size
    # reference: regionmask 0.13 mask_3D on 2-D (curvilinear) coordinates, shapely method
    np.testing.assert_array_equal(hard_mask(lon, lat, geom), expected)


def test_point_list_mask():
    rng = np.random.default_rng(7)
    lon = rng.uniform(60, 120, 3000)
    lat = rng.uniform(15, 50, 3000)
    lon[:5] = np.nan
    got = hard_mask(lon, lat, HIGHLAND)
    assert not got[:5].any()
    expected = shapely.contains_xy(HIGHLAND, lon[5:], lat[5:])
    # reference: shapely.contains_xy on the same points (none lies on the boundary)
    np.testing.assert_array_equal(got[5:], expected)


# ------------------------------------------------------------------------- distances

@pytest.mark.parametrize("name", ["highland", "srex_CEU"])
def test_distance_within_half_percent_of_wgs84(name):
    geom = HIGHLAND if name == "highland" else published("srex", "CEU")
    minx, miny, maxx, maxy = geom.bounds
    rng = np.random.default_rng(11)
    lon = rng.uniform(minx - 5, maxx + 5, 4000)
    lat = rng.uniform(miny - 3, maxy + 3, 4000)
    d = boundary_distance_km(lon, lat, geom, 300.0)
    zone = np.flatnonzero((d >= 10) & (d <= 300))
    sel = np.concatenate([zone[hard_mask(lon[zone], lat[zone], geom)][:30],
                          zone[~hard_mask(lon[zone], lat[zone], geom)][:30]])
    assert sel.size == 60
    boundary = sample_rings(geom)
    ref = reference_distance_km(lon[sel], lat[sel], boundary, WGS84)
    # reference: pyproj.Geod WGS84 inverse, minimum over a densely sampled boundary
    assert np.max(np.abs(d[sel] / ref - 1)) < 0.005
    ref_s = reference_distance_km(lon[sel], lat[sel], boundary, SPHERE)
    # reference: pyproj.Geod(a=6371 km, f=0), same sphere: the method itself is ~exact
    assert np.max(np.abs(d[sel] / ref_s - 1)) < 2e-4


def test_distance_is_inf_beyond_max_and_for_nan():
    lon = np.array([87.5, 60.0, 140.0, np.nan, 87.5])
    lat = np.array([26.0, 33.0, 33.0, 30.0, np.nan])
    d = boundary_distance_km(lon, lat, HIGHLAND, 300.0)
    assert np.isfinite(d[0]) and d[0] < 300
    assert np.all(np.isinf(d[1:]))
    d0 = boundary_distance_km(lon, lat, HIGHLAND, 0.0)
    assert np.all(np.isinf(d0))
    dall = boundary_distance_km(lon[:3], lat[:3], HIGHLAND, np.inf)
    assert np.all(np.isfinite(dall))


def test_whole_globe_has_no_boundary():
    lon, lat = regular(np.arange(-180, 180, 10.0), np.arange(-90, 91, 10.0))
    globe = box(-180, 180, -90, 90)
    assert np.all(np.isinf(boundary_distance_km(lon, lat, globe, 1000)))
    np.testing.assert_array_equal(taper_weight(lon, lat, globe, 500, "inside"), 1.0)


def test_cap_taper_reaches_across_the_pole():
    geom = box(0, 30, 80, 88)
    lon, lat = regular(np.arange(-180, 180, 2.0), np.arange(70, 90.1, 0.5))
    w = taper_weight(lon, lat, geom, 600.0)
    # points beyond the pole from the region (lon 165..225, lat >= 85)
    far = np.flatnonzero(((lat >= 85) & (np.abs(lon - 195 + 360 * (lon < 0)) <= 30)).ravel())
    assert np.count_nonzero(w.ravel()[far] > 0) > 10        # the taper reaches over the pole
    pick = far[:: max(1, far.size // 20)]
    ref = reference_distance_km(lon.ravel()[pick], lat.ravel()[pick], sample_rings(geom), SPHERE)
    assert np.any(ref < 600) and np.any(ref > 600)
    # reference: pyproj.Geod(a=6371 km, f=0) inverse to the sampled boundary, then the taper
    np.testing.assert_allclose(w.ravel()[pick], tail(600.0, ref), atol=2e-4)


# ------------------------------------------------------------------------- taper shape

N_STEPS = 30
WIDTH = 300.0


def transect(start_lat, sign, n=N_STEPS, width=WIDTH):
    """Latitudes at distances 0, w/n, ..., w from a parallel, along a meridian."""
    return start_lat + sign * np.degrees(np.arange(n + 1) * (width / n) / R)


def tukey_tail(n=N_STEPS):
    # a Tukey window with alpha = 0.5 and M = 4n + 1 has cosine edges of n + 1 samples
    return tukey(4 * n + 1, alpha=0.5)[-(n + 1):]


def tukey_rise(n=N_STEPS):
    return tukey(4 * n + 1, alpha=0.5)[: n + 1]


@pytest.mark.parametrize("use_regular", [True, False])
def test_outside_transect_is_tukey_tail(use_regular):
    geom = box(0, 60, 0, 40)
    lat1 = transect(40.0, +1)
    if use_regular:
        lon, lat = regular([29.0, 30.0, 31.0], lat1)
        w = taper_weight(lon, lat, geom, WIDTH, "outside", regular=True)[:, 1]
    else:
        w = taper_weight(np.full(lat1.size, 30.0), lat1, geom, WIDTH, "outside")
    w[0] = taper_weight([30.0], [40.0 + 1e-9], geom, WIDTH)[0]  # just outside the edge
    # reference: scipy.signal.windows.tukey tail (alpha 0.5), distances R * dlat exactly
    np.testing.assert_allclose(w, tukey_tail(), atol=1e-6)


def test_inside_and_centred_transects_are_tukey_edges():
    geom = box(0, 60, 0, 40)
    lat_in = transect(40.0 - 1e-9, -1)                    # inwards from the north edge
    w_in = taper_weight(np.full(lat_in.size, 30.0), lat_in, geom, WIDTH, "inside")
    # reference: scipy.signal.windows.tukey rising edge (alpha 0.5)
    np.testing.assert_allclose(w_in, tukey_rise(), atol=1e-6)
    lat_c = transect(40.0 + np.degrees(0.5 * WIDTH / R), -1)   # from w/2 outside to w/2 inside
    w_c = taper_weight(np.full(lat_c.size, 30.0), lat_c, geom, WIDTH, "centred")
    # reference: scipy.signal.windows.tukey rising edge (alpha 0.5)
    np.testing.assert_allclose(w_c, tukey_rise(), atol=1e-6)
    assert taper_weight([30.0], [40.0], geom, WIDTH, "centred")[0] == pytest.approx(0.5)


@pytest.mark.parametrize("placement", mask_mod.PLACEMENTS)
@pytest.mark.parametrize("use_regular", [True, False])
def test_width_zero_is_hard_mask(placement, use_regular):
    lon, lat = regular(np.arange(-180, 180, 1.0), np.arange(-90, 90.1, 1.0))
    for geom in (HIGHLAND, box(170, -170, -10, 10), box(-180, 180, 80, 90)):
        w = taper_weight(lon, lat, geom, 0.0, placement, regular=use_regular)
        assert w.dtype == np.float64
        np.testing.assert_array_equal(w, hard_mask(lon, lat, geom).astype(float))


@settings(max_examples=15, deadline=None)
@given(lon0=st.floats(-200, 300), dlon=st.floats(1, 120), lat0=st.floats(-85, 70),
       dlat=st.floats(1, 40), width=st.floats(1, 2000))
def test_placements_are_ordered_and_bounded(lon0, dlon, lat0, dlat, width):
    geom = box(lon0, lon0 + dlon, lat0, min(lat0 + dlat, 90))
    lon, lat = regular(np.arange(-180, 180, 4.0), np.arange(-90, 90.1, 4.0))
    mask = hard_mask(lon, lat, geom, regular=True)
    w_out, w_cen, w_in = (taper_weight(lon, lat, geom, width, p, regular=True)
                          for p in ("outside", "centred", "inside"))
    for w in (w_out, w_cen, w_in):
        assert np.all((w >= 0) & (w <= 1))
    assert np.all(w_out[mask] == 1) and np.all(w_in[~mask] == 0)
    assert np.all(w_out >= w_cen - 1e-12) and np.all(w_cen >= w_in - 1e-12)


# ------------------------------------------------------------------------- grid kinds

def test_curvilinear_and_points_equal_regular():
    lon1, lat1 = np.arange(50.0, 125.0, 0.25), np.arange(10.0, 55.0, 0.25)
    lon, lat = regular(lon1, lat1)
    w_reg = taper_weight(lon, lat, HIGHLAND, 300.0, "centred", regular=True)
    assert 0 < np.count_nonzero((w_reg > 0) & (w_reg < 1))
    # the same points as an irregular 2-D array (scrambled) and as a point list
    perm = np.random.default_rng(3).permutation(lon.size)
    shape2 = (150, lon.size // 150)
    w_curv = taper_weight(lon.ravel()[perm].reshape(shape2), lat.ravel()[perm].reshape(shape2),
                             HIGHLAND, 300.0, "centred")
    np.testing.assert_allclose(w_curv.ravel(), w_reg.ravel()[perm], rtol=0, atol=1e-12)
    w_pts = taper_weight(lon.ravel(), lat.ravel(), HIGHLAND, 300.0, "centred")
    np.testing.assert_allclose(w_pts, w_reg.ravel(), rtol=0, atol=1e-12)
    # the 1-D axes of the regular grid give the same 2-D result
    w_axes = taper_weight(lon1, lat1, HIGHLAND, 300.0, "centred", regular=True)
    np.testing.assert_array_equal(w_axes, w_reg)
    d_reg = boundary_distance_km(lon, lat, HIGHLAND, 150.0, regular=True)
    np.testing.assert_array_equal(boundary_distance_km(lon, lat, HIGHLAND, 150.0), d_reg)
    # also in the other longitude convention
    w_360 = taper_weight(lon.ravel() + 360.0, lat.ravel(), HIGHLAND, 300.0, "centred")
    np.testing.assert_allclose(w_360, w_reg.ravel(), rtol=0, atol=1e-12)


def test_rotated_grid_weights_match_reference_distances():
    lon, lat = rotated_grid(n=80, m=60, centre=(87.5, 33.5), step=0.5)
    w = taper_weight(lon, lat, HIGHLAND, 300.0, "outside")
    np.testing.assert_array_equal(w, taper_weight(lon.ravel(), lat.ravel(), HIGHLAND, 300.0)
                                  .reshape(lon.shape))
    zone = np.flatnonzero(((w > 0.01) & (w < 0.99)).ravel())
    assert zone.size > 100
    pick = zone[:: zone.size // 25]
    ref = reference_distance_km(lon.ravel()[pick], lat.ravel()[pick],
                                sample_rings(HIGHLAND), SPHERE)
    # reference: pyproj.Geod(a=6371 km, f=0) distance to the sampled boundary, then the taper
    np.testing.assert_allclose(w.ravel()[pick], tail(300.0, ref), atol=1e-4)


def test_regular_flag_checked():
    lon, lat = rotated_grid(n=10, m=8)
    with pytest.raises(InputError, match="regular=True"):
        taper_weight(lon, lat, HIGHLAND, 100.0, regular=True)
    with pytest.raises(InputError, match="same shape"):
        hard_mask(np.zeros(3), np.zeros(4), HIGHLAND)


# ------------------------------------------------------------------------- dateline, poles

DATELINE_VARIANTS = {
    "box": lambda: box(170, -170, -20, -5),
    "continuous": lambda: polygon([[170, -20], [190, -20], [190, -5], [170, -5]]),
    "negative": lambda: polygon([[-190, -20], [-170, -20], [-170, -5], [-190, -5]]),
    "split": lambda: shapely.MultiPolygon([shapely.box(170, -20, 180, -5),
                                           shapely.box(-180, -20, -170, -5)]),
}


def test_dateline_polygon_same_weights_on_both_grid_conventions():
    lon_a = np.arange(-179.75, 180, 0.5)               # -180..180
    lon_b = np.arange(0.25, 360, 0.5)                  # 0..360
    lat1 = np.arange(-40.0, 15.0, 0.5)
    order = np.argsort(((lon_b + 180) % 360) - 180)    # columns of b in the order of a
    ref = None
    for name, make in DATELINE_VARIANTS.items():
        geom = make()
        for placement in mask_mod.PLACEMENTS:
            wa = taper_weight(*regular(lon_a, lat1), geom, 400.0, placement, regular=True)
            wb = taper_weight(*regular(lon_b, lat1), geom, 400.0, placement, regular=True)
            np.testing.assert_allclose(wb[:, order], wa, atol=1e-12)
            if placement == "inside":
                ref = wa if ref is None else ref
                np.testing.assert_allclose(wa, ref, atol=1e-12)
    # the seam at 180 is not a boundary: weight 1 there, 'inside' taper included
    col = np.argmin(np.abs(lon_a - 179.75))
    row = np.argmin(np.abs(lat1 - -12.5))
    assert ref[row, col] == 1.0


def test_long_edge_is_taken_the_short_way_with_warning():
    with pytest.warns(InputWarning, match="short way"):
        geom = polygon([[170, -20], [-170, -20], [-170, -5], [170, -5]])
    assert geom.equals(DATELINE_VARIANTS["continuous"]())


def test_polar_caps_follow_the_parallel():
    lon1, lat1 = np.arange(-180, 180, 1.0), np.arange(-90, 90.1, 0.5)
    lon, lat = regular(lon1, lat1)
    for geom in (box(-180, 180, 80, 90),
                 polygon([[0, 80], [90, 80], [180, 80], [270, 80]]),
                 polygon([[-180, 80], [180, 80], [180, 90], [-180, 90]])):
        w = taper_weight(lon, lat, geom, 400.0, regular=True)
        d = np.radians(np.clip(80 - lat, 0, None)) * R
        # reference: distance to a parallel along the meridian on the sphere, R * dlat
        np.testing.assert_allclose(w, tail(400.0, d), atol=1e-5)
        np.testing.assert_array_equal(w, taper_weight(lon, lat, geom, 400.0))
    south = box(0, 360, -90, -75)
    w = taper_weight(lon, lat, south, 250.0, "inside", regular=True)
    d = np.radians(np.clip(-75 - lat, 0, None)) * R
    # reference: R * dlat on the sphere, rising edge of the taper
    np.testing.assert_allclose(w, np.where(lat <= -75, 1 - tail(250.0, d), 0.0), atol=1e-5)


def test_ring_around_pole_picks_nearer_pole():
    north = polygon([[0, 70], [120, 70], [240, 70]])
    south = polygon([[0, -70], [120, -70], [240, -70]])
    assert north.contains(shapely.Point(10, 89)) and south.contains(shapely.Point(10, -89))
    with pytest.raises(InputError, match="unclear which pole"):
        polygon([[0, 0], [120, 0], [240, 0]])


# ------------------------------------------------------------------------- shapes and files

def test_bowtie_is_repaired_with_warning():
    with pytest.warns(InputWarning, match="make_valid"):
        geom = polygon([[0, 0], [10, 10], [10, 0], [0, 10]])
    assert geom.is_valid and geom.area == pytest.approx(50.0)
    lon, lat = regular(np.arange(-5, 15, 0.5), np.arange(-5, 15, 0.5))
    assert hard_mask(lon, lat, geom, regular=True).sum() > 0


def test_geojson_with_hole_and_split_dateline_box():
    path = DATA / "region_hole_dateline.geojson"
    geom = read_geojson(path)
    lon1, lat1 = np.arange(-179.5, 180, 1.0), np.arange(-89.5, 90, 1.0)
    lon, lat = regular(lon1, lat1)
    m = hard_mask(lon, lat, geom, regular=True)
    # reference: regionmask 0.13 mask_3D for the same polygon
    np.testing.assert_array_equal(m, regionmask_mask(geom, lon1, lat1))
    assert not hard_mask([20.0], [47.5], geom)[0]                    # in the hole
    pts_lon = np.array([180.0, 175.0, 20.0])
    pts_lat = np.array([-15.0, -15.0, 47.5])
    d = boundary_distance_km(pts_lon, pts_lat, geom, 2000.0)
    ref = reference_distance_km(pts_lon, pts_lat, sample_rings(box(170, -170, -20, -10)
                                                               .union(box(10, 30, 40, 55))
                                                               .difference(box(17, 23, 45, 50))
                                                               ), SPHERE)
    # reference: pyproj.Geod(a=6371 km, f=0); the 180-degree seam is not boundary
    np.testing.assert_allclose(d, ref, rtol=1e-4)


def _write(tmp_path, obj, name="shape.geojson"):
    p = tmp_path / name
    p.write_text(json.dumps(obj) if not isinstance(obj, str) else obj)
    return p


def test_geojson_linestring_raises_naming_file(tmp_path):
    p = _write(tmp_path, {"type": "Feature", "properties": {},
                          "geometry": {"type": "LineString", "coordinates": [[0, 0], [1, 1]]}})
    with pytest.raises(InputError, match=r"shape\.geojson.*'LineString'") as err:
        read_geojson(p)
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("content, pattern", [
    ({"type": "Point", "coordinates": [0, 0]}, "'Point'"),
    ({"type": "GeometryCollection", "geometries": []}, "'GeometryCollection'"),
    ({"type": "FeatureCollection", "features": []}, "no features"),
    ({"type": "Feature", "geometry": None}, "geometry is missing"),
    ("{not json", "not valid JSON"),
    ({"type": "Polygon", "coordinates": [[[0, 95], [1, 95], [1, 96]]]}, "swapped"),
])
def test_geojson_errors(tmp_path, content, pattern):
    p = _write(tmp_path, content, "bad.geojson")
    with pytest.raises(InputError, match=pattern) as err:
        read_geojson(p)
    assert "bad.geojson" in str(err.value)


def test_geojson_missing_file(tmp_path):
    with pytest.raises(InputError, match="nowhere.geojson.*not found"):
        read_geojson(tmp_path / "nowhere.geojson")


def test_geojson_bare_polygon_and_feature(tmp_path):
    ring = [[10, 40], [30, 40], [30, 55], [10, 55], [10, 40]]
    a = read_geojson(_write(tmp_path, {"type": "Polygon", "coordinates": [ring]}, "a.json"))
    b = read_geojson(_write(tmp_path, {"type": "Feature", "properties": {},
                                          "geometry": {"type": "Polygon", "coordinates": [ring]}},
                               "b.json"))
    assert a.equals(box(10, 30, 40, 55)) and b.equals(a)


def test_published_errors_and_union():
    with pytest.raises(InputError, match="srex.*giorgi"):
        published("nonsense", "CEU")
    with pytest.raises(InputError, match="'XYZ'.*CEU"):
        published("srex", "XYZ")
    lon1, lat1 = np.arange(-179.5, 180, 1.0), np.arange(-89.5, 90, 1.0)
    lon, lat = regular(lon1, lat1)
    both = published("SREX", ["ceu", "NEU"])
    expected = (hard_mask(lon, lat, published("srex", "CEU"))
                | hard_mask(lon, lat, published("srex", "NEU")))
    np.testing.assert_array_equal(hard_mask(lon, lat, both, regular=True), expected)
    assert published("srex", "c. europe").equals(published("srex", "CEU"))


def test_combine_include_exclude_any_convention():
    lon, lat = regular(np.arange(-179.5, 180, 1.0), np.arange(-89.5, 90, 1.0))
    a, b, c = box(-30, 10, 0, 30), box(340, 370, 20, 50), box(-5, 5, 10, 40)
    geom = combine([a, b], [c])
    expected = ((hard_mask(lon, lat, a) | hard_mask(lon, lat, b))
                & ~hard_mask(lon, lat, c))
    np.testing.assert_array_equal(hard_mask(lon, lat, geom, regular=True), expected)
    with pytest.raises(InputError, match="empty"):
        combine([c], [box(-10, 10, 0, 50)])
    with pytest.raises(InputError, match="include"):
        combine([], [c])


@pytest.mark.parametrize("call, pattern", [
    (lambda: taper_weight([0.0], [0.0], HIGHLAND, -1.0), "width_km.*>= 0"),
    (lambda: taper_weight([0.0], [0.0], HIGHLAND, 10.0, "middle"), "placement"),
    (lambda: boundary_distance_km([0.0], [0.0], HIGHLAND, -5), "max_km"),
    (lambda: box(0, 10, 50, 40), "lat_min < lat_max"),
    (lambda: box(0, 0, 40, 50), "lon_min equals lon_max"),
    (lambda: polygon([[30, 100], [31, 100], [31, 101]]), "swapped"),
    (lambda: polygon([[0, 0], [1, 1]]), "at least 3"),
    (lambda: hard_mask([0.0], [0.0], shapely.LineString([(0, 0), (1, 1)])), "LineString"),
    (lambda: hard_mask([0.0], [0.0], "CEU"), "shapely Polygon"),
])
def test_input_errors(call, pattern):
    with pytest.raises(InputError, match=pattern) as err:
        call()
    assert "\n" not in str(err.value)


# ------------------------------------------------------------------------- other factors

def test_elevation_ramp_is_raised_cosine():
    n = 20
    z = 1000.0 + np.arange(n + 1) * (500.0 / n)
    w = elevation_ramp(z, 1000.0, ramp_m=500.0)
    # reference: scipy.signal.windows.tukey rising edge (alpha 0.5, M = 4n + 1)
    np.testing.assert_allclose(w, tukey(4 * n + 1, alpha=0.5)[: n + 1], atol=1e-12)
    z2 = 4000.0 - np.arange(n + 1) * (300.0 / n)
    w2 = elevation_ramp(z2, 1000.0, 500.0, max_m=4000.0, max_ramp_m=300.0)
    # reference: scipy.signal.windows.tukey rising edge, mirrored at max_m
    np.testing.assert_allclose(w2, tukey(4 * n + 1, alpha=0.5)[: n + 1], atol=1e-12)
    w3 = elevation_ramp([-10.0, 999.9, 1000.0, np.nan, 5000.0], 1000.0, max_m=4000.0)
    np.testing.assert_array_equal(w3, [0, 0, 1, 0, 0])
    assert elevation_ramp([1e6], None, max_m=None)[0] == 1.0


@pytest.mark.parametrize("kwargs, pattern", [
    (dict(min_m=0, ramp_m=-1), "ramps must be >= 0"),
    (dict(min_m=100, max_m=50), "max_m.*above min_m"),
    (dict(min_m=0, ramp_m=600, max_m=1000, max_ramp_m=500), "overlap"),
    (dict(min_m="high"), "min_m must be a number"),
])
def test_elevation_ramp_errors(kwargs, pattern):
    with pytest.raises(InputError, match=pattern):
        elevation_ramp([0.0], **kwargs)


def test_land_weight():
    np.testing.assert_array_equal(land_weight(fraction=[-0.01, 0.3, 1.0000001, np.nan]),
                                  [0.0, 0.3, 1.0, 0.0])
    np.testing.assert_array_equal(land_weight(mask=[0, 1, 0.5, 0.49, np.nan]), [0, 1, 1, 0, 0])
    np.testing.assert_array_equal(land_weight(mask=[True, False]), [1.0, 0.0])
    np.testing.assert_array_equal(land_weight(mask=[2, 1], threshold=2), [1.0, 0.0])
    with pytest.raises(InputError, match="percent"):
        land_weight(fraction=[0, 50, 100])
    with pytest.raises(InputError, match="exactly one"):
        land_weight()
    with pytest.raises(InputError, match="exactly one"):
        land_weight(fraction=[1], mask=[1])


def test_check_coverage():
    lon, lat = regular(np.arange(0, 360, 1.0), np.arange(-60, 61, 1.0))
    empty = hard_mask(lon, lat, box(-180, 180, 70, 90), regular=True)
    with pytest.raises(InputError, match=r"region 'arctic' contains no grid point; the grid "
                                         r"spans lon 0\.\.359, lat -60\.\.60"):
        check_coverage(empty, "arctic", lon, lat)
    small = hard_mask(lon, lat, box(9.5, 12.5, 9.5, 12.5), regular=True)
    with pytest.warns(InputWarning, match="only 9 grid points"):
        assert check_coverage(small, "tiny", lon, lat) == 9
    big = hard_mask(lon, lat, HIGHLAND, regular=True)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert check_coverage(big, "highland", lon, lat) == big.sum()
