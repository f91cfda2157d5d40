"""What every report shares: JSON-safe values, number formatting, attribute diffs, the longitude arc
of a set of points and the caution line of every report.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from initgen.io.stores import NetCDFStore
from initgen.science import geodesy


#: The global attribute that every initgen run changes; always allowed to differ.
HISTORY = "history"

CAUTION = ("A perturbed start is an experiment: check these numbers before submission, and follow your "
           "experiment's protocol.")




def _py(x: Any) -> Any:
    """Convert numpy scalars and arrays (recursively) into JSON-serialisable Python values.

    Non-finite floats become ``None`` so that the result passes ``json.dumps(allow_nan=False)``.
    """
    if isinstance(x, dict):
        return {str(k): _py(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_py(v) for v in x]
    if isinstance(x, np.ndarray):
        return _py(x.tolist())
    if isinstance(x, np.generic):
        return _py(x.item())
    if isinstance(x, bytes):
        return x.decode("utf-8", "replace")
    if isinstance(x, float):
        return x if math.isfinite(x) else None
    if isinstance(x, (str, int, bool)) or x is None:
        return x
    return str(x)


def _short(x: Any, limit: int = 40) -> str:
    """A short printable form of an attribute value for a one-line message."""
    text = repr(_py(x))
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _attr_equal(x: Any, y: Any) -> bool:
    """True when two attribute values are equal in type, shape and value (NaN equals NaN)."""
    if isinstance(x, str) or isinstance(y, str):
        return type(x) is type(y) and x == y
    ax, ay = np.asarray(x), np.asarray(y)
    if ax.dtype != ay.dtype or ax.shape != ay.shape:
        return False
    if ax.dtype.kind in "fc":
        return bool(np.all((ax == ay) | (np.isnan(ax) & np.isnan(ay))))
    return bool(np.all(ax == ay))


def _attr_diffs(a: dict, b: dict, what: str) -> list[tuple[str, str]]:
    """(attribute name, message) for each attribute added, removed or changed."""
    out = []
    for k in sorted(set(a) | set(b)):
        if k not in b:
            out.append((k, f"{what}attribute '{k}' only in a"))
        elif k not in a:
            out.append((k, f"{what}attribute '{k}' only in b"))
        elif not _attr_equal(a[k], b[k]):
            out.append((k, f"{what}attribute '{k}' differs ({_short(a[k])} vs {_short(b[k])})"))
    return out


def _encoding(store: NetCDFStore, name: str) -> dict:
    """How a variable is stored: chunking, filters, endianness, fill value, quantization."""
    var = store.ds.variables[name]
    enc: dict = {}
    for key, call in (("chunking", var.chunking), ("filters", var.filters), ("endian", var.endian),
                      ("fill_value", var.get_fill_value), ("quantization", var.quantization)):
        try:
            enc[key] = _py(call())
        except Exception:  # netCDF3 files have no chunking or filters; old libraries lack some calls
            enc[key] = None
    return enc


def _lon_arc(lons: np.ndarray) -> tuple[float, float]:
    """The shortest longitude interval [west, east] (east >= west, east - west < 360) holding ``lons``.

    Longitudes come back in a continuous convention (e.g. 175..185 across the 180 degree
    meridian) with ``west`` in the range of the data.
    """
    lons = np.asarray(lons, float)
    lo, hi = float(lons.min()), float(lons.max())
    u = np.unique(np.mod(lons, 360.0))
    if u.size == 1:
        return lo, lo
    west, width = geodesy.smallest_lon_arc(u, u)
    if hi - lo <= width + 1e-9:
        return lo, hi  # the data's own convention already gives the shortest interval
    west += 360.0 * math.floor((lo - west) / 360.0)
    if west < lo - 1e-9:
        west += 360.0
    return west, west + width


def _is_layout_path(layout) -> bool:
    return layout is not None and not hasattr(layout, "data")
