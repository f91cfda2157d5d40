"""Building region shapes: boxes, polygons, GeoJSON files, published region sets and their
combination, as shapely geometries in longitude/latitude degrees.

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

import math
import warnings

import numpy as np
import shapely

from initgen.errors import InputError, InputWarning
from initgen.science.regions.boundary import _check_geom, _polygonal, _repair, _shape_of
from initgen.text import number

# Published region sets shipped with (or downloaded by) regionmask.
_NE_VERSIONS = ("natural_earth_v4_1_0", "natural_earth_v5_0_0", "natural_earth_v5_1_2")
_NE_SETS = ("countries_110", "countries_50", "countries_10", "us_states_50",
            "us_states_10", "land_110", "land_50", "land_10", "ocean_basins_50")
_PUBLISHED_SETS = (("srex", "giorgi", "prudence", "ar6.all", "ar6.land", "ar6.ocean")
                   + tuple(f"{v}.{s}" for v in _NE_VERSIONS for s in _NE_SETS))


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
        raise InputError(f"{what}: vertex ({number(lon0)}, {number(lat0)}) has latitude outside "
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
                f"{what}: edge from ({number(lon[i])}, {number(lat[i])}) to ({number(lon[j])}, "
                f"{number(lat[j])}) spans more than 180 degrees of longitude; taken the short "
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
                         f"{number(lat_min)}, lat_max={number(lat_max)}")
    if lon_min == lon_max:
        raise InputError(f"box: lon_min equals lon_max ({number(lon_min)}); use "
                         f"box(-180, 180, ...) for all longitudes")
    if lon_min > lon_max:
        lon_max += 360.0
    if lon_max - lon_min > 360.0:
        raise InputError(f"box: spans {number(lon_max - lon_min)} degrees of longitude, more "
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


def geojson_region(doc, name):
    """A region from a parsed GeoJSON document (RFC 7946: WGS84 longitude, latitude).

    Parameters
    ----------
    doc : object
        The parsed JSON: a FeatureCollection, Feature or bare geometry. Every geometry must be
        a Polygon or MultiPolygon (holes allowed); all of them are merged into one region.
    name : str
        Where the document came from (a file name), for messages.

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon

    Raises
    ------
    InputError
        A geometry of another type (the message names the file and the type found), or a
        non-geographic ``crs``.

    References
    ----------
    Butler, H., et al. (2016). The GeoJSON Format. IETF RFC 7946.
    """
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
