"""Tests for initgen.science.sources: regridding, bias anomalies, donor blends and member noise."""

import hashlib

import numpy as np
import pytest
from scipy.interpolate import RegularGridInterpolator

from initgen.errors import InputError
from initgen.science.sources import (
    EARTH_RADIUS_KM,
    bias_anomaly,
    correlated_noise,
    donor_blend,
    interp_points,
    interp_regular,
    member_seed,
)


def haversine_km(lon1, lat1, lon2, lat2):
    """Great-circle distance on the sphere R = 6371.0 km (haversine formula, Sinnott 1984)."""
    p1, p2 = np.radians(lat1), np.radians(lat2)
    dl = np.radians(np.asarray(lon2) - np.asarray(lon1))
    h = np.sin((p2 - p1) / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dl / 2) ** 2
    return 2 * EARTH_RADIUS_KM * np.arcsin(np.sqrt(h))


def brute_nearest(src_lon, src_lat, src_val, lon, lat):
    """Value of the nearest finite source point by brute-force haversine distance."""
    ok = np.isfinite(src_val)
    d = haversine_km(src_lon[ok][None, :], src_lat[ok][None, :], lon[:, None], lat[:, None])
    return src_val[ok][np.argmin(d, axis=1)]


RNG = np.random.default_rng(20240601)


# ----------------------------------------------------------------------------- interp_regular
def test_regional_matches_regulargridinterpolator():
    lon = np.arange(10.0, 40.01, 2.5)
    lat = np.arange(30.0, 60.01, 2.0)
    field = RNG.normal(size=(lat.size, lon.size))
    dlon = RNG.uniform(10.0, 40.0, 500)
    dlat = RNG.uniform(30.0, 60.0, 500)
    got, cov = interp_regular(lon, lat, field, dlon, dlat)
    # reference: scipy.interpolate.RegularGridInterpolator (linear) on (lat, lon)
    ref = RegularGridInterpolator((lat, lon), field)(np.column_stack([dlat, dlon]))
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
    assert cov.all()
    # decreasing latitude and decreasing longitude give the same answer
    got2, _ = interp_regular(lon[::-1], lat[::-1], field[::-1, ::-1], dlon, dlat)
    np.testing.assert_allclose(got2, ref, rtol=0, atol=1e-12)
    # grid nodes are reproduced exactly
    g, _ = interp_regular(lon, lat, field, np.array([lon[3]]), np.array([lat[4]]))
    assert g[0] == field[4, 3]


def test_shapes_preserved():
    lon = np.arange(0.0, 360.0, 10.0)
    lat = np.arange(-85.0, 90.0, 10.0)
    field = RNG.normal(size=(lat.size, lon.size))
    mlon, mlat = np.meshgrid(np.linspace(-50, 50, 7), np.linspace(-40, 40, 5))
    vals, cov = interp_regular(lon, lat, field, mlon, mlat)
    assert vals.shape == cov.shape == (5, 7) and cov.dtype == bool


@pytest.mark.parametrize("src_convention", ["0..360", "-180..180"])
def test_dateline_wraparound_matches_reference(src_convention):
    step = 2.5
    lat = np.arange(-88.75, 89.0, step)
    if src_convention == "0..360":
        lon = np.arange(0.0, 360.0, step)
        dst_lon = np.array([-180.0, -179.3, 179.3, 180.0, -0.7, -1.25, 0.3, 178.9, -178.76])
    else:
        lon = np.arange(-180.0, 180.0, step)
        dst_lon = np.array([0.0, 0.3, 359.2, 181.1, 179.7, 180.0, 360.0, 178.76])
    lat_pts = RNG.uniform(-85.0, 85.0, dst_lon.size)
    field = RNG.normal(size=(lat.size, lon.size))
    got, cov = interp_regular(lon, lat, field, dst_lon, lat_pts)
    # reference: scipy.interpolate.RegularGridInterpolator on the source grid with its first
    # column repeated 360 degrees on (the periodic extension), destination longitudes
    # brought into the source's range by hand
    ext_lon = np.concatenate([lon, [lon[0] + 360.0]])
    ext = np.concatenate([field, field[:, :1]], axis=1)
    x = lon[0] + np.mod(dst_lon - lon[0], 360.0)
    ref = RegularGridInterpolator((lat, ext_lon), ext)(np.column_stack([lat_pts, x]))
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
    assert cov.all()
    # the same source with decreasing longitudes
    rev, _ = interp_regular(lon[::-1], lat, field[:, ::-1], dst_lon, lat_pts)
    np.testing.assert_allclose(rev, ref, rtol=0, atol=1e-12)


def test_global_source_covers_poles_and_is_continuous_at_dateline():
    lon = np.arange(0.5, 360.0, 1.0)
    lat = np.arange(-89.5, 90.0, 1.0)
    field = np.cos(np.radians(lat))[:, None] * np.cos(np.radians(lon))[None, :]
    vals, cov = interp_regular(lon, lat, field, np.array([-180.0, 180.0, 10.0, 33.0]),
                               np.array([12.0, 12.0, 90.0, -89.9]))
    assert cov.all()
    assert vals[0] == vals[1]
    assert np.all(np.isfinite(vals))


def test_outside_extent_not_covered_and_nearest():
    lon = np.arange(0.0, 20.01, 1.0)
    lat = np.arange(40.0, 50.01, 1.0)
    field = RNG.normal(size=(lat.size, lon.size))
    dst_lon = np.array([25.0, -3.0, 10.0, 10.0, 20.4, -0.4, 200.0])
    dst_lat = np.array([45.0, 45.0, 55.0, 30.0, 45.2, 49.0, -20.0])
    vals, cov = interp_regular(lon, lat, field, dst_lon, dst_lat)
    # half a spacing beyond the outermost centres is still the source's cell: covered
    np.testing.assert_array_equal(cov, [False, False, False, False, True, True, False])
    # reference: nearest source node by brute-force haversine distance
    mlon, mlat = np.meshgrid(lon, lat)
    ref = brute_nearest(mlon.ravel(), mlat.ravel(), field.ravel(), dst_lon, dst_lat)
    np.testing.assert_array_equal(vals, ref)


def test_regional_source_across_dateline():
    lon = np.concatenate([np.arange(170.0, 180.0, 1.0), np.arange(-180.0, -169.5, 1.0)])
    lat = np.arange(-10.0, 10.01, 1.0)
    field = RNG.normal(size=(lat.size, lon.size))
    dst_lon = np.array([179.5, -179.5, 175.2, -171.0, 0.0])
    dst_lat = np.array([0.3, -2.2, 5.0, 9.0, 0.0])
    vals, cov = interp_regular(lon, lat, field, dst_lon, dst_lat)
    np.testing.assert_array_equal(cov, [True, True, True, True, False])
    # reference: RegularGridInterpolator on the unwrapped longitudes 170..190
    ulon = np.mod(lon, 360.0)
    ref = RegularGridInterpolator((lat, ulon), field)(
        np.column_stack([dst_lat[:4], np.mod(dst_lon[:4], 360.0)]))
    np.testing.assert_allclose(vals[:4], ref, atol=1e-12, rtol=0)


def test_nan_corner_falls_back_to_nearest_valid():
    lon = np.arange(0.0, 10.01, 1.0)
    lat = np.arange(0.0, 10.01, 1.0)
    field = RNG.normal(size=(lat.size, lon.size))
    field[5, 5] = np.nan
    field[0:3, 0:3] = np.nan  # a patch with no data at all
    dst_lon = np.array([5.2, 4.9, 1.1, 7.5])
    dst_lat = np.array([5.3, 4.6, 0.7, 7.5])
    vals, cov = interp_regular(lon, lat, field, dst_lon, dst_lat)
    mlon, mlat = np.meshgrid(lon, lat)
    # reference: nearest valid source node by brute-force haversine distance
    ref = brute_nearest(mlon.ravel(), mlat.ravel(), field.ravel(), dst_lon[:3], dst_lat[:3])
    np.testing.assert_array_equal(vals[:3], ref)
    # a cell without NaN corners is still bilinear
    # reference: scipy.interpolate.RegularGridInterpolator
    assert vals[3] == pytest.approx(RegularGridInterpolator((lat, lon), field)([7.5, 7.5])[0],
                                    abs=1e-12)
    assert cov.all() and np.all(np.isfinite(vals))


def test_masked_field_and_duplicate_meridian():
    lon = np.arange(-180.0, 180.01, 30.0)  # -180 and 180: the same meridian twice
    lat = np.array([-60.0, 0.0, 60.0])
    field = np.ma.masked_array(np.tile(np.arange(lon.size, dtype=float), (3, 1)))
    field[:, -1] = field[:, 0]
    vals, _ = interp_regular(lon, lat, field, np.array([-165.0, 165.0]), np.array([0.0, 0.0]))
    # between -180 (value 0) and -150 (value 1); between 150 (value 11) and 180 (= -180, 0)
    np.testing.assert_allclose(vals, [0.5, 5.5])


@pytest.mark.parametrize("args,key", [
    ((np.arange(3.0), np.arange(2.0), np.zeros((3, 2))), "field_2d"),
    ((np.array([0.0, 1.0, 1.0]), np.arange(2.0), np.zeros((2, 3))), "src_lon_1d"),
    ((np.arange(3.0), np.array([0.0, 2.0, 1.0]), np.zeros((3, 3))), "src_lat_1d"),
    ((np.arange(3.0), np.array([0.0, 95.0]), np.zeros((2, 3))), "src_lat_1d"),
    ((np.arange(3.0), np.arange(2.0), np.full((2, 3), np.nan)), "field_2d"),
])
def test_interp_regular_validation(args, key):
    with pytest.raises(InputError, match=f"^{key}"):
        interp_regular(*args, np.array([0.5]), np.array([0.5]))


def test_interp_regular_bad_destination():
    lon, lat = np.arange(3.0), np.arange(3.0)
    with pytest.raises(InputError, match="^dst_lon, dst_lat"):
        interp_regular(lon, lat, np.zeros((3, 3)), np.zeros(2), np.zeros(3))
    vals, cov = interp_regular(lon, lat, np.zeros((3, 3)), np.array([np.nan]), np.array([1.0]))
    assert np.isnan(vals[0]) and not cov[0]


# ----------------------------------------------------------------------------- interp_points
def test_interp_points_nearest_on_sphere():
    # a rotated curvilinear grid around the pole-near region, with a missing value
    i, j = np.meshgrid(np.arange(15), np.arange(12))
    src_lon = -30.0 + 4.0 * i + 1.5 * j
    src_lat = 55.0 + 1.2 * j - 0.3 * i
    val = RNG.normal(size=src_lon.shape)
    val[3, 4] = np.nan
    dst_lon = RNG.uniform(-25.0, 40.0, 300)
    dst_lat = RNG.uniform(56.0, 66.0, 300)
    got, cov = interp_points(src_lon, src_lat, val, dst_lon, dst_lat)
    # reference: brute-force nearest by haversine distance
    ref = brute_nearest(src_lon.ravel(), src_lat.ravel(), val.ravel(), dst_lon, dst_lat)
    np.testing.assert_array_equal(got, ref)
    far, fcov = interp_points(src_lon, src_lat, val, np.array([120.0]), np.array([-10.0]))
    assert not fcov[0] and np.isfinite(far[0])
    _, c2 = interp_points(src_lon, src_lat, val, np.array([120.0]), np.array([-10.0]),
                          max_distance_km=1e5)
    assert c2[0]


def test_interp_points_validation():
    with pytest.raises(InputError, match="^values"):
        interp_points([0.0, 1.0], [0.0, 1.0], [np.nan, np.nan], [0.0], [0.0])
    with pytest.raises(InputError, match="^src_lon, src_lat, values"):
        interp_points([0.0, 1.0], [0.0], [1.0, 2.0], [0.0], [0.0])
    with pytest.raises(InputError, match="^max_distance_km"):
        interp_points([0.0], [0.0], [1.0], [0.0], [0.0], max_distance_km=-1.0)


# ----------------------------------------------------------------------------- anomalies
def test_bias_anomaly():
    model = np.array([280.0, 275.5, np.nan])
    ref = np.array([279.0, 276.0, 270.0])
    np.testing.assert_allclose(bias_anomaly(model, ref), [-1.0, 0.5, np.nan])
    np.testing.assert_allclose(bias_anomaly(model, ref, scale=0.5), [-0.5, 0.25, np.nan])
    with pytest.raises(InputError, match="^scale"):
        bias_anomaly(model, ref, scale=float("nan"))
    with pytest.raises(InputError, match="^model_clim, reference_clim"):
        bias_anomaly(np.zeros(3), np.zeros(2))


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_donor_blend_exact_at_ends(dtype):
    old = RNG.normal(280.0, 10.0, 1000).astype(dtype)
    donor = RNG.normal(275.0, 10.0, 1000).astype(dtype)
    w = RNG.uniform(0.0, 1.0, 1000)
    w[::3] = 0.0
    w[1::3] = 1.0
    out = donor_blend(old, donor, w)
    assert out.dtype == dtype
    utype = np.uint64 if dtype == np.float64 else np.uint32
    # bitwise: compare the bit patterns, not the values
    np.testing.assert_array_equal(out[::3].view(utype), old[::3].view(utype))
    np.testing.assert_array_equal(out[1::3].view(utype), donor[1::3].view(utype))
    mid = w[2::3]
    want = (1 - mid) * old[2::3].astype(float) + mid * donor[2::3].astype(float)
    np.testing.assert_allclose(out[2::3], want, rtol=1e-6 if dtype == np.float32 else 1e-15)


def test_donor_blend_scalar_weight_and_validation():
    old, donor = np.array([1.0, 2.0]), np.array([3.0, 6.0])
    np.testing.assert_array_equal(donor_blend(old, donor, 0.5), [2.0, 4.0])
    with pytest.raises(InputError, match="^weight"):
        donor_blend(old, donor, 1.5)
    with pytest.raises(InputError, match="^weight"):
        donor_blend(old, donor, np.array([0.2, np.nan]))


# ----------------------------------------------------------------------------- seeds and noise
def test_member_seed_stable_and_distinct():
    s = member_seed(42, "warm01")
    # reference: hashlib.sha256 of the documented message (first 8 bytes, big-endian, 63 bits)
    digest = hashlib.sha256(b"initgen-member-seed\x0042\x00warm01").digest()
    assert s == int.from_bytes(digest[:8], "big") & (2**63 - 1)
    assert s == 9119359090557968578  # regression pin: the value must never change
    assert member_seed(42, "warm02") != s and member_seed(43, "warm01") != s
    assert 0 <= s < 2**63
    with pytest.raises(InputError, match="^seed"):
        member_seed(-1, "a")
    with pytest.raises(InputError, match="^member name"):
        member_seed(1, "")


def test_noise_deterministic_and_member_dependent():
    lon, lat = np.meshgrid(np.linspace(-10, 30, 20), np.linspace(40, 60, 15))
    a = correlated_noise(lon, lat, 1.0, 300.0, member_seed(7, "cold01"))
    b = correlated_noise(lon, lat, 1.0, 300.0, member_seed(7, "cold01"))
    c = correlated_noise(lon, lat, 1.0, 300.0, member_seed(7, "cold02"))
    assert a.shape == lon.shape
    np.testing.assert_array_equal(a, b)
    assert np.max(np.abs(a - c)) > 0.5
    # the value at a point does not depend on the other points passed (block by block)
    sub = correlated_noise(lon[3:7, 2:11], lat[3:7, 2:11], 1.0, 300.0, member_seed(7, "cold01"))
    np.testing.assert_array_equal(sub, a[3:7, 2:11])
    # sigma scales linearly; both longitude conventions give the same field
    np.testing.assert_allclose(correlated_noise(lon, lat, 2.5, 300.0, member_seed(7, "cold01")),
                               2.5 * a, rtol=1e-14)
    shifted = correlated_noise(lon + 360.0, lat, 1.0, 300.0, member_seed(7, "cold01"))
    np.testing.assert_allclose(shifted, a, atol=1e-9)


def test_noise_regression_pin():
    # regression pin (computed with this implementation, numpy 2.x): the draws of
    # Generator(PCG64) are platform-independent, so these values must hold on any machine
    got = correlated_noise(np.array([0.0, 10.0, -170.0]), np.array([0.0, 45.0, -60.0]),
                           1.5, 500.0, 12345)
    np.testing.assert_allclose(
        got, [-1.1362398400365068, 3.002841351882802, -0.007075741754838855], rtol=1e-9,
        atol=1e-12)


def test_noise_correlation_and_unit_variance():
    # Points on a meridian at chosen great-circle distances from the first one.
    L = 400.0
    d = np.array([0.0, 0.25, 0.5, 1.0, 1.5, 2.0, 3.0]) * L
    lat = 45.0 + np.degrees(d / EARTH_RADIUS_KM)
    lon = np.full(d.size, 20.0)
    n = 20000
    # many independent realisations (seeds) on a small point set; 64 features per realisation
    # keep it fast: the expected correlation over realisations is the kernel for any number
    # of features, and each point's variance is exactly sigma^2 for any number of features.
    f = np.array([correlated_noise(lon, lat, 1.0, L, s, n_features=64) for s in range(n)])
    # reference: Gaussian correlation exp(-d^2 / (2 L^2)) in great-circle distance (the
    # target of the method; chord vs arc differ by < 1e-3 here, far below the tolerance)
    target = np.exp(-d**2 / (2 * L**2))
    est = (f[:, :1] * f).mean(axis=0)  # known zero mean and unit variance
    # tolerance: 4 standard errors of a mean of products of two unit-variance Gaussians with
    # correlation rho, Var(XY) = 1 + rho^2, plus the feature-sampling variance of the
    # realised correlation (< 2/64 for 64 features); 4 SE keeps a false alarm below 1e-4
    se = np.sqrt((1.0 + target**2 + 2.0 / 64) / n)
    assert np.all(np.abs(est - target) < 4 * se), (est, target, 4 * se)
    # unit variance and zero mean at every point: SE of a sample variance is sqrt(2 / n)
    np.testing.assert_array_less(np.abs(f.var(axis=0) - 1.0), 4 * np.sqrt(2.0 / n))
    np.testing.assert_array_less(np.abs(f.mean(axis=0)), 4 / np.sqrt(n))


def test_noise_default_features_unit_variance():
    n = 2000
    f = np.array([correlated_noise(np.array([5.0, 100.0]), np.array([10.0, -30.0]), 1.0, 250.0, s)
                  for s in range(n)])
    # SE of a sample variance of a unit Gaussian is sqrt(2 / n); 4 SE tolerance
    np.testing.assert_array_less(np.abs(f.var(axis=0) - 1.0), 4 * np.sqrt(2.0 / n))


def test_noise_validation_and_nan():
    out = correlated_noise(np.array([0.0, np.nan]), np.array([0.0, 0.0]), 1.0, 100.0, 1)
    assert np.isfinite(out[0]) and np.isnan(out[1])
    assert np.all(correlated_noise(np.zeros(3), np.zeros(3), 0.0, 100.0, 1) == 0.0)
    for kwargs, key in [({"sigma_K": -1.0}, "sigma_K"), ({"length_km": 0.0}, "length_km"),
                        ({"seed": -3}, "seed"), ({"seed": 1.5}, "seed")]:
        args = {"sigma_K": 1.0, "length_km": 100.0, "seed": 1} | kwargs
        with pytest.raises(InputError, match=f"^{key}"):
            correlated_noise(np.zeros(2), np.zeros(2), **args)
    with pytest.raises(InputError, match="^lon, lat"):
        correlated_noise(np.zeros(2), np.zeros(3), 1.0, 100.0, 1)
