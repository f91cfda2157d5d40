"""Small synthetic model files of every shape the tests need, made with netCDF4 directly.

These are test fixtures, not reference data: each test that checks physics or geometry compares
against a published value or a reference library, named beside the check. The helpers for running
initgen on them (the tests' recipes, sha256 and raw readers, the CLI's refusal) are in
``tests/clikit.py``; the pytest fixtures built on both (a folder with a small input, the demo made
once per session, a recipe factory) are in ``tests/conftest.py``.
"""

from __future__ import annotations

from pathlib import Path

import netCDF4
import numpy as np

NODES = np.array([0.05, 0.15, 0.35, 0.75, 1.5])
FILL = np.float32(1.0e20)


def cf_lonlat(ds, lon, lat, names=("lon", "lat"), dims=None):
    """CF longitude and latitude variables (float64, degrees_east and degrees_north) named ``names``
    on existing dims: each on its own dim by default (a regular grid), or both on ``dims``
    (``("y", "x")`` for a curvilinear grid, ``("column",)`` for a list of points)."""
    made = []
    for name, values, units, std in zip(names, (lon, lat), ("degrees_east", "degrees_north"),
                                        ("longitude", "latitude")):
        v = ds.createVariable(name, "f8", dims or (name,))
        v.units, v.standard_name = units, std
        v[:] = values
        made.append(v)
    return tuple(made)


def _temps(shape_h, nlay=NODES.size, seed=0):
    rng = np.random.default_rng(seed)
    base = 275.0 + rng.normal(0.0, 2.0, size=shape_h)
    return np.stack([base + 0.5 * k for k in range(nlay)]).astype("f4")


def regular(path: Path, *, fmt="NETCDF4", nlon=36, nlat=18, lon0=0.0, packed=False, layer_first=True,
            ocean_fill=True, per_layer=False, with_time=True, west_to_east=True, lat_flip=False, chunked=False):
    """A regular grid covering the globe at 10 degrees (by default), lon from lon0."""
    lon = lon0 + 5.0 + (360.0 / nlon) * np.arange(nlon)
    if not west_to_east:
        lon = lon[::-1]
    lat = -90 + 90.0 / nlat + (180.0 / nlat) * np.arange(nlat)
    if lat_flip:
        lat = lat[::-1]
    ds = netCDF4.Dataset(path, "w", format=fmt)
    ds.history = "made by the initgen test suite"
    ds.title = "test file"
    ds.createDimension("lon", nlon)
    ds.createDimension("lat", nlat)
    ds.createDimension("lev", NODES.size)
    if with_time:
        ds.createDimension("time", 1)
    cf_lonlat(ds, lon, lat)
    v = ds.createVariable("lev", "f4", ("lev",))
    v.units, v.positive, v.standard_name = "m", "down", "depth"
    v[:] = NODES
    LON, LAT = np.meshgrid(lon, lat)
    land = ~((LAT < -60) | ((LON % 360 > 150) & (LON % 360 < 200) & (np.abs(LAT) < 20)))
    lf = ds.createVariable("landfrac", "f4", ("lat", "lon"))
    lf.units, lf.standard_name = "1", "land_area_fraction"
    lf[:] = land.astype("f4")
    T = _temps(LON.shape)
    if ocean_fill:
        T[:, ~land] = FILL
    tdims = (("time",) if with_time else ()) + (("lev", "lat", "lon") if layer_first else ("lat", "lon", "lev"))
    data = T if layer_first else np.moveaxis(T, 0, -1)
    kw = dict(fill_value=FILL)
    if chunked and fmt.startswith("NETCDF4"):
        kw.update(zlib=True, complevel=2, chunksizes=tuple(1 if d in ("time", "lev") else 6 for d in tdims))
    if per_layer:
        for k in range(NODES.size):
            v = ds.createVariable(f"tsoil{k + 1}", "f4", (("time",) if with_time else ()) + ("lat", "lon"), **kw)
            v.units = "K"
            v[:] = T[k][None] if with_time else T[k]
    elif packed:
        v = ds.createVariable("tsoil", "i2", tdims, fill_value=np.int16(-32767))
        v.scale_factor, v.add_offset = np.float32(0.01), np.float32(273.15)
        v.units, v.standard_name = "K", "soil_temperature"
        v.set_auto_maskandscale(True)
        masked = np.ma.masked_array(np.where(data == FILL, 273.15, data), mask=(data == FILL))
        v[:] = masked[None] if with_time else masked
    else:
        v = ds.createVariable("tsoil", "f4", tdims, **kw)
        v.units, v.standard_name = "K", "soil_temperature"
        v[:] = data[None] if with_time else data
    o = ds.createVariable("other", "f8", ("lat", "lon"))
    o.units = "1"
    o.note = "never touched"
    o[:] = np.sin(LON) * np.cos(LAT)
    ds.close()
    return path


def curvilinear(path: Path, lon2d, lat2d, T=None):
    ny, nx = lon2d.shape
    ds = netCDF4.Dataset(path, "w")
    ds.createDimension("y", ny)
    ds.createDimension("x", nx)
    ds.createDimension("lev", NODES.size)
    cf_lonlat(ds, lon2d, lat2d, ("nav_lon", "nav_lat"), ("y", "x"))
    v = ds.createVariable("lev", "f4", ("lev",))
    v.units, v.positive = "m", "down"
    v[:] = NODES
    v = ds.createVariable("tsoil", "f4", ("lev", "y", "x"), fill_value=FILL)
    v.units, v.standard_name = "K", "soil_temperature"
    v[:] = _temps((ny, nx)) if T is None else T
    ds.close()
    return path


def points(path: Path, lon, lat, T=None, depth_units="m"):
    n = lon.size
    ds = netCDF4.Dataset(path, "w")
    ds.createDimension("column", n)
    ds.createDimension("lev", NODES.size)
    cf_lonlat(ds, lon, lat, ("clon", "clat"), ("column",))
    v = ds.createVariable("lev", "f4", ("lev",))
    v.units, v.positive = depth_units, "down"
    v[:] = NODES * (100.0 if depth_units == "cm" else 1.0)
    v = ds.createVariable("tsoil", "f4", ("column", "lev"), fill_value=FILL)
    v.units, v.standard_name = "K", "soil_temperature"
    v[:] = (_temps((n,)) if T is None else T).T
    ds.close()
    return path



def field_file(path, lon, lat, values=None, name="anom"):
    """A 2-D anomaly field (K) on a lon/lat grid: -1.5 K everywhere unless ``values`` are given."""
    lon, lat = np.asarray(lon, float), np.asarray(lat, float)
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("lon", lon.size)
        ds.createDimension("lat", lat.size)
        v = ds.createVariable("lon", "f8", ("lon",))
        v.units = "degrees_east"
        v[:] = lon
        v = ds.createVariable("lat", "f8", ("lat",))
        v.units = "degrees_north"
        v[:] = lat
        v = ds.createVariable(name, "f4", ("lat", "lon"))
        v.units = "K"
        v[:] = np.full((lat.size, lon.size), -1.5) if values is None else values
    return Path(path)

# =============================================================================================
# Water conventions and packed temperatures (files shaped like the models' own restarts)
# =============================================================================================
# One frozen soil state, encoded in each water convention the layouts support, so that tests can
# check that every convention gives the same physical change as the liquid + ice file.

WATER_INTERFACES = np.array([0.0, 0.1, 0.3, 0.7, 1.5])  # m, four soil layers
WATER_NODES = 0.5 * (WATER_INTERFACES[:-1] + WATER_INTERFACES[1:])
WATER_DZ = np.diff(WATER_INTERFACES)
WATER_LON = np.arange(-30.0, 31.0, 10.0)
WATER_LAT = np.arange(-20.0, 21.0, 10.0)
LOAM = dict(porosity=0.451, psi_sat_m=0.478, b=5.39)  # Clapp and Hornberger (1978), Table 2, loam


def frozen_state(seed=0):
    """Soil temperature (K), liquid and ice (m3 m-3, liquid equivalent) of a partly frozen soil in
    phase equilibrium for loam: liquid = min(total, supercooled limit) below 273.15 K (the
    freezing curve of initgen.science.soil, Niu and Yang 2006). Shape (layer, lat, lon)."""
    from initgen.science.soil.freezing import supercooled_liquid_max

    rng = np.random.default_rng(seed)
    shape = (WATER_NODES.size, WATER_LAT.size, WATER_LON.size)
    T = (270.0 + 0.8 * np.arange(WATER_NODES.size)[:, None, None] + rng.uniform(-1.5, 1.5, shape))
    T = T.astype("f4").astype(float)  # as the file stores it, so the split is in equilibrium as read
    W = rng.uniform(0.20, 0.40, shape)
    lmax = supercooled_liquid_max(T, LOAM["porosity"], LOAM["psi_sat_m"], LOAM["b"])
    liq = np.where(T > 273.15, W, np.minimum(W, lmax))
    return T, liq, W - liq


WATER_VARS = {  # convention -> file variables (role -> name)
    "liquid_and_ice": {"soil_liquid": "water_liquid", "soil_ice": "water_ice"},
    "total_and_liquid": {"soil_water_total": "water_total", "soil_liquid": "water_liquid"},
    "total_and_frozen_fraction": {"soil_water_total": "water_total", "soil_frozen_fraction": "frozen_frac"},
    "total_and_unfrozen_fraction": {"soil_water_total": "water_total", "soil_unfrozen_fraction": "unfrozen_frac"},
    "total_only": {"soil_water_total": "water_total"},
}


def _encode_water(convention, units, liq, ice, ice_reading):
    """role -> values of the file's own variables (units: 'kg m-2', 'm3 m-3' or 'saturation_fraction')."""
    dz = WATER_DZ[:, None, None]
    k = 0.917 if ice_reading == "true_ice_volume" else 1.0  # true ice volume = mass / 917 kg m-3

    def amount(liq_part, ice_part=0.0):
        if units == "kg m-2":
            return (liq_part + ice_part) * 1000.0 * dz
        stored = liq_part + ice_part / k  # volume as the file keeps it
        return stored / LOAM["porosity"] if units == "saturation_fraction" else stored

    W = liq + ice
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(W > 0, ice / W, 0.0)
    out = {}
    if convention == "liquid_and_ice":
        out["soil_liquid"] = amount(liq)
        out["soil_ice"] = amount(0.0, ice)
    else:
        out["soil_water_total"] = amount(liq, ice)
        if convention == "total_and_liquid":
            out["soil_liquid"] = amount(liq)
        elif convention == "total_and_frozen_fraction":
            out["soil_frozen_fraction"] = frac
        elif convention == "total_and_unfrozen_fraction":
            out["soil_unfrozen_fraction"] = 1.0 - frac
    return out


def water_file(path: Path, convention="liquid_and_ice", units="kg m-2", *, ice_reading="liquid_equivalent",
               per_layer=False, dtype="f8", seed=0, units_attr=True, cf_names=False):
    """A small regular-grid restart holding :func:`frozen_state` in ``convention``.

    ``per_layer`` writes each layer as its own 2-D variable (``<name>_1`` ... top first); water
    units are written as attributes unless ``units_attr`` is False (or units are
    'saturation_fraction', which is no UDUNITS unit: the layout's units section gives it).
    Fractions are in '1'. A time axis of length 1 leads, as in restarts. ``cf_names`` adds CF
    standard names where the CF table has one (soil temperature, total water, liquid, ice,
    unfrozen fraction), for runs without a layout.
    """
    cf = {"soil_water_total": "mass_content_of_water_in_soil_layer",
          "soil_liquid": "liquid_water_content_of_soil_layer", "soil_ice": "frozen_water_content_of_soil_layer",
          "soil_unfrozen_fraction": "mass_fraction_of_unfrozen_water_in_soil_moisture"}
    T, liq, ice = frozen_state(seed)
    fields = _encode_water(convention, units, liq, ice, ice_reading)
    nl = WATER_NODES.size
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", 1)
        ds.createDimension("soil_layer", nl)
        ds.createDimension("lat", WATER_LAT.size)
        ds.createDimension("lon", WATER_LON.size)
        ds.createDimension("nv", 2)
        cf_lonlat(ds, WATER_LON, WATER_LAT)
        v = ds.createVariable("soil_layer", "f8", ("soil_layer",))
        v.units, v.positive, v.standard_name, v.bounds = "m", "down", "depth", "soil_layer_bnds"
        v[:] = WATER_NODES
        ds.createVariable("soil_layer_bnds", "f8", ("soil_layer", "nv"))[:] = np.stack(
            [WATER_INTERFACES[:-1], WATER_INTERFACES[1:]], axis=1)
        v = ds.createVariable("soil_temp", "f4", ("time", "soil_layer", "lat", "lon"))
        v.units = "K"
        if cf_names:
            v.standard_name = "soil_temperature"
        v[:] = T[None]
        for role, name in WATER_VARS[convention].items():
            vals = fields[role]
            frac = role.endswith("fraction")
            u = "1" if frac else units
            if per_layer:
                for k in range(nl):
                    v = ds.createVariable(f"{name}_{k + 1}", dtype, ("time", "lat", "lon"))
                    if units_attr and (frac or units != "saturation_fraction"):
                        v.units = u
                    v[:] = vals[k][None]
            else:
                v = ds.createVariable(name, dtype, ("time", "soil_layer", "lat", "lon"))
                if units_attr and (frac or units != "saturation_fraction"):
                    v.units = u
                if cf_names and role in cf:
                    v.standard_name = cf[role]
                v[:] = vals[None]
    return path


def water_layout(path: Path, convention, units="kg m-2", *, ice_reading=None, per_layer=False):
    """The layout for :func:`water_file` (a YAML file; convention and units written out)."""
    nl = WATER_NODES.size
    lines = ["initgen_layout: 1", f"name: {convention.replace('_', '-')}", "roles:", "  longitude: lon",
             "  latitude: lat", "  soil_temperature: soil_temp",
             f"  layer_interface_depth: {{values: {WATER_INTERFACES.tolist()}, units: m}}"]
    for role, name in WATER_VARS[convention].items():
        spec = [f"{name}_{k + 1}" for k in range(nl)] if per_layer else name
        lines.append(f"  {role}: {spec}".replace("'", ""))
    lines.append("layer_dimension: soil_layer")
    lines.append("water:")
    lines.append(f"  convention: {convention}")
    if ice_reading:
        lines.append(f"  volumetric_ice: {ice_reading}")
    if units == "saturation_fraction":
        lines.append("units:")
        for role in WATER_VARS[convention]:
            if not role.endswith("fraction"):
                lines.append(f"  {role}: saturation_fraction")
    path.write_text("\n".join(lines) + "\n")
    return path


def packed_temperature_file(path: Path, headroom_K=5.9):
    """A restart whose int16 soil temperature is packed so tightly (scale_factor/add_offset
    chosen from the data's own range, as packing tools do) that its warmest value can rise by
    only about ``headroom_K`` before reaching the type's limit."""
    T, _, _ = frozen_state(1)
    hi = float(T.max()) + headroom_K
    lo = float(T.min()) - 1.0
    # raw -32766..32767 spans lo..hi (-32767 is the fill value)
    scale = (hi - lo) / (32767 - (-32766))
    offset = lo - (-32766) * scale
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", 1)
        ds.createDimension("soil_layer", WATER_NODES.size)
        ds.createDimension("lat", WATER_LAT.size)
        ds.createDimension("lon", WATER_LON.size)
        cf_lonlat(ds, WATER_LON, WATER_LAT)
        v = ds.createVariable("soil_layer", "f8", ("soil_layer",))
        v.units, v.positive, v.standard_name = "m", "down", "depth"
        v[:] = WATER_NODES
        v = ds.createVariable("soil_temp", "i2", ("time", "soil_layer", "lat", "lon"), fill_value=np.int16(-32767))
        v.scale_factor, v.add_offset = np.float64(scale), np.float64(offset)
        v.units, v.standard_name = "K", "soil_temperature"
        v.set_auto_maskandscale(True)
        v[:] = T[None]
    return path


# =============================================================================================
# Collation fixtures (issue 17): a second invented model of the demo's region, on another grid
# (unstructured columns) with another layer structure (6 layers reaching 1 m), CF names only.
# =============================================================================================

SECOND_INTERFACES = np.array([0.0, 0.02, 0.08, 0.2, 0.4, 0.7, 1.0])


def second_model(path: Path, *, step: int = 2):
    """The demo's invented continent sampled every ``step`` cells as a list of land columns."""
    from initgen import demo
    from initgen.science.soil.freezing import supercooled_liquid_max

    f = demo.demo_fields()
    LON, LAT = np.meshgrid(f["lon"], f["lat"])
    pick = f["landfrac"] > 0
    sub = np.zeros_like(pick)
    sub[::step, ::step] = True
    pick &= sub
    lon, lat = LON[pick], LAT[pick]
    lon = np.where(lon > 180.0, lon - 360.0, lon)  # the -180..180 convention, unlike the demo
    elev, landfrac = f["elev"][pick], f["landfrac"][pick]
    t_surf = 290.0 - 0.0055 * elev - 0.35 * (lat - 40.0)
    t_deep = 285.0 - 0.003 * elev - 0.2 * (lat - 40.0)
    top, bot = SECOND_INTERFACES[:-1], SECOND_INTERFACES[1:]
    node = 0.5 * (top + bot)
    tsoil = t_deep[:, None] + (t_surf - t_deep)[:, None] * np.exp(-node[None] / 0.6)
    dz = (bot - top)[None]
    total = 0.30
    liq = np.minimum(total, supercooled_liquid_max(tsoil, **dict(porosity=0.451, psi_sat_m=0.478, b=5.39)))
    n, nl = lon.size, node.size
    ds = netCDF4.Dataset(path, "w")
    ds.title = "second invented model for the collation tests"
    ds.createDimension("column", n)
    ds.createDimension("depth", nl)
    ds.createDimension("nv", 2)
    cf_lonlat(ds, lon, lat, ("clon", "clat"), ("column",))
    v = ds.createVariable("depth", "f8", ("depth",))
    v.units, v.positive, v.bounds = "m", "down", "depth_bnds"
    v[:] = node
    v = ds.createVariable("depth_bnds", "f8", ("depth", "nv"))
    v.units = "m"
    v[:] = np.stack([top, bot], axis=1)
    for name, vals, units, std in (("frac", landfrac, "1", "land_area_fraction"),
                                   ("zs", elev, "m", "surface_altitude"),
                                   # cells of 0.5 step degrees on a sphere of 6371 km (invented columns)
                                   ("area", (6.371e6 * np.deg2rad(0.5 * step)) ** 2 * np.cos(np.deg2rad(lat)), "m2",
                                    "cell_area"),
                                   ("t_skin", np.minimum(t_surf, 280.0), "K", "surface_temperature"),
                                   ("t_snow", np.minimum(t_surf - 1.0, 272.0), "K", "temperature_in_surface_snow")):
        v = ds.createVariable(name, "f4", ("column",))
        v.units, v.standard_name = units, std
        v[:] = vals
    for name, vals, units, std in (("t_soil", tsoil, "K", "soil_temperature"),
                                   ("w_liq", liq * dz * 1000.0, "kg m-2", "liquid_water_content_of_soil_layer"),
                                   ("w_ice", (total - liq) * dz * 1000.0, "kg m-2", "frozen_water_content_of_soil_layer")):
        v = ds.createVariable(name, "f4", ("column", "depth"))
        v.units, v.standard_name = units, std
        v[:] = vals
    ds.close()
    return path


# =============================================================================================
# Added for the HTML report tests (issue 18): a land fraction on any grid kind
# =============================================================================================


def add_land_fraction(path: Path, land: np.ndarray) -> Path:
    """Add a CF ``land_area_fraction`` variable (values ``land``, the grid's horizontal shape) to a file.

    Works on the files of :func:`curvilinear` (dims y, x) and :func:`points` (dim column).
    """
    with netCDF4.Dataset(path, "a") as ds:
        dims = ("y", "x") if "y" in ds.dimensions else ("column",)
        v = ds.createVariable("landfrac", "f4", dims)
        v.units, v.standard_name = "1", "land_area_fraction"
        v[:] = np.asarray(land, "f4").reshape(v.shape)
    return path


# ---------------------------------------------------------------------------------------------
# Layer geometry, records, cell areas and separate grid files (issue 14, items 2-5 and 7).
# Each file has the shape of one convention; depths are invented and chosen so that node
# depths and interfaces differ from the halfway-between-nodes construction.
# ---------------------------------------------------------------------------------------------

#: Interfaces (m) of the four layers of the per-layer files: 0-10, 10-40, 40-100, 100-200 cm.
GEOM_INTERFACES = np.array([0.0, 0.1, 0.4, 1.0, 2.0])


def _lonlat_regular(ds, nlon=12, nlat=6, lon0=-175.0, bounds=False):
    lon = lon0 + (360.0 / nlon) * np.arange(nlon)
    lat = -90 + 90.0 / nlat + (180.0 / nlat) * np.arange(nlat)
    ds.createDimension("lon", nlon)
    ds.createDimension("lat", nlat)
    v, w = cf_lonlat(ds, lon, lat)
    if bounds:
        ds.createDimension("nv", 2)
        v.bounds, w.bounds = "lon_bnds", "lat_bnds"
        dl, dp = 360.0 / nlon, 180.0 / nlat
        ds.createVariable("lon_bnds", "f8", ("lon", "nv"))[:] = np.stack([lon - dl / 2, lon + dl / 2], axis=1)
        ds.createVariable("lat_bnds", "f8", ("lat", "nv"))[:] = np.stack([lat - dp / 2, lat + dp / 2], axis=1)
    return lon, lat


def _time(ds, nrec):
    ds.createDimension("time", nrec)
    t = ds.createVariable("time", "f8", ("time",))
    t.units, t.standard_name, t.calendar = "days since 2000-01-01", "time", "standard"
    t[:] = np.arange(nrec, dtype=float)


def per_layer_cf_bounds(path: Path, *, nrec=1, order=(2, 0, 3, 1), interfaces=GEOM_INTERFACES,
                        node_fraction=0.5, as_dims=False):
    """Four 2-D soil temperatures (time, lat, lon), each with standard_name soil_temperature and a
    CF scalar depth coordinate with bounds, written to the file in the order ``order`` (not top
    first: detection must order them by depth). Nodes at ``node_fraction`` of each layer."""
    ds = netCDF4.Dataset(path, "w")
    _time(ds, nrec)
    lon, lat = _lonlat_regular(ds)
    ds.createDimension("nv2", 2)
    T = _temps((lat.size, lon.size), nlay=len(interfaces) - 1)
    for k in order:
        top, bot = interfaces[k], interfaces[k + 1]
        if as_dims:  # the variant with a depth axis of length 1 per variable (a coordinate variable)
            ds.createDimension(f"depth{k}", 1)
        d = ds.createVariable(f"depth{k}", "f4", (f"depth{k}",) if as_dims else ())
        d.units, d.positive, d.standard_name, d.axis = "m", "down", "depth", "Z"
        d.bounds = f"depth{k}_bnds"
        d[...] = top + node_fraction * (bot - top)
        ds.createVariable(f"depth{k}_bnds", "f4", ((f"depth{k}",) if as_dims else ()) + ("nv2",))[:] = [top, bot]
        dims = ("time",) + ((f"depth{k}",) if as_dims else ()) + ("lat", "lon")
        v = ds.createVariable(f"st_{'abcdefgh'[k]}", "f4", dims, fill_value=FILL)
        v.units, v.standard_name = "K", "soil_temperature"
        if not as_dims:
            v.coordinates = f"depth{k}"
        v[:] = T[k].reshape((1,) * (len(dims) - 2) + T[k].shape).repeat(nrec, axis=0)
    ds.close()
    return path


def per_layer_depths_in_names(path: Path, *, interfaces_cm=(0, 10, 40, 100, 200), long_names=True):
    """Four 2-D soil temperatures whose depths are written only in their names
    (``soil_temperature_0_10cm``) and long_names (``soil temperature 0-10 cm``), file order
    deepest first."""
    nlay = len(interfaces_cm) - 1
    ds = netCDF4.Dataset(path, "w")
    lon, lat = _lonlat_regular(ds)
    T = _temps((lat.size, lon.size), nlay=nlay)
    for k in reversed(range(nlay)):
        a, b = interfaces_cm[k], interfaces_cm[k + 1]
        v = ds.createVariable(f"soil_temperature_{a}_{b}cm", "f4", ("lat", "lon"), fill_value=FILL)
        v.units, v.standard_name = "K", "soil_temperature"
        if long_names:
            v.long_name = f"soil temperature {a}-{b} cm"
        v[:] = T[k]
    ds.close()
    return path


def nodes_and_thickness(path: Path, *, nodes=(0.05, 0.25, 0.7, 1.5), thickness=(0.1, 0.3, 0.6, 1.0)):
    """One soil temperature on a layer axis whose coordinate holds node depths at the layer
    centres, and a separate ``dz`` variable with the thicknesses (no CF link between them)."""
    ds = netCDF4.Dataset(path, "w")
    lon, lat = _lonlat_regular(ds)
    ds.createDimension("layer", len(nodes))
    v = ds.createVariable("layer", "f4", ("layer",))
    v.units, v.positive = "m", "down"
    v[:] = nodes
    v = ds.createVariable("dz", "f4", ("layer",))
    v.units = "m"
    v[:] = thickness
    v = ds.createVariable("tsoil", "f4", ("layer", "lat", "lon"), fill_value=FILL)
    v.units, v.standard_name = "K", "soil_temperature"
    v[:] = _temps((lat.size, lon.size), nlay=len(nodes))
    ds.close()
    return path


def layered_with_records(path: Path, nrec: int, interfaces=GEOM_INTERFACES):
    """A soil temperature (time, lev, lat, lon) with ``nrec`` records and CF layer bounds."""
    GEOM_INTERFACES = np.asarray(interfaces, float)  # noqa: N806 (the layer interfaces of this file)
    ds = netCDF4.Dataset(path, "w")
    _time(ds, nrec)
    lon, lat = _lonlat_regular(ds)
    ds.createDimension("lev", GEOM_INTERFACES.size - 1)
    ds.createDimension("nv2", 2)
    v = ds.createVariable("lev", "f4", ("lev",))
    v.units, v.positive, v.standard_name, v.bounds = "m", "down", "depth", "lev_bnds"
    v[:] = 0.5 * (GEOM_INTERFACES[1:] + GEOM_INTERFACES[:-1])
    ds.createVariable("lev_bnds", "f4", ("lev", "nv2"))[:] = np.stack([GEOM_INTERFACES[:-1], GEOM_INTERFACES[1:]], 1)
    v = ds.createVariable("tsoil", "f4", ("time", "lev", "lat", "lon"), fill_value=FILL)
    v.units, v.standard_name = "K", "soil_temperature"
    T = _temps((lat.size, lon.size), nlay=GEOM_INTERFACES.size - 1)
    v[:] = np.stack([T + r for r in range(nrec)])
    ds.close()
    return path


def curvilinear_corners(path: Path, *, ny=6, nx=8, corners=True, lon0=-20.0, lat0=-10.0, step=5.0, rot=10.0):
    """A rotated, curvilinear lon/lat grid with CF 2-D cell corners ``(ny, nx, 4)`` (counter-
    clockwise) and no cell-area variable; CF layer bounds on the layer axis."""
    jj, ii = np.meshgrid(np.arange(ny + 1) - 0.5, np.arange(nx + 1) - 0.5, indexing="ij")
    c, s = np.cos(np.radians(rot)), np.sin(np.radians(rot))
    lon_c = lon0 + step * (c * ii - s * jj)
    lat_c = lat0 + step * (s * ii + c * jj)
    clon = 0.25 * (lon_c[:-1, :-1] + lon_c[:-1, 1:] + lon_c[1:, 1:] + lon_c[1:, :-1])
    clat = 0.25 * (lat_c[:-1, :-1] + lat_c[:-1, 1:] + lat_c[1:, 1:] + lat_c[1:, :-1])
    ds = netCDF4.Dataset(path, "w")
    for d, n in (("y", ny), ("x", nx), ("nv4", 4), ("lev", 4), ("nv2", 2)):
        ds.createDimension(d, n)
    v, w = cf_lonlat(ds, clon, clat, ("nav_lon", "nav_lat"), ("y", "x"))
    if corners:
        v.bounds, w.bounds = "lon_corners", "lat_corners"
        ccw = lambda a: np.stack([a[:-1, :-1], a[:-1, 1:], a[1:, 1:], a[1:, :-1]], axis=-1)  # noqa: E731
        ds.createVariable("lon_corners", "f8", ("y", "x", "nv4"))[:] = ccw(lon_c)
        ds.createVariable("lat_corners", "f8", ("y", "x", "nv4"))[:] = ccw(lat_c)
    v = ds.createVariable("lev", "f4", ("lev",))
    v.units, v.positive, v.bounds = "m", "down", "lev_bnds"
    v[:] = 0.5 * (GEOM_INTERFACES[1:] + GEOM_INTERFACES[:-1])
    ds.createVariable("lev_bnds", "f4", ("lev", "nv2"))[:] = np.stack([GEOM_INTERFACES[:-1], GEOM_INTERFACES[1:]], 1)
    v = ds.createVariable("tsoil", "f4", ("lev", "y", "x"), fill_value=FILL)
    v.units, v.standard_name = "K", "soil_temperature"
    v[:] = _temps((ny, nx), nlay=4)
    ds.close()
    return path, (lon_c, lat_c)


def points_dateline(path: Path, n=40, water=False):
    """A list of land points across the dateline (170E..170W), no cell areas, CF layer bounds;
    with ``water``, liquid and ice per layer in kg m-2 (CF standard names) and a temperature just
    above freezing, so that a cooling freezes water."""
    lon = np.linspace(170.0, 190.0, n)
    lon = np.where(lon > 180.0, lon - 360.0, lon)
    lat = np.linspace(-5.0, 5.0, n)
    ds = netCDF4.Dataset(path, "w")
    for d, k in (("column", n), ("lev", 4), ("nv2", 2)):
        ds.createDimension(d, k)
    cf_lonlat(ds, lon, lat, ("clon", "clat"), ("column",))
    v = ds.createVariable("lev", "f4", ("lev",))
    v.units, v.positive, v.bounds = "m", "down", "lev_bnds"
    v[:] = 0.5 * (GEOM_INTERFACES[1:] + GEOM_INTERFACES[:-1])
    ds.createVariable("lev_bnds", "f4", ("lev", "nv2"))[:] = np.stack([GEOM_INTERFACES[:-1], GEOM_INTERFACES[1:]], 1)
    v = ds.createVariable("tsoil", "f4", ("column", "lev"), fill_value=FILL)
    v.units, v.standard_name = "K", "soil_temperature"
    v[:] = (_temps((n,), nlay=4).T if not water else np.full((n, 4), 273.4, "f4"))
    if water:
        dz = np.diff(GEOM_INTERFACES)
        for name, sn, frac in (("wliq", "mass_content_of_liquid_water_in_soil_layer", 0.25),
                               ("wice", "mass_content_of_frozen_water_in_soil_layer", 0.0)):
            w = ds.createVariable(name, "f4", ("column", "lev"))
            w.units, w.standard_name = "kg m-2", sn
            w[:] = np.broadcast_to(frac * 1000.0 * dz, (n, 4))
    ds.close()
    return path


def separate_grid(restart: Path, grid: Path, *, ny=5, nx=7, lon_range=(-10.0, 20.0)):
    """A restart with no coordinates at all (dims y, x, soil) and a grid file holding its 2-D
    lon/lat and cell areas (m2) under names no CF search would guess."""
    lon = np.linspace(lon_range[0], lon_range[1], nx)
    lat = np.linspace(40.0, 60.0, ny)
    LON, LAT = np.meshgrid(lon, lat)
    with netCDF4.Dataset(grid, "w") as ds:
        ds.createDimension("y", ny)
        ds.createDimension("x", nx)
        ds.createVariable("glon", "f8", ("y", "x"))[:] = LON
        ds.createVariable("glat", "f8", ("y", "x"))[:] = LAT
        a = ds.createVariable("garea", "f8", ("y", "x"))
        a.units = "m2"
        a[:] = 1.0e8 * np.cos(np.radians(LAT))
    with netCDF4.Dataset(restart, "w") as ds:
        for d, k in (("y", ny), ("x", nx), ("soil", 4)):
            ds.createDimension(d, k)
        v = ds.createVariable("tsoil", "f4", ("soil", "y", "x"), fill_value=FILL)
        v.units = "K"
        v[:] = _temps((ny, nx), nlay=4)
    return restart, grid


def tiles(folder: Path, ntiles=3, nx=6, ny=5, dlon=4.0):
    """A grid split in ``ntiles`` tiles side by side in longitude: ``restart.tile<k>.nc`` and
    ``grid.tile<k>.nc`` for k = 1..ntiles, plus ``whole.nc``/``whole-grid.nc``, the same grid in one
    piece (tile k's columns at x = (k-1) nx ... k nx - 1)."""
    folder = Path(folder)
    parts = []
    for k in range(1, ntiles + 1):
        lon0 = -10.0 + (k - 1) * nx * dlon
        r, g = separate_grid(folder / f"restart.tile{k}.nc", folder / f"grid.tile{k}.nc", ny=ny, nx=nx,
                             lon_range=(lon0, lon0 + (nx - 1) * dlon))
        parts.append((r, g))
    separate_grid(folder / "whole.nc", folder / "whole-grid.nc", ny=ny, nx=nx * ntiles,
                  lon_range=(-10.0, -10.0 + (nx * ntiles - 1) * dlon))
    return parts
