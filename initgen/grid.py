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

import warnings
from dataclasses import dataclass, field

import numpy as np

from . import geodesy, layers as layers_mod
from .errors import InputError, InputWarning
from .restart import Store, VarInfo, find_coordinate

CF_ROLES = {
    "soil_temperature": ("soil_temperature",),
    "soil_liquid": ("liquid_water_content_of_soil_layer", "mass_content_of_liquid_water_in_soil_layer",
                    "volume_fraction_of_liquid_water_in_soil"),
    "soil_ice": ("frozen_water_content_of_soil_layer", "mass_content_of_frozen_water_in_soil_layer",
                 "volume_fraction_of_frozen_water_in_soil"),
    "land_fraction": ("land_area_fraction",),
    "land_mask": ("land_binary_mask",),
    "surface_altitude": ("surface_altitude",),
    "skin_temperature": ("surface_temperature",),
    "snow_temperature": ("temperature_in_surface_snow",),
    "snow_mass": ("surface_snow_amount",),
    "snow_depth": ("surface_snow_thickness",),
    "snow_cover_fraction": ("surface_snow_area_fraction",),
    "cell_area": ("cell_area",),
    # soil water kept as a total (water in all phases) with a phase fraction; names checked against
    # the CF standard name table as the CMIP7 data request copies it (2025) and the CF editor's
    # version-68 update; the table has no frozen mass fraction of soil moisture (layout only)
    "soil_water_total": ("mass_content_of_water_in_soil_layer",),
    "soil_unfrozen_fraction": ("mass_fraction_of_unfrozen_water_in_soil_moisture",),
    "soil_frozen_fraction": (),
}
_LENGTH_UNITS = ("m", "meter", "meters", "metre", "metres", "cm", "centimeter", "centimeters", "mm")

LAYERED_ROLES = ("soil_temperature", "soil_liquid", "soil_ice", "snow_temperature", "snow_layer_mass",
                 "porosity", "psi_sat", "clapp_b", "sand", "clay",
                 "soil_water_total", "soil_frozen_fraction", "soil_unfrozen_fraction")


class Grid:
    """Horizontal grid: coordinates as stored, dims, kind and cell areas (m2).

    Full-grid arrays (``lon``, ``lat``, ``area``, in the horizontal shape) are built on first
    use only: on a regular grid they are ``nlat x nlon`` arrays that a large file's apply never
    needs. :meth:`at` gives them for a window of the grid (per-dimension index arrays), which is
    what the perturbation works on.
    """

    def __init__(self, lon_src, lat_src, dims, kind, area_src, area_source):
        self.lon_src = np.asarray(lon_src, float)
        self.lat_src = np.asarray(lat_src, float)
        self.dims = tuple(dims)
        self.kind = kind
        self.area_src = area_src  # None: computed (regular); 'equal'; or an array of the horizontal shape
        self.area_source = area_source
        if kind == "regular":
            self.shape = (self.lat_src.size, self.lon_src.size)
            self._factors = geodesy.cell_area_factors(self.lon_src, self.lat_src) if area_src is None else None
        else:
            self.shape = tuple(self.lon_src.shape)
            self._factors = None
        self._full = None

    @property
    def lon1d(self):
        return self.lon_src if self.kind == "regular" else None

    @property
    def lat1d(self):
        return self.lat_src if self.kind == "regular" else None

    @property
    def size(self) -> int:
        return int(np.prod(self.shape))

    def full_window(self) -> tuple:
        return tuple(np.arange(n) for n in self.shape)

    def at(self, window: tuple | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(lon, lat, area) for a window: one sorted index array per horizontal dim (None: all)."""
        if window is None:
            window = self.full_window()
        if self.kind == "regular":
            j, i = window
            lon, lat = np.meshgrid(self.lon_src[i], self.lat_src[j])
            if self._factors is not None:
                r_m = geodesy.EARTH_RADIUS_KM * 1.0e3
                area = r_m * r_m * np.outer(self._factors[0][j], self._factors[1][i])
            else:
                area = self._area_window(window)
            return lon, lat, area
        ix = np.ix_(*window)
        return self.lon_src[ix], self.lat_src[ix], self._area_window(window)

    def _area_window(self, window):
        if isinstance(self.area_src, str):
            return np.ones(tuple(len(w) for w in window))
        return np.asarray(self.area_src)[np.ix_(*window)]

    def _all(self):
        if self._full is None:
            self._full = self.at(None)
        return self._full

    @property
    def lon(self) -> np.ndarray:
        return self._all()[0]

    @property
    def lat(self) -> np.ndarray:
        return self._all()[1]

    @property
    def area(self) -> np.ndarray:
        return self._all()[2]

    def extent(self) -> str:
        return (f"lon {np.nanmin(self.lon_src):.2f}..{np.nanmax(self.lon_src):.2f}, "
                f"lat {np.nanmin(self.lat_src):.2f}..{np.nanmax(self.lat_src):.2f}")


@dataclass
class View:
    """How to read one variable of a role as a canonical-order array."""

    info: VarInfo
    hdims: tuple
    layer_dim: str | None = None
    layer_sel: slice = field(default_factory=lambda: slice(None))

    def key(self, hkey: dict) -> tuple:
        out = []
        for d in self.info.dims:
            if d in hkey:
                out.append(hkey[d])
            elif d == self.layer_dim:
                out.append(self.layer_sel)
            else:
                out.append(slice(None))
        return tuple(out)

    def _order(self):
        extra = [d for d in self.info.dims if d not in self.hdims and d != self.layer_dim]
        lay = [self.layer_dim] if self.layer_dim else []
        order = extra + lay + list(self.hdims)
        return [self.info.dims.index(d) for d in order], len(extra)

    def to_canonical(self, arr: np.ndarray) -> np.ndarray:
        perm, nextra = self._order()
        arr = np.transpose(arr, perm)
        e = int(np.prod(arr.shape[:nextra])) if nextra else 1
        return arr.reshape((e,) + arr.shape[nextra:])

    def from_canonical(self, arr: np.ndarray, var_shape: tuple) -> np.ndarray:
        perm, nextra = self._order()
        shaped = arr.reshape(tuple(var_shape[i] for i in perm))
        return np.transpose(shaped, np.argsort(perm))


@dataclass
class StoreLimits:
    """Values a change would put outside what a variable can store (an integer type, packed with
    scale_factor/add_offset or not, or a valid_range), counted per variable during one run.

    :meth:`Role.stored` notes them here (and clips, which is what storing them would do);
    ``plan.run`` then refuses the run, or with recipe key ``limits.packed_out_of_range: clip``
    counts them as clamps. One object is shared by every role of a model file.
    """

    clip: bool = False
    counts: dict = field(default_factory=dict)  # variable -> cells outside its storable range
    ranges: dict = field(default_factory=dict)  # variable -> (lowest, highest, units, how stored)

    def reset(self, clip: bool) -> None:
        self.clip, self.counts, self.ranges = clip, {}, {}

    def note(self, info: VarInfo, n: int, rng: tuple) -> None:
        self.counts[info.name] = self.counts.get(info.name, 0) + n
        how = str(np.dtype(info.dtype))
        packing = [f"{k} {np.asarray(info.attrs[k]).item():g}" for k in ("scale_factor", "add_offset") if k in info.attrs]
        if packing:
            how += " with " + ", ".join(packing)
        if any(k in info.attrs for k in ("valid_range", "valid_min", "valid_max")):
            how += " and valid limits"
        self.ranges[info.name] = (rng[0], rng[1], info.units, how)


@dataclass
class Role:
    """A role bound to one variable (with or without a layer axis) or a list of 2-D variables."""

    name: str
    views: list
    layered: bool
    fallback_units: str = ""  # the layout's units for this role, used when the file has none
    limits: StoreLimits | None = None  # where stored() notes values the variable cannot hold

    @property
    def variables(self) -> list:
        return [v.info.name for v in self.views]

    @property
    def units(self) -> str:
        return self.views[0].info.units or self.fallback_units

    @property
    def nlayers(self) -> int:
        if not self.layered:
            return 0
        if len(self.views) > 1:
            return len(self.views)
        v = self.views[0]
        n = v.info.shape[v.info.dims.index(v.layer_dim)]
        return len(range(n)[v.layer_sel])

    def read(self, store: Store, hkey: dict) -> np.ndarray:
        if len(self.views) == 1:
            v = self.views[0]
            return v.to_canonical(store.read(v.info.name, v.key(hkey)))
        parts = [v.to_canonical(store.read(v.info.name, v.key(hkey))) for v in self.views]
        return np.stack(parts, axis=1)

    def stored(self, values: np.ndarray) -> np.ndarray:
        """``values`` (canonical order, the variable's units) as they will read back once written:
        rounded to the variable's type and packing. The ledger measures changes on these, so its
        counts are those of the file. Values the variable cannot hold (outside an integer type's
        range or a valid_range) are clipped to it and noted in ``self.limits`` for the run to
        refuse or count."""
        from .restart import pack, pack_overflow, storable_range, unpack

        def one(info, vals):
            ok = np.isfinite(vals)
            v = np.where(ok, vals, 0.0)
            over = ok & pack_overflow(v, info.attrs, info.dtype)
            if np.any(over):
                rng = storable_range(info.attrs, info.dtype)
                if self.limits is not None:
                    self.limits.note(info, int(np.count_nonzero(over)), rng)
                v = np.clip(v, rng[0], rng[1])
            q = unpack(pack(v, info.attrs, info.dtype), info.attrs)
            return np.where(ok, q, vals)

        if len(self.views) == 1:
            return one(self.views[0].info, values)
        return np.stack([one(v.info, values[:, i]) for i, v in enumerate(self.views)], axis=1)

    def write(self, store: Store, hkey: dict, values: np.ndarray, changed: np.ndarray) -> int:
        n = 0
        if len(self.views) == 1:
            v = self.views[0]
            shape = _slab_shape(v, hkey, store)
            return store.write_changed(v.info.name, v.key(hkey), v.from_canonical(values, shape),
                                       v.from_canonical(changed, shape))
        for i, v in enumerate(self.views):
            shape = _slab_shape(v, hkey, store)
            n += store.write_changed(v.info.name, v.key(hkey), v.from_canonical(values[:, i], shape),
                                     v.from_canonical(changed[:, i], shape))
        return n


def _slab_shape(view: View, hkey: dict, store: Store) -> tuple:
    shape = []
    for d, s in zip(view.info.dims, view.info.shape):
        if d in hkey:
            shape.append(len(range(s)[hkey[d]]))
        elif d == view.layer_dim:
            shape.append(len(range(s)[view.layer_sel]))
        else:
            shape.append(s)
    return tuple(shape)


@dataclass
class ModelFile:
    """A store with its grid, soil layers and roles resolved."""

    store: Store
    grid: Grid
    roles: dict
    layers: object | None
    layer_dim: str | None
    source: str  # 'layout <name>' or 'CF attributes'
    notes: list = field(default_factory=list)
    water: object | None = None  # water.WaterSpec: how the file keeps soil water (None: it holds none)
    limits: StoreLimits = field(default_factory=StoreLimits)  # shared with every role (Role.stored)

    @property
    def water_convention(self) -> str | None:
        """The file's soil-water convention (``liquid_and_ice``, ``total_and_liquid``, ...), or None."""
        return self.water.convention if self.water is not None else None

    @property
    def phase_split_diagnosed(self) -> bool:
        """True when the file keeps only total water, so the liquid/ice split is diagnosed from the
        temperature (the equilibrium phase rule is then the only one the file can express)."""
        return self.water is not None and self.water.phase_split_diagnosed

    def role(self, name: str) -> Role | None:
        return self.roles.get(name)

    def require(self, name: str, why: str) -> Role:
        r = self.roles.get(name)
        if r is None:
            raise InputError(
                f"{self.store.describe()}: no variable for role '{name}' ({why}); "
                f"name it under roles.{name} in the layout"
            )
        return r


# ---------------------------------------------------------------------------------------------


def _find_cf(store: Store, role: str) -> str | None:
    names = CF_ROLES.get(role, ())
    for vname, info in store.variables.items():
        if str(info.attrs.get("standard_name", "")).strip() in names:
            return vname
    return None


def _var(store: Store, name: str, role: str, where: str) -> VarInfo:
    if name not in store.variables:
        import difflib

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
    elif kind == "regular":
        area = None
        src = "computed for a regular grid on a sphere of R = 6371.0 km"
    else:
        warnings.warn(f"{store.describe()}: no cell-area variable for a {kind} grid; area-weighted means use "
                      "equal weights (name roles.cell_area in the layout for true areas)", InputWarning, stacklevel=3)
        area = "equal"
        src = "equal weights (no cell-area variable)"
    return Grid(lon, lat, dims, kind, area, src)


def _layer_dim_of(info: VarInfo, hdims: tuple, given: str | None, store: Store, where: str) -> str | None:
    rest = [d for d in info.dims if d not in hdims]
    if given:
        if given in hdims:
            raise InputError(f"{where}: layer_dimension '{given}' is a horizontal dimension of the grid {hdims}; "
                             f"name the layer axis of '{info.name}' {tuple(rest)}")
        return given if given in info.dims else None
    if not rest:
        return None
    big = [d for d in rest if store.dims[d] > 1]
    if len(big) == 1:
        return big[0]
    if not big:
        return rest[-1]
    depthish = [d for d in big if d in store.variables and store.variables[d].units.lower() in _LENGTH_UNITS]
    if len(depthish) == 1:
        return depthish[0]
    raise InputError(f"{where}: variable '{info.name}' has several non-horizontal dims {tuple(big)}; "
                     "say which is the layer axis with layer_dimension in the layout")


def _bind(store, role, spec, hdims, layout_data, where) -> Role:
    layered_role = role in LAYERED_ROLES
    names = spec if isinstance(spec, list) else [spec]
    views = []
    nsnow = int(layout_data.get("snow_layers") or 0) if layout_data else 0
    for n in names:
        info = _var(store, n, role, where)
        missing = [d for d in hdims if d not in info.dims]
        if missing:
            raise InputError(f"{store.describe()}: variable '{n}' (role {role}) has dims {info.dims} but not the "
                             f"grid's horizontal dims {hdims}; check the layout")
        ldim = None
        sel = slice(None)
        if layered_role and len(names) == 1:
            given = layout_data.get("layer_dimension") if layout_data else None
            ldim = _layer_dim_of(info, hdims, given, store, where)
            if given and ldim is None and role.startswith("snow_"):
                ldim = _layer_dim_of(info, hdims, None, store, where)   # snow layers on an axis of their own
            if given and ldim is None and role == "soil_temperature":
                raise InputError(f"{where}: layer_dimension '{given}' is not a dimension of '{n}' {info.dims}; "
                                 f"name its layer axis, one of {tuple(d for d in info.dims if d not in hdims)}")
            if ldim and nsnow:
                sel = slice(0, nsnow) if role.startswith("snow_") else slice(nsnow, None)
        views.append(View(info, hdims, ldim, sel))
    layered = layered_role and (len(views) > 1 or views[0].layer_dim is not None)
    for v in views[1:]:
        if v.info.dims != views[0].info.dims:
            raise InputError(f"{store.describe()}: per-layer variables of role {role} differ in dims "
                             f"({views[0].info.name}{views[0].info.dims} vs {v.info.name}{v.info.dims})")
    fallback = ((layout_data or {}).get("units") or {}).get(role) or ""
    return Role(role, views, layered, fallback)


def _depth_layers(store: Store, layout_data: dict | None, soil: Role | None, where: str):
    """Soil layer geometry from the layout's depth roles, or from the layer axis' coordinate."""
    roles = (layout_data or {}).get("roles") or {}
    nsnow = int((layout_data or {}).get("snow_layers") or 0)
    nsoil = soil.nlayers if soil is not None and soil.layered else None
    ctor = {"layer_node_depth": layers_mod.Layers.from_nodes, "layer_interface_depth": layers_mod.Layers.from_interfaces,
            "layer_thickness": layers_mod.Layers.from_thicknesses}
    for role, make in ctor.items():
        spec = roles.get(role)
        if spec is None:
            continue
        key = f"{where}: roles.{role}"
        if isinstance(spec, dict):
            vals = np.asarray(spec["values"], float)
            units, positive = spec["units"], spec["positive"]
        else:
            info = _var(store, spec, role, where)
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
            units = info.units or "m"
            positive = str(info.attrs.get("positive", "down"))
        vals = _soil_part(vals, role, nsnow, nsoil)
        return make(vals, units=units, positive=positive, name=key)
    if soil is not None and soil.layered and soil.views[0].layer_dim:
        ldim = soil.views[0].layer_dim
        if ldim in store.variables:
            info = store.variables[ldim]
            if info.units.lower() in _LENGTH_UNITS or str(info.attrs.get("standard_name", "")) == "depth":
                bounds = info.attrs.get("bounds")
                if bounds and bounds in store.variables:
                    b = store.read(bounds)
                    interfaces = np.concatenate([b[:, 0], b[-1:, 1]])
                    interfaces = _soil_part(interfaces, "layer_interface_depth", nsnow, nsoil)
                    return layers_mod.Layers.from_interfaces(interfaces, units=info.units or "m",
                                                      positive=str(info.attrs.get("positive", "down")),
                                                      name=f"{store.describe()}: {bounds}")
                vals = _soil_part(store.read(ldim), "layer_node_depth", nsnow, nsoil)
                return layers_mod.Layers.from_nodes(vals, units=info.units or "m",
                                             positive=str(info.attrs.get("positive", "down")),
                                             name=f"{store.describe()}: {ldim}")
    return None


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


def open_model(store: Store, layout=None, needed: tuple = ()) -> ModelFile:
    """Resolve roles, grid and soil layers of ``store`` from ``layout`` (a Document) or CF attributes."""
    data = layout.data if layout is not None else None
    where = str(layout.path) if layout is not None and layout.path else ("layout" if layout else "CF detection")
    roles_spec = dict((data or {}).get("roles") or {})
    lon_name = roles_spec.get("longitude") or find_coordinate(store, "lon")
    lat_name = roles_spec.get("latitude") or find_coordinate(store, "lat")
    if lon_name and lon_name not in store.variables:
        _var(store, lon_name, "longitude", where)
    if lat_name and lat_name not in store.variables:
        _var(store, lat_name, "latitude", where)
    if not lon_name or not lat_name:
        raise InputError(f"{store.describe()}: no longitude/latitude variables found; give them standard_name "
                         "longitude/latitude or name roles.longitude and roles.latitude in a layout")
    area_name = roles_spec.get("cell_area") or (None if data else _find_cf(store, "cell_area"))
    if area_name:
        _var(store, area_name, "cell_area", where)
    grid = build_grid(store, lon_name, lat_name, area_name, where)
    bound = {}
    all_roles = list(CF_ROLES) + ["porosity", "psi_sat", "clapp_b", "sand", "clay", "snow_layer_mass",
                                  "snow_layer_count"]
    for role in all_roles:
        spec = roles_spec.get(role)
        if spec is None and data is None:
            spec = _find_cf(store, role)
        if spec is None or role == "cell_area":
            continue
        bound[role] = _bind(store, role, spec, grid.dims, data, where)
    from . import water as water_mod

    # the physics' liquid and ice may come from any water convention (water.py): checked there
    water_needed = any(r in needed for r in ("soil_liquid", "soil_ice"))
    missing = [r for r in needed if r not in bound and not (water_needed and r in water_mod.WATER_ROLES)]
    if missing:
        how = "the layout" if data else "CF standard_name attributes"
        raise InputError(f"{store.describe()}: could not find role(s) {', '.join(missing)} by {how}; "
                         f"map them under roles: in a layout (--layout)")
    soil = bound.get("soil_temperature")
    layer_geom = _depth_layers(store, data, soil, where)
    ldim = soil.views[0].layer_dim if soil is not None and soil.layered else None
    model = ModelFile(store, grid, bound, layer_geom, ldim, f"layout {layout.name}" if layout else "CF attributes")
    for r in bound.values():
        r.limits = model.limits
    model.water = water_mod.resolve(bound, data, f"{store.describe()} ({where})" if data else store.describe(),
                                    required=water_needed)
    return model
