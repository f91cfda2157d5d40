"""Small synthetic model files of every shape the tests need (made with netCDF4 directly).

These are test fixtures, not reference data: each test that checks physics or geometry compares
against a published value or a reference library, named beside the check.
"""

from __future__ import annotations

from pathlib import Path

import netCDF4
import numpy as np

NODES = np.array([0.05, 0.15, 0.35, 0.75, 1.5])
FILL = np.float32(1.0e20)


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
    v = ds.createVariable("lon", "f8", ("lon",))
    v.units, v.standard_name = "degrees_east", "longitude"
    v[:] = lon
    v = ds.createVariable("lat", "f8", ("lat",))
    v.units, v.standard_name = "degrees_north", "latitude"
    v[:] = lat
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
    v = ds.createVariable("nav_lon", "f8", ("y", "x"))
    v.units, v.standard_name = "degrees_east", "longitude"
    v[:] = lon2d
    v = ds.createVariable("nav_lat", "f8", ("y", "x"))
    v.units, v.standard_name = "degrees_north", "latitude"
    v[:] = lat2d
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
    v = ds.createVariable("clon", "f8", ("column",))
    v.units, v.standard_name = "degrees_east", "longitude"
    v[:] = lon
    v = ds.createVariable("clat", "f8", ("column",))
    v.units, v.standard_name = "degrees_north", "latitude"
    v[:] = lat
    v = ds.createVariable("lev", "f4", ("lev",))
    v.units, v.positive = depth_units, "down"
    v[:] = NODES * (100.0 if depth_units == "cm" else 1.0)
    v = ds.createVariable("tsoil", "f4", ("column", "lev"), fill_value=FILL)
    v.units, v.standard_name = "K", "soil_temperature"
    v[:] = (_temps((n,)) if T is None else T).T
    ds.close()
    return path


def read_raw(path, name):
    with netCDF4.Dataset(path) as ds:
        v = ds.variables[name]
        v.set_auto_maskandscale(False)
        return np.array(v[:])


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
    v = ds.createVariable("lon", "f8", ("lon",))
    v.units, v.standard_name = "degrees_east", "longitude"
    v[:] = lon
    w = ds.createVariable("lat", "f8", ("lat",))
    w.units, w.standard_name = "degrees_north", "latitude"
    w[:] = lat
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
    v = ds.createVariable("nav_lon", "f8", ("y", "x"))
    v.units, v.standard_name = "degrees_east", "longitude"
    v[:] = clon
    w = ds.createVariable("nav_lat", "f8", ("y", "x"))
    w.units, w.standard_name = "degrees_north", "latitude"
    w[:] = clat
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
    v = ds.createVariable("clon", "f8", ("column",))
    v.units, v.standard_name = "degrees_east", "longitude"
    v[:] = lon
    v = ds.createVariable("clat", "f8", ("column",))
    v.units, v.standard_name = "degrees_north", "latitude"
    v[:] = lat
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
