"""The one module that opens netCDF files: read-only stores, the atomic copy-and-patch writer.

Values cross this boundary as float64 arrays with NaN where the file holds a fill value, a
missing value or a value outside ``valid_range``; packing (``scale_factor`` / ``add_offset``) is
undone on read and redone on write. Writing changes only the cells a caller says changed: every
other raw value is written back exactly as it was read, so untouched cells stay bit-identical
even inside a patched block.

The writer never touches the input. It copies the input to a temporary file beside the output
(the operating system's file copy), patches the touched variables in place with netCDF4, fsyncs,
and moves the result into place atomically: an existing output is only replaced with ``force``,
and two runs racing for the same output end with one complete file and a clear message from
the other (a lock file ``.NAME.initgen-lock`` beside the output stops the second at once). A run
that is interrupted (SIGINT, SIGTERM, SIGHUP, a full disk) removes its temporary file and lock;
those of a run that was killed outright are removed by the next run for the same output.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import os
import shutil
import signal
import socket
import struct
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np

from initgen._version import __version__
from initgen.errors import InputError

try:  # netCDF4 is a hard dependency; import lazily-failing for a clear message
    import netCDF4
except ImportError as exc:  # pragma: no cover
    raise ImportError("initgen needs the netCDF4 package: pip install netCDF4") from exc


TMP_TAG = ".initgen-tmp"


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


def _fill_values(attrs: dict, dtype: np.dtype) -> list:
    out = []
    for key in ("_FillValue", "missing_value"):
        if key in attrs:
            val = np.atleast_1d(np.asarray(attrs[key]))
            out.extend(val.tolist())
    return out


def unpack(raw: np.ndarray, attrs: dict) -> np.ndarray:
    """Raw stored values -> float64 physical values with NaN for fill/missing/out-of-range."""
    raw = np.asarray(raw)
    if np.ma.isMaskedArray(raw):
        raw = raw.filled()
    vals = raw.astype(np.float64)
    bad = ~np.isfinite(vals)
    for fv in _fill_values(attrs, raw.dtype):
        bad |= raw == np.asarray(fv).astype(raw.dtype) if raw.dtype.kind != "f" else raw == fv
    if "valid_range" in attrs:
        lo, hi = np.asarray(attrs["valid_range"]).tolist()[:2]
        bad |= (raw < lo) | (raw > hi)
    else:
        if "valid_min" in attrs:
            bad |= raw < np.asarray(attrs["valid_min"]).item()
        if "valid_max" in attrs:
            bad |= raw > np.asarray(attrs["valid_max"]).item()
    scale = attrs.get("scale_factor")
    offset = attrs.get("add_offset")
    if scale is not None:
        vals = vals * float(np.asarray(scale).item())
    if offset is not None:
        vals = vals + float(np.asarray(offset).item())
    vals[bad] = np.nan
    return vals


def pack(values: np.ndarray, attrs: dict, dtype: np.dtype) -> np.ndarray:
    """float64 physical values -> raw values of ``dtype`` (inverse of :func:`unpack`).

    Integer types are rounded to nearest and clipped to the type's range (never onto the fill
    value), as the NetCDF User Guide's packing convention implies.
    """
    vals = np.asarray(values, dtype=np.float64)
    offset = attrs.get("add_offset")
    scale = attrs.get("scale_factor")
    if offset is not None:
        vals = vals - float(np.asarray(offset).item())
    if scale is not None:
        vals = vals / float(np.asarray(scale).item())
    dtype = np.dtype(dtype)
    if dtype.kind in "iu":
        lo, hi = _int_limits(attrs, dtype)
        return np.clip(np.rint(vals), lo, hi).astype(dtype)
    return vals.astype(dtype)


def _int_limits(attrs: dict, dtype: np.dtype) -> tuple[int, int]:
    """The raw integers :func:`pack` may write for ``dtype`` (the type's range, never its fill value)."""
    info = np.iinfo(dtype)
    lo, hi = int(info.min), int(info.max)
    fills = [int(f) for f in _fill_values(attrs, dtype)]
    if fills and fills[0] == lo:
        lo += 1
    if fills and fills[0] == hi:
        hi -= 1
    return lo, hi


def _valid_limits(attrs: dict) -> tuple[float, float]:
    """valid_range / valid_min / valid_max in raw (packed) units: beyond them a value reads back as missing."""
    lo, hi = -np.inf, np.inf
    if "valid_range" in attrs:
        lo, hi = (float(v) for v in np.asarray(attrs["valid_range"]).tolist()[:2])
    else:
        if "valid_min" in attrs:
            lo = float(np.asarray(attrs["valid_min"]).item())
        if "valid_max" in attrs:
            hi = float(np.asarray(attrs["valid_max"]).item())
    return lo, hi


def storable_range(attrs: dict, dtype: np.dtype) -> tuple[float, float] | None:
    """The physical values a variable can hold and read back, (lowest, highest): an integer type's
    range (packed with scale_factor/add_offset or not, never its fill value) within any
    valid_range/valid_min/valid_max; None for a floating-point variable without valid limits."""
    dtype = np.dtype(dtype)
    vlo, vhi = _valid_limits(attrs)
    if dtype.kind not in "iu":
        if not (np.isfinite(vlo) or np.isfinite(vhi)):
            return None
        lo, hi = vlo, vhi
    else:
        lo, hi = _int_limits(attrs, dtype)
        lo, hi = max(lo, vlo), min(hi, vhi)
    scale = float(np.asarray(attrs.get("scale_factor", 1.0)).item())
    offset = float(np.asarray(attrs.get("add_offset", 0.0)).item())
    a, b = lo * scale + offset, hi * scale + offset
    return (min(a, b), max(a, b))


def pack_overflow(values: np.ndarray, attrs: dict, dtype: np.dtype) -> np.ndarray:
    """Where finite ``values`` fall outside what :func:`pack` can store in ``dtype`` (it would clip
    them): a boolean mask, all False for floating-point variables."""
    vals = np.asarray(values, dtype=np.float64)
    dtype = np.dtype(dtype)
    vlo, vhi = _valid_limits(attrs)
    if dtype.kind not in "iu" and not (np.isfinite(vlo) or np.isfinite(vhi)):
        return np.zeros(vals.shape, bool)
    offset = attrs.get("add_offset")
    scale = attrs.get("scale_factor")
    raw = vals - float(np.asarray(offset).item()) if offset is not None else vals
    if scale is not None:
        raw = raw / float(np.asarray(scale).item())
    with np.errstate(invalid="ignore"):
        if dtype.kind in "iu":
            lo, hi = _int_limits(attrs, dtype)
            raw = np.rint(raw)
            lo, hi = max(lo, vlo), min(hi, vhi)
        else:
            lo, hi = vlo, vhi
        return np.isfinite(raw) & ((raw < lo) | (raw > hi))


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
            nc_type, _vsize, begin = read(">I"), count(), read(offset_fmt)
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


def sha256_file(path: str | os.PathLike, bufsize: int = 8 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(bufsize), b""):
            h.update(block)
    return h.hexdigest()


# ---------------------------------------------------------------------------------------------
# The atomic writer
# ---------------------------------------------------------------------------------------------


class _Interrupted(BaseException):
    pass


@contextlib.contextmanager
def _signals_raise() -> Iterator[None]:
    """Turn SIGTERM, SIGINT and SIGHUP into an exception so that clean-up code runs."""
    def handler(signum, frame):
        raise _Interrupted(signal.Signals(signum).name)

    old = {}
    try:
        for sig in (signal.SIGTERM, signal.SIGINT, getattr(signal, "SIGHUP", signal.SIGTERM)):
            try:
                old[sig] = signal.signal(sig, handler)
            except ValueError:  # not in the main thread
                pass
        yield
    finally:
        for sig, h in old.items():
            signal.signal(sig, h)


def check_output_path(input_path: Path, output: Path, force: bool) -> None:
    """Refuse outputs that would overwrite the input, or an existing file without force."""
    output = Path(output)
    if output.exists() and output.is_dir():
        raise InputError(f"{output}: is a folder; give a file name for the output")
    try:
        same = output.exists() and os.path.samefile(input_path, output)
    except OSError:
        same = False
    if same or Path(os.path.abspath(input_path)) == Path(os.path.abspath(output)):
        raise InputError(f"{output}: output is the input file; initgen never modifies its input, choose another name")
    parent = output.parent if str(output.parent) else Path(".")
    if not parent.exists():
        raise InputError(f"{output}: output folder {parent} does not exist; create it first")
    if not os.access(parent, os.W_OK):
        raise InputError(f"{output}: output folder {parent} is not writable; choose another folder")
    if output.exists() and not force:
        raise InputError(f"{output}: exists; pass --force to replace it")


def _tmp_path(output: Path) -> Path:
    return output.parent / f".{output.name}.{os.getpid()}{TMP_TAG}"


def clean_stale_temporaries(output: Path) -> list[Path]:
    """Remove temporaries left beside ``output`` by crashed initgen runs (dead process ids)."""
    removed = []
    prefix = f".{output.name}."
    for p in output.parent.glob(f"{prefix}*{TMP_TAG}"):
        pid_text = p.name[len(prefix):-len(TMP_TAG)]
        if not pid_text.isdigit():
            continue
        pid = int(pid_text)
        if pid == os.getpid() or _pid_alive(pid):
            continue
        with contextlib.suppress(OSError):
            p.unlink()
            removed.append(p)
    return removed


LOCK_TAG = ".initgen-lock"


def _lock_path(output: Path) -> Path:
    return output.parent / f".{output.name}{LOCK_TAG}"


def _lock_is_stale(lock: Path) -> bool:
    """A lock left by a crashed run: its process (on this host) is gone, or it was never filled in."""
    try:
        text = lock.read_text(encoding="utf-8").split()
        age = time.time() - lock.stat().st_mtime
    except (OSError, UnicodeDecodeError):
        return False
    if len(text) != 2 or not text[1].isdigit():
        return age > 60.0  # created but never written: a crash between the two steps
    return text[0] == socket.gethostname() and not _pid_alive(int(text[1]))


@contextlib.contextmanager
def output_lock(output: Path) -> Iterator[None]:
    """Hold ``.<name>.initgen-lock`` beside ``output`` while writing it, so that a second initgen
    run for the same output stops at once with a clear message instead of racing to the end."""
    lock = _lock_path(output)
    for attempt in (0, 1):
        try:
            fd = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
            break
        except FileExistsError:
            if attempt == 0 and _lock_is_stale(lock):
                with contextlib.suppress(OSError):
                    lock.unlink()
                continue
            raise InputError(f"{output}: another initgen run is writing this output right now (lock file "
                             f"{lock.name}); wait for it to finish or choose another output") from None
        except OSError as exc:
            raise _disk_error(exc, output) from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(f"{socket.gethostname()} {os.getpid()}\n")
        yield
    finally:
        with contextlib.suppress(OSError):
            lock.unlink()


def clean_stale_files(output: Path) -> None:
    """Remove the temporaries and the lock that crashed or killed initgen runs left beside ``output``
    (their process is gone); those of live runs are left alone."""
    output = Path(output)
    if not output.parent.is_dir():
        return
    clean_stale_temporaries(output)
    lock = _lock_path(output)
    if lock.exists() and _lock_is_stale(lock):
        with contextlib.suppress(OSError):
            lock.unlink()


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _disk_error(exc: OSError, output: Path) -> InputError:
    if exc.errno == errno.ENOSPC:
        return InputError(f"{output}: no space left on the device; free space or write elsewhere (nothing was written)")
    if exc.errno == errno.ENOENT and not output.parent.exists():
        return InputError(f"{output}: output folder {output.parent} does not exist; create it first")
    if exc.errno == errno.EISDIR:
        return InputError(f"{output}: is a folder; remove it or choose another output name")
    if exc.errno == errno.ENOTDIR:
        return InputError(f"{output}: {output.parent} is not a folder; give an output path inside a folder")
    if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        return InputError(f"{output}: cannot write there ({exc.strerror}); choose another folder")
    return InputError(f"{output}: write failed ({exc.strerror or exc}); nothing was written")


def fsync_path(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def publish(tmp: Path, output: Path, force: bool) -> None:
    """Move a finished temporary file into place atomically.

    Without ``force`` a hard link creates the output only if no file is there (so a concurrent
    run cannot be overwritten); with ``force`` ``os.replace`` swaps it in.
    """
    if force:
        os.replace(tmp, output)
    else:
        try:
            os.link(tmp, output)
        except FileExistsError:
            raise InputError(
                f"{output}: another process created this file while initgen was writing; "
                "kept theirs, pass --force to replace it"
            ) from None
        except OSError:
            # filesystems without hard links: fall back to an exclusive create check + rename
            if output.exists():
                raise InputError(f"{output}: exists; pass --force to replace it") from None
            os.replace(tmp, output)
            return
        tmp.unlink()
    with contextlib.suppress(OSError):
        dfd = os.open(output.parent, os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)


def write_atomic_bytes(path: Path, data: bytes) -> None:
    """Write a small file (provenance, reports, figures) through a temporary file and a rename."""
    path = Path(path)
    tmp = _tmp_path(path)
    try:
        with open(tmp, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        publish(tmp, path, force=True)
    except OSError as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise _disk_error(exc, path) from None
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()


def write_atomic_text(path: Path, text: str, force: bool = True) -> None:
    """Write a small text file (UTF-8) atomically; see :func:`write_atomic_bytes`."""
    write_atomic_bytes(path, text.encode("utf-8"))


def copy_and_patch(input_path: str | os.PathLike, output: str | os.PathLike, patch: Callable[[NetCDFStore], Any],
                   *, force: bool = False, history: str | None = None,
                   after: Callable[[Path], None] | None = None, timings: dict | None = None,
                   repack_output: bool = False) -> Any:
    """Copy ``input_path`` beside ``output``, run ``patch(store)`` on the copy, move it into place.

    ``after(tmp_path)`` runs once the patched copy is closed, before it is published (used to
    write the provenance record, which needs the output's hash); it runs while the copy is
    being synced to disk, and publishing waits for both. Whatever goes wrong, the temporary file
    is removed and no output appears. A second initgen run for the same output stops at once
    (see :func:`output_lock`). ``timings`` (a dict) receives the seconds spent per stage.
    ``repack_output`` rewrites the patched copy whole (see :func:`repack`), for users who
    prefer a compact file to a fast run.
    """
    timings = {} if timings is None else timings
    clock = time.perf_counter
    input_path = Path(input_path)
    output = Path(output)
    check_output_path(input_path, output, force)
    clean_stale_temporaries(output)
    tmp = _tmp_path(output)
    result = None
    try:
        with _signals_raise(), output_lock(output):
            t = clock()
            try:
                shutil.copyfile(input_path, tmp)
            except OSError as exc:
                raise _disk_error(exc, output) from None
            with contextlib.suppress(OSError):
                os.chmod(tmp, 0o644 | (os.stat(input_path).st_mode & 0o777))
            timings["copy_s"] = clock() - t
            t = clock()
            store = NetCDFStore(tmp, "r+", label=str(input_path))
            try:
                result = patch(store)
                if history:
                    store.set_history(history)
            finally:
                store.close()
            timings["patch_s"] = clock() - t
            if repack_output:
                t = clock()
                packed = tmp.parent / (tmp.name + ".repack")
                try:
                    repack(tmp, packed)
                    os.replace(packed, tmp)
                finally:
                    with contextlib.suppress(OSError):
                        packed.unlink()
                timings["repack_s"] = clock() - t
            t = clock()
            # sync the copy to disk while the caller hashes it (both only read the page cache)
            with ThreadPoolExecutor(max_workers=1) as pool:
                synced = pool.submit(fsync_path, tmp)
                if not force and output.exists():  # made meanwhile by another program: keep its record too
                    raise InputError(f"{output}: another process created this file while initgen was writing; "
                                     "kept theirs, pass --force to replace it")
                if after is not None:
                    after(tmp)
                synced.result()
            timings["sync_and_record_s"] = clock() - t
            publish(tmp, output, force)
    except _Interrupted as exc:
        raise KeyboardInterrupt(str(exc)) from None
    except OSError as exc:
        raise _disk_error(exc, output) from None
    except RuntimeError as exc:
        # the netCDF library reports a full disk as "NetCDF: HDF error", without errno
        free = _free_bytes(output.parent)
        if free is not None and free < max(64 << 20, _size(input_path)):
            raise InputError(f"{output}: writing failed ({exc}) with {free / 1e6:.1f} MB left on the device, so "
                             "the disk is most likely full; free space or write elsewhere (nothing was written)") from None
        raise
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()
    return result


def _free_bytes(folder: Path) -> int | None:
    try:
        return shutil.disk_usage(folder).free
    except OSError:
        return None


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def repack(src: Path, dst: Path, block_elements: int = 4_000_000) -> None:
    """Rewrite a netCDF file whole into ``dst``: the same format, dimensions, variables, attributes
    and encodings (chunking, compression, shuffle, checksums, endianness, fill values), with every
    chunk compressed afresh and the file laid out without the holes an in-place patch can leave.

    Values are copied raw (no unpacking), block by block along the first dimension, so memory
    stays bounded. Files with groups are refused.
    """
    with netCDF4.Dataset(src) as ds_in:
        if ds_in.groups:
            raise InputError(f"{src}: has groups, which repacking does not support; run without --repack")
        ds_out = netCDF4.Dataset(dst, "w", format=ds_in.data_model)
        try:
            ds_out.setncatts({k: ds_in.getncattr(k) for k in ds_in.ncattrs()})
            for name, dim in ds_in.dimensions.items():
                ds_out.createDimension(name, None if dim.isunlimited() else len(dim))
            for name, var in ds_in.variables.items():
                var.set_auto_maskandscale(False)
                kw = {}
                if ds_in.data_model.startswith("NETCDF4"):
                    filters = var.filters() or {}
                    chunking = var.chunking()
                    kw = dict(zlib=bool(filters.get("zlib")), complevel=filters.get("complevel") or 4,
                              shuffle=bool(filters.get("shuffle")), fletcher32=bool(filters.get("fletcher32")),
                              endian=var.endian())
                    if chunking == "contiguous":
                        kw["contiguous"] = not var.dimensions or all(
                            not ds_in.dimensions[d].isunlimited() for d in var.dimensions)
                    elif chunking:
                        kw["chunksizes"] = tuple(chunking)
                attrs = {k: var.getncattr(k) for k in var.ncattrs()}
                fill = attrs.pop("_FillValue", None)
                out = ds_out.createVariable(name, var.datatype, var.dimensions, fill_value=fill, **kw)
                out.set_auto_maskandscale(False)
                out.setncatts(attrs)
                if var.ndim == 0:
                    out.assignValue(var.getValue())
                    continue
                row = int(np.prod(var.shape[1:])) if var.ndim > 1 else 1
                step = max(1, block_elements // max(row, 1))
                for i in range(0, var.shape[0], step):
                    out[i:i + step] = var[i:i + step]
        finally:
            ds_out.close()


def create_netcdf(path: Path, build: Callable[[Any], None], fmt: str = "NETCDF4", force: bool = True) -> None:
    """Create a new netCDF file through a temporary file (used by the demo and the mask writer)."""
    path = Path(path)
    tmp = _tmp_path(path)
    try:
        ds = netCDF4.Dataset(tmp, "w", format=fmt)
        try:
            build(ds)
        finally:
            ds.close()
        publish(tmp, path, force)
    except OSError as exc:
        raise _disk_error(exc, path) from None
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()


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
                             f"variables: {', '.join(sorted(store.variables))}")
        lon_name, lat_name = find_coordinate(store, "lon"), find_coordinate(store, "lat")
        if lon_name is None or lat_name is None:
            raise InputError(f"{path}: no longitude/latitude variables found (recipe key {key_name}); "
                             "give them standard_name longitude/latitude")
        lon = store.read(lon_name)
        lat = store.read(lat_name)
        vals = store.read(variable)
        info = store.variables[variable]
        keep = tuple(0 if (s == 1 and i < len(info.shape) - 2) else slice(None) for i, s in enumerate(info.shape))
        vals = vals[keep]
        if vals.ndim != 2:
            raise InputError(f"{path}: variable '{variable}' must be 2-D (lat, lon) after dropping size-1 "
                             f"dimensions, got dims {info.dims} (recipe key {key_name})")
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


__all__ = [
    "VarInfo", "Store", "NetCDFStore", "XarrayStore", "copy_and_patch", "create_netcdf", "sha256_file",
    "unpack", "pack", "check_output_path", "clean_stale_temporaries", "write_atomic_text", "read_field",
    "versions",
]
