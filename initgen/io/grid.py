"""Find a model file's grid, layer axis and role variables, from a layout or CF attributes.

A *role* is a quantity initgen knows about (``soil_temperature``, ``land_fraction``, ...). A
layout maps roles to variable names; without one, roles are found from CF attributes
(``standard_name``, ``units``, ``axis``, ``positive``). The result, a :class:`ModelFile`, says
for each role which variable(s) hold it and how to read a horizontal slab of it in a canonical
axis order: ``(E, L, *horizontal)`` for layered roles and ``(E, *horizontal)`` for 2-D roles,
where ``E`` gathers any other axes (a time axis of length 1, say) and ``L`` is the layer axis.

Three grid kinds go through one code path: ``regular`` (1-D lon and lat on their own dims),
``curvilinear`` (2-D lon and lat) and ``points`` (1-D lon and lat on one shared dimension, such as
a model's list of land columns).
"""

from __future__ import annotations

import difflib
import re
import warnings
from pathlib import Path

import numpy as np

from initgen.errors import InputError, InputWarning
from initgen.io import water as water_mod
from initgen.io.cf import CF_ROLES, _cf_role, _per_layer_depths, _record_dims, is_length
from initgen.io.layout import NO_ROLES, DepthValues, GridFile, Layout
from initgen.io.model import LAYERED_ROLES, Grid, ModelFile, Role, View
from initgen.io.stores import NetCDFStore, Store, VarInfo, find_coordinate
from initgen.science import geodesy
from initgen.science import layers as layers_mod


def _var(store: Store, name: str, role: str, where: str) -> VarInfo:
    if name not in store.variables:
        hint = difflib.get_close_matches(name, list(store.variables), n=1)
        extra = f"; did you mean '{hint[0]}'?" if hint else ""
        raise InputError(f"{where}: roles.{role} names variable '{name}', which {store.describe()} does not have{extra}")
    return store.variables[name]


def build_grid(store: Store, lon_name: str, lat_name: str, area_name: str | None, where: str) -> Grid:
    lon_i, lat_i = store.variables[lon_name], store.variables[lat_name]
    lon = store.read(lon_name)
    lat = store.read(lat_name)
    if not np.all(np.isfinite(lon)) or not np.all(np.isfinite(lat)):
        raise InputError(f"{store.describe()}: longitude '{lon_name}' or latitude '{lat_name}' has missing values; "
                         "every grid point needs a position")
    if lon.min() < -180.0 - 1e-6 or lon.max() > 360.0 + 1e-6:
        raise InputError(f"{store.describe()}: longitude '{lon_name}' outside -180..360 degrees "
                         f"({lon.min():.6g}..{lon.max():.6g}); is it in radians or projected metres?")
    if lat.min() < -90.0 - 1e-6 or lat.max() > 90.0 + 1e-6:
        raise InputError(f"{store.describe()}: latitude '{lat_name}' outside -90..90 degrees "
                         f"({lat.min():.6g}..{lat.max():.6g}); is it in radians or projected metres?")
    if lon.ndim == 1 and lat.ndim == 1 and lon_i.dims != lat_i.dims:
        kind = "regular"
        dims = (lat_i.dims[0], lon_i.dims[0])
    elif lon.ndim == 1 and lat.ndim == 1:
        kind = "points"
        dims = lon_i.dims
    elif lon.ndim == 2 and lat.ndim == 2 and lon_i.dims == lat_i.dims:
        kind = "curvilinear"
        dims = lon_i.dims
    else:
        raise InputError(f"{store.describe()}: cannot tell the grid from longitude {lon_name}{lon_i.dims} and "
                         f"latitude {lat_name}{lat_i.dims}; they must be 1-D on their own dims, 1-D on one shared "
                         "dim, or 2-D on the same dims")
    if area_name:
        info = store.variables[area_name]
        if info.dims != dims:
            raise InputError(f"{store.describe()}: cell area '{area_name}' has dims {info.dims}, expected {dims}")
        area = store.read(area_name)
        u = info.units.lower().replace("^", "").replace("**", "")
        if u in ("km2", "km-2", "square_kilometers", "km 2"):
            area = area * 1e6
        elif u not in ("m2", "m 2", "square_meters", "square_metres", ""):
            raise InputError(f"{store.describe()}: cell area '{area_name}' has units '{info.units}'; expected m2 or km2")
        area = np.where(np.isfinite(area), area, 0.0)
        src = f"variable {area_name}"
    elif kind == "regular" and lon_i.attrs.get("bounds") in store.variables and lat_i.attrs.get("bounds") in store.variables:
        blon = np.asarray(store.read(lon_i.attrs["bounds"]), float)
        blat = np.asarray(store.read(lat_i.attrs["bounds"]), float)
        if blon.shape != (lon.size, 2) or blat.shape != (lat.size, 2):
            raise InputError(f"{store.describe()}: CF cell bounds '{lon_i.attrs['bounds']}' {blon.shape} / "
                             f"'{lat_i.attrs['bounds']}' {blat.shape} do not have shape (n, 2) of their coordinates")
        r_m = geodesy.EARTH_RADIUS_KM * 1.0e3
        area = r_m * r_m * geodesy.cell_areas_from_bounds_1d(blon, blat)
        src = (f"computed from the CF cell bounds {lon_i.attrs['bounds']}/{lat_i.attrs['bounds']} on a sphere of "
               f"R = {geodesy.EARTH_RADIUS_KM} km")
    elif kind == "regular":
        area = None
        src = "computed for a regular grid on a sphere of R = 6371.0 km"
    elif kind == "curvilinear" and lon_i.attrs.get("bounds") in store.variables \
            and lat_i.attrs.get("bounds") in store.variables:
        blon = np.asarray(store.read(lon_i.attrs["bounds"]), float)
        blat = np.asarray(store.read(lat_i.attrs["bounds"]), float)
        if blon.shape != lon.shape + (4,) or blat.shape != lat.shape + (4,):
            raise InputError(f"{store.describe()}: CF cell corners '{lon_i.attrs['bounds']}' {blon.shape} / "
                             f"'{lat_i.attrs['bounds']}' {blat.shape} do not have the shape {lon.shape + (4,)} "
                             "(nj, ni, 4) of 2-D cell corners")
        area = geodesy.spherical_polygon_area_m2(blon, blat)
        src = (f"computed from the CF cell corners {lon_i.attrs['bounds']}/{lat_i.attrs['bounds']} "
               f"(great-circle edges) on a sphere of R = {geodesy.EARTH_RADIUS_KM} km")
    else:
        why = ("a list of points has no cell area; name roles.cell_area in the layout" if kind == "points" else
               "a curvilinear grid without a cell-area variable or CF cell corners (bounds); name roles.cell_area "
               "in the layout or add corner bounds")
        warnings.warn(f"{store.describe()}: no cell-area variable and no cell bounds ({why}); area-weighted means use equal weights and totals "
                      "in kg and J are left out", InputWarning, stacklevel=3)
        area = "equal"
        src = f"unknown: {why}; means use equal weights and totals are left out"
    return Grid(lon, lat, dims, kind, area, src)


def _layer_dim_of(info: VarInfo, hdims: tuple, given: str | None, store: Store, where: str) -> str | None:
    records = _record_dims(store)
    rest = [d for d in info.dims if d not in hdims and d not in records]
    if given:
        if given in hdims:
            raise InputError(f"{where}: layer_dimension '{given}' is a horizontal dimension of the grid {hdims}; "
                             f"name the layer axis of '{info.name}' {tuple(rest)}")
        return given if given in info.dims else None
    if not rest:
        return None
    big = [d for d in rest if store.dims[d] > 1]
    if not big and [d for d in info.dims if d in records and store.dims[d] > 1]:
        return None
    if len(big) == 1:
        return big[0]
    if not big:
        return rest[-1]
    depthish = [d for d in big if d in store.variables and is_length(store.variables[d].units)]
    if len(depthish) == 1:
        return depthish[0]
    raise InputError(f"{where}: variable '{info.name}' has several non-horizontal dims {tuple(big)}; "
                     "say which is the layer axis with layer_dimension in the layout")


def _bind(store, role, spec, hdims, layout: Layout | None, where) -> Role:
    layered_role = role in LAYERED_ROLES
    per_layer = isinstance(spec, (list, tuple))  # 2-D variables, one per layer (a layout's tuple, CF's list)
    names = list(spec) if per_layer else [spec]
    views = []
    nsnow = layout.snow_layers if layout is not None else 0
    for n in names:
        info = _var(store, n, role, where)
        missing = [d for d in hdims if d not in info.dims]
        if missing:
            raise InputError(f"{store.describe()}: variable '{n}' (role {role}) has dims {info.dims} but not the "
                             f"grid's horizontal dims {hdims}; check the layout")
        ldim = None
        sel = slice(None)
        if layered_role and len(names) == 1:
            given = layout.layer_dimension if layout is not None else None
            ldim = _layer_dim_of(info, hdims, given, store, where)
            if given and ldim is None and role.startswith("snow_"):
                ldim = _layer_dim_of(info, hdims, None, store, where)   # snow layers on an axis of their own
            if given and ldim is None and role == "soil_temperature":
                raise InputError(f"{where}: layer_dimension '{given}' is not a dimension of '{n}' {info.dims}; "
                                 f"name its layer axis, one of {tuple(d for d in info.dims if d not in hdims)}")
            if ldim and nsnow:
                sel = slice(0, nsnow) if role.startswith("snow_") else slice(nsnow, None)
        views.append(View(info, hdims, ldim, sel))
    layered = layered_role and (per_layer or views[0].layer_dim is not None)
    def big(info):  # axes of length 1 (a per-layer depth axis, a single record) may differ by name
        return [(d, n) for d, n in zip(info.dims, info.shape) if n > 1]

    for v in views[1:]:
        if big(v.info) != big(views[0].info):
            raise InputError(f"{store.describe()}: per-layer variables of role {role} differ in dims "
                             f"({views[0].info.name}{views[0].info.dims} vs {v.info.name}{v.info.dims})")
    return Role(role, views, layered, layout.units_of(role) if layout is not None else "")


def _depth_values(store: Store, spec, role: str, soil: Role | None, key: str):
    """A layout depth role (values or a variable) as (values, units, positive)."""
    if isinstance(spec, DepthValues):
        return np.asarray(spec.values, float), spec.units, spec.positive
    info = _var(store, spec, role, key.rsplit(": roles.", 1)[0])
    vals = store.read(spec)
    if vals.ndim > 1:
        # depth per column: must be the same everywhere (a per-column geometry is not supported yet)
        hd = _hdims_of(soil)
        order = [i for i, d in enumerate(info.dims) if d not in hd] + \
                [i for i, d in enumerate(info.dims) if d in hd]
        moved = np.transpose(vals, order)
        nlay = int(np.prod([info.shape[i] for i in order if info.dims[i] not in hd]))
        flat = moved.reshape(nlay, -1)
        col = flat[:, 0]
        if not np.allclose(flat, col[:, None], equal_nan=True):
            raise InputError(f"{key}: variable '{spec}' varies between columns; initgen needs one set of "
                             "layer depths for the whole grid (give values in the layout)")
        vals = col
    return vals, info.units or "m", str(info.attrs.get("positive", "down"))


def _depth_layers(store: Store, layout: Layout | None, soil: Role | None, where: str):
    """Soil layer geometry from every source the layout and the file give (layers.resolve_layers).

    Sources: the layout's depth roles (node depths, interfaces, thicknesses); the layer axis'
    coordinate (node depths) and its CF ``bounds``; for per-layer 2-D variables, their CF scalar
    depth coordinates (and bounds), layer top/bottom attributes and depth ranges written in their
    names or long_names. Sources that disagree are refused naming both; interfaces are never put
    halfway between nodes unless the layout says ``interfaces: midpoints_between_nodes``.
    """
    roles = layout.roles if layout is not None else NO_ROLES
    nsnow = layout.snow_layers if layout is not None else 0
    nsoil = soil.nlayers if soil is not None and soil.layered else None
    cands = []
    kinds = {"layer_node_depth": "node", "layer_interface_depth": "interface", "layer_thickness": "thickness"}
    for role, kind in kinds.items():
        spec = roles.get(role)
        if spec is None:
            continue
        key = f"{where}: roles.{role}"
        vals, units, positive = _depth_values(store, spec, role, soil, key)
        vals = _soil_part(vals, role, nsnow, nsoil)
        z = layers_mod._to_depth_m(vals, units, positive, key)
        label = f"layout roles.{role}" + (f" (variable {spec})" if isinstance(spec, str) else " (values)")
        cands.append((kind, z, label))
    if soil is not None and soil.layered and soil.views[0].layer_dim and len(soil.views) == 1:
        ldim = soil.views[0].layer_dim
        info = store.variables.get(ldim)
        if info is not None and (is_length(info.units) or str(info.attrs.get("standard_name", "")) == "depth"):
            units = info.units or "m"
            pos = str(info.attrs.get("positive", "down"))
            bounds = info.attrs.get("bounds")
            if bounds and bounds in store.variables:
                bv = np.asarray(store.read(bounds), float)
                if bv.ndim != 2 or bv.shape[1] != 2:
                    raise InputError(f"{store.describe()}: bounds '{bounds}' of '{ldim}' has shape {bv.shape}; CF "
                                     "bounds of a layer axis have shape (layers, 2)")
                name = f"{store.describe()}: {bounds}"
                tb = np.abs(np.stack([layers_mod._to_depth_m(bv[:, 0], units, pos, name),
                                      layers_mod._to_depth_m(bv[:, 1], units, pos, name)], axis=1))
                tb = np.sort(tb, axis=1)
                if nsoil is not None and nsnow and tb.shape[0] == nsoil + nsnow:
                    tb = tb[nsnow:]
                cands.append(("top_bottom", tb, f"CF bounds '{bounds}' of the layer axis '{ldim}'"))
            vals = _soil_part(store.read(ldim), "layer_node_depth", nsnow, nsoil)
            cands.append(("node", layers_mod._to_depth_m(vals, units, pos, f"{store.describe()}: {ldim}"),
                          f"the layer axis coordinate '{ldim}'"))
    if soil is not None and (len(soil.views) > 1 or (soil.layered and soil.views[0].layer_dim is None)):
        cands.extend(_per_layer_depths(store, [v.info for v in soil.views]))
    midpoints = layout is not None and layout.interfaces == "midpoints_between_nodes"
    if not cands:
        if midpoints:
            raise InputError(f"{where}: interfaces: midpoints_between_nodes needs node depths, and none were found; "
                             "name roles.layer_node_depth")
        return None
    return layers_mod.resolve_layers(cands, midpoints=midpoints, name=f"{store.describe()}")


def _hdims_of(role):
    return role.views[0].hdims if role else ()


def _soil_part(vals, role, nsnow, nsoil):
    vals = np.asarray(vals, float)
    if nsoil is None:
        return vals
    extra = 1 if role == "layer_interface_depth" else 0
    if vals.size == nsoil + extra:
        return vals
    if nsnow and vals.size == nsnow + nsoil + extra:
        return vals[nsnow:]
    return vals  # the layers module reports the size mismatch later via the plan


def _check_records(store: Store, roles: dict) -> None:
    """Refuse a role variable with several records (a time axis longer than 1): initgen perturbs
    one state. A record axis of length 1 is read and written like any other length-1 axis; other
    extra axes (sub-grid tiles, say) keep being perturbed entry by entry, as before."""
    records = _record_dims(store)
    for role in roles.values():
        for v in role.views:
            for d, n in zip(v.info.dims, v.info.shape):
                if d in records and d not in v.hdims and d != v.layer_dim and n > 1:
                    raise InputError(f"{store.describe()}: variable '{v.info.name}' (role {role.name}) has {n} "
                                     f"records along '{d}'; initgen perturbs one state at a time: write each record "
                                     "to a file of its own and apply the recipe to each")


def _check_per_layer_depths(store: Store, bound: dict, soil, layer_geom) -> None:
    """Per-layer 2-D variables of the other layered roles (water, ice, parameters) that carry
    their own depths must describe the soil temperature's layers, in the same order."""
    ref = ("top_bottom", np.stack([layer_geom.top_m, layer_geom.bottom_m], axis=1),
           "the soil temperature's layers")
    for name, role in bound.items():
        if role is soil or name == "snow_temperature" or len(role.views) < 2:
            continue
        cands = _per_layer_depths(store, [v.info for v in role.views])
        if cands:
            layers_mod.resolve_layers([ref] + [c for c in cands if c[0] != "node"],
                                      name=f"{store.describe()}: role {name}")


def _grid_store(spec: GridFile | None, layout_path, where: str, store: Store):
    """The separate grid file a layout names (``grid_file``, relative to the layout's folder), opened
    read-only, or None."""
    if spec is None:
        return None

    text = str(spec.path)
    if "{tile}" in text:
        # one grid file per tile: the tile comes from the restart's own file name

        name = Path(getattr(store, "label", None) or store.path or "").name
        pattern = spec.tile_pattern or r"tile(\d+)"
        try:
            m = re.search(pattern, name)
        except re.error as exc:
            raise InputError(f"{where}: grid_file.tile_pattern {pattern!r} is not a regular expression ({exc})") from None
        if m is None or not m.groups():
            raise InputError(f"{where}: grid_file.path '{text}' has {{tile}} but the input's name '{name}' does not "
                             f"match grid_file.tile_pattern {pattern!r} (with one group for the tile)")
        text = text.replace("{tile}", m.group(1))
    path = Path(text)
    if not path.is_absolute():
        base = Path(layout_path).parent if layout_path else Path.cwd()
        path = base / path
    if not path.is_file():
        raise InputError(f"{where}: grid_file.path '{text}' does not exist ({path}); give the file holding "
                         "the grid's longitude and latitude")
    return NetCDFStore(path)


def open_model(store: Store, layout=None, needed: tuple = ()) -> ModelFile:
    """Resolve roles, grid and soil layers of ``store`` from ``layout`` and CF attributes.

    ``layout`` is a layout document (config/recipe: read through its ``view``, an
    :class:`initgen.io.layout.Layout`; its ``path`` and ``name`` name it), or None for CF
    attributes only. A layout overrides the roles it names; every other role is found by CF
    attributes, and ``role_sources`` says which came from where.
    """
    lay: Layout | None = layout.view if layout is not None else None
    where = str(layout.path) if layout is not None and layout.path else ("layout" if layout else "CF detection")
    roles_spec = lay.roles if lay is not None else NO_ROLES
    gspec = lay.grid_file if lay is not None else None
    gstore = _grid_store(gspec, layout.path if layout is not None else None, where, store)
    sources = {}
    try:
        cstore = gstore or store
        grid_lon, grid_lat = (gspec.longitude, gspec.latitude) if gspec is not None else (None, None)
        lon_name = grid_lon or roles_spec.longitude or find_coordinate(cstore, "lon")
        lat_name = grid_lat or roles_spec.latitude or find_coordinate(cstore, "lat")
        if lon_name and lon_name not in cstore.variables:
            _var(cstore, lon_name, "longitude", where)
        if lat_name and lat_name not in cstore.variables:
            _var(cstore, lat_name, "latitude", where)
        if not lon_name or not lat_name:
            raise InputError(f"{cstore.describe()}: no longitude/latitude variables found; give them standard_name "
                             "longitude/latitude or name roles.longitude and roles.latitude in a layout")
        if gstore is not None:
            area_name = gspec.cell_area
            if area_name:
                _var(gstore, area_name, "cell_area", where)
        else:
            area_name = roles_spec.cell_area
            if area_name:
                _var(store, area_name, "cell_area", where)
                sources["cell_area"] = "layout roles.cell_area"
            else:
                found = _cf_role(store, "cell_area", (), set())
                area_name = found[0] if found else None
                if found:
                    sources["cell_area"] = found[1]
        grid = build_grid(cstore, lon_name, lat_name, area_name, where)
        if gstore is not None:
            for d, n in zip(grid.dims, grid.shape):
                if store.dims.get(d) != n:
                    raise InputError(f"{where}: grid_file {gstore.describe()} has dimension '{d}' of length {n}, "
                                     f"but {store.describe()} has "
                                     + (f"length {store.dims[d]}" if d in store.dims else "no such dimension")
                                     + "; the grid file must describe the restart's horizontal dimensions")
            for r, n in (("longitude", lon_name), ("latitude", lat_name), ("cell_area", area_name)):
                if n:
                    sources[r] = f"grid_file {gstore.describe()} variable {n}"
        else:
            sources.setdefault("longitude", "layout roles.longitude" if roles_spec.longitude else
                               "CF attributes (find_coordinate)")
            sources.setdefault("latitude", "layout roles.latitude" if roles_spec.latitude else
                               "CF attributes (find_coordinate)")
    finally:
        if gstore is not None:
            gstore.close()
    bound = {}
    records = _record_dims(store)
    all_roles = list(CF_ROLES) + ["porosity", "psi_sat", "clapp_b", "sand", "clay", "snow_layer_mass",
                                  "snow_layer_count"]
    for role in all_roles:
        if role == "cell_area":
            continue
        spec = roles_spec.get(role)
        how = f"layout roles.{role}"
        if spec is None:
            found = _cf_role(store, role, grid.dims, records)
            if found is None:
                continue
            spec, how = found
        bound[role] = _bind(store, role, spec, grid.dims, lay, where)
        sources[role] = how

    # the physics' liquid and ice may come from any water convention (io/water.py): checked there
    water_needed = any(r in needed for r in ("soil_liquid", "soil_ice"))
    missing = [r for r in needed if r not in bound and not (water_needed and r in water_mod.WATER_ROLES)]
    if missing:
        how = "the layout or CF standard_name attributes" if lay is not None else "CF standard_name attributes"
        raise InputError(f"{store.describe()}: could not find role(s) {', '.join(missing)} by {how}; "
                         f"map them under roles: in a layout (--layout)")
    _check_records(store, bound)
    soil = bound.get("soil_temperature")
    layer_geom = _depth_layers(store, lay, soil, where)
    if layer_geom is not None and layer_geom.interfaces_known:
        _check_per_layer_depths(store, bound, soil, layer_geom)
    ldim = soil.views[0].layer_dim if soil is not None and soil.layered else None
    src = f"layout {layout.name}" + (" and CF attributes" if any(not v.startswith(("layout", "grid_file"))
                                                                 for v in sources.values()) else "") \
        if layout else "CF attributes"
    model = ModelFile(store, grid, bound, layer_geom, ldim, src, role_sources=sources,
                      grid_file=None if gstore is None else str(gstore.path), layout=layout)
    for r in bound.values():
        r.limits = model.limits
    water_where = f"{store.describe()} ({where})" if lay is not None else store.describe()
    model.water = water_mod.resolve(bound, lay, water_where, required=water_needed)
    return model
