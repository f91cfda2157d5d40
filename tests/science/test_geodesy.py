"""Tests for initgen.science.geodesy: longitude wrapping, great-circle distance, cell areas."""

import inspect

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import Geod

from initgen.science import geodesy
from initgen.science.geodesy import (
    EARTH_RADIUS_KM,
    cell_areas_regular,
    chord_to_km,
    great_circle_km,
    km_to_chord,
    lonlat_to_unit,
    point_arc_km,
    wrap_lon,
)

R = EARTH_RADIUS_KM
SPHERE = Geod(a=R * 1e3, f=0.0)      # pyproj on the same sphere: must agree to round-off
WGS84 = Geod(ellps="WGS84")


def test_radius_is_iugg_mean_radius():
    # reference: IUGG mean Earth radius R1 = 6371.0088 km (Moritz 2000), rounded to 6371.0
    assert EARTH_RADIUS_KM == 6371.0


def test_no_file_io_in_geodesy():
    src = inspect.getsource(geodesy)
    assert "open(" not in src and "import os" not in src


# ---------------------------------------------------------------- wrap_lon

def test_wrap_lon_examples():
    assert wrap_lon([190.0, -180.0, 180.0, 360.0, -190.0]).tolist() == [
        -170.0, -180.0, -180.0, 0.0, 170.0]
    assert wrap_lon([-10.0, 360.0, 720.5], west=0.0).tolist() == [350.0, 0.0, 0.5]
    # tiny negative numbers must not round up to the excluded east end
    out = wrap_lon(np.array([-1e-17, -1e-300]), west=0.0)
    assert np.all((out >= 0.0) & (out < 360.0))
    assert np.isnan(wrap_lon(np.nan))
    assert wrap_lon(np.zeros((2, 3))).shape == (2, 3)


@settings(max_examples=200, deadline=None)
@given(st.floats(-1e5, 1e5, allow_nan=False), st.sampled_from([-180.0, 0.0, -90.0, 20.0]))
def test_wrap_lon_property(lon, west):
    w = float(wrap_lon(lon, west))
    assert west <= w < west + 360.0
    k = (lon - w) / 360.0
    assert abs(k - round(k)) < 1e-9


# ---------------------------------------------------------------- great-circle distance

def test_great_circle_known_values():
    assert great_circle_km(0, 0, 0, 0) == 0.0
    assert np.isclose(great_circle_km(0, 0, 0, 90), np.pi * R / 2, rtol=1e-14)
    assert np.isclose(great_circle_km(10, 20, -170, -20), np.pi * R, rtol=1e-14)  # antipodes
    assert np.isclose(great_circle_km(-180, 10, 180, 10), 0.0, atol=1e-9)
    assert np.isclose(great_circle_km(359, 0, -1, 0), 0.0, atol=1e-9)


def test_great_circle_broadcasts():
    d = great_circle_km(np.zeros((3, 1)), np.zeros((3, 1)), np.arange(4.0), 0.0)
    assert d.shape == (3, 4)
    assert np.allclose(d[0], np.radians(np.arange(4.0)) * R)


def test_great_circle_matches_pyproj_sphere():
    rng = np.random.default_rng(1)
    n = 2000
    lon1, lon2 = rng.uniform(-180, 180, (2, n))
    lat1, lat2 = np.degrees(np.arcsin(rng.uniform(-1, 1, (2, n))))
    # short distances too, where the haversine form matters
    lon2[:500] = lon1[:500] + rng.uniform(-0.01, 0.01, 500)
    lat2[:500] = np.clip(lat1[:500] + rng.uniform(-0.01, 0.01, 500), -90, 90)
    _, _, m = SPHERE.inv(lon1, lat1, lon2, lat2)
    d = great_circle_km(lon1, lat1, lon2, lat2)
    # reference: pyproj.Geod(a=6371 km, f=0) inverse on the same sphere
    np.testing.assert_allclose(d, m / 1e3, rtol=1e-9, atol=1e-9)


def test_great_circle_within_half_percent_of_wgs84_at_midlatitudes():
    rng = np.random.default_rng(2)
    n = 2000
    lat1 = rng.uniform(25, 65, n) * rng.choice([-1, 1], n)
    lon1 = rng.uniform(-180, 180, n)
    lat2 = lat1 + rng.uniform(-3, 3, n)
    lon2 = lon1 + rng.uniform(-4, 4, n)
    _, _, m = WGS84.inv(lon1, lat1, lon2, lat2)
    d = great_circle_km(lon1, lat1, lon2, lat2)
    ok = m > 10e3
    # reference: pyproj.Geod WGS84 inverse (sphere vs ellipsoid, <= 0.5 % by REFERENCES.md)
    assert np.max(np.abs(d[ok] / (m[ok] / 1e3) - 1.0)) < 0.005


# ---------------------------------------------------------------- unit vectors and chords

def test_unit_vectors():
    u = lonlat_to_unit([0, 90, 0, 180, 45], [0, 0, 90, 0, -90])
    np.testing.assert_allclose(u[0], [1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(u[1], [0, 1, 0], atol=1e-15)
    np.testing.assert_allclose(u[2], [0, 0, 1], atol=1e-15)
    np.testing.assert_allclose(u[3], [-1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(u[4], [0, 0, -1], atol=1e-15)
    rng = np.random.default_rng(3)
    v = lonlat_to_unit(rng.uniform(-500, 500, (4, 5)), rng.uniform(-90, 90, (4, 5)))
    assert v.shape == (4, 5, 3)
    np.testing.assert_allclose(np.linalg.norm(v, axis=-1), 1.0, rtol=1e-15)
    # any longitude convention gives the same vector
    np.testing.assert_allclose(lonlat_to_unit(190, 10), lonlat_to_unit(-170, 10), atol=1e-15)


def test_chord_conversions():
    rng = np.random.default_rng(4)
    lon1, lat1, lon2, lat2 = rng.uniform(-90, 90, (4, 500))
    chord = np.linalg.norm(lonlat_to_unit(lon1, lat1) - lonlat_to_unit(lon2, lat2), axis=-1)
    np.testing.assert_allclose(chord_to_km(chord), great_circle_km(lon1, lat1, lon2, lat2),
                               rtol=1e-10, atol=1e-8)
    km = np.array([0.0, 1e-3, 1.0, 300.0, 5000.0, np.pi * R])
    np.testing.assert_allclose(chord_to_km(km_to_chord(km)), km, rtol=1e-12, atol=1e-9)
    assert chord_to_km(np.inf) == np.inf
    assert chord_to_km(2.5) == pytest.approx(np.pi * R)       # clipped
    assert km_to_chord(1e9) == pytest.approx(2.0)


def test_point_arc_distance_matches_sampled_geodesic():
    rng = np.random.default_rng(5)
    for _ in range(20):
        a_ll = rng.uniform([-30, -60], [30, 60])
        b_ll = a_ll + rng.uniform(-15, 15, 2)
        p_ll = rng.uniform(a_ll - 20, a_ll + 20, (50, 2))
        p_ll[:, 1] = np.clip(p_ll[:, 1], -89, 89)
        # dense samples along the arc: pyproj's great-circle points on the same sphere
        pts = np.array(SPHERE.npts(*a_ll, *b_ll, 4000, initial_idx=0, terminus_idx=0))
        got = point_arc_km(lonlat_to_unit(p_ll[:, 0], p_ll[:, 1]),
                           lonlat_to_unit(*a_ll), lonlat_to_unit(*b_ll))
        for k in range(len(p_ll)):
            _, _, m = SPHERE.inv(np.full(len(pts), p_ll[k, 0]), np.full(len(pts), p_ll[k, 1]),
                                 pts[:, 0], pts[:, 1])
            # reference: pyproj.Geod(a=6371 km, f=0) npts along the arc + inverse, minimum
            assert got[k] == pytest.approx(m.min() / 1e3, rel=1e-5, abs=0.01)


def test_point_arc_degenerate_arc_is_point_distance():
    a = lonlat_to_unit(10, 20)
    p = lonlat_to_unit(12, 25)
    assert point_arc_km(p, a, a) == pytest.approx(great_circle_km(10, 20, 12, 25), rel=1e-10)


# ---------------------------------------------------------------- cell areas

SPHERE_AREA_M2 = 4.0 * np.pi * (R * 1e3) ** 2


@pytest.mark.parametrize("lon, lat", [
    (np.arange(0.5, 360, 1.0), np.arange(-89.5, 90, 1.0)),          # 1-degree, 0..360
    (np.arange(-179.5, 180, 1.0), np.arange(89.5, -90, -1.0)),      # -180..180, north first
    (np.arange(0.0, 360, 1.0), np.arange(-90.0, 90.1, 1.0)),        # centres on the poles
    (np.r_[np.arange(300, 360, 2.5), np.arange(0, 300, 2.5)],       # crosses the wrap point
     np.linspace(-88.75, 88.75, 72)),
])
def test_global_cell_areas_sum_to_sphere(lon, lat):
    a = cell_areas_regular(lon, lat)
    assert a.shape == (lat.size, lon.size)
    assert np.all(a > 0)
    # reference: IUGG mean Earth radius 6371.0 km, sphere area 4 pi R^2
    assert abs(a.sum() / SPHERE_AREA_M2 - 1.0) < 1e-6


def test_cell_area_is_spherical_zone():
    lon = np.arange(0.5, 360, 1.0)
    lat = np.arange(-89.5, 90, 1.0)
    a = cell_areas_regular(lon, lat)
    j = 130   # centre 40.5N, bounds 40 and 41
    expected = (R * 1e3) ** 2 * np.radians(1.0) * (np.sin(np.radians(41)) - np.sin(np.radians(40)))
    # reference: area of a lon/lat rectangle on a sphere, R^2 dlon (sin lat2 - sin lat1)
    # (Snyder 1987, cylindrical equal-area projection)
    assert a[j, 7] == pytest.approx(expected, rel=1e-12)
    assert np.allclose(a[j], a[j, 0])           # rows are uniform
    assert a[0, 0] < a[90, 0]                   # smaller towards the poles


def test_regional_grid_bounds_extrapolated():
    lon = np.array([10.0, 11.0, 12.0])
    lat = np.array([50.0, 51.0])
    a = cell_areas_regular(lon, lat)
    r2 = (R * 1e3) ** 2
    exp = r2 * np.radians(1.0) * (np.sin(np.radians(51.5)) - np.sin(np.radians(50.5)))
    assert a[1, 1] == pytest.approx(exp, rel=1e-12)
    assert a.sum() == pytest.approx(
        r2 * np.radians(3.0) * (np.sin(np.radians(51.5)) - np.sin(np.radians(49.5))), rel=1e-12)


def test_smallest_lon_arc_by_hand():
    """Intervals 170..175 and -178..-170 (across the 180 degree meridian): the largest gap is
    -170..170 (340 degrees), so the arc starts at 170 and is 20 degrees wide; a set covering the
    whole circle has no gap (-180, 360)."""
    from initgen.science.geodesy import smallest_lon_arc

    assert smallest_lon_arc([170.0, -178.0], [175.0, -170.0]) == pytest.approx((170.0, 20.0))
    assert smallest_lon_arc([-180.0, 0.0], [0.0, 180.0]) == (-180.0, 360.0)
