"""Turn a recipe and a model file into weights, factors and anomalies, and apply them block by block.

For each perturbation block of the recipe the plan holds the horizontal weight ``w(x)``, the
surface anomaly ``A(x)`` (or a donor store), and the vertical factor ``f(z)`` per soil layer. The
target change is ``dT(z, x) = w(x) * f(z) * A(x)``. Blocks are applied in recipe order, each to the
result of the previous one (documented in the README), so a recipe with two blocks equals two
runs with one block each.

Work happens on the slabs of the grid that the region touches (its bounding boxes in index
space, split where the region wraps around the dateline), in blocks of rows, so memory stays
bounded whatever the file size. Every block goes through the same code whether the store is a
netCDF file being patched in place or an in-memory xarray dataset.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import ledger as ledger_mod
from . import constants, geodesy, persistence, profiles, regions, soil, sources
from .errors import InputError, InputWarning
from .grid import ModelFile
from .layers import Layers
from .recipe import Document, resolve_path
from .restart import NetCDFStore, read_field

T_FREEZE = 273.15
MIN_WEIGHT = 1e-6  # weights below this are set to 0
BLOCK_ELEMENTS = 250_000  # values per variable per block (2 MB as float64): memory stays flat


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
    physics: dict
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


def needed_roles(recipe: Document) -> tuple:
    need = set()
    for block in recipe.data["perturbations"]:
        need.update(block["targets"])
    if recipe.data["physics"]["mode"] != "none" and "soil_temperature" in need:
        need.update(("soil_liquid", "soil_ice"))
    return tuple(sorted(need))


# ---------------------------------------------------------------------------------------------
# Building the plan
# ---------------------------------------------------------------------------------------------


def _keyed(exc: InputError, key: str) -> InputError:
    """An error from a science module (which knows no recipe keys), with the recipe key in front."""
    msg = str(exc)
    return exc if "recipe key" in msg else InputError(f"recipe key {key}: {msg}")


def shape_geometry(shape: dict, recipe: Document, key: str, allow_outside: bool):
    try:
        return _shape_geometry(shape, recipe, key, allow_outside)
    except InputError as exc:
        raise _keyed(exc, key) from None
    except RecursionError:  # json.load of an absurdly nested file
        raise InputError(f"recipe key {key}: the shape's file is nested too deeply to be a GeoJSON region; "
                         "fix the file") from None


MAX_ABS_LON = 720.0  # two turns either way; beyond, wrapping a shape would take for ever


def _shape_geometry(shape: dict, recipe: Document, key: str, allow_outside: bool):
    if shape.get("geojson"):
        path = resolve_shape_file(recipe, shape["geojson"], key + ".geojson", allow_outside)
        geom = regions.read_geojson(path)
        west, _, east, _ = geom.bounds
        if not (-MAX_ABS_LON <= west and east <= MAX_ABS_LON):
            raise InputError(f"recipe key {key}.geojson: {path.name} has longitudes {west:.6g}..{east:.6g}, beyond "
                             f"+-{MAX_ABS_LON:g} degrees; give longitude/latitude in degrees (EPSG:4326)")
        return geom
    if shape.get("box"):
        (w, e), (s, n) = shape["box"]["lon"], shape["box"]["lat"]
        if s >= n:
            raise InputError(f"recipe key {key}.box.lat: south ({s}) must be below north ({n})")
        return regions.box(w, e, s, n)
    if shape.get("vertices"):
        return regions.polygon(shape["vertices"])
    pub = shape["published"]
    return regions.published(pub["set"], pub["regions"])


def resolve_shape_file(recipe: Document, rel: str, key: str, allow_outside: bool) -> Path:
    """A GeoJSON path relative to the recipe; a bare file name that is not beside the recipe is
    looked up in the shipped masks/ library. A path with folders is never replaced by a shipped
    file of the same name."""
    from .shipped import shipped_file

    bare = Path(rel).name == rel
    if bare and not (recipe.base_dir / rel).exists():
        lib = shipped_file("masks", rel)
        if lib is not None:
            return lib
        raise InputError(f"recipe key {key}: file '{rel}' not found beside the recipe ({recipe.base_dir}) nor in "
                         "the shipped masks library; check the name")
    return resolve_path(recipe, rel, key, allow_outside)


def referenced_files(recipe: Document, allow_outside: bool = False) -> dict:
    """Every file the recipe reads (GeoJSON shapes, anomaly fields, climatologies, donors), by
    recipe key: its resolved path and sha256. The recipe's hash covers its text; these hashes
    cover what its text points to, so a changed outline or field shows in the provenance."""
    from .restart import sha256_file

    out = {}
    for i, b in enumerate(recipe.data["perturbations"]):
        key = f"perturbations[{i}]"
        for part in ("include", "exclude"):
            for j, shape in enumerate(b["region"][part]):
                if shape.get("geojson"):
                    k = f"{key}.region.{part}[{j}].geojson"
                    out[k] = resolve_shape_file(recipe, shape["geojson"], k, allow_outside)
        anomaly = b["anomaly"]
        for kind, names in (("field", ("file",)), ("bias", ("model_file", "reference_file")), ("donor", ("file",))):
            for name in names:
                if anomaly.get(kind):
                    k = f"{key}.anomaly.{kind}.{name}"
                    out[k] = resolve_path(recipe, anomaly[kind][name], k, allow_outside)
    return {k: {"path": str(p), "sha256": sha256_file(p)} for k, p in out.items()}


def region_geometry(region: dict, recipe: Document, key: str, allow_outside: bool):
    inc = [shape_geometry(s, recipe, f"{key}.include[{i}]", allow_outside) for i, s in enumerate(region["include"])]
    exc = [shape_geometry(s, recipe, f"{key}.exclude[{i}]", allow_outside) for i, s in enumerate(region["exclude"])]
    return regions.combine(inc, exc)


def horizontal_weight(model: ModelFile, region: dict, geom, name: str, window: tuple,
                      lon: np.ndarray, lat: np.ndarray, key: str = "region") -> np.ndarray:
    """w(x) = taper(x) * elevation ramp(x) * land weight(x) on the window; 0 where land data are missing."""
    grid = model.grid
    if region["taper_km"] > 0:
        w = regions.taper_weight(lon, lat, geom, region["taper_km"], placement=region["taper_placement"])
    else:
        w = regions.hard_mask(lon, lat, geom).astype(np.float64)
    if not np.any(w > 0):
        raise InputError(f"region '{name}' contains no grid point; the grid spans {grid.extent()}; check the "
                         "region's coordinates and longitude convention")
    regions.check_coverage(w > 0, name, lon, lat)
    elev = region.get("elevation")
    if elev:
        role = model.require("surface_altitude", f"region '{name}' has an elevation band")
        z = read_window(model, role, window) * _metres_per(role, model)
        w = w * regions.elevation_ramp(z, elev["min_m"], elev["ramp_m"], elev.get("max_m"), elev["max_ramp_m"])
    frac = model.role("land_fraction")
    mask = model.role("land_mask")
    if frac is not None and region["use_land_fraction"]:
        w = w * regions.land_weight(fraction=land_fraction(model, window))
    elif mask is not None:
        w = w * regions.land_weight(mask=read_window(model, mask, window), threshold=region["land_threshold"])
    # the last sliver of a taper (w < 1e-6, a micro-kelvin per kelvin of anomaly) cannot change a
    # stored value; counting it as region would only blur the ledger
    w = np.where(np.isfinite(w) & (w >= MIN_WEIGHT), w, 0.0)
    if not np.any(w > 0):
        found = ""
        if elev:
            inside = regions.hard_mask(lon, lat, geom) & np.isfinite(z)
            if np.any(inside):
                found = f"; surface altitude in the region spans {np.nanmin(z[inside]):.0f}..{np.nanmax(z[inside]):.0f} m"
        raise InputError(f"recipe key {key}: region '{name}' keeps no land grid cell above weight 0 after the "
                         f"elevation band and land weighting{found}; check elevation.min_m/max_m and the land data")
    return w


def _metres_per(role, model: ModelFile) -> float:
    """Metres per unit of a length variable (surface altitude), from its units attribute (m if none)."""
    from .layers import units_to_metres

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
                         "use a file that covers the region")
    if np.any(miss):
        frac = miss.sum() / max(1, (weight > 0).sum())
        warnings.warn(f"recipe key {key}: the anomaly file covers only {100 * (1 - frac):.1f}% of the region; "
                      "nearest values are used beyond its edge", InputWarning, stacklevel=2)
    bad = (weight > 0) & ~np.isfinite(out)
    if np.any(bad):
        raise InputError(f"recipe key {key}: the anomaly field has no valid value for {bad.sum()} region cell(s); "
                         "use a file that covers the region")
    return np.where(np.isfinite(out), out, 0.0)


MAX_ANOMALY_K = 60.0  # the bound of anomaly.constant_K in the recipe schema


def block_anomaly(model: ModelFile, anomaly: dict, recipe: Document, key: str, weight: np.ndarray,
                  allow_outside: bool, dst: tuple):
    a, donor = _block_anomaly(model, anomaly, recipe, key, weight, allow_outside, dst)
    if a is not None:
        region = weight > 0
        big = region & ~(np.abs(a) <= MAX_ANOMALY_K)
        if np.any(big):
            worst = float(np.nanmax(np.abs(np.where(big, a, 0.0)))) if np.any(np.isfinite(a[big])) else float("nan")
            kind = next(k for k in ("field", "bias") if anomaly.get(k))
            raise InputError(f"recipe key {key}.{kind}: the anomaly reaches {worst:.6g} K in {int(big.sum())} region "
                             f"cell(s), beyond +-{MAX_ANOMALY_K:g} K; check the file's units and variable, or the scale")
    return a, donor


def _block_anomaly(model: ModelFile, anomaly: dict, recipe: Document, key: str, weight: np.ndarray,
                   allow_outside: bool, dst: tuple):
    if anomaly.get("constant_K") is not None:
        return np.full(weight.shape, float(anomaly["constant_K"])), None
    if anomaly.get("field"):
        f = anomaly["field"]
        path = resolve_path(recipe, f["file"], f"{key}.field.file", allow_outside)
        lon, lat, vals = read_field(path, f["variable"], f"{key}.field.variable")
        return f["scale"] * _interp_to_grid(dst, lon, lat, vals, f"{key}.field", weight), None
    if anomaly.get("bias"):
        b = anomaly["bias"]
        mpath = resolve_path(recipe, b["model_file"], f"{key}.bias.model_file", allow_outside)
        rpath = resolve_path(recipe, b["reference_file"], f"{key}.bias.reference_file", allow_outside)
        mlon, mlat, mvals = read_field(mpath, b["variable"], f"{key}.bias.variable")
        rlon, rlat, rvals = read_field(rpath, b.get("reference_variable") or b["variable"],
                                       f"{key}.bias.reference_variable")
        mod = _interp_to_grid(dst, mlon, mlat, mvals, f"{key}.bias.model_file", weight)
        ref = _interp_to_grid(dst, rlon, rlat, rvals, f"{key}.bias.reference_file", weight)
        return sources.bias_anomaly(mod, ref, b["scale"]), None
    d = anomaly["donor"]
    from .grid import open_model

    path = resolve_path(recipe, d["file"], f"{key}.donor.file", allow_outside)
    donor_store = NetCDFStore(path)
    donor = open_model(donor_store, _layout_of(model))
    if donor.grid.shape != model.grid.shape or donor.grid.lon_src.shape != model.grid.lon_src.shape \
            or not np.allclose(donor.grid.lon_src, model.grid.lon_src) \
            or not np.allclose(donor.grid.lat_src, model.grid.lat_src):
        donor_store.close()
        raise InputError(f"recipe key {key}.donor.file: {path} is not on the same grid as the input; "
                         "a donor must be a restart file of the same model and grid")
    return None, donor


def _layout_of(model: ModelFile):
    return getattr(model, "layout", None)


def profile_factors(profile: dict, layers: Layers | None, key: str) -> tuple[np.ndarray | None, float]:
    """f(z) per soil layer, and f at the surface (used for skin and snow temperatures)."""
    kw = dict(efolding_m=profile.get("efolding_m"), zero_at_m=profile.get("zero_at_m"),
              table=profile.get("table"), diffusivity_m2_s=profile.get("diffusivity_m2_s"),
              period_s=None if profile.get("period_days") is None else profile["period_days"] * 86400.0,
              max_depth_m=profile.get("max_depth_m"))
    surface = Layers(np.array([0.0]), np.array([1e-9]), np.array([0.0]))
    try:
        fsurf = float(profiles.factor(profile["kind"], surface, evaluate="node", **kw)[0])
        if layers is None:
            if profile["kind"] != "uniform":
                raise InputError(f"recipe key {key}.kind: profile '{profile['kind']}' needs soil layer depths, and "
                                 "none were found; name roles.layer_node_depth (or interfaces/thickness) in the layout")
            return None, fsurf
        return np.asarray(profiles.factor(profile["kind"], layers, evaluate=profile["evaluate"], **kw), float), fsurf
    except InputError as exc:
        msg = str(exc)
        raise (exc if "recipe key" in msg else
               InputError(f"recipe key {key}.{msg.replace('period_s:', 'period_days:')}")) from None


def build_plan(recipe: Document, model: ModelFile, *, allow_outside: bool = False) -> Plan:
    blocks = []
    geoms = [region_geometry(b["region"], recipe, f"perturbations[{i}].region", allow_outside)
             for i, b in enumerate(recipe.data["perturbations"])]
    window = find_window(model, [(g, b["region"]["taper_km"]) for g, b in zip(geoms, recipe.data["perturbations"])])
    if any(w.size == 0 for w in window):
        name = recipe.data["perturbations"][0]["name"]
        raise InputError(f"region '{name}' contains no grid point; the grid spans {model.grid.extent()}; check the "
                         "region's coordinates and longitude convention")
    lon, lat, _ = model.grid.at(window)
    region_any = np.zeros(lon.shape, bool)
    for i, (b, geom) in enumerate(zip(recipe.data["perturbations"], geoms)):
        key = f"perturbations[{i}]"
        w = horizontal_weight(model, b["region"], geom, b["name"], window, lon, lat, key=f"{key}.region")
        anomaly, donor = block_anomaly(model, b["anomaly"], recipe, f"{key}.anomaly", w, allow_outside, (lon, lat))
        factors, fsurf = profile_factors(b["profile"], model.layers, f"{key}.profile")
        soil = model.role("soil_temperature")
        if factors is not None and soil is not None and soil.layered and soil.nlayers != factors.size:
            raise InputError(f"{model.store.describe()}: soil temperature has {soil.nlayers} layers but the layer "
                             f"depths describe {factors.size}; check the layout's depth role and snow_layers")
        if factors is None and soil is not None and soil.layered:
            factors = np.ones(soil.nlayers)
        blocks.append(BlockPlan(b["name"], i, tuple(b["targets"]), w, anomaly, factors, fsurf, donor,
                                b["snow_mass_mode"], b["snow_mass_change"], [str(geom.bounds)]))
        region_any |= w > 0
    plan = Plan(recipe, model, blocks, dict(recipe.data["physics"]), region_any, window)
    plan.files = referenced_files(recipe, allow_outside)
    if getattr(model, "grid_file", None):  # the layout's separate grid file: its hash goes into the provenance
        from .restart import sha256_file

        plan.files["layout.grid_file"] = {"path": model.grid_file, "sha256": sha256_file(model.grid_file)}
    check_before_writing(plan)
    return plan


def check_before_writing(plan: Plan) -> None:
    """Refuse units and soil textures initgen cannot use, before anything is read block by block or written."""
    model = plan.model
    try:
        _check_units(plan, model)
    except InputError as exc:
        raise InputError(f"{model.store.describe()}: {exc}") from None
    if plan.physics.get("texture"):
        try:
            soil.hydraulics_from_texture(plan.physics["texture"])
        except InputError as exc:
            raise _keyed(exc, "physics.texture") from None
    # the soil parameters the physics will use, read and range-checked where the region lies,
    # so that `check` and `apply` refuse them before anything is written
    soil_role = model.role("soil_temperature")
    if plan.physics["mode"] != "none" and "soil_temperature" in plan.targets and soil_role is not None \
            and model.layers is not None:
        for slab in slabs(plan):
            for hkey, _ in blocks_of(plan, slab):
                shape = soil_role.read(model.store, hkey).shape
                shape = shape if soil_role.layered else (shape[0], 1) + shape[1:]
                _hydraulics(plan, model.store, hkey, shape)


def _check_units(plan: Plan, model: ModelFile) -> None:
    for target in ("soil_temperature", "skin_temperature", "snow_temperature"):
        role = model.role(target)
        if target in plan.targets and role is not None and not role.units:
            warnings.warn(f"{model.store.describe()}: variable '{role.variables[0]}' ({target}) has no units "
                          f"attribute; assuming K (give it units, or set layout key units.{target})", InputWarning, stacklevel=2)
        if target in plan.targets and role is not None:
            soil.temperature_to_kelvin(np.zeros(1), role.units or "K", name=role.variables[0], key=f"units.{target}")
    if plan.physics["mode"] != "none" and "soil_temperature" in plan.targets:
        for rname in ("soil_liquid", "soil_ice"):
            role = model.role(rname)
            if role is not None:
                soil.water_to_volumetric(np.zeros(1), role.units or "kg m-2", np.ones(1), porosity=np.ones(1),
                                         name=role.variables[0])


# ---------------------------------------------------------------------------------------------
# Slabs and blocks
# ---------------------------------------------------------------------------------------------


def _runs(flags: np.ndarray, min_gap: int, idx_file: np.ndarray) -> list[tuple[int, int]]:
    """Runs (window positions) where ``flags`` is true, merging gaps < min_gap, never across a
    break in the window's file indices (so every run is one contiguous slice of the file)."""
    pos = np.flatnonzero(flags)
    if pos.size == 0:
        return []
    breaks = np.flatnonzero((np.diff(pos) > min_gap) | (np.diff(idx_file[pos]) != np.diff(pos)))
    starts = np.concatenate([[pos[0]], pos[breaks + 1]])
    ends = np.concatenate([pos[breaks], [pos[-1]]]) + 1
    return list(zip(starts.tolist(), ends.tolist()))


def slabs(plan: Plan) -> list[tuple[dict, tuple]]:
    """Bounding slabs of the region: (file slices per horizontal dim, window slices).

    One slab per run of each horizontal dim: a region that wraps around the dateline on a
    0..360 grid gives two slabs, not one spanning the globe.
    """
    region = plan.region
    dims = plan.model.grid.dims
    per_dim = []
    for ax, d in enumerate(dims):
        other = tuple(a for a in range(region.ndim) if a != ax)
        flags = region.any(axis=other) if other else region
        gap = max(8, region.shape[ax] // 20)
        per_dim.append(_runs(flags, gap, plan.window[ax]))
    out = [({}, ())]
    for ax, (d, runs) in enumerate(zip(dims, per_dim)):
        win = plan.window[ax]
        out = [(dict(h, **{d: slice(int(win[a]), int(win[b - 1]) + 1)}), w + (slice(a, b),))
               for h, w in out for (a, b) in runs]
    return out


def _chunk_edges(start: int, stop: int, step: int, chunk: int) -> list[tuple[int, int]]:
    """Split [start, stop) into pieces of about ``step``, cut at multiples of ``chunk``."""
    if chunk > 1:
        step = max(chunk, (step // chunk) * chunk)
    out = []
    a = start
    while a < stop:
        b = min(stop, ((a // step) + 1) * step if chunk > 1 else a + step)
        out.append((a, b))
        a = b
    return out


def blocks_of(plan: Plan, slab: tuple) -> list[tuple[dict, tuple]]:
    """Tile a slab into blocks of at most about ``BLOCK_ELEMENTS`` values per variable.

    Blocks are cut along both horizontal dims, at the chunk boundaries of chunked variables (a
    block never holds part of a chunk that another block also writes), so the memory a block
    needs does not grow with the file or the region.
    """
    hkey, widx = slab
    model = plan.model
    dims = model.grid.dims
    depth, chunks = 1, [1] * len(dims)
    for role in model.roles.values():
        for v in role.views:
            info = v.info
            depth = max(depth, int(np.prod([s for dd, s in zip(info.dims, info.shape) if dd not in dims])))
            if info.chunks:
                for ax, d in enumerate(dims):
                    if d in info.dims:
                        chunks[ax] = max(chunks[ax], info.chunks[info.dims.index(d)])
    budget = max(1, BLOCK_ELEMENTS // depth)  # horizontal cells per block
    spans = [(hkey[d].start, hkey[d].stop) for d in dims]
    if len(dims) == 1:
        pieces = [[p] for p in _chunk_edges(*spans[0], budget, chunks[0])]
    else:
        ncols = spans[1][1] - spans[1][0]
        cols = ncols if ncols * chunks[0] <= budget else max(1, budget // max(chunks[0], 1))
        col_pieces = _chunk_edges(*spans[1], cols, chunks[1])
        width = max(b - a for a, b in col_pieces)
        row_pieces = _chunk_edges(*spans[0], max(1, budget // width), chunks[0])
        pieces = [[r, c] for r in row_pieces for c in col_pieces]
    out = []
    for piece in pieces:
        h = dict(hkey)
        w = list(widx)
        for ax, (d, (a, b)) in enumerate(zip(dims, piece)):
            offset = widx[ax].start - hkey[d].start  # window position = file index + offset in a slab
            h[d] = slice(a, b)
            w[ax] = slice(a + offset, b + offset)
        out.append((h, tuple(w)))
    return out


# ---------------------------------------------------------------------------------------------
# Applying
# ---------------------------------------------------------------------------------------------


def run(plan: Plan, store, *, write: bool, progress=None) -> dict:
    """Apply the plan to ``store`` (writing only when ``write``) and return the ledger."""
    led = ledger_mod.Ledger(plan)
    if plan.physics["mode"] != "none":
        led.soil_sources = soil_parameter_sources(plan.physics, plan.model)
    all_blocks = [b for s in slabs(plan) for b in blocks_of(plan, s)]
    limits = plan.model.limits
    limits.reset(clip=(plan.recipe.data.get("limits") or {}).get("packed_out_of_range") == "clip")
    for k, (hkey, widx) in enumerate(all_blocks):
        apply_block(plan, store, hkey, widx, led, write=write)
        if progress:
            progress(k + 1, len(all_blocks))
    if plan.blocks and any(b.donor for b in plan.blocks):
        for b in plan.blocks:
            if b.donor:
                b.donor.store.close()
    _storable_or_refuse(plan, led)
    out = led.finish()
    if plan.model.water is not None and plan.physics["mode"] != "none" and "soil_temperature" in plan.targets:
        out["water"] = plan.model.water.record()
    out["data_blocks_read"] = len(all_blocks)
    odd = sum(out["flags"].get(k, 0) for k in ("realised_change_opposite_to_imposed",
                                                "realised_change_larger_than_imposed",
                                                "phase_change_against_imposed_change"))
    source = plan.physics.get("texture") or ("sand/clay" if plan.physics.get("sand_pct") is not None else
                                             "the given parameters")
    shift = out.get("input_phase_disequilibrium")
    # the change-driven rule holds ice beside liquid below the curve as stable: warn only about
    # states it would not hold either; the equilibrium rule re-balances every cell counted
    warn_cells = (sum(shift["cells_per_layer"]) if shift and shift["acted_on"] else
                  sum(shift["cells_inconsistent_with_one_sided_rule_per_layer"]) if shift else 0)
    if warn_cells:
        fr = sum(shift["equilibrium_rule_would_freeze_kg_per_layer"])
        me = sum(shift["equilibrium_rule_would_melt_kg_per_layer"])
        warnings.warn(f"{warn_cells} region layer-cell(s) of the input are not in phase equilibrium "
                      f"for the soil parameters used ({source}): the equilibrium rule would freeze {fr:.3g} kg and "
                      f"melt {me:.3g} kg of water there; "
                      + ("physics.phase_rule equilibrium re-balances them" if shift["acted_on"] else
                         "the change-driven rule leaves them as they are")
                      + "; check that physics matches your model (or give its parameters in the layout)",
                      InputWarning, stacklevel=2)
    if odd:
        warnings.warn(f"{odd} soil layer-cell flag(s) where water froze while warming, ice melted while cooling, or "
                      "the temperature moved against or beyond the imposed change: the start is "
                      f"not in phase equilibrium for the soil parameters used ({source}), so water froze or melted on "
                      "its own; check that physics matches your model (or give its parameters in the layout)",
                      InputWarning, stacklevel=2)
    return out


def _storable_or_refuse(plan: Plan, led) -> None:
    """Values a variable cannot hold (grid.StoreLimits, noted by Role.stored): refused, naming the
    variable, its storable range and the cell count; or, when the recipe allows clipping, counted
    as clamps by rule. Preview and apply run the same code, so they refuse and count alike."""
    limits = plan.model.limits
    if limits.clip:
        for name, n in sorted(limits.counts.items()):
            led.clamp(f"{name}_outside_packed_range", n)
        return
    if limits.counts:
        parts = []
        for name, n in sorted(limits.counts.items()):
            lo, hi, units, how = limits.ranges[name]
            parts.append(f"variable '{name}' ({how}) holds only {lo:.6g}..{hi:.6g} {units}".rstrip()
                         + f" and the change puts {n} cell(s) outside that range")
        raise InputError(f"{plan.model.store.describe()}: " + "; ".join(parts) + "; nothing was written: repack the "
                         "variable with a wider range, or set recipe key limits.packed_out_of_range: clip to clip "
                         "(the ledger then counts the clipped cells as clamps)")


__all__ = ["Plan", "BlockPlan", "build_plan", "run", "slabs", "blocks_of", "needed_roles", "apply_block"]


# ---------------------------------------------------------------------------------------------
# One block of rows: read, change, limit, write, account
# ---------------------------------------------------------------------------------------------


def _bcast_h(arr_h: np.ndarray, ndim_extra: int) -> np.ndarray:
    """Horizontal array -> shape (1, [1,] *h) for broadcasting against (E, [L,] *h)."""
    return arr_h.reshape((1,) * ndim_extra + arr_h.shape)


def _layer_col(vec: np.ndarray, nh: int) -> np.ndarray:
    """Per-layer vector -> (1, L, 1, ...) for broadcasting against (E, L, *h)."""
    return vec.reshape((1, -1) + (1,) * nh)


def _temp_read(role, store, hkey):
    vals = role.read(store, hkey)
    return soil.temperature_to_kelvin(vals, role.units or "K", name=role.variables[0], key=f"units.{role.name}")


def _temp_stored(role, kelvin: np.ndarray, layered: bool) -> np.ndarray:
    """Temperatures in K as they will read back from the file (type and packing of the variable)."""
    units = role.units or "K"
    vals = kelvin if layered else kelvin[:, 0]
    q = soil.temperature_to_kelvin(role.stored(soil.kelvin_to_units(vals, units)), units, name=role.variables[0])
    return q if layered else q[:, None]


def _temp_write(role, store, hkey, kelvin, changed, write):
    if write:
        role.write(store, hkey, soil.kelvin_to_units(kelvin, role.units or "K"), changed)


T_PLAUSIBLE_K = (100.0, 400.0)  # the widest clamps the recipe schema allows


def _check_no_undeclared_gaps(role, values, inside, store):
    """NaN inside the region in a variable that declares no fill value is an error, not ocean;
    so is a "temperature" no soil or snow can have (an undeclared fill value such as 1e20 or the
    netCDF default 9.97e36), which the clamps would otherwise turn into a plausible number."""
    lo, hi = T_PLAUSIBLE_K
    odd = inside & np.isfinite(values) & ((values < lo) | (values > hi))
    if np.any(odd):
        v = float(values[odd].flat[0])
        raise InputError(f"{store.describe()}: variable '{role.variables[0]}' holds {v:.6g} K inside the region "
                         f"({int(odd.sum())} value(s) outside {lo:g}..{hi:g} K), not a temperature; declare it as "
                         "_FillValue or fix the file")
    if not np.any(inside & ~np.isfinite(values)):
        return
    attrs = role.views[0].info.attrs
    if not any(k in attrs for k in ("_FillValue", "missing_value", "valid_range", "valid_min", "valid_max")):
        raise InputError(f"{store.describe()}: variable '{role.variables[0]}' has NaN values inside the region but "
                         "declares no _FillValue; fix the file or mark the missing cells with a fill value")


def apply_block(plan: Plan, store, hkey: dict, widx: tuple, led, *, write: bool) -> None:
    """Apply the plan to one block: ``hkey`` the file slices, ``widx`` the same cells in the window."""
    model = plan.model
    hidx = widx
    nh = len(model.grid.shape)
    area = plan.area[hidx]
    weights = [b.weight[hidx] for b in plan.blocks]
    inside_h = np.any([w > 0 for w in weights], axis=0)
    if not np.any(inside_h):
        return
    targets = plan.targets
    phys = plan.physics
    top_change = None  # realised change of the top soil layer, set when a physics mode runs

    # --- soil temperature (with water and ice when physics is on) ---------------------------
    if "soil_temperature" in targets:
        role = model.role("soil_temperature")
        T0 = _temp_read(role, store, hkey)
        layered = role.layered
        if not layered:
            T0 = T0[:, None]
        inside = np.broadcast_to(_bcast_h(inside_h, 2), T0.shape) & np.isfinite(T0)
        _check_no_undeclared_gaps(role, T0, np.broadcast_to(_bcast_h(inside_h, 2), T0.shape), store)
        T = T0.copy()
        water = _read_water(plan, store, hkey, T0.shape) if phys["mode"] != "none" else None
        if water is not None:
            led.disequilibrium += int(np.count_nonzero(
                soil.disequilibrium(T0, water["liq"], water["ice"], water["porosity"], water["psi"], water["b"])
                & inside))
            _report_input_shift(T0, water, inside, led, area)
        for b, w in zip(plan.blocks, weights):
            if "soil_temperature" not in b.targets:
                continue
            f = b.factors if b.factors is not None else np.ones(T.shape[1])
            wf = _bcast_h(w, 2) * _layer_col(f, nh)
            sel = (wf != 0) & np.isfinite(T)
            if b.donor is not None:
                donor_role = b.donor.require("soil_temperature", "the donor must hold the targets")
                D = _temp_read(donor_role, b.donor.store, hkey)
                D = D if layered else D[:, None]
                T = np.where(sel, sources.donor_blend(T, D, np.broadcast_to(wf, T.shape)), T)
                if water is not None:
                    dw = _read_water(plan, store, hkey, T.shape, donor=b.donor)
                    for k in ("liq", "ice"):
                        water[k] = np.where(sel, sources.donor_blend(water[k], dw[k], np.broadcast_to(wf, T.shape)),
                                            water[k])
                if water is not None:
                    _equilibrate_blend(T, water, sel, led, area, phys.get("phase_rule", "change_driven"))
                continue
            dT = wf * _bcast_h(_anomaly(plan, b, hidx), 2)
            if water is None:
                T = np.where(sel, T + dT, T)
            else:
                T_before = T
                T = _physics(T, T + dT, water, sel, phys, led, area, nh, mode=phys["mode"], dT=dT)
                _flag_departures(led, T - T_before, np.where(sel, dT, 0.0), sel)
        T[inside], n_low, n_high = soil.clamp_soil_temperature(
            T[inside], phys["soil_temperature_min_K"], phys["soil_temperature_max_K"])
        led.clamp("soil_temperature_below_min", n_low)
        led.clamp("soil_temperature_above_max", n_high)
        T = np.where(inside, _temp_stored(role, T, layered), T)
        changed = inside & (T != T0)
        led.stats(role.variables[0] if len(role.variables) == 1 else "+".join(role.variables), "soil_temperature",
                  "K", T.shape[1], layered).add(T - T0, inside, area)
        _temp_write(role, store, hkey, T if layered else T[:, 0], changed if layered else changed[:, 0], write)
        if water is not None:
            _write_water(plan, store, hkey, water, inside, led, area, write)
            # with a physics mode the skin follows the top layer's realised change (latent heat included)
            top_change = np.where(np.isfinite(T[:, 0]) & np.isfinite(T0[:, 0]), T[:, 0] - T0[:, 0], 0.0)
        # how long the change lasts under pure conduction (persistence.py; reads T0, T and water only)
        persistence.add_block(plan, led, T0, T, water, inside, area, store, hkey)

    # --- skin temperature, snow temperature, snow mass ---------------------------------------
    snow_mass_now = None
    snow = None   # (m0, m, inside): snow mass before and after the recipe's snow_mass change
    if "snow_mass" in targets:
        snow = _snow_mass_change(plan, store, hkey, weights, inside_h, led)
        snow_mass_now = snow[1]
    if "skin_temperature" in targets:
        _surface_temperature(plan, store, hkey, widx, "skin_temperature", weights, inside_h, led, area, write,
                             snow_mass=snow_mass_now, follow=top_change)
    melt = None
    if "snow_temperature" in targets:
        melt = _surface_temperature(plan, store, hkey, widx, "snow_temperature", weights, inside_h, led, area,
                                    write, snow_mass=snow_mass_now)
    if melt is not None and snow is None:
        m0 = model.role("snow_mass").read(store, hkey)
        snow = (m0, m0.copy(), np.broadcast_to(inside_h[None], m0.shape) & np.isfinite(m0))
    if snow is not None:
        m0, m, inside_s = snow
        if melt is not None:
            m = np.where(inside_s, np.maximum(m - melt.sum(axis=1), 0.0), m)
            _snow_layer_mass_write(plan, store, hkey, melt, led, area, write)
        _snow_mass_write(plan, store, hkey, m0, m, inside_s, led, area, write)


def _anomaly(plan: Plan, b: BlockPlan, hidx) -> np.ndarray:
    a = b.anomaly[hidx] * plan.member_scale + plan.member_offset_K
    if plan.noise is not None:
        a = a + plan.noise[hidx]
    return a


def _surface_temperature(plan, store, hkey, widx, target, weights, inside_h, led, area, write, snow_mass=None,
                         follow=None):
    """Skin or snow temperature: moves with the surface factor, or (skin, physics modes) follows the
    realised change of the top soil layer (``follow``); under snow the skin stays at or below 0 C."""
    model = plan.model
    role = model.role(target)
    T0 = _temp_read(role, store, hkey)
    layered = role.layered
    T0 = T0 if layered else T0[:, None]
    inside = np.broadcast_to(_bcast_h(inside_h, 2), T0.shape) & np.isfinite(T0)
    _check_no_undeclared_gaps(role, T0, np.broadcast_to(_bcast_h(inside_h, 2), T0.shape), store)
    layer_mass = None
    if target == "snow_temperature":
        # only snow layers that hold snow change: the others' temperatures are placeholders
        active, layer_mass = _active_snow_layers(plan, store, hkey, T0.shape, snow_mass, led)
        if active is not None:
            inside = inside & active
    T = T0.copy()
    mine = [b for b in plan.blocks if target in b.targets]
    if follow is not None and follow.shape[0] == T.shape[0] and all(
            "soil_temperature" in b.targets and b.donor is None for b in mine):
        sel = np.any([_bcast_h(w, 2) != 0 for b, w in zip(plan.blocks, weights) if b in mine], axis=0)
        T = np.where(sel & inside, T0 + follow[:, None], T)
        mine = []
    for b, w in zip(plan.blocks, weights):
        if b not in mine:
            continue
        ww = _bcast_h(w, 2)
        sel = (ww != 0) & inside
        if b.donor is not None:
            D = _temp_read(b.donor.require(target, "the donor must hold the targets"), b.donor.store, hkey)
            D = D if layered else D[:, None]
            T = np.where(sel, sources.donor_blend(T, D, np.broadcast_to(ww, T.shape)), T)
        else:
            T = np.where(sel, T + ww * b.surface_factor * _bcast_h(_anomaly(plan, b, widx), 2), T)
    melt = None
    if target == "snow_temperature":
        moved = inside & (T != T0)          # snow the recipe changed; other values stay as read
        if plan.physics["mode"] == "energy" and np.any(moved & (T > T_FREEZE)):
            T, melt = _melt_snow(T, moved, layer_mass, led, area)
        T[moved], n = soil.clamp_snow_temperature(T[moved])
        led.clamp("snow_temperature_above_freezing", n)
    else:
        snow = snow_mass
        if snow is None and model.role("snow_mass") is not None:
            snow = model.role("snow_mass").read(store, hkey)
        if snow is not None:
            covered = np.broadcast_to((snow > 0)[:, None], T.shape)
            over = inside & covered & (T > T_FREEZE) & (T != T0)
            # the snow-covered part of the cell stays at or below 0 C; with a snow cover fraction f
            # from the file only that part is capped: T <= f T_f + (1 - f) T
            frac_role = model.role("snow_cover_fraction")
            f = 1.0
            if frac_role is not None:
                f = frac_role.read(store, hkey)
                f = np.clip(np.where(np.isfinite(f), f / (100.0 if frac_role.units.strip() in ("%", "percent")
                                                            else 1.0), 1.0), 0.0, 1.0)[:, None]
            cap = f * T_FREEZE + (1.0 - f) * T
            capped = np.maximum(cap, np.minimum(T0, T))
            over = over & (capped != T)
            led.clamp("skin_temperature_above_freezing_under_snow", np.count_nonzero(over))
            T = np.where(over, capped, T)
    T = np.where(inside, _temp_stored(role, T, layered), T)
    changed = inside & (T != T0)
    led.stats(role.variables[0], target, "K", T.shape[1], layered).add(T - T0, inside, area)
    _temp_write(role, store, hkey, T if layered else T[:, 0], changed if layered else changed[:, 0], write)
    return melt


def _active_snow_layers(plan, store, hkey, shape, snow_mass, led):
    """Snow layers holding snow, (E, Ls, *h) bool, and each layer's snow mass (kg m-2) where the
    file gives it. From the file's layer masses (> 0), or its snow-layer count (the layout says
    whether the first or the last layers are the active ones), or, with neither, every layer of
    a cell whose snow mass is > 0 (said in the ledger)."""
    model = plan.model
    nl = shape[1]
    lm_role = model.role("snow_layer_mass")
    if lm_role is not None:
        lm = lm_role.read(store, hkey)
        lm = lm if lm_role.layered else lm[:, None]
        if lm.shape != shape:
            raise InputError(f"{store.describe()}: variable '{lm_role.variables[0]}' (snow_layer_mass) has "
                             f"{lm.shape[1]} layer(s) but the snow temperature has {nl}; name matching variables "
                             "in the layout")
        led.note("snow_layers_active", f"where the layer mass in '{lm_role.variables[0]}' is > 0")
        return np.isfinite(lm) & (lm > 0), np.where(np.isfinite(lm), lm, 0.0)
    snow_now = snow_mass
    if snow_now is None and model.role("snow_mass") is not None:
        snow_now = model.role("snow_mass").read(store, hkey)
    has_snow = None if snow_now is None else np.broadcast_to((np.isfinite(snow_now) & (snow_now > 0))[:, None], shape)
    cnt_role = model.role("snow_layer_count")
    if cnt_role is not None:
        layout = _layout_of(model)
        which = layout.data.get("snow_layer_count_active") if layout is not None else None
        if which not in ("first", "last"):
            raise InputError(f"layout: roles.snow_layer_count names '{cnt_role.variables[0]}' but the layout does not "
                             "say which snow layers it counts; set snow_layer_count_active: first or last (along "
                             "the snow layer axis as stored)")
        n = cnt_role.read(store, hkey)
        n = np.where(np.isfinite(n), n, 0.0)[:, None]
        idx = np.arange(nl).reshape((1, nl) + (1,) * (len(shape) - 2))
        active = (idx < n) if which == "first" else (idx >= nl - n)
        led.note("snow_layers_active", f"the {which} n layers, n from '{cnt_role.variables[0]}'")
        active = active if has_snow is None else active & has_snow
        return active, _split_snow_mass(snow_now, active, led)
    if has_snow is None:
        led.note("snow_layers_active", "every layer (the file gives no snow mass, layer count or layer mass)")
        return None, None
    led.note("snow_layers_active", "every layer of a cell whose snow mass is > 0 (the file gives no snow layer "
                                   "count or layer mass)")
    return has_snow, _split_snow_mass(snow_now, has_snow, led)


def _split_snow_mass(snow_now, active, led):
    """Layer masses when the file has only the total: split equally between a cell's active
    layers. A guess, and said so in the ledger; it matters only where snow melts (energy mode)."""
    if snow_now is None:
        return None
    n = np.maximum(active.sum(axis=1, keepdims=True), 1)
    led.note("snow_layer_mass", "not in the file: where snow melts, each active layer is taken to hold an equal "
                                "share of the snow mass (a guess; name roles.snow_layer_mass for the model's own)")
    return np.where(active, np.where(np.isfinite(snow_now), snow_now, 0.0)[:, None] / n, 0.0)


def _melt_snow(T, moved, layer_mass, led, area):
    """Energy mode: snow warmed past 273.15 K melts instead of warming further.

    The energy above 0 C, m c_i (T - T_f) per layer (m the layer's snow mass, c_i the specific
    heat of ice), melts m c_i (T - T_f) / L_f kg m-2 of snow (at most the layer's mass) and the
    layer stays at T_f. Without layer masses in the file the change is refused: the energy cannot
    be accounted for.
    """
    over = moved & (T > T_FREEZE)
    if layer_mass is None:
        raise InputError("physics mode energy melts snow warmed past 273.15 K, which needs each snow layer's mass; "
                         "name roles.snow_layer_mass in the layout, or use physics mode temperature (which caps snow "
                         "at 273.15 K and counts the clamp)")
    excess = np.where(over, T - T_FREEZE, 0.0)
    melt = np.minimum(layer_mass, layer_mass * constants.CP_ICE * excess / constants.LATENT_HEAT_FUSION)
    melt = np.where(over, melt, 0.0)
    a = _bcast_h(area, 2)
    led.add_phase("snow_melted_kg", (melt * a).sum(axis=tuple(i for i in range(melt.ndim) if i != 1)))
    led.note("snow_melt_water", "snow that melted leaves the column: initgen writes it into no liquid water "
                                "variable (the snow mass goes down by the melt, counted in snow_melted_*)")
    led.flag("snow_layers_melting", np.count_nonzero(melt > 0))
    return np.where(over, T_FREEZE, T), melt


FRESH_SNOW_DENSITY = 100.0  # kg m-3, used only when snow appears where there was none (common practice)


def _snow_mass_change(plan, store, hkey, weights, inside_h, led):
    """The recipe's snow_mass change: (mass before, after, cells inside the region)."""
    model = plan.model
    role = model.role("snow_mass")
    m0 = role.read(store, hkey)
    inside = np.broadcast_to(inside_h[None], m0.shape) & np.isfinite(m0)
    m = m0.copy()
    for b, w in zip(plan.blocks, weights):
        if "snow_mass" not in b.targets:
            continue
        ww = w[None]
        if b.donor is not None:
            D = b.donor.require("snow_mass", "the donor must hold the targets").read(b.donor.store, hkey)
            m = np.where(inside, sources.donor_blend(m, D, np.broadcast_to(ww, m.shape)), m)
        elif b.snow_mass_mode == "add":
            m = np.where(inside, m + ww * b.snow_mass_change * plan.member_scale, m)
        else:
            m = np.where(inside, m * (1.0 + ww * b.snow_mass_change * plan.member_scale), m)
    neg = inside & (m < 0)
    led.clamp("snow_mass_negative", np.count_nonzero(neg))
    return m0, np.where(neg, 0.0, m), inside


def _snow_layer_mass_write(plan, store, hkey, melt, led, area, write):
    """Take melted snow off the file's snow layer masses (values as stored)."""
    role = plan.model.role("snow_layer_mass")
    if role is None:
        return
    lm0 = role.read(store, hkey)
    lm0 = lm0 if role.layered else lm0[:, None]
    moved = melt > 0
    lm = np.where(moved, role.stored(np.maximum(lm0 - melt, 0.0)), lm0)
    changed = moved & (lm != lm0)
    led.stats(role.variables[0], "snow_layer_mass", role.units or "kg m-2", lm.shape[1], role.layered).add(
        lm - lm0, np.isfinite(lm0) & (lm0 > 0), area)
    if write:
        role.write(store, hkey, lm if role.layered else lm[:, 0], changed if role.layered else changed[:, 0])


def _snow_mass_write(plan, store, hkey, m0, m, inside, led, area, write):
    """Write the new snow mass (values as stored) and scale the snow depth with it."""
    model = plan.model
    role = model.role("snow_mass")
    m = np.where(inside, role.stored(m), m)
    changed = inside & (m != m0)
    led.stats(role.variables[0], "snow_mass", role.units or "kg m-2", 1, False).add(m - m0, inside, area)
    if write:
        role.write(store, hkey, m, changed)
    depth_role = model.role("snow_depth")
    if depth_role is not None:
        d0 = depth_role.read(store, hkey)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(m0 > 0, m / m0, np.nan)
        d = np.where(changed & (m0 > 0), d0 * ratio, d0)
        d = np.where(changed & ~(m0 > 0), m / FRESH_SNOW_DENSITY, d)
        d = np.where(changed & np.isfinite(d0), depth_role.stored(d), d0)
        dchanged = changed & np.isfinite(d0) & (d != d0)
        led.stats(depth_role.variables[0], "snow_depth", depth_role.units or "m", 1, False).add(d - d0, inside, area)
        if write:
            depth_role.write(store, hkey, d, dchanged)


# ---------------------------------------------------------------------------------------------
# Soil water and ice for the physics modes
# ---------------------------------------------------------------------------------------------


_SUCTION_PER_PASCAL = 1.0 / (1000.0 * 9.80616)  # m of water per Pa: psi = p / (rho_w g), constants.py set


def _suction_metres(values: np.ndarray, role, model: ModelFile) -> np.ndarray:
    """Saturated matric potential from a file as a suction magnitude in metres of water.

    Lengths (m, cm, mm, also written 'mm H2O' or 'm of water') are converted with their unit;
    pressures (Pa, hPa, kPa, MPa) with psi = p / (rho_w g); both parsed by initgen.units
    (cf-units). Missing or unknown units are refused: a suction read in the wrong unit moves the
    freezing curve by orders of magnitude.
    """
    from . import units as units_mod

    raw = role.units.strip().lower()
    unit = raw.replace("h2o", "").replace("of water", "").replace("water", "").strip()
    where = f"{model.store.describe()}: variable '{role.variables[0]}' (saturated matric potential)"
    if not unit:
        raise InputError(f"{where} has no units attribute; give its units (m, mm, kPa ...) in the file or with "
                         "layout key units.psi_sat")
    pa = units_mod.pascal_per(unit)
    if pa is not None:
        return np.abs(values) * pa * _SUCTION_PER_PASCAL
    m = units_mod.metres_per(unit)
    if m is not None:
        return np.abs(values) * m
    raise InputError(f"{where} has units '{role.units}'; initgen reads lengths of water (m, cm, mm) or "
                     "pressures (Pa, kPa, MPa); fix the attribute or set layout key units.psi_sat")


def _check_range(values: np.ndarray, lo: float, hi: float, model: ModelFile, role_name: str, what: str = "",
                 low_open: bool = True) -> None:
    """Refuse soil parameters outside a physically possible range (usually a unit slip)."""
    v = np.asarray(values, float)
    below = (v <= lo) if low_open else (v < lo)
    bad = np.isfinite(v) & (below | (v > hi))
    if np.any(bad):
        role = model.role(role_name)
        name = what or f"variable '{role.variables[0]}' ({role_name}, units '{role.units}')"
        raise InputError(f"{model.store.describe()}: {name} has {int(bad.sum())} value(s) outside {lo:g}..{hi:g} "
                         f"(e.g. {float(v[bad].flat[0]):.6g}); check its units")


def _percent(values: np.ndarray, role, role_name: str) -> np.ndarray:
    """Sand or clay content in percent, decided by the units alone (never by the values, which a
    block of a low-clay region could make look like fractions): percent as it is, fractions
    ('1', 'fraction', 'kg kg-1') times 100; anything else is refused, naming the layout key."""
    u = role.units.strip().lower()
    if u in ("%", "percent", "pct"):
        return values
    if u in ("1", "fraction", "kg kg-1", "kg/kg"):
        return values * 100.0
    raise InputError(f"variable '{role.variables[0]}' ({role_name}) has units {role.units!r}; initgen reads sand and "
                     f"clay as '%' or as fractions '1': set units.{role_name} in the layout")


def _hydraulics(plan: Plan, store, hkey, shape, model=None):
    """Porosity, saturated suction (m), Clapp-Hornberger b and solids heat capacity (or None),
    broadcast to ``shape`` (E, L, *h). Cells where a file's parameters are missing get NaN, which
    the soil functions refuse only where the recipe perturbs."""
    model = model or plan.model
    phys = plan.physics

    def role_or_none(name):
        r = model.role(name)
        if r is None:
            return None
        v = r.read(store, hkey)
        return v if r.layered else v[:, None]

    named = [r for r in ("porosity", "psi_sat", "clapp_b") if model.role(r) is not None]
    c_solid = None
    if named and len(named) < 3:
        missing = sorted({"porosity", "psi_sat", "clapp_b"} - set(named))
        raise InputError(f"layout: names {', '.join(named)} but not {', '.join(missing)}; give all three soil "
                         "parameters in the layout, or none (then the recipe's physics section is used)")
    if named:
        por, b = role_or_none("porosity"), role_or_none("clapp_b")
        if model.role("porosity").units.strip().lower() in ("%", "percent"):
            por = por / 100.0
        psi = _suction_metres(role_or_none("psi_sat"), model.role("psi_sat"), model)
        for vals, role, lo, hi in ((por, "porosity", 0.0, 1.0), (psi, "psi_sat", 1e-4, 10.0),
                                   (b, "clapp_b", 0.0, 30.0)):
            _check_range(vals, lo, hi, model, role)
    elif model.role("sand") is not None and model.role("clay") is not None:
        sand = _percent(role_or_none("sand"), model.role("sand"), "sand")
        clay = _percent(role_or_none("clay"), model.role("clay"), "clay")
        _check_range(sand, 0.0, 100.0, model, "sand", low_open=False)
        _check_range(clay, 0.0, 100.0, model, "clay", low_open=False)
        _check_range(sand + clay, 0.0, 100.0, model, "sand", what="sand + clay", low_open=False)
        ok = np.isfinite(sand) & np.isfinite(clay)
        sand_ok, clay_ok = np.where(ok, sand, 40.0), np.where(ok, clay, 20.0)
        por, psi, b = (np.where(ok, x, np.nan) for x in soil.cosby_1984(sand_ok, clay_ok))
        c_solid = np.where(ok, soil.soil_solid_heat_capacity(sand_ok, clay_ok), np.nan)
    elif phys.get("sand_pct") is not None and phys.get("clay_pct") is not None:
        por, psi, b = soil.cosby_1984(phys["sand_pct"], phys["clay_pct"])
        c_solid = soil.soil_solid_heat_capacity(phys["sand_pct"], phys["clay_pct"])
    elif phys.get("texture"):
        por, psi, b = soil.hydraulics_from_texture(phys["texture"])
        c_solid = soil.texture_solid_heat_capacity(phys["texture"])
    elif phys.get("porosity") and phys.get("psi_sat_m") and phys.get("clapp_b"):
        por, psi, b = phys["porosity"], phys["psi_sat_m"], phys["clapp_b"]
    else:
        raise InputError("recipe key physics: a physics mode needs soil hydraulic parameters; give physics.texture, "
                         "physics.sand_pct and clay_pct, or porosity, psi_sat_m and clapp_b (or name them in the layout)")
    if phys.get("organic_fraction") is not None:
        if named:
            raise InputError("recipe key physics.organic_fraction: the layout gives the model's own soil parameters "
                             f"({', '.join(named)}); blend organic soil into recipe parameters only (remove one)")
        (por, psi, b), c_solid = soil.blend_organic(
            (por, psi, b), soil.CV_SOLID_DEFAULT if c_solid is None else c_solid, phys["organic_fraction"])
    out = tuple(np.broadcast_to(np.asarray(x, float), shape) for x in (por, psi, b))
    return out + (None if c_solid is None else np.broadcast_to(np.asarray(c_solid, float), shape),)


def soil_parameter_sources(physics: dict, model: ModelFile) -> dict:
    """Where the soil parameters of a physics mode come from, in words (for check and the ledger):
    the same order of precedence as :func:`_hydraulics`."""
    named = [r for r in ("porosity", "psi_sat", "clapp_b") if model.role(r) is not None]
    default_cs = (f"default {soil.CV_SOLID_DEFAULT:.5g} J m-3 K-1 (texture formula at equal sand and clay; "
                  "a choice of initgen: give sand/clay or a texture to set it)")
    if named:
        hyd, cs = "file variables " + ", ".join(model.role(r).variables[0] for r in named), default_cs
    elif model.role("sand") is not None and model.role("clay") is not None:
        hyd = "Cosby et al. (1984) Table 5 from the file's sand and clay"
        cs = "texture formula (de Vries 1963 values) from the file's sand and clay"
    elif physics.get("sand_pct") is not None:
        hyd = f"Cosby et al. (1984) Table 5 at sand {physics['sand_pct']:g} %, clay {physics['clay_pct']:g} %"
        cs = "texture formula (de Vries 1963 values) at the same sand and clay"
    elif physics.get("texture"):
        sand, clay = soil.TEXTURE_CLASS_CENTROID_PCT.get(physics["texture"], (None, None))
        hyd = f"Clapp and Hornberger (1978) Table 2, {physics['texture']}"
        cs = (f"texture formula at the class centroid (sand {sand:g} %, clay {clay:g} %)" if sand is not None
              else "texture formula at the class centroid")
    else:
        hyd, cs = "recipe constants porosity, psi_sat_m, clapp_b", default_cs
    out = {"hydraulics": hyd, "solids_heat_capacity": cs}
    if physics.get("organic_fraction") is not None:
        out["organic_fraction"] = (f"{physics['organic_fraction']:g}, blended linearly with the organic soil of "
                                   "Lawrence and Slater (2008)")
    return out


def _water_spec(plan: Plan, model: ModelFile):
    """The water convention of ``model`` (the input, or a donor read with the input's layout)."""
    from . import water as water_mod

    if model.water is not None:
        return model.water
    lay = _layout_of(plan.model)
    return water_mod.resolve(model.roles, lay.data if lay is not None else None, model.store.describe(), True)


def _water_values(spec, rname: str, raw: np.ndarray, dz, por, name: str) -> np.ndarray:
    """One water variable as stored -> m3 m-3 as stored (a phase fraction -> fraction of 1)."""
    from .water import FRACTION_ROLES, fraction_factor

    if rname in FRACTION_ROLES:
        return np.asarray(raw, float) * fraction_factor(spec.units[rname])
    return soil.water_to_volumetric(raw, spec.units[rname], dz, porosity=por, name=name)


def _water_file_values(spec, liq: np.ndarray, ice: np.ndarray) -> dict:
    """The physics' liquid and ice (m3 m-3, ice liquid-equivalent) -> the values of the file's own
    water variables (m3 m-3 as stored, or fractions of 1), by role. The physics conserves water
    mass, so a total moves only where a donor blend changes it, or where it holds the true ice
    volume (the same mass fills another volume once melted or frozen): see _write_water."""
    conv, reading = spec.convention, spec.reading
    out = {}
    if conv == "liquid_and_ice":
        out["soil_liquid"] = liq
        out["soil_ice"] = soil.water_equivalent_to_ice_volume(ice, reading)
        return out
    if conv == "total_and_liquid":
        out["soil_liquid"] = liq
    elif conv in ("total_and_frozen_fraction", "total_and_unfrozen_fraction"):
        f = soil.frozen_fraction(liq, ice)
        out[spec.roles[1]] = f if conv == "total_and_frozen_fraction" else 1.0 - f
    out["soil_water_total"] = soil.total_from_phases(liq, ice, reading)
    return out


TOTAL_ROUNDING = 1e-12  # m3 m-3 (relative to 1 + total): a total that moved less is round-off, kept as stored


def _read_water(plan: Plan, store, hkey, shape, donor: ModelFile | None = None) -> dict:
    """Soil liquid and ice (m3 m-3, ice as liquid-water equivalent) from the file's own water
    convention (water.py), with the layer geometry and soil parameters the physics needs."""
    model = donor or plan.model
    src = model.store if donor else store
    nh = len(model.grid.shape)
    layers = plan.model.layers
    if layers is None:
        raise InputError(f"{plan.model.store.describe()}: a physics mode needs soil layer thicknesses; name "
                         "roles.layer_node_depth (or interfaces/thickness) in the layout")
    dz = np.broadcast_to(_layer_col(np.asarray(layers.thickness_m), nh), shape)
    por, psi, b, c_solid = _hydraulics(plan, src, hkey, shape, model=model)
    out = {"dz": dz, "porosity": por, "psi": psi, "b": b, "c_solid": c_solid}
    spec = _water_spec(plan, model)
    where = src.describe()
    raw, vol, names = {}, {}, {}
    for rname in spec.roles:
        role = model.role(rname)
        r = role.read(src, hkey)
        raw[rname] = r if role.layered else r[:, None]
        names[rname] = "+".join(role.variables)
        vol[rname] = _water_values(spec, rname, raw[rname], dz, por, role.variables[0])
    conv, reading = spec.convention, spec.reading
    units = spec.units
    if conv == "liquid_and_ice":
        liq, ice = vol["soil_liquid"], soil.ice_volume_to_water_equivalent(vol["soil_ice"], reading)
        out["liq_name"], out["ice_name"] = (f"{where}: variable '{names[r]}'" for r in ("soil_liquid", "soil_ice"))
        out["liq_units"], out["ice_units"] = units["soil_liquid"], units["soil_ice"]
    elif conv == "total_only":
        # the file holds no split: diagnose it from the temperature (the equilibrium phase rule)
        troles = model.require("soil_temperature", "a total-only water convention splits water by temperature")
        T = _temp_read(troles, src, hkey)
        T = T if troles.layered else T[:, None]
        W = vol["soil_water_total"]
        ok = np.isfinite(T) & np.isfinite(W)
        liq, ice = soil.equilibrate_phase(np.where(ok, T, T_FREEZE + 1.0), np.where(ok, W, 0.0), 0.0, por, psi, b)
        bad = ok & ~(np.isfinite(liq) & np.isfinite(ice))  # soil parameters missing: no split known
        liq, ice = np.where(ok & ~bad, liq, W), np.where(ok & ~bad, ice, np.where(bad, np.nan, 0.0))
        out["liq_name"] = f"{where}: liquid diagnosed from total '{names['soil_water_total']}'"
        out["ice_name"] = f"{where}: ice diagnosed from total '{names['soil_water_total']}'"
        out["liq_units"] = out["ice_units"] = units["soil_water_total"]
    else:
        other = spec.roles[1]
        kind = {"soil_liquid": "liquid", "soil_frozen_fraction": "frozen_fraction",
                "soil_unfrozen_fraction": "unfrozen_fraction"}[other]
        liq, ice = soil.phases_from_total(vol["soil_water_total"], vol[other], kind, reading)
        tot = names["soil_water_total"]
        if kind == "liquid":
            out["liq_name"] = f"{where}: variable '{names[other]}'"
            out["ice_name"] = f"{where}: ice = total - liquid ('{tot}' - '{names[other]}')"
        else:
            out["liq_name"] = f"{where}: liquid from '{tot}' and '{names[other]}'"
            out["ice_name"] = f"{where}: ice from '{tot}' and '{names[other]}'"
        out["liq_units"] = units[other] if kind == "liquid" else units["soil_water_total"]
        out["ice_units"] = units["soil_water_total"]
    out["liq"], out["ice"] = np.asarray(liq, float), np.asarray(ice, float)
    out["liq0"], out["ice0"] = out["liq"].copy(), out["ice"].copy()
    out["spec"], out["raw"] = spec, raw
    return out


def _physics(T_old, T_new, water, sel, phys, led, area, nh, mode, dT=None):
    """Impose the change on the selected cells and bring water phase into line."""
    kw = dict(porosity=water["porosity"], psi_sat_m=water["psi"], b=water["b"], c_solid=water["c_solid"])
    for key in ("liq", "ice"):
        # round-off negatives (a model's own arithmetic leaves -1e-12 kg m-2 about) become 0, counted
        tiny = sel & (water[key] < 0) & (water[key] >= -NEGATIVE_WATER_ROUNDING)
        if np.any(tiny):
            led.clamp(f"soil_{key}_rounding_negative_to_zero", np.count_nonzero(tiny))
            water[key] = np.where(tiny, 0.0, water[key])
        bad = sel & ~((water[key] >= 0) & np.isfinite(water[key]))
        if np.any(bad):
            raise InputError(f"{water[key + '_name']} has {int(bad.sum())} negative or missing value(s) in cells the "
                             "recipe perturbs; fix the file, or mark missing cells with its _FillValue")
        over = sel & (water[key] > 1.0 + 1e-6)
        if np.any(over):
            raise InputError(f"{water[key + '_name']} holds more water than the layer's volume in {int(over.sum())} "
                             f"perturbed cell(s) when read as '{water[key + '_units']}'; check its units attribute "
                             "(kg m-2, m3 m-3 or saturation_fraction)")
    rule = effective_phase_rule(phys, water["spec"])
    if mode == "energy":
        res = soil.apply_energy_mode(T_old, water["liq"], water["ice"], dT, water["dz"], rule=rule, **kw)
    else:
        res = soil.apply_temperature_mode(T_old, water["liq"], water["ice"], T_new - T_old, water["dz"], rule=rule,
                                          **kw)
    T = np.where(sel, res.T, T_old)
    _check_invariants(T_old, water, res, sel, dT if mode == "energy" else T_new - T_old, mode, rule, led, area, kw)
    water["liq"] = np.where(sel, res.liq, water["liq"])
    water["ice"] = np.where(sel, res.ice, water["ice"])
    # total water is conserved, so a layer holding more than its pores did so before the change:
    # it is reported, not "corrected" (removing water would break the water budget)
    over = sel & (water["liq"] + water["ice"] > water["porosity"] * (1.0 + 1e-9))
    led.flag("water_above_porosity_kept", np.count_nonzero(over))
    # warming cannot freeze water and cooling cannot melt ice: where it does, the starting state
    # was not in phase equilibrium for these soil parameters (in either mode)
    imposed = dT if mode == "energy" else T_new - T_old
    against = sel & (((imposed > 0) & (res.frozen_kg_m2 > PHASE_TOL_KG)) | ((imposed < 0) & (res.melted_kg_m2 > PHASE_TOL_KG)))
    led.flag("phase_change_against_imposed_change", np.count_nonzero(against))
    a = _bcast_h(area, 2)
    for key, arr in (("frozen_kg", res.frozen_kg_m2), ("melted_kg", res.melted_kg_m2),
                     ("sensible_J", res.sensible_J_m2), ("latent_J", res.latent_J_m2)):
        vals = np.where(sel, arr, 0.0) * a
        led.add_phase(key, vals.sum(axis=tuple(i for i in range(vals.ndim) if i != 1)))
    return T


def _check_invariants(T_old, water, res, sel, imposed, mode, rule, led, area, kw) -> None:
    """Measure the physics' promises on the cells it changed and put them in the ledger:
    water (liquid + ice) conserved; the temperature change never opposite to the imposed one;
    energy mode: |dT| <= |imposed dT| and the enthalpy change equal to C0 dT dz; temperature
    mode: dT equal to the imposed change."""
    s = sel & np.isfinite(res.T)
    if not np.any(s):
        return
    dz = water["dz"]
    w0 = (water["liq"] + water["ice"])[s]
    w1 = (res.liq + res.ice)[s]
    a = np.broadcast_to(_bcast_h(area, 2), s.shape)[s] * dz[s] * constants.RHO_WATER
    dT = (res.T - T_old)[s]
    imp = imposed[s]
    inv = led.invariants
    inv["water_before_kg"] += float((w0 * a).sum())
    inv["water_change_kg"] += float(((w1 - w0) * a).sum())
    inv["cells_checked"] += int(s.sum())
    inv["cells_opposite_sign"] += int(np.count_nonzero(dT * imp < 0))
    if mode == "energy":
        inv["cells_beyond_imposed"] += int(np.count_nonzero(np.abs(dT) > np.abs(imp) * (1 + 1e-12) + 1e-9))
        liq0, ice0 = water["liq"], water["ice"]
        if rule == "equilibrium":
            liq0, ice0 = soil.equilibrate_phase(np.where(sel, T_old, constants.T_FREEZE), liq0, ice0,
                                                kw["porosity"], kw["psi_sat_m"], kw["b"])
        C0 = soil.heat_capacity(liq0, ice0, kw["porosity"], kw["c_solid"])
        target = (C0 * imposed * dz)[s]
        err = np.abs((res.sensible_J_m2 + res.latent_J_m2)[s] - target)
        # relative to the target, or to the round-off of the layer's enthalpy where the target is
        # smaller than that (a profile factor of 1e-26 imposes nothing the solver can resolve)
        H0 = (np.abs(C0 * (T_old - constants.T_FREEZE)) + RHO_LF * (liq0 + ice0) + C0)[s] * dz[s]
        denom = np.maximum(np.abs(target), 1e-12 * H0)
        inv["max_energy_budget_rel_error"] = max(inv["max_energy_budget_rel_error"], float((err / denom).max()))
        # the phase change is what the imposed energy pays for: |d ice| rho_w L_f dz <= |C0 dT dz|
        dice = np.abs(res.ice - ice0)[s] * RHO_LF * dz[s]
        inv["cells_phase_change_beyond_energy"] += int(np.count_nonzero(dice > np.abs(target) * (1 + 1e-9) + 1e-9 * H0))
    else:
        inv["cells_not_exact"] += int(np.count_nonzero(dT != imp))
        latent = np.abs(res.latent_J_m2[s])
        sensible_budget = np.abs((soil.heat_capacity(water["liq"], water["ice"], kw["porosity"], kw["c_solid"])
                                  * imposed * dz)[s])
        # temperature mode sets T exactly: melting all ice on crossing 0 C can cost far more than
        # the sensible heat of the change; worth a look, since energy mode would differ
        led.flag("temperature_mode_latent_heat_beyond_imposed_energy",
                 np.count_nonzero(latent > sensible_budget * (1 + 1e-9) + 1e-6))
    # consistent before (no liquid above the curve below 0 C, no ice above 0 C), consistent after
    T1 = res.T
    cons0 = _one_sided_consistent(T_old, water["liq"], water["ice"], kw)
    cons1 = _one_sided_consistent(T1, res.liq, res.ice, kw)
    inv["cells_made_inconsistent"] += int(np.count_nonzero((cons0 & ~cons1)[s]))


RHO_LF = constants.RHO_WATER * constants.LATENT_HEAT_FUSION   # J per m3 of liquid water


def _one_sided_consistent(T, liq, ice, kw, tol=1e-9) -> np.ndarray:
    """No liquid above the supercooled curve below 0 C and no ice above 0 C (to ``tol`` m3 m-3)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        lmax = soil.supercooled_liquid_max(np.where(np.isfinite(T), T, constants.T_FREEZE), kw["porosity"],
                                           kw["psi_sat_m"], kw["b"])
    return ~(((T < constants.T_FREEZE) & (liq > lmax + tol)) | ((T > constants.T_FREEZE) & (ice > tol)))


def effective_phase_rule(physics: dict, water_spec) -> str:
    """The recipe's phase rule, except for a file that keeps only total water: its model
    diagnoses the liquid/ice split from temperature, which is the equilibrium rule."""
    if water_spec is not None and getattr(water_spec, "phase_split_diagnosed", False):
        return "equilibrium"
    return physics.get("phase_rule", "change_driven")


def _report_input_shift(T0, water, inside, led, area) -> None:
    """Per layer: input cells off the freezing curve and the kg the equilibrium rule would move."""
    ok = inside & np.isfinite(T0) & np.isfinite(water["liq"]) & np.isfinite(water["ice"])
    with np.errstate(invalid="ignore"):
        shift = soil.equilibrium_shift(np.where(ok, T0, constants.T_FREEZE), water["liq"], water["ice"],
                                       water["porosity"], water["psi"], water["b"])
    # shifts within the tolerance of soil.disequilibrium (1e-4 m3 m-3: float32 storage, slightly
    # different constants) are not counted
    shift = np.where(ok & (np.abs(shift) > soil.DISEQUILIBRIUM_TOL), shift, 0.0)
    kg_m2 = shift * water["dz"] * constants.RHO_WATER
    moved = shift != 0
    a = _bcast_h(area, 2)
    axes = tuple(i for i in range(kg_m2.ndim) if i != 1)
    # states a one-sided model would not hold either (liquid above the curve below 0 C, ice above
    # 0 C); ice beside liquid below the curve is stable for it and not counted here
    off = ok & ~_one_sided_consistent(T0, water["liq"], water["ice"],
                                      {"porosity": water["porosity"], "psi_sat_m": water["psi"], "b": water["b"]},
                                      tol=soil.DISEQUILIBRIUM_TOL)
    led.add_input_shift(moved.sum(axis=axes), (np.maximum(kg_m2, 0.0) * a).sum(axis=axes),
                        (np.maximum(-kg_m2, 0.0) * a).sum(axis=axes), off.sum(axis=axes))


def _equilibrate_blend(T, water, sel, led, area, rule) -> None:
    """Bring a donor-blended state into line with the phase rule at its blended temperature.

    A blend of two consistent states need not be consistent itself (the freezing curve is not
    linear). Change-driven rule: liquid above the supercooled limit freezes and ice above 0 C
    melts, nothing else (:func:`soil.settle_one_sided`). Equilibrium rule: the split is put on
    the freezing curve (:func:`soil.equilibrate_phase`). Water is conserved.
    """
    ok = sel & np.isfinite(T)
    settle = soil.equilibrate_phase if rule == "equilibrium" else soil.settle_one_sided
    liq, ice = settle(np.where(ok, T, T_FREEZE), water["liq"], water["ice"], water["porosity"], water["psi"],
                      water["b"])
    dice = np.where(ok, ice - water["ice"], 0.0)
    water["liq"] = np.where(ok, liq, water["liq"])
    water["ice"] = np.where(ok, ice, water["ice"])
    led.flag("donor_blend_re_equilibrated", np.count_nonzero(np.abs(dice) > 1e-12))
    a = _bcast_h(area, 2) * water["dz"] * constants.RHO_WATER  # m3 m-3 of water -> kg, times m2
    for key, vals in (("frozen_kg", np.maximum(dice, 0.0)), ("melted_kg", np.maximum(-dice, 0.0))):
        per = vals * a
        led.add_phase(key, per.sum(axis=tuple(i for i in range(per.ndim) if i != 1)))


PHASE_TOL_KG = 1e-6  # kg m-2 of water changing phase below which a cell is not flagged
NEGATIVE_WATER_ROUNDING = 1e-9  # m3 m-3: negative water this small is round-off, set to 0 (counted)
DEPARTURE_K = 0.05  # realised minus imposed change beyond which a cell is flagged (K)


def _flag_departures(led, realised: np.ndarray, imposed: np.ndarray, sel: np.ndarray) -> None:
    """Count cells whose temperature moved against the imposed change, or by clearly more than it.

    Latent heat can only damp an imposed change (water freezes as soil cools, ice melts as it
    warms). A change of the opposite sign, or larger than imposed, means the starting state was
    not in phase equilibrium for the soil parameters used: its water froze or melted on its own.
    """
    big = sel & (np.abs(imposed) > 0)
    opposite = big & (realised * imposed < 0) & (np.abs(realised) > DEPARTURE_K)
    larger = big & ~opposite & (np.abs(realised) > np.abs(imposed) + DEPARTURE_K)
    led.flag("realised_change_opposite_to_imposed", np.count_nonzero(opposite))
    led.flag("realised_change_larger_than_imposed", np.count_nonzero(larger))


def _write_water(plan, store, hkey, water, inside, led, area, write):
    """Write the physics' liquid and ice back in the file's own convention: only the variables
    that can move (in total_and_liquid the liquid moves and the total stays), only where the
    state moved, rounded as the file stores them."""
    model = plan.model
    spec = water["spec"]
    new_vals = _water_file_values(spec, water["liq"], water["ice"])
    old_vals = _water_file_values(spec, water["liq0"], water["ice0"])
    for rname, vals in new_vals.items():
        role = model.role(rname)
        old = water["raw"][rname]  # as read, in the file's units
        moved = inside & (vals != old_vals[rname]) & np.isfinite(vals)
        if rname == "soil_water_total":  # conserved by the physics up to round-off: the total stays
            moved &= np.abs(vals - old_vals[rname]) > TOTAL_ROUNDING * (1.0 + np.abs(old_vals[rname]))
        if rname in ("soil_frozen_fraction", "soil_unfrozen_fraction"):
            from .water import fraction_factor

            new = vals / fraction_factor(spec.units[rname])
        else:
            new = soil.volumetric_to_water(vals, spec.units[rname], water["dz"], porosity=water["porosity"])
        new = np.where(moved, role.stored(new if role.layered else new[:, 0]).reshape(new.shape), old)
        changed = inside & (new != old) & ~(np.isnan(new) & np.isnan(old))
        led.stats(role.variables[0] if len(role.variables) == 1 else "+".join(role.variables), rname,
                  spec.units[rname], new.shape[1], role.layered).add(np.where(changed, new - old, 0.0), inside, area)
        if write:
            role.write(store, hkey, new if role.layered else new[:, 0], changed if role.layered else changed[:, 0])
