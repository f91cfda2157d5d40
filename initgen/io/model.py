"""The model file as initgen sees it: the grid (lon, lat, cell areas, kind), each role's variable(s)
and how to read a horizontal slab of it in a canonical axis order: ``(E, L, *horizontal)`` for
layered roles and ``(E, *horizontal)`` for 2-D roles, where ``E`` gathers any other axes (a time
axis of length 1, say) and ``L`` is the layer axis.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from initgen.errors import InputError
from initgen.io.coding import pack, pack_overflow, storable_range, unpack
from initgen.io.stores import Store, VarInfo
from initgen.science import geodesy

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
    def has_area(self) -> bool:
        """False when no cell areas could be had (equal weights; no totals in kg or J)."""
        return not isinstance(self.area_src, str)

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
        if len(self.views) > 1 or self.views[0].layer_dim is None:
            return len(self.views)
        v = self.views[0]
        n = v.info.shape[v.info.dims.index(v.layer_dim)]
        return len(range(n)[v.layer_sel])

    def read(self, store: Store, hkey: dict) -> np.ndarray:
        if len(self.views) == 1:
            v = self.views[0]
            out = v.to_canonical(store.read(v.info.name, v.key(hkey)))
            # one 2-D variable standing for one layer: give it its layer axis of length 1
            return out[:, None] if self.layered and v.layer_dim is None else out
        parts = [v.to_canonical(store.read(v.info.name, v.key(hkey))) for v in self.views]
        return np.stack(parts, axis=1)

    def stored(self, values: np.ndarray) -> np.ndarray:
        """``values`` (canonical order, the variable's units) as they will read back once written:
        rounded to the variable's type and packing. The ledger measures changes on these, so its
        counts are those of the file. Values the variable cannot hold (outside an integer type's
        range or a valid_range) are clipped to it and noted in ``self.limits`` for the run to
        refuse or count."""

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
    layout: object | None = None  # the layout Document it was opened with (None: CF attributes only)

    @property
    def water_convention(self) -> str | None:
        """The file's soil-water convention (``liquid_and_ice``, ``total_and_liquid``, ...), or None."""
        return self.water.convention if self.water is not None else None

    @property
    def phase_split_diagnosed(self) -> bool:
        """True when the file keeps only total water, so the liquid/ice split is diagnosed from the
        temperature (the equilibrium phase rule is then the only one the file can express)."""
        return self.water is not None and self.water.phase_split_diagnosed
    role_sources: dict = field(default_factory=dict)  # role -> 'layout roles.X' or 'CF standard_name ...'
    grid_file: str | None = None  # the layout's separate grid file, when there is one

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
