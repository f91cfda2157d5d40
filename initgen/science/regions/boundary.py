"""Normalised shapes, cached: each shape wrapped into [-180, 180] and repeated at +-360 degrees,
its boundary segments and the sampled boundary trees for nearest-point searches.
"""

from __future__ import annotations

import functools
import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import shapely
from scipy.spatial import cKDTree

from initgen.errors import InputError, InputWarning
from initgen.science import geodesy
from initgen.text import number


def _polygonal(geom):
    """The polygonal part of a geometry (drops points and lines), or an empty polygon."""
    if geom is None or geom.is_empty:
        return shapely.Polygon()
    if isinstance(geom, (shapely.Polygon, shapely.MultiPolygon)):
        return geom
    parts = [g for g in shapely.get_parts(geom)
             if isinstance(g, (shapely.Polygon, shapely.MultiPolygon))]
    if not parts:
        return shapely.Polygon()
    return shapely.unary_union(parts)


def _repair(geom, what):
    """Return a valid polygonal geometry; repair invalid ones with a warning."""
    if geom.is_valid:
        return geom
    reason = shapely.is_valid_reason(geom)
    fixed = _polygonal(shapely.make_valid(geom))
    warnings.warn(
        f"{what} is not a valid polygon ({reason}); repaired with shapely.make_valid "
        f"(area {number(geom.area)} -> {number(fixed.area)} square degrees): check the vertex "
        f"order", InputWarning, stacklevel=3)
    if fixed.is_empty:
        raise InputError(f"{what} has no area after repair ({reason}); give the vertices "
                         f"in order around the region")
    return fixed


def _check_geom(geom, what="region"):
    if not isinstance(geom, shapely.Geometry):
        raise InputError(f"{what} must be a shapely Polygon or MultiPolygon (see "
                         f"regions.box, polygon, read_geojson, published), got "
                         f"{type(geom).__name__}")
    if not isinstance(geom, (shapely.Polygon, shapely.MultiPolygon,
                             shapely.GeometryCollection)):
        raise InputError(f"{what} must be a Polygon or MultiPolygon, got {geom.geom_type}")
    if geom.is_empty or _polygonal(geom).is_empty:
        raise InputError(f"{what} is empty")
    return geom


def _segments(lines):
    """Segments (n, 4) = lon0, lat0, lon1, lat1 of rings or lines, in order."""
    coords, idx = shapely.get_coordinates(lines, return_index=True)
    if len(coords) < 2:
        return np.empty((0, 4))
    same = idx[1:] == idx[:-1]
    return np.column_stack([coords[:-1][same], coords[1:][same]])


def _lon_arc(x0, x1):
    """Smallest circular arc (start, width) covering segments with lon in [-180, 180]."""
    return geodesy.smallest_lon_arc(np.minimum(x0, x1), np.maximum(x0, x1))


def _in_arc(lon, start, width, margin):
    if width + 2 * margin >= 360.0:
        return np.ones(np.shape(lon), dtype=bool)
    rel = np.mod(np.asarray(lon, dtype=np.float64) - (start - margin), 360.0)
    return rel <= width + 2 * margin


@dataclass
class _Shape:
    """A region wrapped into [-180, 180], repeated at +-360, with derived arrays."""

    wrapped: object        # polygonal geometry within lon [-180, 180]
    periodic: object       # union of wrapped shifted by -360, 0, +360 (prepared)
    edges: np.ndarray      # non-horizontal ring segments of `periodic` (scanline test)
    lat_range: tuple
    lon_arc: tuple
    boundary: np.ndarray   # real boundary segments (no seams, no pole lines), lon/lat
    _trees: dict = field(default_factory=dict)

    def tree(self, spacing_km):
        """Densified boundary as unit vectors, a k-d tree over them, and arc links."""
        if spacing_km not in self._trees:
            if len(self._trees) >= _TREES_PER_SHAPE:  # bounded: a long-lived process sees many widths
                self._trees.pop(next(iter(self._trees)))
            self._trees[spacing_km] = _densify(self.boundary, spacing_km)
        return self._trees[spacing_km]


@functools.lru_cache(maxsize=32)
def _shape_cached(geom):
    return _build_shape(geom)


def _shape_of(geom):
    return _shape_cached(_check_geom(geom))


def _build_shape(geom):
    geom = _repair(_polygonal(geom), "region")
    minx, _, maxx, _ = geom.bounds
    k_lo = math.ceil((-180.0 - maxx) / 360.0)
    k_hi = math.floor((180.0 - minx) / 360.0)
    frame = shapely.box(-180.0, -90.0, 180.0, 90.0)
    pieces = [shapely.intersection(shapely.transform(geom, lambda c, k=k: c + [360.0 * k, 0]),
                                   frame) for k in range(k_lo, k_hi + 1)]
    wrapped = _polygonal(shapely.unary_union(pieces))
    if wrapped.is_empty:
        raise InputError("region has no area within latitudes -90..90")
    periodic = _polygonal(shapely.unary_union(
        [shapely.transform(wrapped, lambda c, k=k: c + [360.0 * k, 0]) for k in (-1, 0, 1)]))
    shapely.prepare(periodic)
    edges = _segments(shapely.get_rings(shapely.get_parts(periodic)))
    edges = edges[edges[:, 1] != edges[:, 3]]
    lines = shapely.get_parts(shapely.get_parts(
        shapely.intersection(shapely.boundary(periodic), frame)))
    lines = lines[shapely.get_type_id(lines) == 1]
    seg = _segments(lines) if len(lines) else np.empty((0, 4))
    at_pole = (np.abs(seg[:, 1]) >= 90.0 - 1e-9) & (np.abs(seg[:, 3]) >= 90.0 - 1e-9)
    seg = seg[~at_pole & ((seg[:, 0] != seg[:, 2]) | (seg[:, 1] != seg[:, 3]))]
    wseg = _segments(shapely.get_rings(shapely.get_parts(wrapped)))
    _, miny, _, maxy = wrapped.bounds
    return _Shape(wrapped=wrapped, periodic=periodic, edges=edges, lat_range=(miny, maxy),
                  lon_arc=_lon_arc(wseg[:, 0], wseg[:, 2]), boundary=seg)


_TREES_PER_SHAPE = 4  # boundary samplings kept per cached shape (one per sample spacing)


@dataclass
class _Tree:
    xyz: np.ndarray        # (n, 3) unit vectors of the densified boundary
    kdtree: object
    prv: np.ndarray        # index of the previous sample along the boundary, or -1
    nxt: np.ndarray        # index of the next sample along the boundary, or -1
    lat_range: tuple
    lon_arc: tuple
    max_abs_lat: float
    spacing_km: float


def _densify(seg, spacing_km):
    """Sample boundary segments (straight in lon/lat) at most ``spacing_km`` apart.

    Samples of one chain of segments are linked to their neighbours (``prv``, ``nxt``); a
    chain end that coincides on the sphere with a chain start (a closed ring, or a ring cut
    at the 180-degree meridian or at +-180 by the frame) is linked across the join.
    """
    if len(seg) == 0:
        return None
    x0, y0, x1, y1 = seg.T
    k = math.pi / 180.0 * geodesy.EARTH_RADIUS_KM
    # upper bound of the segment length: the widest parallel it touches
    cross_eq = np.sign(y0) != np.sign(y1)
    cosmax = np.where(cross_eq, 1.0, np.cos(np.radians(np.minimum(np.abs(y0), np.abs(y1)))))
    length = k * np.hypot((x1 - x0) * cosmax, y1 - y0)
    n = np.maximum(1, np.ceil(length / spacing_km).astype(np.int64))
    cont = np.zeros(len(seg), dtype=bool)
    cont[:-1] = (x1[:-1] == x0[1:]) & (y1[:-1] == y0[1:])
    npts = n + (~cont)                       # interior samples, plus the end if the chain stops
    sid = np.repeat(np.arange(len(seg)), npts)
    first = np.cumsum(npts) - npts
    j = np.arange(sid.size) - first[sid]
    t = j / n[sid]
    lon = x0[sid] + t * (x1 - x0)[sid]
    lat = y0[sid] + t * (y1 - y0)[sid]
    xyz = geodesy.lonlat_to_unit(lon, lat)
    total = sid.size
    ends = (first + npts - 1)[~cont]
    starts = np.concatenate(([0], ends[:-1] + 1))
    nxt = np.arange(1, total + 1)
    prv = np.arange(-1, total - 1)
    nxt[ends] = -1
    prv[starts] = -1
    key = lambda i: tuple(np.round(xyz[i] * 1e9).astype(np.int64))  # noqa: E731
    start_of = {}
    for st in starts:
        start_of.setdefault(key(st), st)
    for en in ends:
        st = start_of.get(key(en))
        if st is not None and st != en:
            nxt[en] = nxt[st]
            prv[st] = prv[en]
    return _Tree(xyz=xyz, kdtree=cKDTree(xyz), prv=prv, nxt=nxt,
                 lat_range=(float(lat.min()), float(lat.max())),
                 lon_arc=_lon_arc(seg[:, 0], seg[:, 2]),
                 max_abs_lat=float(np.max(np.abs(lat))), spacing_km=spacing_km)


# --------------------------------------------------------------------------------------
