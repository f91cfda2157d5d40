"""Regions and horizontal weights: hard masks and tapered edges on any lon/lat grid.

Shapes are shapely geometries in longitude/latitude degrees. Edges are straight lines in
lon/lat (as in GeoJSON and regionmask), so an edge along constant latitude follows the
parallel. Any longitude convention is accepted for shapes and grids alike: internally each
shape is wrapped into [-180, 180] and repeated at +-360 degrees, so a region that crosses the
180-degree meridian, or is written in 0..360 longitudes, masks any grid the same way.

Weights are pure functions of lon/lat arrays (2-D regular or curvilinear grids, or 1-D point
lists) and a shape:

* :func:`hard_mask` - which points lie in the region (regionmask's edge convention);
* :func:`boundary_distance_km` - great-circle distance to the region's boundary;
* :func:`taper_weight` - 1 in the region, raised-cosine decay across the boundary;
* :func:`elevation_ramp`, :func:`land_weight` - other horizontal factors;
* :func:`check_coverage` - fail clearly when a region holds no grid point.

Interpreting vertex lists (:func:`polygon`, :func:`read_geojson`)
------------------------------------------------------------------
* An edge whose ends differ by more than 180 degrees of longitude (but less than 360) is
  taken the short way across the 180-degree meridian, with an :class:`InputWarning`:
  ``[[170, 0], [-170, 0], [-170, 10], [170, 10]]`` is a 20-degree box, not a 340-degree one.
  Write continuous longitudes (170 to 190) to avoid the warning.
* An edge of exactly 360 degrees (e.g. -180 to 180) runs along the whole parallel, as in
  ``box(-180, 180, 80, 90)``.
* A ring that goes once around a pole without visiting it (e.g. points at 75N every 90
  degrees) encloses the cap on that pole's side (the pole nearer the ring's mean latitude).
"""

from __future__ import annotations

import functools
import json
import math
import os
import warnings
from dataclasses import dataclass, field

import numpy as np
import shapely
from scipy.spatial import cKDTree

from initgen.errors import InputError, InputWarning
from initgen.science import geodesy

__all__ = [
    "box",
    "polygon",
    "read_geojson",
    "published",
    "combine",
    "hard_mask",
    "boundary_distance_km",
    "taper_weight",
    "elevation_ramp",
    "land_weight",
    "check_coverage",
    "PLACEMENTS",
]

#: Allowed values of ``placement`` in :func:`taper_weight`.
PLACEMENTS = ("outside", "inside", "centred")

# regionmask's edge convention: a grid point belongs to a region when the point shifted by
# these tiny offsets (west and south) lies strictly inside it; points at 90S are moved
# just north of the pole instead (regionmask 0.13, core/mask.py).
_LON_OFFSET = 1.0e-8
_LAT_OFFSET = 1.0e-10

# Spacing (km) at which region boundaries are sampled before the nearest-point search.
_SPACING_KM = 1.0

# Published region sets shipped with (or downloaded by) regionmask.
_NE_VERSIONS = ("natural_earth_v4_1_0", "natural_earth_v5_0_0", "natural_earth_v5_1_2")
_NE_SETS = ("countries_110", "countries_50", "countries_10", "us_states_50",
            "us_states_10", "land_110", "land_50", "land_10", "ocean_basins_50")
_PUBLISHED_SETS = (("srex", "giorgi", "prudence", "ar6.all", "ar6.land", "ar6.ocean")
                   + tuple(f"{v}.{s}" for v in _NE_VERSIONS for s in _NE_SETS))


# --------------------------------------------------------------------------------------
# building shapes
# --------------------------------------------------------------------------------------

def _fmt(x):
    return f"{float(x):g}"


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
        f"(area {_fmt(geom.area)} -> {_fmt(fixed.area)} square degrees): check the vertex "
        f"order", InputWarning, stacklevel=3)
    if fixed.is_empty:
        raise InputError(f"{what} has no area after repair ({reason}); give the vertices "
                         f"in order around the region")
    return fixed


def _ring_coords(coords, what, *, allow_cap=True):
    """Vertex list -> closed-ring coordinates, applying the module's reading rules."""
    try:
        a = np.asarray(coords, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{what}: vertices must be a list of [lon, lat] pairs of numbers")
    if a.ndim != 2 or a.shape[1] < 2:
        raise InputError(f"{what}: vertices must be a list of [lon, lat] pairs, got an "
                         f"array of shape {a.shape}")
    a = a[:, :2]
    if not np.all(np.isfinite(a)):
        raise InputError(f"{what}: vertices contain NaN or infinite values")
    bad = np.abs(a[:, 1]) > 90.0
    if bad.any():
        lon0, lat0 = a[np.argmax(bad)]
        raise InputError(f"{what}: vertex ({_fmt(lon0)}, {_fmt(lat0)}) has latitude outside "
                         f"-90..90; are lon and lat swapped? give [lon, lat] pairs")
    if len(a) > 1 and np.array_equal(a[0], a[-1]):
        a = a[:-1]
    if len(np.unique(a, axis=0)) < 3:
        raise InputError(f"{what}: a ring needs at least 3 distinct vertices, got {len(a)}")
    lon, lat = a[:, 0], a[:, 1]
    d = np.diff(np.append(lon, lon[0]))
    long_edge = (np.abs(d) > 180.0) & (np.abs(d) < 360.0)
    d = np.where(long_edge, d - 360.0 * np.sign(d), d)
    winding = float(np.sum(d))
    ulon = lon[0] + np.concatenate(([0.0], np.cumsum(d[:-1])))
    if abs(winding) < 1e-6:
        if long_edge.any():
            i = int(np.argmax(long_edge))
            j = (i + 1) % len(lon)
            warnings.warn(
                f"{what}: edge from ({_fmt(lon[i])}, {_fmt(lat[i])}) to ({_fmt(lon[j])}, "
                f"{_fmt(lat[j])}) spans more than 180 degrees of longitude; taken the short "
                f"way across the 180-degree meridian; write continuous longitudes (e.g. "
                f"170 to 190) to avoid this warning", InputWarning, stacklevel=3)
        return np.column_stack([ulon, lat])
    if abs(abs(winding) - 360.0) < 1e-6 and allow_cap:
        mean_lat = float(np.mean(lat))
        if mean_lat == 0.0:
            raise InputError(f"{what}: the ring goes around the globe along the equator, so "
                             f"it is unclear which pole it encloses; add the pole vertices "
                             f"explicitly (e.g. [lon, 90])")
        pole = 90.0 if mean_lat > 0 else -90.0
        end = lon[0] + winding
        extra = np.array([[end, lat[0]], [end, pole], [lon[0], pole]])
        return np.vstack([np.column_stack([ulon, lat]), extra])
    raise InputError(f"{what}: the ring winds {winding / 360.0:+.0f} times around the pole; "
                     f"give the vertices in order around the region")


def box(lon_min, lon_max, lat_min, lat_max):
    """A lon/lat rectangle bounded by two meridians and two parallels.

    Parameters
    ----------
    lon_min, lon_max : float
        Western and eastern edges in degrees, any convention. ``lon_min > lon_max`` means
        the box crosses the 180-degree meridian: ``box(170, -170, ...)`` is 20 degrees wide.
        ``box(-180, 180, ...)`` (or ``0, 360``) spans all longitudes.
    lat_min, lat_max : float
        Southern and northern edges in degrees, ``-90 <= lat_min < lat_max <= 90``.
        ``box(-180, 180, 80, 90)`` is the cap north of 80N.

    Returns
    -------
    shapely.Polygon
        In continuous longitudes (``box(170, -170, 0, 10)`` has lon 170..190).
    """
    try:
        lon_min, lon_max, lat_min, lat_max = (float(v) for v in
                                              (lon_min, lon_max, lat_min, lat_max))
    except (TypeError, ValueError):
        raise InputError("box: lon_min, lon_max, lat_min, lat_max must be numbers")
    if not all(math.isfinite(v) for v in (lon_min, lon_max, lat_min, lat_max)):
        raise InputError("box: bounds must be finite numbers")
    if not -90.0 <= lat_min < lat_max <= 90.0:
        raise InputError(f"box: need -90 <= lat_min < lat_max <= 90, got lat_min="
                         f"{_fmt(lat_min)}, lat_max={_fmt(lat_max)}")
    if lon_min == lon_max:
        raise InputError(f"box: lon_min equals lon_max ({_fmt(lon_min)}); use "
                         f"box(-180, 180, ...) for all longitudes")
    if lon_min > lon_max:
        lon_max += 360.0
    if lon_max - lon_min > 360.0:
        raise InputError(f"box: spans {_fmt(lon_max - lon_min)} degrees of longitude, more "
                         f"than 360; use box(-180, 180, ...) for all longitudes")
    return shapely.box(lon_min, lat_min, lon_max, lat_max)


def polygon(vertices, holes=()):
    """A polygon from a list of ``[lon, lat]`` vertices (degrees).

    Parameters
    ----------
    vertices : sequence of [lon, lat]
        The outer ring, in order (either direction, closed or not). See the module notes
        for edges longer than 180 degrees of longitude and rings around a pole.
    holes : sequence of vertex lists, optional
        Inner rings to cut out.

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon
        A self-intersecting ring (e.g. a bow tie) is repaired with ``shapely.make_valid``
        and an :class:`InputWarning`.
    """
    shell = _ring_coords(vertices, "polygon")
    inner = [_ring_coords(h, f"polygon hole {i + 1}", allow_cap=False)
             for i, h in enumerate(holes)]
    return _repair(shapely.Polygon(shell, inner), "polygon")


def _geojson_polygon(rings, what):
    if not isinstance(rings, list) or not rings:
        raise InputError(f"{what}: a Polygon needs a list of rings")
    shell = _ring_coords(rings[0], what)
    holes = [_ring_coords(r, f"{what} hole {i + 1}", allow_cap=False)
             for i, r in enumerate(rings[1:])]
    return shapely.Polygon(shell, holes)


def _geojson_geometry(obj, what):
    if not isinstance(obj, dict):
        raise InputError(f"{what}: geometry is missing or not a JSON object; expected a "
                         f"Polygon or MultiPolygon")
    kind = obj.get("type")
    if kind == "Polygon":
        return [_geojson_polygon(obj.get("coordinates"), what)]
    if kind == "MultiPolygon":
        coords = obj.get("coordinates")
        if not isinstance(coords, list) or not coords:
            raise InputError(f"{what}: a MultiPolygon needs a list of polygons")
        return [_geojson_polygon(p, f"{what} part {i + 1}") for i, p in enumerate(coords)]
    raise InputError(f"{what}: geometry type {kind!r} is not supported; a region must be a "
                     f"Polygon or MultiPolygon")


def read_geojson(path):
    """Read a region from a GeoJSON file (RFC 7946: WGS84 longitude, latitude).

    Parameters
    ----------
    path : str or os.PathLike
        A FeatureCollection, Feature or bare geometry. Every geometry must be a Polygon
        or MultiPolygon (holes allowed); all of them are merged into one region.

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon

    Raises
    ------
    InputError
        Missing or unreadable file, invalid JSON, a geometry of another type (the message
        names the file and the type found), or a non-geographic ``crs``.

    References
    ----------
    Butler, H., et al. (2016). The GeoJSON Format. IETF RFC 7946.
    """
    name = os.fspath(path)
    try:
        with open(name, encoding="utf-8") as fh:
            doc = json.load(fh)
    except FileNotFoundError:
        raise InputError(f"GeoJSON file '{name}' not found; check the path")
    except (OSError, UnicodeDecodeError) as err:
        raise InputError(f"GeoJSON file '{name}' cannot be read ({err})")
    except json.JSONDecodeError as err:
        raise InputError(f"GeoJSON file '{name}' is not valid JSON (line {err.lineno}: "
                         f"{err.msg})")
    if not isinstance(doc, dict):
        raise InputError(f"GeoJSON file '{name}': expected a JSON object at the top level")
    crs = doc.get("crs")
    if crs is not None:
        crs_name = str((crs.get("properties") or {}).get("name", "")) if isinstance(
            crs, dict) else str(crs)
        if not any(k in crs_name.upper() for k in ("CRS84", "4326")):
            raise InputError(f"GeoJSON file '{name}': crs {crs_name!r} is not geographic "
                             f"longitude/latitude; reproject to WGS84 (EPSG:4326)")
    kind = doc.get("type")
    what = f"GeoJSON file '{name}'"
    if kind == "FeatureCollection":
        feats = doc.get("features")
        if not isinstance(feats, list) or not feats:
            raise InputError(f"{what}: the FeatureCollection has no features")
        geoms = [(f.get("geometry") if isinstance(f, dict) else None,
                  f"{what} feature {i + 1}") for i, f in enumerate(feats)]
    elif kind == "Feature":
        geoms = [(doc.get("geometry"), what)]
    else:
        geoms = [(doc, what)]
    polys = []
    for obj, label in geoms:
        polys.extend(_geojson_geometry(obj, label))
    merged = shapely.unary_union([_repair(p, what) for p in polys])
    return _repair(_polygonal(merged), what)


def published(set_name, abbrevs):
    """Union of regions from a published set shipped with regionmask.

    Parameters
    ----------
    set_name : str
        ``'srex'`` (Seneviratne et al. 2012), ``'giorgi'`` (Giorgi and Francisco 2000),
        ``'prudence'`` (Christensen and Christensen 2007) work offline; ``'ar6.land'``,
        ``'ar6.all'``, ``'ar6.ocean'`` (Iturbide et al. 2020) and the Natural Earth sets
        (e.g. ``'natural_earth_v5_0_0.countries_110'``) are downloaded by regionmask on
        first use.
    abbrevs : str or sequence of str
        Region abbreviations (e.g. ``'CEU'`` or ``['NEU', 'CEU']``); names are accepted too.

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon

    References
    ----------
    Seneviratne, S. I., et al. (2012). Changes in climate extremes and their impacts on the
    natural physical environment. In: IPCC SREX, Cambridge University Press, 109-230.
    Giorgi, F. and Francisco, R. (2000). Uncertainties in regional climate change
    prediction: a regional analysis of ensemble simulations with the HADCM2 coupled AOGCM.
    Climate Dynamics 16, 169-182.
    Christensen, J. H. and Christensen, O. B. (2007). A summary of the PRUDENCE model
    projections of changes in European climate by the end of this century. Climatic Change
    81, 7-30.
    Iturbide, M., et al. (2020). An update of IPCC climate reference regions for
    subcontinental analysis of climate model data. Earth System Science Data 12, 2959-2970.
    Hauser, M., et al. regionmask: plotting and creating masks of spatial regions.
    Zenodo, doi:10.5281/zenodo.3998463.
    """
    key = str(set_name).strip().lower()
    if key not in _PUBLISHED_SETS:
        raise InputError(f"unknown published region set {set_name!r}; choose one of "
                         f"{', '.join(_PUBLISHED_SETS)}")
    try:
        import regionmask  # noqa: PLC0415  (imported lazily: it pulls in xarray)

        obj = regionmask.defined_regions
        for part in key.split("."):
            obj = getattr(obj, part)
    except Exception as err:  # noqa: BLE001 - download or parsing failures alike
        msg = " ".join(str(err).split())
        msg = msg if len(msg) <= 160 else msg[:157] + "..."
        raise InputError(f"published region set {set_name!r} could not be loaded "
                         f"({type(err).__name__}: {msg}); regionmask downloads it on first "
                         f"use, so without internet use 'srex', 'giorgi', 'prudence' or a "
                         f"GeoJSON file")
    if isinstance(abbrevs, str):
        abbrevs = [abbrevs]
    abbrevs = list(abbrevs)
    if not abbrevs:
        raise InputError(f"published region set {set_name!r}: give at least one region "
                         f"abbreviation")
    table_abbrev = [str(a) for a in obj.abbrevs]
    table_name = [str(n) for n in obj.names]
    polys = list(obj.polygons)
    chosen = []
    for want in abbrevs:
        w = str(want).strip()
        idx = None
        for table in (table_abbrev, table_name):
            if w in table:
                idx = table.index(w)
                break
            low = [t.lower() for t in table]
            if w.lower() in low and low.count(w.lower()) == 1:
                idx = low.index(w.lower())
                break
        if idx is None:
            shown = ", ".join(table_abbrev[:80]) + (" ..." if len(table_abbrev) > 80 else "")
            raise InputError(f"region {want!r} is not in the published set {key!r}; valid "
                             f"abbreviations: {shown}")
        chosen.append(_repair(polys[idx], f"region {table_abbrev[idx]!r} of {key!r}"))
    return shapely.unary_union(chosen) if len(chosen) > 1 else chosen[0]


def combine(include, exclude=()):
    """Union of the ``include`` shapes minus the union of the ``exclude`` shapes.

    Shapes may use different longitude conventions; the result is wrapped into
    [-180, 180] (a region crossing the 180-degree meridian comes back in two parts).

    Parameters
    ----------
    include : geometry or list of geometries
    exclude : geometry or list of geometries, optional

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon

    Raises
    ------
    InputError
        When ``include`` is empty or the excluded shapes remove everything.
    """
    def as_list(x):
        if x is None:
            return []
        if isinstance(x, shapely.Geometry):
            return [x]
        return list(x)

    inc = [_shape_of(_check_geom(g, f"include[{i}]")).wrapped
           for i, g in enumerate(as_list(include))]
    exc = [_shape_of(_check_geom(g, f"exclude[{i}]")).wrapped
           for i, g in enumerate(as_list(exclude))]
    if not inc:
        raise InputError("combine: 'include' needs at least one shape")
    out = shapely.unary_union(inc)
    if exc:
        out = shapely.difference(out, shapely.unary_union(exc))
    out = _polygonal(out)
    if out.is_empty:
        raise InputError("combine: the excluded shapes cover all included ones, leaving an "
                         "empty region")
    return out


# --------------------------------------------------------------------------------------
# normalised shapes (cached)
# --------------------------------------------------------------------------------------

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
    lo = np.minimum(x0, x1)
    hi = np.maximum(x0, x1)
    order = np.argsort(lo)
    lo, hi = lo[order], hi[order]
    hi = np.maximum.accumulate(hi)
    # gaps between merged intervals, plus the gap across the wrap point
    gaps = np.append(lo[1:] - hi[:-1], lo[0] + 360.0 - hi[-1])
    k = int(np.argmax(gaps))
    if gaps[k] <= 0.0:
        return -180.0, 360.0
    start = lo[(k + 1) % len(lo)]
    return float(start), float(360.0 - gaps[k])


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
# grids
# --------------------------------------------------------------------------------------

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


def _check_max_km(max_km):
    try:
        max_km = float(max_km)
    except (TypeError, ValueError):
        raise InputError(f"max_km must be a number, got {max_km!r}")
    if not max_km >= 0.0:
        raise InputError(f"max_km must be >= 0, got {_fmt(max_km)}")
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
    try:
        width = float(width_km)
    except (TypeError, ValueError):
        raise InputError(f"taper width_km must be a number, got {width_km!r}")
    if not (width >= 0.0 and math.isfinite(width)):
        raise InputError(f"taper width_km must be a finite number >= 0, got {_fmt(width)}; "
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
# other horizontal factors
# --------------------------------------------------------------------------------------

def elevation_ramp(elevation_m, min_m, ramp_m=0.0, max_m=None, max_ramp_m=0.0):
    """Weights from surface elevation: an elevation band with raised-cosine ramps.

    The weight is 0 below ``min_m``, rises as a raised cosine (not linearly) to 1 at
    ``min_m + ramp_m``, stays 1, and if ``max_m`` is given falls symmetrically, from 1 at
    ``max_m - max_ramp_m`` to 0 at ``max_m``, and is 0 above. With a zero ramp the edge is
    a step that includes the limit (``elevation >= min_m``, ``elevation <= max_m``).

    Parameters
    ----------
    elevation_m : array_like
        Surface elevation in m; NaN gives weight 0.
    min_m : float or None
        Lower limit in m (None: no lower limit).
    ramp_m : float, default 0
        Width of the rise above ``min_m``, >= 0.
    max_m : float, optional
        Upper limit in m.
    max_ramp_m : float, default 0
        Width of the fall below ``max_m``, >= 0.

    Returns
    -------
    numpy.ndarray of float64, in [0, 1]

    References
    ----------
    Harris, F. J. (1978). On the use of windows for harmonic analysis with the discrete
    Fourier transform. Proceedings of the IEEE 66(1), 51-83 (raised-cosine taper).
    """
    def num(name, v, allow_none=False):
        if v is None and allow_none:
            return None
        try:
            v = float(v)
        except (TypeError, ValueError):
            raise InputError(f"elevation {name} must be a number, got {v!r}")
        if not math.isfinite(v):
            raise InputError(f"elevation {name} must be finite, got {_fmt(v)}")
        return v

    lo = num("min_m", min_m, allow_none=True)
    hi = num("max_m", max_m, allow_none=True)
    r_lo = num("ramp_m", ramp_m)
    r_hi = num("max_ramp_m", max_ramp_m)
    if r_lo < 0 or r_hi < 0:
        raise InputError(f"elevation ramps must be >= 0 m, got ramp_m={_fmt(r_lo)}, "
                         f"max_ramp_m={_fmt(r_hi)}")
    if lo is not None and hi is not None:
        if hi <= lo:
            raise InputError(f"elevation max_m ({_fmt(hi)}) must be above min_m ({_fmt(lo)})")
        if lo + r_lo > hi - r_hi:
            raise InputError(f"elevation ramps overlap: min_m + ramp_m = {_fmt(lo + r_lo)} "
                             f"is above max_m - max_ramp_m = {_fmt(hi - r_hi)}; shorten the "
                             f"ramps or widen the band")
    z = np.asarray(elevation_m, dtype=np.float64)
    w = np.where(np.isnan(z), 0.0, 1.0)
    with np.errstate(invalid="ignore"):
        if lo is not None:
            w = w * (_raised_cosine_rise((z - lo) / r_lo) if r_lo > 0
                     else (z >= lo).astype(np.float64))
        if hi is not None:
            w = w * (_raised_cosine_rise((hi - z) / r_hi) if r_hi > 0
                     else (z <= hi).astype(np.float64))
    return np.where(np.isnan(z), 0.0, w)


def land_weight(fraction=None, mask=None, threshold=0.5):
    """Weights from a land-area fraction or a land mask.

    Parameters
    ----------
    fraction : array_like, optional
        Land-area fraction (0..1): clipped to [0, 1], NaN gives 0. Values above 1.5 look
        like percent and raise :class:`InputError`.
    mask : array_like, optional
        Land mask: 1 where ``mask >= threshold``, else 0 (NaN gives 0).
    threshold : float, default 0.5

    Returns
    -------
    numpy.ndarray of float64, in [0, 1]
    """
    if (fraction is None) == (mask is None):
        raise InputError("land_weight needs exactly one of 'fraction' (land-area fraction) "
                         "or 'mask' (land mask)")
    if fraction is not None:
        f = np.asarray(fraction, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            if np.nanmax(f, initial=0.0) > 1.5:
                raise InputError(f"land fraction reaches {_fmt(np.nanmax(f))}, above 1; if "
                                 f"it is in percent, divide by 100")
        return np.where(np.isnan(f), 0.0, np.clip(f, 0.0, 1.0))
    try:
        threshold = float(threshold)
    except (TypeError, ValueError):
        raise InputError(f"land mask threshold must be a number, got {threshold!r}")
    m = np.asarray(mask, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        return (m >= threshold).astype(np.float64)


def check_coverage(mask, region_name, lon, lat):
    """Fail clearly when a region holds no grid point; warn when it holds fewer than 10.

    Parameters
    ----------
    mask : array_like of bool
        Hard mask (or weights: points with a weight > 0 count).
    region_name : str
        Name used in the message.
    lon, lat : array_like
        Grid coordinates, to describe the grid's extent in the message.

    Returns
    -------
    int
        Number of grid points in the region.

    Raises
    ------
    InputError
        "region 'X' contains no grid point; the grid spans lon A..B, lat C..D".
    """
    n = int(np.count_nonzero(np.nan_to_num(np.asarray(mask, dtype=np.float64)) > 0))
    if n == 0:
        lon = np.asarray(lon, dtype=np.float64)
        lat = np.asarray(lat, dtype=np.float64)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            span = (f"lon {_fmt(np.nanmin(lon))}..{_fmt(np.nanmax(lon))}, "
                    f"lat {_fmt(np.nanmin(lat))}..{_fmt(np.nanmax(lat))}")
        raise InputError(f"region '{region_name}' contains no grid point; the grid spans "
                         f"{span}; check the region's coordinates or enlarge it")
    if n < 10:
        warnings.warn(f"region '{region_name}' contains only {n} grid point"
                      f"{'s' if n > 1 else ''}; the perturbation will be very local",
                      InputWarning, stacklevel=2)
    return n
