"""Hard masks, boundary distances and tapered weights on any lon/lat grid.

* :func:`hard_mask` - which points lie in the region (regionmask's edge convention);
* :func:`boundary_distance_km` - great-circle distance to the region's boundary;
* :func:`taper_weight` - 1 in the region, raised-cosine decay across the boundary.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

from initgen.errors import InputError
from initgen.science import geodesy
from initgen.science.regions.boundary import _in_arc, _shape_of
from initgen.text import number

#: Allowed values of ``placement`` in :func:`taper_weight`.
PLACEMENTS = ("outside", "inside", "centred")

# regionmask's edge convention: a grid point belongs to a region when the point shifted by
# these tiny offsets (west and south) lies strictly inside it; points at 90S are moved
# just north of the pole instead (regionmask 0.13, core/mask.py).
_LON_OFFSET = 1.0e-8
_LAT_OFFSET = 1.0e-10

# Spacing (km) at which region boundaries are sampled before the nearest-point search.
_SPACING_KM = 1.0


@dataclass
class _Grid:
    """Query points: the output shape, and either the 1-D axes or flat lon/lat."""

    shape: tuple
    axes: tuple = None          # (lon1d, lat1d) for a regular grid
    lon: np.ndarray = None      # flat longitudes otherwise
    lat: np.ndarray = None

    @property
    def size(self):
        return int(np.prod(self.shape))


def _grid(lon, lat, regular):
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    if regular:
        if lon.ndim == 1 and lat.ndim == 1:
            return _Grid(shape=(lat.size, lon.size), axes=(lon, lat))
        if lon.ndim != 2 or lat.shape != lon.shape:
            raise InputError(f"regular=True needs 2-D lon and lat of the same shape (or the "
                             f"1-D axes), got shapes {lon.shape} and {lat.shape}")
        lon1, lat1 = lon[0, :], lat[:, 0]
        if not ((lon == lon1).all() and (lat == lat1[:, None]).all()):
            raise InputError("regular=True but lon varies along the first axis or lat along "
                             "the last; pass regular=False for curvilinear grids")
        return _Grid(shape=lon.shape, axes=(lon1, lat1))
    if lon.shape != lat.shape:
        try:
            lon, lat = np.broadcast_arrays(lon, lat)
        except ValueError:
            raise InputError(f"lon and lat must have the same shape, got {lon.shape} and "
                             f"{lat.shape}")
    return _Grid(shape=lon.shape, lon=lon.reshape(-1), lat=lat.reshape(-1))


def _query_lon_lat(lon, lat):
    """Shift points by regionmask's edge offsets (after wrapping lon to [-180, 180))."""
    q_lon = geodesy.wrap_lon(lon) - _LON_OFFSET
    lat = np.asarray(lat, dtype=np.float64)
    q_lat = np.where(np.isclose(lat, -90.0), -90.0 + _LAT_OFFSET, lat - _LAT_OFFSET)
    return q_lon, q_lat


def _scanline_mask(edges, lon1d, lat1d):
    """Even-odd scanline fill of a regular grid (one pass per crossing, no Python loop)."""
    q_lon, q_lat = _query_lon_lat(lon1d, lat1d)
    nlat, nlon = q_lat.size, q_lon.size
    out = np.zeros((nlat, nlon), dtype=bool)
    if len(edges) == 0:
        return out
    row_order = np.argsort(q_lat, kind="stable")
    qs = q_lat[row_order]
    x0, y0, x1, y1 = edges.T
    ylo, yhi = np.minimum(y0, y1), np.maximum(y0, y1)
    r0 = np.searchsorted(qs, ylo, side="left")
    r1 = np.searchsorted(qs, yhi, side="left")      # rows with ylo <= q < yhi
    count = r1 - r0
    total = int(count.sum())
    if total == 0:
        return out
    e = np.repeat(np.arange(len(edges)), count)
    r = np.arange(total) - np.repeat(np.cumsum(count) - count, count) + r0[e]
    q = qs[r]
    xc = x0[e] + (q - y0[e]) * (x1[e] - x0[e]) / (y1[e] - y0[e])
    col_order = np.argsort(q_lon, kind="stable")
    ls = q_lon[col_order]
    # a crossing at x counts for every point east of it (ray cast towards the west)
    p = np.searchsorted(ls, xc, side="right")
    rmin, rmax = int(r.min()), int(r.max()) + 1
    nr = rmax - rmin
    toggles = np.bincount((r - rmin) * (nlon + 1) + p, minlength=nr * (nlon + 1)) & 1
    parity = np.bitwise_xor.accumulate(toggles.astype(np.uint8).reshape(nr, nlon + 1),
                                       axis=1)[:, :nlon].astype(bool)
    out[np.ix_(row_order[rmin:rmax], col_order)] = parity
    return out


def _mask_on(grid, shape):
    if grid.axes is not None:
        return _scanline_mask(shape.edges, *grid.axes)
    out = np.zeros(grid.size, dtype=bool)
    lo, hi = shape.lat_range
    cand = (grid.lat >= lo - 1e-6) & (grid.lat <= hi + 1e-6)
    idx = np.flatnonzero(cand)
    idx = idx[_in_arc(grid.lon[idx], *shape.lon_arc, margin=1e-6)]
    if idx.size:
        q_lon, q_lat = _query_lon_lat(grid.lon[idx], grid.lat[idx])
        out[idx] = shapely.contains_xy(shape.periodic, q_lon, q_lat)
    return out.reshape(grid.shape)


def hard_mask(lon, lat, geom, *, regular=False):
    """Which grid points lie inside a region.

    Follows regionmask's convention for points on the boundary: a point belongs to the
    region when the point moved 1e-8 degrees west and 1e-10 degrees south lies inside
    (points at 90S are moved just north instead), so masks equal regionmask's own.

    Parameters
    ----------
    lon, lat : array_like
        Same-shape arrays in degrees (any longitude convention): 2-D for regular or
        curvilinear grids, 1-D for point lists. With ``regular=True`` the 1-D axes
        (lengths nlon and nlat) may be passed instead.
    geom : shapely.Polygon or shapely.MultiPolygon
        The region (lon/lat degrees, any convention).
    regular : bool, default False
        True when lon varies only along the last axis and lat only along the first: an
        even-odd scanline fill of the grid rows is used (like rasterising). Otherwise each
        point near the region is tested with ``shapely.contains_xy``.

    Returns
    -------
    numpy.ndarray of bool
        Shape of ``lon`` (``(nlat, nlon)`` when 1-D axes are given with ``regular=True``).
        Points with NaN coordinates are outside.

    References
    ----------
    Shimrat, M. (1962). Algorithm 112: Position of point relative to polygon.
    Communications of the ACM 5(8), 434 (even-odd crossing rule).
    Hauser, M., et al. regionmask, doi:10.5281/zenodo.3998463 (edge convention).
    """
    shape = _shape_of(geom)
    return _mask_on(_grid(lon, lat, regular), shape)


def _candidates(tree, max_km):
    """Latitude band and longitude arc holding every point within max_km of the boundary."""
    delta = min(max_km / geodesy.EARTH_RADIUS_KM, math.pi)
    delta_deg = math.degrees(delta) * (1 + 1e-9) + 1e-9
    lat_lo = tree.lat_range[0] - delta_deg
    lat_hi = tree.lat_range[1] + delta_deg
    cos_b = math.cos(math.radians(tree.max_abs_lat))
    if lat_lo <= -90.0 or lat_hi >= 90.0 or delta >= math.pi / 2 or math.sin(delta) >= cos_b:
        return lat_lo, lat_hi, (-180.0, 360.0), 0.0
    dlon = math.degrees(math.asin(math.sin(delta) / cos_b)) * (1 + 1e-9) + 1e-9
    return lat_lo, lat_hi, tree.lon_arc, dlon


def _distance_to(tree, lon, lat, max_km):
    """Distance (km) from points to the densified boundary; inf beyond max_km."""
    p = geodesy.lonlat_to_unit(lon, lat)
    bound = (float(geodesy.km_to_chord(max_km + 2.0 * tree.spacing_km)) * (1 + 1e-12)
             if math.isfinite(max_km) else np.inf)
    chord, i = tree.kdtree.query(p, k=1, distance_upper_bound=bound, workers=-1)
    dist = np.full(len(p), np.inf)
    found = np.flatnonzero(np.isfinite(chord))
    if found.size == 0:
        return dist
    i = i[found]
    pf = p[found]
    d = geodesy.chord_to_km(chord[found])
    # refine with the exact distance to the arcs on either side of the nearest sample
    for other in (tree.prv[i], tree.nxt[i]):
        sel = np.flatnonzero(other >= 0)
        if sel.size:
            da = geodesy.point_arc_km(pf[sel], tree.xyz[i[sel]], tree.xyz[other[sel]])
            d[sel] = np.minimum(d[sel], da)
    d[d > max_km] = np.inf
    dist[found] = d
    return dist


def _spacing_km(max_km):
    """Boundary sampling: finer for narrow tapers, at most 2 km (exact arcs refine it)."""
    if not math.isfinite(max_km):
        return 2.0
    return float(min(2.0, max(0.25, round(max_km / 150.0, 2))))


def _float_arg(value, label):
    """``float(value)``, or an InputError ``'<label> must be a number, got <value!r>'``.

    Parameters
    ----------
    value : object
        A scalar argument of a region function (a distance, width, elevation or threshold).
    label : str
        How the message names the argument, e.g. ``'taper width_km'``.

    Returns
    -------
    float

    Raises
    ------
    InputError
        If ``float(value)`` fails.
    """
    try:
        return float(value)
    except (TypeError, ValueError):
        raise InputError(f"{label} must be a number, got {value!r}")


def _check_max_km(max_km):
    max_km = _float_arg(max_km, "max_km")
    if not max_km >= 0.0:
        raise InputError(f"max_km must be >= 0, got {number(max_km)}")
    return max_km


def _near_on(grid, shape, max_km, select=None):
    """(flat indices, distances) of grid points within max_km of the region's boundary.

    ``select`` (flat bool, optional) restricts the search to those points.
    """
    empty = (np.empty(0, dtype=np.int64), np.empty(0))
    tree = shape.tree(_spacing_km(max_km))
    if tree is None:          # no boundary at all (e.g. the whole globe)
        return empty
    lat_lo, lat_hi, arc, margin = _candidates(tree, max_km)
    if grid.axes is not None:
        lon1, lat1 = grid.axes
        rows = np.flatnonzero((lat1 >= lat_lo) & (lat1 <= lat_hi))
        cols = np.flatnonzero(_in_arc(lon1, *arc, margin=margin) & np.isfinite(lon1))
        if rows.size == 0 or cols.size == 0:
            return empty
        idx = (rows[:, None] * grid.shape[1] + cols[None, :]).reshape(-1)
        if select is not None:
            keep = select[idx]
            idx = idx[keep]
            plon = np.broadcast_to(lon1[cols], (rows.size, cols.size)).reshape(-1)[keep]
            plat = np.broadcast_to(lat1[rows, None], (rows.size, cols.size)).reshape(-1)[keep]
        else:
            plon = np.broadcast_to(lon1[cols], (rows.size, cols.size)).reshape(-1)
            plat = np.broadcast_to(lat1[rows, None], (rows.size, cols.size)).reshape(-1)
    else:
        cand = (grid.lat >= lat_lo) & (grid.lat <= lat_hi) & np.isfinite(grid.lon)
        if select is not None:
            cand &= select
        idx = np.flatnonzero(cand)
        idx = idx[_in_arc(grid.lon[idx], *arc, margin=margin)]
        plon, plat = grid.lon[idx], grid.lat[idx]
    if idx.size == 0:
        return empty
    dist = _distance_to(tree, plon, plat, max_km)
    keep = np.isfinite(dist)
    return idx[keep], dist[keep]


def boundary_distance_km(lon, lat, geom, max_km, *, regular=False):
    """Great-circle distance (km, sphere) from each point to the region's boundary.

    Only points that can lie within ``max_km`` of the boundary are examined (those in the
    boundary's bounding box widened by ``max_km``, with the longitude widening growing
    towards the poles and covering all longitudes near a pole); all others get ``+inf``.
    Distances larger than ``max_km`` are also reported as ``+inf``. Seams at the
    180-degree meridian and lines along a pole are not boundary.

    Method: the boundary (straight lines in lon/lat) is sampled every 0.25 to 2 km
    (``max_km / 150``), samples and points become unit vectors, a k-d tree gives the
    nearest sample by chord length, and the exact point-to-arc distance on the sphere to
    the two arcs beside that sample refines the result. Against geodesics on the WGS84
    ellipsoid the error is that of the spherical Earth (about 0.25 % at mid-latitudes, at
    most 0.56 % for north-south distances near the equator).

    Parameters
    ----------
    lon, lat : array_like
        As in :func:`hard_mask`.
    geom : shapely.Polygon or shapely.MultiPolygon
    max_km : float
        Largest distance of interest, >= 0 (``inf`` examines every point).
    regular : bool, default False
        As in :func:`hard_mask`; only the widened box's rows and columns are examined.

    Returns
    -------
    numpy.ndarray of float64
        Unsigned distance in km; ``+inf`` beyond ``max_km`` and for NaN coordinates.

    References
    ----------
    Bentley, J. L. (1975). Multidimensional binary search trees used for associative
    searching. Communications of the ACM 18(9), 509-517.
    Maneewongvatana, S. and Mount, D. M. (1999). Analysis of approximate nearest neighbor
    searching with clustered point sets. arXiv:cs/9901013 (scipy's sliding-midpoint
    k-d tree).
    Gade, K. (2010). A non-singular horizontal position representation. The Journal of
    Navigation 63(3), 395-417.
    """
    max_km = _check_max_km(max_km)
    shape = _shape_of(geom)
    grid = _grid(lon, lat, regular)
    idx, dist = _near_on(grid, shape, max_km)
    out = np.full(grid.size, np.inf)
    out[idx] = dist
    return out.reshape(grid.shape)


def _raised_cosine_rise(u):
    """0.5 * (1 - cos(pi * u)) for u clipped to [0, 1]: 0 -> 0, 1 -> 1."""
    return 0.5 * (1.0 - np.cos(np.pi * np.clip(u, 0.0, 1.0)))


def taper_weight(lon, lat, geom, width_km, placement="outside", regular=False):
    """Region weights in [0, 1] with a raised-cosine edge of ``width_km`` (great circle).

    With ``d`` the great-circle distance to the boundary, the weight falls as the tail of
    a Tukey window, ``w(d) = 0.5 * (1 + cos(pi * d / width_km))`` for
    ``0 <= d <= width_km``, from 1 to 0 across the edge zone:

    * ``'outside'``: 1 inside the region, falling to 0 at ``width_km`` outside it;
    * ``'inside'``: 0 outside the region, rising to 1 at ``width_km`` inside it;
    * ``'centred'``: 0.5 on the boundary, from 0 at ``width_km / 2`` outside to 1 at
      ``width_km / 2`` inside.

    ``width_km == 0`` is a hard edge, identical to :func:`hard_mask`.

    Parameters
    ----------
    lon, lat : array_like
        As in :func:`hard_mask`.
    geom : shapely.Polygon or shapely.MultiPolygon
    width_km : float
        Width of the edge zone in km, >= 0.
    placement : {'outside', 'inside', 'centred'}
    regular : bool, default False
        As in :func:`hard_mask` (faster on regular grids).

    Returns
    -------
    numpy.ndarray of float64
        Shape of ``lon``; points with NaN coordinates get 0.

    References
    ----------
    Harris, F. J. (1978). On the use of windows for harmonic analysis with the discrete
    Fourier transform. Proceedings of the IEEE 66(1), 51-83 (Tukey, cosine-tapered window).
    """
    width = _float_arg(width_km, "taper width_km")
    if not (width >= 0.0 and math.isfinite(width)):
        raise InputError(f"taper width_km must be a finite number >= 0, got {number(width)}; "
                         f"use 0 for a hard edge")
    if placement not in PLACEMENTS:
        raise InputError(f"taper placement {placement!r} is not one of "
                         f"{', '.join(PLACEMENTS)}")
    shape = _shape_of(geom)
    grid = _grid(lon, lat, regular)
    inside = _mask_on(grid, shape).reshape(-1)
    weight = inside.astype(np.float64)
    if width > 0.0:
        # only one side of the boundary needs distances, except for 'centred'
        select = {"outside": ~inside, "inside": inside, "centred": None}[placement]
        reach = 0.5 * width if placement == "centred" else width
        idx, dist = _near_on(grid, shape, reach, select=select)
        signed = np.where(inside[idx], dist, -dist)            # positive inside
        start = {"outside": -width, "inside": 0.0, "centred": -0.5 * width}[placement]
        weight[idx] = _raised_cosine_rise((signed - start) / width)
    return weight.reshape(grid.shape)


# --------------------------------------------------------------------------------------
