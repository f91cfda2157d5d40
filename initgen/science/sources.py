"""Horizontal anomaly fields A(x): interpolation, bias-derived anomalies, donor blends, noise.

Pure numpy (and scipy's cKDTree): arrays in, arrays out. Reading the source files is the
job of another module; this one receives the coordinate and data arrays.

Longitudes are in degrees east in either convention (0..360 or -180..180), latitudes in
degrees north. Distances on the sphere use the mean Earth radius R = 6371.0 km (IUGG).
"""

from __future__ import annotations

import hashlib
import math
from numbers import Integral, Real

import numpy as np
from scipy.spatial import cKDTree

from initgen.errors import InputError
from initgen.science import geodesy
from initgen.science.geodesy import EARTH_RADIUS_KM  # the one home of the radius: constants.EARTH_RADIUS_M

__all__ = [
    "EARTH_RADIUS_KM",
    "interp_regular",
    "interp_points",
    "bias_anomaly",
    "donor_blend",
    "correlated_noise",
    "member_seed",
]


#: Default number of random Fourier features in :func:`correlated_noise`.
DEFAULT_FEATURES = 1024


# ----------------------------------------------------------------------------- helpers
def _float_array(values, name: str) -> np.ndarray:
    """Return `values` as a float64 ndarray (masked entries become NaN)."""
    if isinstance(values, np.ma.MaskedArray):
        return np.ma.filled(values.astype(np.float64), np.nan)
    try:
        return np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{name}: must be an array of numbers") from None


def _is_number(value, kind=Real) -> bool:
    """True for a number of ``kind`` (``numbers.Real`` or ``numbers.Integral``, or a tuple of
    types), False for anything else, booleans included (``True`` is no seed or distance)."""
    return not isinstance(value, bool) and isinstance(value, kind)


def _check_lat(lat: np.ndarray, name: str) -> None:
    """Raise InputError naming ``name`` when a finite latitude lies outside [-90, 90] degrees."""
    if np.any(np.abs(lat[np.isfinite(lat)]) > 90.0):
        raise InputError(f"{name}: latitudes must lie within [-90, 90] degrees north")


def _unit_vectors(lon_deg: np.ndarray, lat_deg: np.ndarray) -> np.ndarray:
    """Cartesian unit vectors, shape ``lon.shape + (3,)``, of points on the sphere.

    :func:`initgen.science.geodesy.lonlat_to_unit` of the longitudes wrapped first to
    [-180, 180), so that both longitude conventions give the same vector to the last bit (the
    nearest source point must not depend on how a file writes its longitudes).
    """
    return geodesy.lonlat_to_unit(np.mod(lon_deg + 180.0, 360.0) - 180.0, lat_deg)


def _check_dst(dst_lon, dst_lat) -> tuple[np.ndarray, np.ndarray]:
    lon = _float_array(dst_lon, "dst_lon")
    lat = _float_array(dst_lat, "dst_lat")
    if lon.shape != lat.shape:
        raise InputError(
            f"dst_lon, dst_lat: must have the same shape, got {lon.shape} and {lat.shape}; "
            "for a regular destination grid pass the 2-D mesh (numpy.meshgrid)"
        )
    _check_lat(lat, "dst_lat")
    return lon, lat


class _NearestValid:
    """Nearest valid (finite) source value on the sphere, by cKDTree on unit vectors."""

    def __init__(self, lon: np.ndarray, lat: np.ndarray, values: np.ndarray, name: str):
        ok = np.isfinite(values) & np.isfinite(lon) & np.isfinite(lat)
        if not np.any(ok):
            raise InputError(f"{name}: the source has no finite values to interpolate from")
        self.values = values[ok]
        self.tree = cKDTree(_unit_vectors(lon[ok], lat[ok]))

    def query(self, lon: np.ndarray, lat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (value, great-circle distance in km) of the nearest valid source point."""
        chord, idx = self.tree.query(_unit_vectors(lon, lat))
        return self.values[idx], geodesy.chord_to_km(chord)


# ----------------------------------------------------------------------------- regular grids
def _prepare_lon(src_lon: np.ndarray) -> tuple[np.ndarray, np.ndarray, bool]:
    """Arrange source longitudes as one increasing arc.

    Returns (lon_arc, column_index, is_global): ``lon_arc`` strictly increasing, spanning
    less than 360 degrees, starting after the widest gap between neighbouring longitudes;
    ``column_index`` picks the matching columns of the field; ``is_global`` is True when the
    widest gap (the one across the arc's ends) is no wider than 1.5 times the widest spacing
    inside the arc, that is, the grid closes around the globe.
    """
    if np.unique(src_lon).size != src_lon.size:
        dup = np.flatnonzero(np.diff(np.sort(src_lon)) == 0.0)
        raise InputError(
            f"src_lon_1d: longitude {np.sort(src_lon)[dup[0]]:g} appears twice; each column "
            "of the source grid needs its own longitude"
        )
    lon = np.mod(src_lon, 360.0)
    order = np.argsort(lon, kind="stable")
    lon_s = lon[order]
    # drop wrap-around duplicates such as -180 and 180 (the same meridian twice)
    keep = np.concatenate([[True], np.diff(lon_s) > 1e-9])
    if lon_s.size > 1 and lon_s[-1] - lon_s[0] > 360.0 - 1e-9:
        keep[-1] = False
    lon_s, order = lon_s[keep], order[keep]
    n = lon_s.size
    if n < 2:
        raise InputError("src_lon_1d: need at least two distinct longitudes")
    gaps = geodesy.circular_gaps(lon_s, lon_s)
    k = int(np.argmax(gaps))
    start = (k + 1) % n
    idx = np.roll(np.arange(n), -start)
    lon_arc = lon_s[idx]
    lon_arc = lon_arc[0] + np.mod(lon_arc - lon_arc[0], 360.0)
    inner = np.diff(lon_arc)
    is_global = bool(n >= 3 and gaps[k] <= 1.5 * inner.max())
    return lon_arc, order[idx], is_global


def interp_regular(src_lon_1d, src_lat_1d, field_2d, dst_lon, dst_lat):
    """Bilinear interpolation from a regular (tensor-product) longitude-latitude grid.

    Inside the source's grid of centres, values are bilinear in longitude and latitude
    (degrees). Longitudes wrap: a global source (its columns close around the globe) is
    interpolated across its first and last columns, and source and destination may use
    different longitude conventions (0..360, -180..180). Latitude may increase or decrease.

    Fall-backs, both to the **nearest valid source point** on the sphere (cKDTree on unit
    vectors): (1) a destination point whose cell has a NaN corner (e.g. a land-only source
    at a coast); (2) a destination point beyond the outermost source centres (nearest
    neighbour beyond the data's edge).

    A point is *covered* when it lies inside the source's extent, taken as the cells around
    the source centres: half a grid spacing beyond the outermost centres (latitudes clipped
    to +-90); for a global source whose outermost rows lie within one spacing of a pole
    (e.g. a Gaussian grid), the polar cap beyond them is covered too.

    Parameters
    ----------
    src_lon_1d : array_like, shape (nlon,)
        Source longitudes (degrees east), distinct, in any order and either convention; a
        duplicate meridian such as both -180 and 180 is dropped (the first column kept).
    src_lat_1d : array_like, shape (nlat,)
        Source latitudes (degrees north), strictly increasing or strictly decreasing.
    field_2d : array_like, shape (nlat, nlon)
        Source values; NaN (or masked) where missing.
    dst_lon, dst_lat : array_like
        Destination coordinates, any shape, both the same.

    Returns
    -------
    values : numpy.ndarray
        Float64, shape of `dst_lon`. NaN only where the destination coordinates are NaN.
    covered : numpy.ndarray of bool
        Shape of `dst_lon`; False for points outside the source's extent (their values come
        from the nearest source point), so the caller can warn that a region is not covered.

    Raises
    ------
    InputError
        Malformed coordinates (non-finite, duplicated, not monotonic latitudes, outside
        +-90), a field of the wrong shape, or a field with no finite value.
    """
    src_lon = _float_array(src_lon_1d, "src_lon_1d")
    src_lat = _float_array(src_lat_1d, "src_lat_1d")
    field = _float_array(field_2d, "field_2d")
    for key, arr in (("src_lon_1d", src_lon), ("src_lat_1d", src_lat)):
        if arr.ndim != 1 or arr.size < 2:
            raise InputError(f"{key}: must be a 1-D array of at least two coordinates")
        if not np.all(np.isfinite(arr)):
            raise InputError(f"{key}: coordinates must be finite")
    if field.shape != (src_lat.size, src_lon.size):
        raise InputError(
            f"field_2d: shape {field.shape} does not match (nlat, nlon) = "
            f"({src_lat.size}, {src_lon.size}); transpose the field so latitude comes first"
        )
    if np.any(np.abs(src_lat) > 90.0):
        raise InputError("src_lat_1d: latitudes must lie within [-90, 90] degrees north")
    dlat = np.diff(src_lat)
    if np.all(dlat < 0.0):
        src_lat, field = src_lat[::-1], field[::-1, :]
        dlat = -dlat[::-1]
    elif not np.all(dlat > 0.0):
        i = int(np.flatnonzero(dlat * np.sign(dlat[0] or 1.0) <= 0.0)[0]) + 1
        raise InputError(
            f"src_lat_1d: latitudes must be strictly monotonic; index {i} breaks the order"
        )
    lon_arc, cols, is_global = _prepare_lon(src_lon)
    field = field[:, cols]
    dlon = np.diff(lon_arc)
    if is_global:  # close the circle: repeat the first column 360 degrees on
        lon_arc = np.concatenate([lon_arc, [lon_arc[0] + 360.0]])
        field = np.concatenate([field, field[:, :1]], axis=1)

    dst_lon_a, dst_lat_a = _check_dst(dst_lon, dst_lat)
    shape = dst_lon_a.shape
    x_in = dst_lon_a.reshape(-1)
    y = dst_lat_a.reshape(-1)
    finite = np.isfinite(x_in) & np.isfinite(y)

    # covered: half a spacing beyond the outermost centres
    lat_lo = max(src_lat[0] - 0.5 * dlat[0], -90.0)
    lat_hi = min(src_lat[-1] + 0.5 * dlat[-1], 90.0)
    if is_global:  # e.g. Gaussian grids: the polar caps beyond the last row belong to it
        if src_lat[0] + 90.0 <= dlat[0] * (1.0 + 1e-9):
            lat_lo = -90.0
        if 90.0 - src_lat[-1] <= dlat[-1] * (1.0 + 1e-9):
            lat_hi = 90.0
    if is_global:
        west = lon_arc[0]
        x = west + np.mod(x_in - west, 360.0)
        lon_cov = np.ones_like(x, dtype=bool)
        in_lon = np.ones_like(x, dtype=bool)
    else:
        west = lon_arc[0] - 0.5 * dlon[0]
        east = lon_arc[-1] + 0.5 * dlon[-1]
        x = west + np.mod(x_in - west, 360.0)
        lon_cov = x <= east
        in_lon = (x >= lon_arc[0]) & (x <= lon_arc[-1])
    covered = finite & lon_cov & (y >= lat_lo) & (y <= lat_hi)
    inside = finite & in_lon & (y >= src_lat[0]) & (y <= src_lat[-1])

    values = np.full(x.shape, np.nan)
    xi, yi = x[inside], y[inside]
    j = np.clip(np.searchsorted(lon_arc, xi, side="right") - 1, 0, lon_arc.size - 2)
    i = np.clip(np.searchsorted(src_lat, yi, side="right") - 1, 0, src_lat.size - 2)
    u = (xi - lon_arc[j]) / (lon_arc[j + 1] - lon_arc[j])
    t = (yi - src_lat[i]) / (src_lat[i + 1] - src_lat[i])
    v00, v01 = field[i, j], field[i, j + 1]
    v10, v11 = field[i + 1, j], field[i + 1, j + 1]
    values[inside] = (
        (1.0 - t) * ((1.0 - u) * v00 + u * v01) + t * ((1.0 - u) * v10 + u * v11)
    )

    need = finite & ~np.isfinite(values)  # NaN corner, or beyond the outermost centres
    if np.any(need):
        lon2, lat2 = np.meshgrid(lon_arc, src_lat)
        nearest = _NearestValid(lon2.reshape(-1), lat2.reshape(-1), field.reshape(-1), "field_2d")
        values[need] = nearest.query(x[need], y[need])[0]
    return values.reshape(shape), covered.reshape(shape)


# ----------------------------------------------------------------------------- scattered points
def interp_points(src_lon, src_lat, values, dst_lon, dst_lat, *, max_distance_km=None):
    """Nearest-neighbour values from a curvilinear or unstructured source, on the sphere.

    Each destination point takes the value of the nearest source point with a finite value,
    nearest in great-circle distance (a cKDTree on 3-D unit vectors; the chord is monotonic
    in the great-circle distance ``d = 2 R asin(chord / 2)``, so the nearest by chord is the
    nearest on the sphere).

    Parameters
    ----------
    src_lon, src_lat, values : array_like
        Source longitudes, latitudes (degrees) and values, all the same shape (any shape:
        2-D curvilinear or 1-D list of points). NaN or masked values are skipped.
    dst_lon, dst_lat : array_like
        Destination coordinates, any shape, both the same.
    max_distance_km : float, optional
        A destination point is *covered* when its nearest valid source point is within this
        great-circle distance. Default: twice the median nearest-neighbour spacing of the
        valid source points (infinite when there is only one).

    Returns
    -------
    values : numpy.ndarray
        Float64, shape of `dst_lon`; NaN where the destination coordinates are NaN.
    covered : numpy.ndarray of bool
        Shape of `dst_lon`; False where the nearest valid source point is farther than
        `max_distance_km`.

    Raises
    ------
    InputError
        Mismatched shapes, no finite source value, or a bad `max_distance_km`.
    """
    slon = _float_array(src_lon, "src_lon").reshape(-1)
    slat = _float_array(src_lat, "src_lat").reshape(-1)
    sval = _float_array(values, "values").reshape(-1)
    if not (slon.size == slat.size == sval.size):
        raise InputError(
            f"src_lon, src_lat, values: must have the same number of points, got {slon.size}, "
            f"{slat.size} and {sval.size}"
        )
    _check_lat(slat, "src_lat")
    dlon, dlat = _check_dst(dst_lon, dst_lat)
    nearest = _NearestValid(slon, slat, sval, "values")
    if max_distance_km is None:
        if nearest.values.size > 1:
            chord = nearest.tree.query(nearest.tree.data, k=2)[0][:, 1]
            max_d = 2.0 * float(np.median(geodesy.chord_to_km(chord)))
        else:
            max_d = math.inf
    else:
        if not (_is_number(max_distance_km) and max_distance_km > 0):
            raise InputError(f"max_distance_km: must be a number > 0, got {max_distance_km!r}")
        max_d = float(max_distance_km)
    flat_lon, flat_lat = dlon.reshape(-1), dlat.reshape(-1)
    finite = np.isfinite(flat_lon) & np.isfinite(flat_lat)
    out = np.full(flat_lon.shape, np.nan)
    covered = np.zeros(flat_lon.shape, dtype=bool)
    if np.any(finite):
        val, dist = nearest.query(flat_lon[finite], flat_lat[finite])
        out[finite] = val
        covered[finite] = dist <= max_d
    return out.reshape(dlon.shape), covered.reshape(dlon.shape)


# ----------------------------------------------------------------------------- anomalies
def bias_anomaly(model_clim, reference_clim, scale=1.0):
    """Anomaly that offsets a model's climatological bias against a reference.

    ``A = -scale * (model_clim - reference_clim)`` (a definition): with ``scale = 1`` adding
    ``A`` to the model's state moves its climatology onto the reference.

    Parameters
    ----------
    model_clim, reference_clim : array_like
        Model and reference climatologies on the same grid, same units (e.g. K);
        broadcastable to each other.
    scale : float, optional
        Fraction of the bias to remove (finite; default 1.0).

    Returns
    -------
    numpy.ndarray
        Float64 anomaly, the broadcast shape; NaN where either input is NaN.
    """
    if not (_is_number(scale, (Real, np.floating, np.integer)) and math.isfinite(float(scale))):
        raise InputError(f"scale: must be a finite number, got {scale!r}")
    m = _float_array(model_clim, "model_clim")
    r = _float_array(reference_clim, "reference_clim")
    try:
        return -float(scale) * (m - r)
    except ValueError:
        raise InputError(
            f"model_clim, reference_clim: shapes {m.shape} and {r.shape} do not match; "
            "interpolate the reference onto the model grid first"
        ) from None


def donor_blend(old, donor, weight):
    """Blend a model state towards a donor state: ``(1 - w) old + w donor`` (a definition).

    Where ``w == 0`` the result is exactly (bitwise) `old`, where ``w == 1`` exactly
    `donor`; in between the blend is computed in float64.

    Parameters
    ----------
    old, donor : array_like
        Current and donor values, broadcastable to each other and to `weight`.
    weight : array_like
        Blend weight in [0, 1].

    Returns
    -------
    numpy.ndarray
        The broadcast shape, with dtype ``numpy.result_type(old, donor)`` when that is a
        floating type (so float32 stays float32), float64 otherwise.

    Raises
    ------
    InputError
        If a weight is NaN or outside [0, 1], or the shapes do not broadcast.
    """
    o, d = np.asarray(old), np.asarray(donor)
    w = _float_array(weight, "weight")
    if np.any(~np.isfinite(w)) or np.any((w < 0.0) | (w > 1.0)):
        raise InputError("weight: blend weights must be finite and within [0, 1]")
    dtype = np.result_type(o, d)
    if not np.issubdtype(dtype, np.floating):
        dtype = np.dtype(np.float64)
    try:
        o_b, d_b, w_b = np.broadcast_arrays(o.astype(dtype), d.astype(dtype), w)
    except ValueError:
        raise InputError(
            f"old, donor, weight: shapes {o.shape}, {d.shape} and {w.shape} do not broadcast"
        ) from None
    with np.errstate(invalid="ignore", over="ignore"):
        mix = ((1.0 - w_b) * o_b.astype(np.float64) + w_b * d_b.astype(np.float64)).astype(dtype)
    return np.where(w_b == 0.0, o_b, np.where(w_b == 1.0, d_b, mix))


# ----------------------------------------------------------------------------- noise
def member_seed(recipe_seed, member_name: str) -> int:
    """A per-member random seed, the same on every machine.

    ``seed = int(sha256(b"initgen-member-seed\\0" + str(recipe_seed) + b"\\0" + name)[:8])``
    (big-endian, top bit cleared), i.e. a non-negative integer below 2**63 that fits a signed
    64-bit integer (netCDF and JSON friendly). SHA-256 is FIPS 180-4.

    Parameters
    ----------
    recipe_seed : int
        The recipe's seed (a non-negative integer).
    member_name : str
        The member's name (non-empty).

    Returns
    -------
    int
    """
    if not (_is_number(recipe_seed, Integral) and recipe_seed >= 0):
        raise InputError(f"seed: must be a non-negative integer, got {recipe_seed!r}")
    if not isinstance(member_name, str) or not member_name:
        raise InputError(f"member name: must be a non-empty string, got {member_name!r}")
    msg = b"initgen-member-seed\0" + str(int(recipe_seed)).encode("ascii") + b"\0" + (
        member_name.encode("utf-8")
    )
    return int.from_bytes(hashlib.sha256(msg).digest()[:8], "big") & (2**63 - 1)


def correlated_noise(lon, lat, sigma_K, length_km, seed, *, n_features: int = DEFAULT_FEATURES):
    """Spatially correlated Gaussian noise with a Gaussian correlation function.

    Target covariance ``C(d) = sigma^2 exp(-d^2 / (2 L^2))``, ``d`` the great-circle distance
    (km) on a sphere of radius R = 6371.0 km.

    Method: random Fourier features (Rahimi and Recht 2007, "Random features for large-scale
    kernel machines", NIPS 20, Algorithm 1; the spectral representation of a stationary
    covariance by Bochner's theorem). Points are embedded in 3-D as ``x = R u`` (``u`` the unit
    vector, km). With ``M`` wavevectors ``w_m ~ N(0, I / L^2)`` (km-1) and independent
    ``a_m, b_m ~ N(0, 1)``::

        noise(x) = sigma * sqrt(1 / M) * sum_m [a_m cos(w_m . x) + b_m sin(w_m . x)]

    Given the wavevectors this is exactly Gaussian with variance ``sigma^2`` at every point
    (``cos^2 + sin^2 = 1``) and covariance ``sigma^2 mean_m cos(w_m . (x - y))``, whose
    expectation over the wavevectors is ``sigma^2 exp(-c^2 / (2 L^2))`` with ``c`` the chord
    ``|x - y|`` (the characteristic function of the Gaussian). For one realisation the
    correlation differs from that by a Monte Carlo error of order ``1 / sqrt(M)``.

    Approximation: the chord ``c = 2 R sin(d / (2 R))`` is used in place of the great-circle
    distance ``d``; the relative difference in the exponent is about ``d^2 / (12 R^2)``
    (0.2 % at d = 1000 km), negligible where the correlation is not already ~0 when
    ``L << R``. A bonus of the chord: the covariance is positive definite on the sphere.

    The value at a point depends only on the point, the seed and `n_features`, not on which
    other points are passed: a field computed block by block equals the field computed at
    once.

    Parameters
    ----------
    lon, lat : array_like
        Point coordinates in degrees, same shape (any shape).
    sigma_K : float
        Standard deviation (K, >= 0).
    length_km : float
        Correlation length L in km (> 0).
    seed : int
        Non-negative integer seed (see :func:`member_seed`). The draws come from
        ``numpy.random.Generator(PCG64(seed))``, the same on every machine.
    n_features : int, optional
        Number of Fourier features M (default 1024). Cost O(N M).

    Returns
    -------
    numpy.ndarray
        Float64 noise in K, shape of `lon`; NaN where a coordinate is NaN.

    Notes
    -----
    Reproducibility: the random draws are bit-identical on every platform for a given NumPy
    version (PCG64 and the Generator's normal sampler are platform-independent). The result
    is bit-identical run to run on one machine; across machines it may differ in the last
    bits because ``cos`` and ``sin`` come from the platform's maths library.
    """
    if not (_is_number(sigma_K) and math.isfinite(sigma_K) and sigma_K >= 0):
        raise InputError(f"sigma_K: noise standard deviation must be a finite number >= 0, got {sigma_K!r}")
    if not (_is_number(length_km) and math.isfinite(length_km) and length_km > 0):
        raise InputError(f"length_km: correlation length must be a finite number > 0, got {length_km!r}")
    if not (_is_number(seed, Integral) and seed >= 0):
        raise InputError(f"seed: must be a non-negative integer, got {seed!r}")
    if not (_is_number(n_features, Integral) and n_features >= 1):
        raise InputError(f"n_features: must be a positive integer, got {n_features!r}")
    lon_a = _float_array(lon, "lon")
    lat_a = _float_array(lat, "lat")
    if lon_a.shape != lat_a.shape:
        raise InputError(f"lon, lat: must have the same shape, got {lon_a.shape} and {lat_a.shape}")
    _check_lat(lat_a, "lat")

    m = int(n_features)
    rng = np.random.Generator(np.random.PCG64(int(seed)))
    w = rng.standard_normal((3, m)) / float(length_km)  # km-1
    a = rng.standard_normal(m)
    b = rng.standard_normal(m)

    flat_lon, flat_lat = lon_a.reshape(-1), lat_a.reshape(-1)
    out = np.full(flat_lon.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(flat_lon) & np.isfinite(flat_lat))
    if ok.size:
        xyz = EARTH_RADIUS_KM * _unit_vectors(flat_lon[ok], flat_lat[ok])
        amp = float(sigma_K) * math.sqrt(1.0 / m)
        res = np.empty(ok.size)
        chunk = max(1, (1 << 21) // m)  # bound memory: ~16 MB per temporary
        for s in range(0, ok.size, chunk):
            p = xyz[s:s + chunk]
            # elementwise (no BLAS) so a point's value does not depend on the chunking
            phase = p[:, 0:1] * w[0] + p[:, 1:2] * w[1] + p[:, 2:3] * w[2]
            res[s:s + chunk] = (np.cos(phase) * a + np.sin(phase) * b).sum(axis=1)
        out[ok] = amp * res
    return out.reshape(lon_a.shape)
