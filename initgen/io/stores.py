"""Stores: the one place that reads netCDF files (netCDF4, or an in-memory xarray dataset).

Values cross this boundary as float64 arrays with NaN where the file holds a fill value, a
missing value or a value outside ``valid_range`` (see :mod:`initgen.io.coding`). Writing changes
only the cells a caller says changed: every other raw value is written back exactly as it was
read, so untouched cells stay bit-identical even inside a patched block.
"""

from __future__ import annotations

import os
import struct
import sys
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path

import numpy as np

from initgen._version import __version__
from initgen.errors import InputError

try:  # netCDF4 is a hard dependency; import lazily-failing for a clear message
    import netCDF4
except ImportError as exc:  # pragma: no cover
    raise ImportError("initgen needs the netCDF4 package: pip install netCDF4") from exc
from initgen.io.coding import _fill_values, pack, unpack


@dataclass(frozen=True)
class VarInfo:
    """What initgen needs to know about one variable, whichever store it lives in."""

    name: str
    dims: tuple
    shape: tuple
    dtype: np.dtype
    attrs: dict = field(default_factory=dict)

    @property
    def units(self) -> str:
        return str(self.attrs.get("units", "")).strip()

    @property
    def chunks(self) -> tuple | None:
        return self.attrs.get("_initgen_chunks")


class Store:
    """Read (and, for writable stores, patch) variables of one dataset."""

    path: Path | None = None
    dims: dict
    variables: dict
    global_attrs: dict

    def read(self, name: str, key: tuple | None = None) -> np.ndarray:
        raise NotImplementedError

    def read_raw(self, name: str, key: tuple | None = None) -> np.ndarray:
        raise NotImplementedError

    def write_changed(self, name: str, key: tuple, values: np.ndarray, changed: np.ndarray) -> int:
        raise NotImplementedError

    def describe(self) -> str:
        return str(self.path) if self.path else "the dataset"


def _key(key, ndim):
    return (slice(None),) * ndim if key is None else key


class NetCDFStore(Store):
    """A netCDF file opened with netCDF4, auto-scaling off (we pack and unpack ourselves)."""

    def __init__(self, path: str | os.PathLike, mode: str = "r", label: str | None = None):
        self.path = Path(path)
        self.label = label  # what messages call the file: the input, for the copy being patched
        self.ds = open_netcdf(self.path, mode)
        self.ds.set_auto_maskandscale(False)
        self.dims = {name: len(d) for name, d in self.ds.dimensions.items()}
        self.variables = {}
        for name, var in self.ds.variables.items():
            attrs = {k: var.getncattr(k) for k in var.ncattrs()}
            try:
                chunking = var.chunking()
            except Exception:  # netCDF3 has no chunking
                chunking = "contiguous"
            if isinstance(chunking, list):
                attrs["_initgen_chunks"] = tuple(chunking)
            self.variables[name] = VarInfo(name, tuple(var.dimensions), tuple(var.shape), np.dtype(var.dtype), attrs)
        self.global_attrs = {k: self.ds.getncattr(k) for k in self.ds.ncattrs()}
        self.bytes_written = 0

    @property
    def file_format(self) -> str:
        return self.ds.data_model

    def describe(self):
        return self.label or str(self.path)

    def read_raw(self, name, key=None):
        var = self.ds.variables[name]
        try:
            data = var[_key(key, var.ndim)]
        except (RuntimeError, OSError, IndexError) as exc:
            raise InputError(f"{self.describe()}: cannot read variable '{name}' ({exc}); the file may be truncated or "
                             "corrupt") from None
        return np.ma.getdata(data)

    def read(self, name, key=None):
        return unpack(self.read_raw(name, key), self.variables[name].attrs)

    def write_changed(self, name, key, values, changed):
        """Write ``values`` where ``changed``; every other cell is written back as read."""
        if not np.any(changed):
            return 0
        info = self.variables[name]
        raw = self.read_raw(name, key).copy()
        raw[changed] = pack(values[changed], info.attrs, info.dtype)
        var = self.ds.variables[name]
        var[_key(key, var.ndim)] = raw
        self.bytes_written += raw.nbytes
        return int(np.count_nonzero(changed))

    def set_history(self, line: str) -> None:
        old = self.global_attrs.get("history", "")
        old = old if isinstance(old, str) else str(old)
        new = f"{line}\n{old}" if old else line  # CF: most recent first, one line per step
        self.ds.setncattr("history", new)

    def close(self):
        if self.ds.isopen():
            self.ds.close()


class XarrayStore(Store):
    """An in-memory xarray.Dataset (decoded, as xarray opens it), for notebook use."""

    def __init__(self, dataset):
        self.ds = dataset
        self.path = None
        self.dims = dict(dataset.sizes)
        self.variables = {}
        for name, var in dataset.variables.items():
            attrs = dict(var.attrs)
            if "units" in var.encoding and "units" not in attrs:
                attrs["units"] = var.encoding["units"]
            self.variables[name] = VarInfo(str(name), tuple(var.dims), tuple(var.shape), np.dtype(var.dtype), attrs)
        self.global_attrs = dict(dataset.attrs)
        self.bytes_written = 0

    def describe(self):
        return "the in-memory dataset"

    def read_raw(self, name, key=None):
        arr = self.ds[name].values
        return arr[_key(key, arr.ndim)]

    def read(self, name, key=None):
        arr = np.asarray(self.read_raw(name, key))
        out = arr.astype(np.float64)
        if arr.dtype.kind not in "fc":
            # integers in a decoded dataset: fill values are still raw
            for fv in _fill_values(self.variables[name].attrs, arr.dtype):
                out[arr == fv] = np.nan
        return out

    def write_changed(self, name, key, values, changed):
        if not np.any(changed):
            return 0
        var = self.ds[name].variable
        arr = var.values  # numpy view of the (copied) data
        block = arr[_key(key, arr.ndim)]
        block = np.array(block, copy=True)
        if arr.dtype.kind in "iu":
            block[changed] = np.rint(values[changed]).astype(arr.dtype)
        else:
            block[changed] = values[changed].astype(arr.dtype)
        arr[_key(key, arr.ndim)] = block
        var.values = arr
        return int(np.count_nonzero(changed))


def open_netcdf(path: Path, mode: str = "r"):
    """Open a netCDF file with a one-line error for everything that can go wrong."""
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a netCDF file; give the path of the restart file")
    if not path.exists():
        raise InputError(f"{path}: file not found; check the path")
    if not path.is_file():  # opening a pipe would wait for a writer for ever; netCDF needs random access
        raise InputError(f"{path}: is not a regular file (a pipe or a device); give the path of a netCDF file")
    try:
        ds = netCDF4.Dataset(path, mode)
    except PermissionError:
        raise InputError(f"{path}: permission denied; check the file's permissions") from None
    except OSError as exc:
        msg = exc.strerror or (str(exc).split(":")[0] if str(exc) else "unknown error")
        raise InputError(
            f"{path}: not a readable netCDF file ({msg}); it may be truncated or corrupt, or not netCDF at all"
        ) from None
    if ds.data_model.startswith("NETCDF3"):
        # the netCDF-3 library reads zeros past the end of a truncated file without a word
        try:
            need = netcdf3_data_end(path)
        except (OSError, ValueError, struct.error):
            need = None
        size = path.stat().st_size
        if need is not None and size < need:
            ds.close()
            raise InputError(f"{path}: truncated netCDF file ({size} bytes; its header describes {need}); "
                             "copy it again from the original")
    return ds


_NC3_SIZES = {1: 1, 2: 1, 3: 2, 4: 4, 5: 4, 6: 8, 7: 1, 8: 2, 9: 4, 10: 8, 11: 8}


def netcdf3_data_end(path: Path) -> int | None:
    """The byte where the data of a netCDF-3 file (classic, 64-bit offset or CDF-5) end, from its header.

    Follows the format specification (NetCDF Users Guide, "File Format Specifications"): the
    header lists every variable with its shape, type and ``begin`` offset. None when the number
    of records is unknown (a streaming file).
    """
    with open(path, "rb") as fh:
        head = fh.read(4)
        if head[:3] != b"CDF" or head[3] not in (1, 2, 5):
            return None
        version = head[3]
        big = version == 5
        count_fmt = ">Q" if big else ">I"
        offset_fmt = ">I" if version == 1 else ">Q"

        def read(fmt):
            n = struct.calcsize(fmt)
            data = fh.read(n)
            if len(data) != n:
                raise ValueError("header ends early")
            return struct.unpack(fmt, data)[0]

        def count():
            return read(count_fmt)

        def name():
            n = count()
            fh.read(n + (-n) % 4)

        def attributes():
            tag, n = read(">I"), count()
            if tag not in (0, 12):
                raise ValueError("bad attribute list")
            for _ in range(n):
                name()
                nc_type, nelems = read(">I"), count()
                size = _NC3_SIZES[nc_type] * nelems
                fh.seek(size + (-size) % 4, 1)

        numrecs = count()
        tag, ndims = read(">I"), count()
        if tag not in (0, 10):
            raise ValueError("bad dimension list")
        dims = []
        for _ in range(ndims):
            name()
            dims.append(count())
        attributes()
        tag, nvars = read(">I"), count()
        if tag not in (0, 11):
            raise ValueError("bad variable list")
        fixed_end, recs = 0, []
        for _ in range(nvars):
            name()
            dimids = [count() for _ in range(count())]
            attributes()
            nc_type = read(">I")
            count()                                  # vsize: recomputed below from the shape
            begin = read(offset_fmt)
            lengths = [dims[d] for d in dimids]
            is_rec = bool(lengths) and lengths[0] == 0
            n = _NC3_SIZES[nc_type]
            for length in lengths[1:] if is_rec else lengths:
                n *= length
            if is_rec:
                recs.append((begin, n))
            else:
                fixed_end = max(fixed_end, begin + n)
    if recs and numrecs:
        if numrecs == (2**64 - 1 if big else 2**32 - 1):  # streaming
            return None
        sizes = [n for _, n in recs]
        recsize = sizes[0] if len(sizes) == 1 else sum(n + (-n) % 4 for n in sizes)
        rec_end = max(begin + (numrecs - 1) * recsize + n for begin, n in recs)
        return max(fixed_end, rec_end)
    return fixed_end


_LON_NAMES = ("lon", "longitude", "nav_lon", "xlon", "glon", "lons")
_LAT_NAMES = ("lat", "latitude", "nav_lat", "xlat", "glat", "lats")


def find_coordinate(store: Store, axis: str) -> str | None:
    """The longitude (``axis='lon'``) or latitude variable of a store, by CF attributes
    (standard_name, then units, then a usual name, then axis X/Y with degree units)."""
    sn, units, names, ax = (("longitude", ("degrees_east", "degree_east", "degree_e", "degrees_e"), _LON_NAMES, "X")
                            if axis == "lon" else
                            ("latitude", ("degrees_north", "degree_north", "degree_n", "degrees_n"), _LAT_NAMES, "Y"))
    vars_ = store.variables
    for test in (
        lambda i: str(i.attrs.get("standard_name", "")).lower() == sn,
        lambda i: i.units.lower() in units,
        lambda i: i.name.lower() in names,
        lambda i: str(i.attrs.get("axis", "")).upper() == ax and "degree" in i.units.lower(),
    ):
        hits = [n for n, i in vars_.items() if test(i) and len(i.dims) in (1, 2)]
        if hits:
            return hits[0]
    return None


def read_field(path: Path, variable: str, key_name: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read a 2-D lon/lat field (squeezing size-1 dims) from a netCDF file: (lon, lat, values).

    Longitude and latitude are found by CF attributes (standard_name, units, axis) or by name.
    """
    store = NetCDFStore(path)
    try:
        if variable not in store.variables:
            raise InputError(f"{path}: has no variable '{variable}' (recipe key {key_name}); "
                             f"variables: {', '.join(sorted(store.variables))}", key=key_name)
        lon_name, lat_name = find_coordinate(store, "lon"), find_coordinate(store, "lat")
        if lon_name is None or lat_name is None:
            raise InputError(f"{path}: no longitude/latitude variables found (recipe key {key_name}); "
                             "give them standard_name longitude/latitude", key=key_name)
        lon = store.read(lon_name)
        lat = store.read(lat_name)
        vals = store.read(variable)
        info = store.variables[variable]
        keep = tuple(0 if (s == 1 and i < len(info.shape) - 2) else slice(None) for i, s in enumerate(info.shape))
        vals = vals[keep]
        if vals.ndim != 2:
            raise InputError(f"{path}: variable '{variable}' must be 2-D (lat, lon) after dropping size-1 "
                             f"dimensions, got dims {info.dims} (recipe key {key_name})", key=key_name)
        dims = [d for d, k in zip(info.dims, keep) if k != 0]
        lon_dim = store.variables[lon_name].dims
        if lon.ndim == 1 and dims[0] == lon_dim[0]:
            vals = vals.T
        return lon, lat, vals
    finally:
        store.close()


def versions() -> dict:
    """Versions of the libraries that decide the bits of the output."""

    # xarray's version from its package metadata when it is not imported yet: importing it takes
    # about a second, which every ensemble worker would pay for one string
    xr = sys.modules.get("xarray")
    try:
        xr_version = xr.__version__ if xr is not None else metadata.version("xarray")
    except metadata.PackageNotFoundError:  # pragma: no cover - xarray is a dependency
        xr_version = None
    return {
        "initgen": __version__,
        "numpy": np.__version__,
        "xarray": xr_version,
        "netCDF4": netCDF4.__version__,
        "netcdf-c": netCDF4.__netcdf4libversion__,
        "hdf5": netCDF4.__hdf5libversion__,
    }
