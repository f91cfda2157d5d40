"""Packing and fill values: raw values as stored to float64 with NaN and back.

A fill value, a missing value or a value outside ``valid_range`` reads as NaN; packing
(``scale_factor`` / ``add_offset``) is undone on read and redone on write, here and not by the
netCDF library, so a value that cannot be stored is found before anything is written.
"""

from __future__ import annotations

import numpy as np


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
