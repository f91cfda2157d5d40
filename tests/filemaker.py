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
