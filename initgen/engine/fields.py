"""The plan's arrays from the recipe: region shapes and the files they name, horizontal weights,
the window of grid indices a region can touch, surface anomalies and vertical profile factors.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from initgen.config.recipe import Document, resolve_path
from initgen.config.views import Anomaly, Physics, Profile, Region, Shape
from initgen.errors import InputError, InputWarning
from initgen.io.atomic import sha256_file
from initgen.io import readers
from initgen.io.grid import open_model
from initgen.io.model import ModelFile
from initgen.io.shipped import shipped_file
from initgen.io.stores import NetCDFStore, read_field
from initgen.science import geodesy, profiles, sources
from initgen.science.layers import Layers, units_to_metres
from initgen.science.regions import factors as regions_factors
from initgen.science.regions import mask as regions_mask
from initgen.science.regions import shapes as regions_shapes

MIN_WEIGHT = 1e-6  # weights below this are set to 0


@dataclass
class BlockPlan:
    name: str
    index: int
    targets: tuple
    weight: np.ndarray  # window shape
    anomaly: np.ndarray | None  # window shape, K
    factors: np.ndarray | None  # per soil layer
    surface_factor: float
    donor: ModelFile | None = None
    snow_mass_mode: str = "add"
    snow_mass_change: float = 0.0
    notes: list = field(default_factory=list)


@dataclass
class Plan:
    recipe: Document
    model: ModelFile
    blocks: list
    physics: Physics  # the recipe's physics section (recipe.view.physics)
    region: np.ndarray  # bool, window shape: any block's weight > 0
    window: tuple | None = None  # per horizontal dim, sorted file indices; None: the whole grid
    member_scale: float = 1.0
    member_offset_K: float = 0.0
    noise: np.ndarray | None = None  # window shape, K
    files: dict = field(default_factory=dict)  # files the recipe reads: key -> {path, sha256}

    def __post_init__(self):
        if self.window is None:
            self.window = self.model.grid.full_window()
        self.lon, self.lat, self.area = self.model.grid.at(self.window)
        # the soil quantities are per m2 of land: weight means and totals by land area
        f = land_fraction(self.model, self.window)
        if f is not None:
            self.area = self.area * np.clip(np.nan_to_num(f, nan=0.0), 0.0, 1.0)

    def effective_anomaly(self, b: BlockPlan, index=Ellipsis) -> np.ndarray:
        """The anomaly block ``b`` imposes for this plan's member (K, on the window, or at ``index``
        of it): A(x) x the member's scale x sign, plus its offset, plus its noise. The one place it
        is computed: the run applies it, the ledger summarises it, the preview report draws it."""
        a = b.anomaly[index] * self.member_scale + self.member_offset_K
        if self.noise is not None:
            a = a + self.noise[index]
        return a

    def full(self, arr: np.ndarray, fill: float = 0.0) -> np.ndarray:
        """A window-shaped array placed on the whole grid (for maps and mask files)."""
        out = np.full(self.model.grid.shape, fill, dtype=np.result_type(arr, np.float64))
        out[np.ix_(*self.window)] = arr
        return out

    @property
    def targets(self) -> tuple:
        out = []
        for b in self.blocks:
            for t in b.targets:
                if t not in out:
                    out.append(t)
        return tuple(out)


def _keyed(exc: InputError, key: str) -> InputError:
    """An error from a science module (which knows no recipe keys), with the recipe key in front."""
    return exc if exc.key is not None else InputError(f"recipe key {key}: {exc}", key=key)


def shape_geometry(shape: Shape, recipe: Document, key: str, allow_outside: bool):
    try:
        return _shape_geometry(shape, recipe, key, allow_outside)
    except InputError as exc:
        raise _keyed(exc, key) from None
    except RecursionError:  # json.load of an absurdly nested file
        raise InputError(f"recipe key {key}: the shape's file is nested too deeply to be a GeoJSON region; "
                         "fix the file", key=key) from None


MAX_ABS_LON = 720.0  # two turns either way; beyond, wrapping a shape would take for ever


def _shape_geometry(shape: Shape, recipe: Document, key: str, allow_outside: bool):
    if shape.geojson:
        path = resolve_shape_file(recipe, shape.geojson, key + ".geojson", allow_outside)
        geom = readers.read_geojson(path)
        west, _, east, _ = geom.bounds
        if not (-MAX_ABS_LON <= west and east <= MAX_ABS_LON):
            raise InputError(f"recipe key {key}.geojson: {path.name} has longitudes {west:.6g}..{east:.6g}, beyond "
                             f"+-{MAX_ABS_LON:g} degrees; give longitude/latitude in degrees (EPSG:4326)", key=f"{key}.geojson")
        return geom
    if shape.box:
        (w, e), (s, n) = shape.box.lon, shape.box.lat
        if s >= n:
            raise InputError(f"recipe key {key}.box.lat: south ({s}) must be below north ({n})", key=f"{key}.box.lat")
        return regions_shapes.box(w, e, s, n)
    if shape.vertices:
        return regions_shapes.polygon(shape.vertices)
    return regions_shapes.published(shape.published.set, shape.published.regions)


def resolve_shape_file(recipe: Document, rel: str, key: str, allow_outside: bool) -> Path:
    """A GeoJSON path relative to the recipe; a bare file name that is not beside the recipe is
    looked up in the shipped masks/ library. A path with folders is never replaced by a shipped
    file of the same name."""

    bare = Path(rel).name == rel
    if bare and not (recipe.base_dir / rel).exists():
        lib = shipped_file("masks", rel)
        if lib is not None:
            return lib
        raise InputError(f"recipe key {key}: file '{rel}' not found beside the recipe ({recipe.base_dir}) nor in "
                         "the shipped masks library; check the name", key=key)
    return resolve_path(recipe, rel, key, allow_outside)


def referenced_files(recipe: Document, allow_outside: bool = False) -> dict:
    """Every file the recipe reads (GeoJSON shapes, anomaly fields, climatologies, donors), by
    recipe key: its resolved path and sha256. The recipe's hash covers its text; these hashes
    cover what its text points to, so a changed outline or field shows in the provenance."""

    out = {}
    for i, b in enumerate(recipe.view.perturbations):
        key = f"perturbations[{i}]"
        for part in ("include", "exclude"):
            for j, shape in enumerate(getattr(b.region, part)):
                if shape.geojson:
                    k = f"{key}.region.{part}[{j}].geojson"
                    out[k] = resolve_shape_file(recipe, shape.geojson, k, allow_outside)
        for kind, names in (("field", ("file",)), ("bias", ("model_file", "reference_file")), ("donor", ("file",))):
            source = getattr(b.anomaly, kind)
            for name in names:
                if source is not None:
                    k = f"{key}.anomaly.{kind}.{name}"
                    out[k] = resolve_path(recipe, getattr(source, name), k, allow_outside)
    return {k: {"path": str(p), "sha256": sha256_file(p)} for k, p in out.items()}


def region_geometry(region: Region, recipe: Document, key: str, allow_outside: bool):
    inc = [shape_geometry(s, recipe, f"{key}.include[{i}]", allow_outside) for i, s in enumerate(region.include)]
    exc = [shape_geometry(s, recipe, f"{key}.exclude[{i}]", allow_outside) for i, s in enumerate(region.exclude)]
    return regions_shapes.combine(inc, exc)


def horizontal_weight(model: ModelFile, region: Region, geom, name: str, window: tuple,
                      lon: np.ndarray, lat: np.ndarray, key: str = "region") -> np.ndarray:
    """w(x) = taper(x) * elevation ramp(x) * land weight(x) on the window; 0 where land data are missing."""
    grid = model.grid
    if region.taper_km > 0:
        w = regions_mask.taper_weight(lon, lat, geom, region.taper_km, placement=region.taper_placement)
    else:
        w = regions_mask.hard_mask(lon, lat, geom).astype(np.float64)
    if not np.any(w > 0):
        raise InputError(f"region '{name}' contains no grid point; the grid spans {grid.extent()}; check the "
                         "region's coordinates and longitude convention")
    regions_factors.check_coverage(w > 0, name, lon, lat)
    elev = region.elevation
    if elev:
        role = model.require("surface_altitude", f"region '{name}' has an elevation band")
        z = read_window(model, role, window) * _metres_per(role, model)
        w = w * regions_factors.elevation_ramp(z, elev.min_m, elev.ramp_m, elev.max_m, elev.max_ramp_m)
    frac = model.role("land_fraction")
    mask = model.role("land_mask")
    if frac is not None and region.use_land_fraction:
        w = w * regions_factors.land_weight(fraction=land_fraction(model, window))
    elif mask is not None:
        w = w * regions_factors.land_weight(mask=read_window(model, mask, window), threshold=region.land_threshold)
    # the last sliver of a taper (w < 1e-6, a micro-kelvin per kelvin of anomaly) cannot change a
    # stored value; counting it as region would only blur the ledger
    w = np.where(np.isfinite(w) & (w >= MIN_WEIGHT), w, 0.0)
    if not np.any(w > 0):
        found = ""
        if elev:
            inside = regions_mask.hard_mask(lon, lat, geom) & np.isfinite(z)
            if np.any(inside):
                found = f"; surface altitude in the region spans {np.nanmin(z[inside]):.0f}..{np.nanmax(z[inside]):.0f} m"
        raise InputError(f"recipe key {key}: region '{name}' keeps no land grid cell above weight 0 after the "
                         f"elevation band and land weighting{found}; check elevation.min_m/max_m and the land data", key=key)
    return w


def _metres_per(role, model: ModelFile) -> float:
    """Metres per unit of a length variable (surface altitude), from its units attribute (m if none)."""

    try:
        return units_to_metres(role.units or "m", name=role.variables[0])
    except InputError:
        raise InputError(f"{model.store.describe()}: variable '{role.variables[0]}' (surface altitude) has units "
                         f"'{role.units}'; initgen reads m or km, fix the units attribute") from None


def _runs_of(idx: np.ndarray) -> list[tuple[int, int]]:
    """Contiguous runs of a sorted index array, as (start, stop) positions in the array."""
    if idx.size == 0:
        return []
    breaks = np.flatnonzero(np.diff(idx) != 1) + 1
    starts = np.concatenate([[0], breaks])
    stops = np.concatenate([breaks, [idx.size]])
    return list(zip(starts.tolist(), stops.tolist()))


def land_fraction(model: ModelFile, window: tuple) -> np.ndarray | None:
    """The land fraction on the window as a fraction (a file in percent is scaled), or None."""
    role = model.role("land_fraction")
    if role is None:
        return None
    f = read_window(model, role, window)
    return f / 100.0 if np.nanmax(f, initial=0.0) > 1.5 else f


def read_window(model: ModelFile, role, window: tuple, store=None) -> np.ndarray:
    """A 2-D role on the window (first index of any extra axes), read run by run from the file."""
    store = store or model.store
    dims = model.grid.dims
    pieces = []
    for ra in _runs_of(window[0]):
        row = []
        for rb in (_runs_of(window[1]) if len(dims) > 1 else [None]):
            hkey = {dims[0]: slice(int(window[0][ra[0]]), int(window[0][ra[1] - 1]) + 1)}
            if rb is not None:
                hkey[dims[1]] = slice(int(window[1][rb[0]]), int(window[1][rb[1] - 1]) + 1)
            arr = role.read(store, hkey)
            row.append(arr[0] if arr.ndim == len(dims) + 1 else arr.reshape(arr.shape[-len(dims):]))
        pieces.append(np.concatenate(row, axis=1) if len(row) > 1 else row[0])
    return np.concatenate(pieces, axis=0) if len(pieces) > 1 else pieces[0]


def find_window(model: ModelFile, spans: list) -> tuple:
    """Per horizontal dim, the sorted indices of the grid that any region (widened) can touch.

    ``spans`` holds ``(geometry, reach_km)`` pairs. A cell can get a weight only if it lies in a
    part's lon/lat bounding box widened by the reach (the taper width) in great-circle distance;
    the widening in longitude grows as 1/cos(latitude), and reaching within a degree of a pole
    takes every longitude. Everything outside the window is exactly 0.
    """
    grid = model.grid
    km_per_deg = geodesy.EARTH_RADIUS_KM * np.pi / 180.0
    boxes = []
    for geom, reach in spans:
        parts = getattr(geom, "geoms", [geom])
        for part in parts:
            x0, y0, x1, y1 = part.bounds
            dlat = reach / km_per_deg + 1e-6
            lo, hi = y0 - dlat, y1 + dlat
            polar = max(abs(lo), abs(hi)) >= 89.0
            dlon = 360.0 if polar else reach / (km_per_deg * np.cos(np.radians(max(abs(lo), abs(hi))))) + 1e-6
            width = (x1 - x0) + 2 * dlon
            boxes.append((lo, hi, x0 - dlon, width))

    def inside(lon, lat):
        hit = np.zeros(np.shape(lon), bool)
        for lo, hi, west, width in boxes:
            band = (lat >= lo) & (lat <= hi)
            hit |= band if width >= 360.0 else band & (np.mod(lon - west, 360.0) <= width)
        return hit

    if grid.kind == "regular":
        rows = np.zeros(grid.shape[0], bool)
        cols = np.zeros(grid.shape[1], bool)
        for lo, hi, west, width in boxes:
            band = (grid.lat_src >= lo) & (grid.lat_src <= hi)
            rows |= band
            if band.any():
                cols |= True if width >= 360.0 else (np.mod(grid.lon_src - west, 360.0) <= width)
        return np.flatnonzero(rows), np.flatnonzero(cols)
    hit = inside(grid.lon_src, grid.lat_src)
    if grid.kind == "points":
        return (np.flatnonzero(hit),)
    return np.flatnonzero(hit.any(axis=1)), np.flatnonzero(hit.any(axis=0))


def _interp_to_grid(dst: tuple, lon, lat, vals, key: str, weight: np.ndarray) -> np.ndarray:
    """Interpolate a source field to the window's points ``dst = (lon, lat)``."""
    try:
        if lon.ndim == 1 and lat.ndim == 1 and vals.shape == (lat.size, lon.size):
            out, covered = sources.interp_regular(lon, lat, vals, dst[0], dst[1])
        else:
            lon2, lat2 = (np.meshgrid(lon, lat) if lon.ndim == 1 and vals.ndim == 2 and vals.shape != lon.shape
                          else (lon, lat))
            out, covered = sources.interp_points(lon2, lat2, vals, dst[0], dst[1])
    except InputError as exc:
        raise _keyed(exc, key) from None
    miss = (weight > 0) & ~np.asarray(covered, bool)
    if np.all(miss[weight > 0]):
        # nearest values from elsewhere for the whole region would be an invented field
        raise InputError(f"recipe key {key}: the anomaly file covers none of the region (it spans lon "
                         f"{np.nanmin(lon):.6g}..{np.nanmax(lon):.6g}, lat {np.nanmin(lat):.6g}..{np.nanmax(lat):.6g}); "
                         "use a file that covers the region", key=key)
    if np.any(miss):
        frac = miss.sum() / max(1, (weight > 0).sum())
        warnings.warn(f"recipe key {key}: the anomaly file covers only {100 * (1 - frac):.1f}% of the region; "
                      "nearest values are used beyond its edge", InputWarning, stacklevel=2)
    bad = (weight > 0) & ~np.isfinite(out)
    if np.any(bad):
        raise InputError(f"recipe key {key}: the anomaly field has no valid value for {bad.sum()} region cell(s); "
                         "use a file that covers the region", key=key)
    return np.where(np.isfinite(out), out, 0.0)


MAX_ANOMALY_K = 60.0  # the bound of anomaly.constant_K in the recipe schema


def block_anomaly(model: ModelFile, anomaly: Anomaly, recipe: Document, key: str, weight: np.ndarray,
                  allow_outside: bool, dst: tuple):
    a, donor = _block_anomaly(model, anomaly, recipe, key, weight, allow_outside, dst)
    if a is not None:
        region = weight > 0
        big = region & ~(np.abs(a) <= MAX_ANOMALY_K)
        if np.any(big):
            worst = float(np.nanmax(np.abs(np.where(big, a, 0.0)))) if np.any(np.isfinite(a[big])) else float("nan")
            kind = anomaly.kind  # field or bias: a constant is within the schema's bounds
            raise InputError(f"recipe key {key}.{kind}: the anomaly reaches {worst:.6g} K in {int(big.sum())} region "
                             f"cell(s), beyond +-{MAX_ANOMALY_K:g} K; check the file's units and variable, or the scale", key=f"{key}.{kind}")
    return a, donor


def _block_anomaly(model: ModelFile, anomaly: Anomaly, recipe: Document, key: str, weight: np.ndarray,
                   allow_outside: bool, dst: tuple):
    if anomaly.constant_K is not None:
        return np.full(weight.shape, float(anomaly.constant_K)), None
    if anomaly.field:
        f = anomaly.field
        path = resolve_path(recipe, f.file, f"{key}.field.file", allow_outside)
        lon, lat, vals = read_field(path, f.variable, f"{key}.field.variable")
        return f.scale * _interp_to_grid(dst, lon, lat, vals, f"{key}.field", weight), None
    if anomaly.bias:
        b = anomaly.bias
        mpath = resolve_path(recipe, b.model_file, f"{key}.bias.model_file", allow_outside)
        rpath = resolve_path(recipe, b.reference_file, f"{key}.bias.reference_file", allow_outside)
        mlon, mlat, mvals = read_field(mpath, b.variable, f"{key}.bias.variable")
        rlon, rlat, rvals = read_field(rpath, b.reference_variable or b.variable,
                                       f"{key}.bias.reference_variable")
        mod = _interp_to_grid(dst, mlon, mlat, mvals, f"{key}.bias.model_file", weight)
        ref = _interp_to_grid(dst, rlon, rlat, rvals, f"{key}.bias.reference_file", weight)
        return sources.bias_anomaly(mod, ref, b.scale), None

    path = resolve_path(recipe, anomaly.donor.file, f"{key}.donor.file", allow_outside)
    donor_store = NetCDFStore(path)
    donor = open_model(donor_store, model.layout)
    if donor.grid.shape != model.grid.shape or donor.grid.lon_src.shape != model.grid.lon_src.shape \
            or not np.allclose(donor.grid.lon_src, model.grid.lon_src) \
            or not np.allclose(donor.grid.lat_src, model.grid.lat_src):
        donor_store.close()
        raise InputError(f"recipe key {key}.donor.file: {path} is not on the same grid as the input; "
                         "a donor must be a restart file of the same model and grid", key=f"{key}.donor.file")
    return None, donor


def profile_factors(profile: Profile, layers: Layers | None, key: str) -> tuple[np.ndarray | None, float]:
    """f(z) per soil layer, and f at the surface (used for skin and snow temperatures)."""
    kw = dict(efolding_m=profile.efolding_m, zero_at_m=profile.zero_at_m,
              table=profile.table, diffusivity_m2_s=profile.diffusivity_m2_s,
              period_s=None if profile.period_days is None else profile.period_days * 86400.0,
              max_depth_m=profile.max_depth_m)
    surface = Layers(np.array([0.0]), np.array([1e-9]), np.array([0.0]))
    try:
        fsurf = float(profiles.factor(profile.kind, surface, evaluate="node", **kw)[0])
        if layers is None:
            if profile.kind != "uniform":
                raise InputError(f"recipe key {key}.kind: profile '{profile.kind}' needs soil layer depths, and "
                                 "none were found; name roles.layer_node_depth (or interfaces/thickness) in the layout", key=f"{key}.kind")
            return None, fsurf
        return np.asarray(profiles.factor(profile.kind, layers, evaluate=profile.evaluate, **kw), float), fsurf
    except InputError as exc:
        if exc.key is not None:  # already names its recipe key
            raise exc from None
        # a profiles error names its parameter first (period_s is the recipe's period_days)
        raise InputError(f"recipe key {key}.{str(exc).replace('period_s:', 'period_days:')}", key=key) from None
