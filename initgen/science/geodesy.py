"""Spherical-Earth geometry helpers: longitude wrapping, great-circle distance, cell areas.

Everything here is pure numpy and works on a sphere of radius :data:`EARTH_RADIUS_KM`.
Distances on the sphere differ from distances on the WGS84 ellipsoid by up to about 0.5 %
(at most about 0.56 % for north-south distances near the equator, about 0.25 % at
mid-latitudes), which is far below what matters for tapering a temperature anomaly.

No function in this module reads or writes files.
"""

from __future__ import annotations

import numpy as np

from initgen.science.constants import EARTH_RADIUS_M

__all__ = [
    "EARTH_RADIUS_KM",
    "smallest_lon_arc",
    "circular_gaps",
    "wrap_lon",
    "great_circle_km",
    "lonlat_to_unit",
    "chord_to_km",
    "km_to_chord",
    "point_arc_km",
    "cell_areas_regular",
]

#: Mean radius of the Earth in km: :data:`initgen.science.constants.EARTH_RADIUS_M` (the one home
#: of the value, IUGG mean radius R1 = 6371.0088 km rounded; Moritz 2000) in km.
EARTH_RADIUS_KM = EARTH_RADIUS_M / 1000.0


def wrap_lon(lon, west=-180.0):
    """Wrap longitudes (degrees) into the half-open interval ``[west, west + 360)``.

    Parameters
    ----------
    lon : array_like
        Longitudes in degrees, any convention and any shape. NaN stays NaN.
    west : float, default -180.0
        Western end of the target interval, e.g. ``-180.0`` or ``0.0``.

    Returns
    -------
    numpy.ndarray
        Float64 array of the shape of ``lon`` with values in ``[west, west + 360)``.

    Examples
    --------
    >>> wrap_lon([190.0, -180.0, 180.0, 360.0], west=-180.0).tolist()
    [-170.0, -180.0, -180.0, 0.0]
    """
    lon = np.asarray(lon, dtype=np.float64)
    out = np.mod(lon - west, 360.0)
    # np.mod of a tiny negative number can round up to exactly 360
    out = np.where(out >= 360.0, 0.0, out)
    return out + west


def great_circle_km(lon1, lat1, lon2, lat2):
    """Great-circle distance in km between points given in degrees (broadcasting).

    Uses the haversine formula, which is well conditioned for small distances; the
    argument of the arcsine is clipped to 1 so antipodal points give ``pi * R``.

    Parameters
    ----------
    lon1, lat1, lon2, lat2 : array_like
        Longitudes and latitudes in degrees; any shapes that broadcast together.

    Returns
    -------
    numpy.ndarray
        Distances in km on a sphere of radius :data:`EARTH_RADIUS_KM`.

    References
    ----------
    Sinnott, R. W. (1984). Virtues of the haversine. Sky and Telescope 68(2), 159.
    """
    lam1, phi1, lam2, phi2 = (np.radians(np.asarray(a, dtype=np.float64))
                              for a in (lon1, lat1, lon2, lat2))
    h = (np.sin(0.5 * (phi2 - phi1)) ** 2
         + np.cos(phi1) * np.cos(phi2) * np.sin(0.5 * (lam2 - lam1)) ** 2)
    return 2.0 * EARTH_RADIUS_KM * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))


def lonlat_to_unit(lon, lat):
    """Unit vectors (Earth-centred, Earth-fixed axes) for points given in degrees.

    The x axis points to (0E, 0N), y to (90E, 0N) and z to the North Pole.

    Parameters
    ----------
    lon, lat : array_like
        Longitudes and latitudes in degrees (any convention), broadcastable.

    Returns
    -------
    numpy.ndarray
        Float64 array of shape ``broadcast(lon, lat).shape + (3,)``.

    References
    ----------
    Gade, K. (2010). A non-singular horizontal position representation. The Journal of
    Navigation 63(3), 395-417 (the "n-vector").
    """
    lam = np.radians(np.asarray(lon, dtype=np.float64))
    phi = np.radians(np.asarray(lat, dtype=np.float64))
    lam, phi = np.broadcast_arrays(lam, phi)
    out = np.empty(lam.shape + (3,), dtype=np.float64)
    cphi = np.cos(phi)
    out[..., 0] = cphi * np.cos(lam)
    out[..., 1] = cphi * np.sin(lam)
    out[..., 2] = np.sin(phi)
    return out


def chord_to_km(chord):
    """Convert a chord length between unit vectors to a great-circle distance in km.

    Parameters
    ----------
    chord : array_like
        Straight-line distance between two points on the unit sphere (0 to 2).
        ``inf`` stays ``inf``.

    Returns
    -------
    numpy.ndarray
        ``2 R asin(chord / 2)`` in km, with the chord clipped to [0, 2].
    """
    chord = np.asarray(chord, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        km = 2.0 * EARTH_RADIUS_KM * np.arcsin(np.clip(0.5 * chord, 0.0, 1.0))
    return np.where(np.isinf(chord), np.inf, km)


def km_to_chord(km):
    """Inverse of :func:`chord_to_km`: chord length on the unit sphere for a distance in km.

    Distances beyond half the circumference give the diameter, 2.
    """
    km = np.asarray(km, dtype=np.float64)
    angle = np.clip(km / EARTH_RADIUS_KM, 0.0, np.pi)
    return 2.0 * np.sin(0.5 * angle)


def point_arc_km(p, a, b):
    """Great-circle distance in km from points to great-circle arcs, all as unit vectors.

    Parameters
    ----------
    p, a, b : array_like, shape (..., 3)
        Unit vectors of the points and of the two ends of each arc (the shorter arc from
        ``a`` to ``b``); broadcastable.

    Returns
    -------
    numpy.ndarray
        Distance in km from ``p`` to the nearest point of the arc: the cross-track
        distance when the foot of the perpendicular great circle falls within the arc,
        otherwise the distance to the nearer end. Degenerate arcs (``a == b``) give the
        distance to ``a``.

    References
    ----------
    Gade, K. (2010). A non-singular horizontal position representation. The Journal of
    Navigation 63(3), 395-417 (vector formulation on the sphere: the arc's pole
    ``n = a x b``, cross-track angle ``asin(|p . n|)`` for unit ``n``).
    """
    p = np.asarray(p, dtype=np.float64)
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    n = np.cross(a, b)
    nn = np.sqrt(np.sum(n * n, axis=-1))
    ok = nn > 1e-15
    nhat = n / np.where(ok, nn, 1.0)[..., None]
    s = np.sum(p * nhat, axis=-1)
    within = ok & (np.sum(np.cross(a, p) * nhat, axis=-1) >= 0.0) & (
        np.sum(np.cross(p, b) * nhat, axis=-1) >= 0.0)
    cross_angle = np.arcsin(np.clip(np.abs(s), 0.0, 1.0))
    ca = np.sqrt(np.sum((p - a) ** 2, axis=-1))
    cb = np.sqrt(np.sum((p - b) ** 2, axis=-1))
    end_angle = 2.0 * np.arcsin(np.clip(0.5 * np.minimum(ca, cb), 0.0, 1.0))
    return EARTH_RADIUS_KM * np.where(within, cross_angle, end_angle)


def _bounds_1d(centres, clip=None, period=None):
    """Cell bounds halfway between centres, ends extrapolated by half a spacing."""
    c = np.asarray(centres, dtype=np.float64)
    if c.ndim != 1 or c.size < 2:
        raise ValueError("need a 1-D coordinate with at least two values")
    if period is not None:
        # make longitudes monotonic in their own direction (e.g. 350, 355, 0, 5)
        d = np.diff(c)
        sign = 1.0 if np.median(d) >= 0 else -1.0
        d = np.mod(sign * d, period) * sign
        c = c[0] + np.concatenate(([0.0], np.cumsum(d)))
    mid = 0.5 * (c[1:] + c[:-1])
    b = np.concatenate(([c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]))
    if period is not None:
        gap = period - abs(c[-1] - c[0])
        spacing = np.max(np.abs(np.diff(c)))
        if 0.0 < gap <= 1.5 * spacing:
            # global grid: the outer bounds meet halfway across the wrap-around gap
            sign = 1.0 if c[-1] >= c[0] else -1.0
            b[0] = c[0] - sign * 0.5 * gap
            b[-1] = b[0] + sign * period
    if clip is not None:
        b = np.clip(b, -clip, clip)
    return b


def cell_areas_regular(lon_1d, lat_1d):
    """Areas (m^2) of the cells of a regular lon/lat grid on the sphere.

    Cell bounds lie halfway between neighbouring centres; the outermost bounds are
    extrapolated by half a spacing, latitude bounds are clipped to +-90 degrees, and on
    a global grid (the wrap-around gap equals about one spacing) the longitude bounds
    span exactly 360 degrees. Each cell is bounded by two meridians and two parallels.

    Parameters
    ----------
    lon_1d : array_like, shape (nlon,)
        Cell-centre longitudes in degrees (any convention, increasing or decreasing,
        may cross the wrap point, e.g. ``350, 355, 0, 5``).
    lat_1d : array_like, shape (nlat,)
        Cell-centre latitudes in degrees, increasing or decreasing.

    Returns
    -------
    numpy.ndarray, shape (nlat, nlon)
        ``R^2 * |dlon| * |sin(lat_n) - sin(lat_s)|`` in m^2 with R = 6371.0 km.

    References
    ----------
    Snyder, J. P. (1987). Map Projections - A Working Manual. U.S. Geological Survey
    Professional Paper 1395, pp. 76-85 (the cylindrical equal-area projection,
    ``y = R sin(lat)``, from which the area of a lon/lat rectangle follows).
    """
    dsin, dlon = cell_area_factors(lon_1d, lat_1d)
    r_m = EARTH_RADIUS_KM * 1.0e3
    return r_m * r_m * dsin[:, None] * dlon[None, :]


def cell_area_factors(lon_1d, lat_1d):
    """The two 1-D factors of :func:`cell_areas_regular`: ``|sin(lat_n) - sin(lat_s)|`` per
    row and ``|dlon|`` in radians per column, so that area = R^2 * outer(dsin, dlon).

    A regular grid's cell areas are separable; callers that need the areas of a part of a
    large grid multiply the two factors for that part only.
    """
    blon = _bounds_1d(lon_1d, period=360.0)
    blat = _bounds_1d(lat_1d, clip=90.0)
    dlon = np.abs(np.radians(np.diff(blon)))
    dsin = np.abs(np.diff(np.sin(np.radians(blat))))
    return dsin, dlon


def cell_areas_from_bounds_1d(lon_bounds, lat_bounds):
    """Cell areas (in units of R^2) of a regular lon/lat grid from CF cell bounds.

    Parameters
    ----------
    lon_bounds : array_like, shape (nlon, 2)
        West and east edge of each column, degrees (CF ``bounds`` of the longitude).
    lat_bounds : array_like, shape (nlat, 2)
        South and north edge of each row, degrees.

    Returns
    -------
    numpy.ndarray, shape (nlat, nlon)
        ``|dlon| * |sin(lat_2) - sin(lat_1)|`` (dlon in radians; a pair across the wrap point
        such as (175, -175) is 10 degrees wide);
        multiply by R^2 for m^2.

    References
    ----------
    Snyder, J. P. (1987). Map Projections - A Working Manual. U.S. Geological Survey
    Professional Paper 1395, pp. 76-85 (the cylindrical equal-area projection, ``y = R sin(lat)``,
    from which the area of a cell bounded by two meridians and two parallels follows).
    """
    blon = np.asarray(lon_bounds, dtype=np.float64)
    blat = np.asarray(lat_bounds, dtype=np.float64)
    w = np.abs(blon[:, 1] - blon[:, 0])
    # a pair written across the wrap point (175, -175) is 10 degrees wide, not 350; cells wider
    # than 180 degrees exist only as one column spanning the globe (width exactly 360)
    w = np.where((w > 180.0) & (w < 360.0), 360.0 - w, np.minimum(w, 360.0))
    dlon = np.radians(w)
    dsin = np.abs(np.sin(np.radians(blat[:, 1])) - np.sin(np.radians(blat[:, 0])))
    return dsin[:, None] * dlon[None, :]


def spherical_polygon_area_m2(lon_corners, lat_corners, radius_km=None):
    """Areas (m^2) of quadrilaterals with great-circle edges on a sphere (CF 2-D cell corners).

    Each cell ``(lon[..., k], lat[..., k])``, k = 0..3, is split into the triangles (0, 1, 2)
    and (0, 2, 3); the solid angle of each triangle of unit vectors a, b, c is
    ``2 atan2(a . (b x c), 1 + a.b + b.c + c.a)`` (signed by orientation), and the cell's area is
    ``R^2 |Omega_1 + Omega_2|``, so the corners may go either way round.

    Parameters
    ----------
    lon_corners, lat_corners : array_like, shape (..., 4)
        Corner longitudes and latitudes in degrees (CF ``bounds`` of 2-D coordinates).
    radius_km : float, optional
        Sphere radius; default :data:`EARTH_RADIUS_KM`.

    Returns
    -------
    numpy.ndarray, shape (...)

    References
    ----------
    Van Oosterom, A. and Strackee, J. (1983). The solid angle of a plane triangle. IEEE
    Transactions on Biomedical Engineering, BME-30(2), 125-126, eq. (8).
    """
    r_m = (EARTH_RADIUS_KM if radius_km is None else float(radius_km)) * 1.0e3
    p = lonlat_to_unit(np.asarray(lon_corners, float), np.asarray(lat_corners, float))

    def omega(a, b, c):
        num = np.sum(a * np.cross(b, c), axis=-1)
        den = 1.0 + np.sum(a * b, axis=-1) + np.sum(b * c, axis=-1) + np.sum(c * a, axis=-1)
        return 2.0 * np.arctan2(num, den)

    a, b, c, d = (p[..., k, :] for k in range(4))
    return r_m * r_m * np.abs(omega(a, b, c) + omega(a, c, d))


def circular_gaps(lo, hi):
    """Gaps between longitude intervals sorted by their west ends, and the gap across the wrap.

    Parameters
    ----------
    lo : numpy.ndarray
        West ends, degrees east, sorted ascending within one 360 degree span.
    hi : numpy.ndarray
        East ends in the same order, each at least the east ends before it (a running maximum);
        for points, ``hi = lo``.

    Returns
    -------
    numpy.ndarray
        ``n`` gaps in degrees: ``lo[i + 1] - hi[i]`` for ``i < n - 1``, then
        ``lo[0] + 360 - hi[-1]``, the gap from the last interval round to the first.

    Examples
    --------
    >>> circular_gaps(np.array([0.0, 90.0, 300.0]), np.array([10.0, 100.0, 310.0])).tolist()
    [80.0, 200.0, 50.0]
    """
    return np.append(lo[1:] - hi[:-1], lo[0] + 360.0 - hi[-1])


def smallest_lon_arc(lo, hi):
    """The smallest circular longitude arc covering intervals [lo_i, hi_i] (degrees, one 360
    degree span, hi_i >= lo_i): the complement of the largest gap between them.

    Parameters
    ----------
    lo, hi : array_like
        Interval ends, degrees east (points: lo = hi).

    Returns
    -------
    tuple of float
        ``(start, width)``: the arc runs east from ``start`` over ``width`` degrees;
        ``(-180, 360)`` when no gap is left.
    """
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    order = np.argsort(lo)
    lo, hi = lo[order], np.maximum.accumulate(hi[order])
    gaps = circular_gaps(lo, hi)    # between merged intervals, plus the gap across the wrap point
    k = int(np.argmax(gaps))
    if gaps[k] <= 0.0:
        return -180.0, 360.0
    return float(lo[(k + 1) % len(lo)]), float(360.0 - gaps[k])
