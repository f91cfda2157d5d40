"""The atomic writer: copy, patch, hash, lock and publish.

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
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any, Callable, Iterator

from initgen.errors import InputError

try:  # netCDF4 is a hard dependency; import lazily-failing for a clear message
    import netCDF4
except ImportError as exc:  # pragma: no cover
    raise ImportError("initgen needs the netCDF4 package: pip install netCDF4") from exc
from initgen.io.stores import NetCDFStore
from initgen.science.blocks import REPACK_BLOCK_ELEMENTS, slab_blocks

TMP_TAG = ".initgen-tmp"


def sha256_file(path: str | os.PathLike, bufsize: int = 8 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(bufsize), b""):
            h.update(block)
    return h.hexdigest()




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


def repack(src: Path, dst: Path, block_elements: int = REPACK_BLOCK_ELEMENTS) -> None:
    """Rewrite a netCDF file whole into ``dst``: the same format, dimensions, variables, attributes
    and encodings (chunking, compression, shuffle, checksums, endianness, fill values), with every
    chunk compressed afresh and the file laid out without the holes an in-place patch can leave.

    Values are copied raw (no unpacking), block by block (:func:`initgen.science.blocks.slab_blocks`), so
    memory stays bounded. Files with groups are refused.
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
                for key in slab_blocks(var.shape, block_elements):
                    out[key] = var[key]
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
