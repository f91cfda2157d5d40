"""Reports: compare two netCDF files, verify a provenance record, preview and mask outputs.

Four entry points, each called by the command line (``initgen compare | verify | preview --report |
mask``):

* :func:`compare` - structural and value diff of two netCDF files, read block by block, with
  :func:`compare_text` (a table for an email) and :func:`compare_markdown`;
* :func:`verify` - re-run a provenance record and check the recorded output against the re-run;
* :func:`preview_report` - a Markdown report with PNG figures of what ``apply`` would change;
* :func:`write_mask` - the horizontal weight field as a CF netCDF file on the model grid.

Every number in a preview comes from the ledger (the same record ``apply`` writes into the
provenance), so the report, the terminal table and the provenance never disagree. Figures are drawn
with matplotlib's non-interactive Agg backend, imported inside the functions that draw (never when
initgen is imported) and used through matplotlib's object interface, so the pyplot backend of an
interactive session is left as it is.
"""

from __future__ import annotations

import inspect
import json
import math
import tempfile
import warnings
from pathlib import Path
from typing import Any, Iterable, Iterator

import numpy as np

from initgen import api
from initgen._version import __version__
from initgen.config.recipe import document_from_text, inline_layout, load_layout, load_recipe
from initgen.engine import plan as plan_mod
from initgen.engine.persistence import line as persistence_line
from initgen.engine.plan import MIN_WEIGHT, region_geometry
from initgen.errors import InputError
from initgen.io.grid import open_model
from initgen.io.restart import (NetCDFStore, check_output_path, create_netcdf, sha256_file, unpack, write_atomic_bytes,
                                write_atomic_text)
from initgen.outputs import provenance as prov
from initgen.outputs.ensemble import configure
from initgen.reports.figures import histogram_figure, map_figure, profile_figure, short_label
from initgen.reports.html_report import CLAMP_TEXT, FLAG_TEXT, MEAN_REGION, compare_page, preview_page
from initgen.science import regions
from initgen.science.regions import land_weight

#: Largest number of elements of one variable read at once by :func:`compare` (per file).
BLOCK_ELEMENTS = 2_000_000

from initgen.reports.figures import FIG_DPI, FIG_PIXELS, FIG_SIZE_IN  # noqa: F401  (every figure's size, re-exported)

#: The global attribute that every initgen run changes; always allowed to differ.
HISTORY = "history"

CAUTION = ("A perturbed start is an experiment: check these numbers before submission, and follow your "
           "experiment's protocol.")


# =============================================================================================
# Small helpers
# =============================================================================================


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


def _fmt(v: float | None, spec: str = ".4g") -> str:
    return "-" if v is None else format(v, spec)


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


def _blocks(shape: tuple, limit: int | None = None) -> Iterator[tuple]:
    """Index tuples (of slices) that cover an array of ``shape`` in pieces of at most ~``limit`` elements.

    Pieces are slabs along the first dimension; when one index of the first dimension alone is
    larger than ``limit``, the next dimension is split too, and so on.
    """
    limit = BLOCK_ELEMENTS if limit is None else limit
    if len(shape) == 0:
        yield ()
        return
    if any(s == 0 for s in shape):
        return
    k = 0
    while k < len(shape) - 1 and int(np.prod(shape[k + 1:])) > limit:
        k += 1
    inner = int(np.prod(shape[k + 1:])) if k + 1 < len(shape) else 1
    step = max(1, limit // max(inner, 1))
    rest = (slice(None),) * (len(shape) - k - 1)
    for outer in np.ndindex(*shape[:k]):
        head = tuple(slice(i, i + 1) for i in outer)
        for start in range(0, shape[k], step):
            yield head + (slice(start, min(shape[k], start + step)),) + rest


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
    gaps = np.diff(np.concatenate([u, u[:1] + 360.0]))
    i = int(np.argmax(gaps))
    width = 360.0 - float(gaps[i])
    if hi - lo <= width + 1e-9:
        return lo, hi  # the data's own convention already gives the shortest interval
    west = float(u[(i + 1) % u.size])
    west += 360.0 * math.floor((lo - west) / 360.0)
    if west < lo - 1e-9:
        west += 360.0
    return west, west + width


def _is_layout_path(layout) -> bool:
    return layout is not None and not hasattr(layout, "data")


# =============================================================================================
# compare
# =============================================================================================


class _ValueStats:
    """Running statistics of the change b - a over the cells of one variable (or one layer)."""

    def __init__(self):
        self.cells = 0
        self.changed = 0
        self.became_missing = 0
        self.became_valid = 0
        self.max_abs = None
        self.wsum = 0.0
        self.w = 0.0

    def add(self, changed, fa, fb, weight) -> None:
        """``changed``: bool; ``fa``, ``fb``: physical values (or None for non-numeric); ``weight``."""
        self.cells += int(changed.size)
        n = int(np.count_nonzero(changed))
        self.changed += n
        if n == 0 or fa is None:
            return
        va, vb = np.isfinite(fa), np.isfinite(fb)
        self.became_missing += int(np.count_nonzero(changed & va & ~vb))
        self.became_valid += int(np.count_nonzero(changed & ~va & vb))
        both = changed & va & vb
        if not np.any(both):
            return
        d = (fb - fa)[both]
        m = float(np.abs(d).max())
        self.max_abs = m if self.max_abs is None else max(self.max_abs, m)
        w = np.broadcast_to(weight, changed.shape)[both]
        self.wsum += float((d * w).sum())
        self.w += float(w.sum())

    def as_dict(self) -> dict:
        return {
            "cells": self.cells,
            "cells_changed": self.changed,
            "cells_became_missing": self.became_missing,
            "cells_became_valid": self.became_valid,
            "max_abs_change": self.max_abs,
            "area_weighted_mean_change": (self.wsum / self.w) if self.w > 0 else None,
        }


def _find_grid(store: NetCDFStore, layout, notes: list):
    """The horizontal grid of ``store`` (lon, lat, area, dims), or None when lon/lat cannot be found."""

    lay = load_layout(layout) if _is_layout_path(layout) else layout
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            model = open_model(store, lay)
        except InputError as exc:
            if lay is not None:
                raise
            notes.append(f"no grid found in a ({' '.join(str(exc).split())}); means use equal weights, no lon/lat box")
            return None
    for w in caught:
        notes.append(" ".join(str(w.message).split()))
    return model.grid


def _value_diff(sa: NetCDFStore, sb: NetCDFStore, name: str, grid) -> dict:
    """Compare the values of one variable present in both files with the same shape, block by block."""
    ia, ib = sa.variables[name], sb.variables[name]
    numeric_a = ia.dtype.kind in "iufcb"
    numeric_b = ib.dtype.kind in "iufcb"
    numeric = numeric_a and numeric_b
    same_dtype = ia.dtype == ib.dtype
    dims = ia.dims
    hdims = tuple(grid.dims) if grid is not None and all(d in dims for d in grid.dims) else ()
    if hdims and tuple(ia.shape[dims.index(d)] for d in hdims) != tuple(grid.shape):
        hdims = ()
    nonh = [d for d in dims if d not in hdims]
    big = [d for d in nonh if ia.shape[dims.index(d)] > 1]
    layer_dim = big[0] if hdims and len(big) == 1 else None
    order = ([layer_dim] if layer_dim else []) + [d for d in nonh if d != layer_dim] + list(hdims)
    perm = [dims.index(d) for d in order]
    total = _ValueStats()
    nlay = ia.shape[dims.index(layer_dim)] if layer_dim else 0
    per_layer = [_ValueStats() for _ in range(nlay)]
    changed_h = np.zeros(grid.shape, bool) if hdims else None
    for key in _blocks(ia.shape):
        if key == ():  # a scalar variable
            ra, rb = np.asarray(sa.read_raw(name)).reshape(()), np.asarray(sb.read_raw(name)).reshape(())
        else:
            ra, rb = np.asarray(sa.read_raw(name, key)), np.asarray(sb.read_raw(name, key))
        fa = unpack(ra, ia.attrs) if numeric else None
        fb = unpack(rb, ib.attrs) if numeric else None
        if same_dtype:
            if ra.dtype.kind in "fc":
                same = (ra == rb) | (np.isnan(ra) & np.isnan(rb))
            else:
                same = np.asarray(ra == rb, dtype=bool).reshape(ra.shape)
        elif numeric:
            same = (fa == fb) | (np.isnan(fa) & np.isnan(fb))
        else:
            same = np.asarray(ra.astype(str) == rb.astype(str), dtype=bool).reshape(ra.shape)
        changed = ~same
        if changed.ndim:
            changed = np.transpose(changed, perm)
            if fa is not None:
                fa, fb = np.transpose(fa, perm), np.transpose(fb, perm)
        if hdims:
            hidx = tuple(key[dims.index(d)] for d in hdims)
            weight = grid.area[hidx]
            changed_h[hidx] |= changed.reshape((-1,) + changed.shape[changed.ndim - len(hdims):]).any(axis=0)
        else:
            weight = np.ones(())
        total.add(changed, fa, fb, weight)
        if layer_dim:
            lsel = range(nlay)[key[dims.index(layer_dim)]]
            for j, layer in enumerate(lsel):
                per_layer[layer].add(changed[j], None if fa is None else fa[j], None if fb is None else fb[j], weight)
    out = total.as_dict()
    out["units"] = ia.units
    out["weights"] = (grid.area_source if hdims else "equal") if numeric else None
    out["layer_dim"] = layer_dim
    if layer_dim:
        out["layers"] = [dict(layer=i, **s.as_dict()) for i, s in enumerate(per_layer)]
    out["bbox"] = None
    if changed_h is not None and changed_h.any():
        lon, lat = grid.lon[changed_h], grid.lat[changed_h]
        west, east = _lon_arc(lon)
        out["bbox"] = {"lon": [west, east], "lat": [float(lat.min()), float(lat.max())],
                       "horizontal_cells_changed": int(changed_h.sum())}
    return out


def compare(a, b, allow: Iterable[str] = (), layout=None) -> dict:
    """Structural and value diff of two netCDF files.

    Parameters
    ----------
    a, b : str or path-like
        The two files, e.g. the original restart and the perturbed copy.
    allow : iterable of str, optional
        Variables allowed to differ: any difference of theirs (values, attributes, encodings,
        presence) is reported but does not make the result fail. The global ``history``
        attribute is always allowed to differ.
    layout : str, path-like or Document, optional
        Layout used to find longitude, latitude and cell areas (else CF attributes). Without a
        grid, means use equal weights and no lon/lat box is given.

    Returns
    -------
    dict
        JSON-serialisable: ``ok`` (True when the files are identical or differ only in the allowed
        variables and ``history``), ``identical``, ``differences`` (one short string per
        difference outside the allowed ones), ``structure`` (every structural difference, allowed
        ones marked), ``variables`` (per variable: status, cells changed, largest absolute change
        and area-weighted mean change over the changed cells in physical units, per layer where
        the variable has one layer axis besides the horizontal ones, and the lon/lat box of the
        changed cells), ``notes`` and the file formats.

    Raises
    ------
    InputError
        When a file is missing or not a readable netCDF file.

    Notes
    -----
    Cells are compared on the raw stored values (no masking or unpacking): byte-identical
    values, equal values and NaN against NaN count as equal, so fill against fill is equal.
    Values are read in blocks of at most :data:`BLOCK_ELEMENTS` elements per file.
    """
    allow = [str(v) for v in (allow or ())]
    sa = NetCDFStore(a)
    try:
        sb = NetCDFStore(b)
    except BaseException:
        sa.close()
        raise
    try:
        return _compare(sa, sb, allow, layout)
    finally:
        sa.close()
        sb.close()


def _compare(sa: NetCDFStore, sb: NetCDFStore, allow: list, layout) -> dict:
    items: list[tuple[str | None, str]] = []  # (owner variable or None, structural difference)
    value_items: list[tuple[str, str]] = []  # (variable, value difference)
    notes: list[str] = []
    fa = {"data_model": sa.ds.data_model, "disk_format": getattr(sa.ds, "disk_format", None)}
    fb = {"data_model": sb.ds.data_model, "disk_format": getattr(sb.ds, "disk_format", None)}
    if fa["data_model"] != fb["data_model"]:
        items.append((None, f"file format {fa['data_model']} vs {fb['data_model']}"))
    elif fa["disk_format"] != fb["disk_format"]:
        items.append((None, f"disk format {fa['disk_format']} vs {fb['disk_format']}"))
    ga, gb = sorted(sa.ds.groups), sorted(sb.ds.groups)
    if ga or gb:
        notes.append("groups are not compared (only the root group is)")
        if ga != gb:
            items.append((None, f"groups {ga} vs {gb}"))
    for d in sorted(set(sa.dims) | set(sb.dims)):
        if d not in sb.dims:
            items.append((None, f"dimension '{d}' only in a"))
        elif d not in sa.dims:
            items.append((None, f"dimension '{d}' only in b"))
        else:
            if sa.dims[d] != sb.dims[d]:
                items.append((None, f"dimension '{d}' size {sa.dims[d]} vs {sb.dims[d]}"))
            ua, ub = sa.ds.dimensions[d].isunlimited(), sb.ds.dimensions[d].isunlimited()
            if ua != ub:
                items.append((None, f"dimension '{d}' is {'unlimited' if ua else 'fixed'} in a, "
                                    f"{'unlimited' if ub else 'fixed'} in b"))
    for key, msg in _attr_diffs(sa.global_attrs, sb.global_attrs, "global "):
        items.append(("\x00history" if key == HISTORY else None, msg))

    grid = _find_grid(sa, layout, notes)
    variables: dict = {}
    names = list(sa.variables) + [n for n in sb.variables if n not in sa.variables]
    for name in names:
        entry: dict = {"allowed": name in allow}
        variables[name] = entry
        if name not in sb.variables or name not in sa.variables:
            where = "a" if name in sa.variables else "b"
            info = (sa if where == "a" else sb).variables[name]
            entry.update(status=f"only in {where}", dtype=str(info.dtype), dims=list(info.dims), structure=[])
            items.append((name, f"variable '{name}' only in {where}"))
            continue
        ia, ib = sa.variables[name], sb.variables[name]
        struct = []
        if ia.dtype != ib.dtype:
            struct.append(f"dtype {ia.dtype} vs {ib.dtype}")
        if ia.dims != ib.dims:
            struct.append(f"dims {ia.dims} vs {ib.dims}")
        elif ia.shape != ib.shape:
            struct.append(f"shape {ia.shape} vs {ib.shape}")
        attrs_a = {k: v for k, v in ia.attrs.items() if not k.startswith("_initgen")}
        attrs_b = {k: v for k, v in ib.attrs.items() if not k.startswith("_initgen")}
        struct += [m for _, m in _attr_diffs(attrs_a, attrs_b, "")]
        ea, eb = _encoding(sa, name), _encoding(sb, name)
        fill_attr_differs = not _attr_equal(ia.attrs.get("_FillValue"), ib.attrs.get("_FillValue"))
        for k in ea:
            if ea[k] != eb[k] and not (k == "fill_value" and fill_attr_differs):
                struct.append(f"{k} {_short(ea[k], 60)} vs {_short(eb[k], 60)}")
        entry.update(dtype=str(ia.dtype), dims=list(ia.dims), shape=list(ia.shape), structure=struct)
        for m in struct:
            items.append((name, f"variable '{name}': {m}"))
        if ia.shape != ib.shape:
            entry["values"] = "not compared (shapes differ)"
            entry["status"] = "differs"
            continue
        vals = _value_diff(sa, sb, name, grid)
        entry.update(vals)
        if vals["cells_changed"]:
            mx = vals["max_abs_change"]
            extra = f", largest |change| {mx:.4g} {vals['units']}".rstrip() if mx is not None else ""
            value_items.append((name, f"variable '{name}': {vals['cells_changed']} of {vals['cells']} values changed{extra}"))
        entry["status"] = "differs" if (struct or vals["cells_changed"]) else "identical"

    unknown = [v for v in allow if v not in sa.variables and v not in sb.variables]
    if unknown:
        notes.append(f"allowed variable(s) in neither file: {', '.join(unknown)} (a typo?)")

    def allowed(owner):
        return owner == "\x00history" or (owner is not None and owner in allow)

    structure = [m + (" (allowed)" if allowed(o) else "") for o, m in items]
    differences = [m for o, m in items + value_items if not allowed(o)]
    result = {
        "a": str(sa.path),
        "b": str(sb.path),
        "format": {"a": fa, "b": fb},
        "ok": not differences,
        "identical": not items and not value_items,
        "allow": allow,
        "differences": differences,
        "structure": structure,
        "variables": variables,
        "grid": None if grid is None else {"kind": grid.kind, "dims": list(grid.dims), "shape": list(grid.shape),
                                           "cell_area": grid.area_source},
        "notes": notes,
    }
    return _py(result)


def compare_text(result: dict) -> str:
    """A compact plain-text table of a :func:`compare` result, for a terminal or an email.

    Parameters
    ----------
    result : dict
        What :func:`compare` returned.

    Returns
    -------
    str
    """
    lines = [f"a: {result['a']} ({result['format']['a']['data_model']})",
             f"b: {result['b']} ({result['format']['b']['data_model']})"]
    changed = {n: v for n, v in result["variables"].items() if v.get("status") != "identical"}
    if result["identical"]:
        lines.append("result: OK, identical")
    elif result["ok"]:
        parts = [f"{', '.join(sorted(changed))} (allowed)"] if changed else []
        if any(x.startswith(f"global attribute '{HISTORY}'") for x in result["structure"]):
            parts.append("the history attribute")
        lines.append("result: OK, differences only in " + " and ".join(parts))
    else:
        lines.append(f"result: DIFFERENT, {len(result['differences'])} difference(s) outside the allowed variables")
        for d in result["differences"]:
            lines.append(f"  - {d}")
    if changed:
        head = f"{'variable':<22} {'changed':>9} {'of':>9} {'max|change|':>11} {'mean_changed':>12} {'units':<7} " \
               f"{'lon':<15} lat"
        lines.append(head)
        for name, v in changed.items():
            label = name + (" *" if v.get("allowed") else "")
            if v.get("status", "").startswith("only in"):
                lines.append(f"{label:<22} {v['status']}")
                continue
            if "cells" not in v:
                lines.append(f"{label:<22} {v.get('values', '')}")
                continue
            box = v.get("bbox")
            lon = f"{box['lon'][0]:.2f}..{box['lon'][1]:.2f}" if box else "-"
            lat = f"{box['lat'][0]:.2f}..{box['lat'][1]:.2f}" if box else "-"
            lines.append(f"{label:<22} {v['cells_changed']:>9} {v['cells']:>9} {_fmt(v['max_abs_change']):>11} "
                         f"{_fmt(v['area_weighted_mean_change']):>12} {(v.get('units') or '-'):<7} {lon:<15} {lat}")
            for row in v.get("layers") or []:
                if row["cells_changed"]:
                    lines.append(f"  {v['layer_dim']}[{row['layer']}]".ljust(22) +
                                 f" {row['cells_changed']:>9} {row['cells']:>9} {_fmt(row['max_abs_change']):>11} "
                                 f"{_fmt(row['area_weighted_mean_change']):>12}")
            for s in v.get("structure") or []:
                lines.append(f"  {s}")
        if any(v.get("allowed") for v in changed.values()):
            lines.append("(* allowed to differ; mean_changed: mean over changed cells, the area-weighted mean change over the "
                         "cells whose value changed)")
        else:
            lines.append("(mean_changed: mean over changed cells, the area-weighted mean change over the cells whose value "
                         "changed)")
    other = [s for s in result["structure"] if not s.startswith("variable '")]
    if other:
        lines.append("file-level: " + "; ".join(other))
    same = [n for n, v in result["variables"].items() if v.get("status") == "identical"]
    lines.append(f"identical variables: {len(same)}")
    for n in result.get("notes") or []:
        lines.append(f"note: {n}")
    return "\n".join(lines)


def compare_markdown(result: dict) -> str:
    """The :func:`compare` result as Markdown, for a report folder or an issue.

    Parameters
    ----------
    result : dict
        What :func:`compare` returned.

    Returns
    -------
    str
        A heading with the verdict, the :func:`compare_text` table in a code block, and what was
        allowed to differ.
    """
    verdict = "OK" if result["ok"] else "DIFFERENT"
    return (f"# initgen compare: {verdict}\n\n```text\n{compare_text(result)}\n```\n\n"
            f"Allowed to differ: {', '.join(result['allow']) or 'nothing'} (and the global history attribute).\n")


def _compare_fields(result: dict, layout) -> tuple:
    """(grid, land, land_what, fields): per changed variable the change b - a of its first changed layer.

    ``fields``: name -> (change on the grid, NaN where a value became missing; changed cells;
    label; units; the layer's cells changed as the compare result counts them). Read from the two
    files one horizontal field at a time; (None, ...) without a grid.
    """

    sa = NetCDFStore(result["a"])
    try:
        sb = NetCDFStore(result["b"])
    except BaseException:
        sa.close()
        raise
    fields: dict = {}
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                model = open_model(sa, load_layout(layout) if _is_layout_path(layout) else layout)
            except InputError:
                return None, None, None, fields
            grid = model.grid
            land, land_what = _land_for_map(model, sa)
        for name, v in result["variables"].items():
            if v.get("status") != "differs" or not v.get("cells_changed") or v.get("weights") is None:
                continue
            info = sa.variables[name]
            dims = list(info.dims)
            if not all(d in dims for d in grid.dims) or info.shape != tuple(sb.variables[name].shape):
                continue
            row = next((r for r in v.get("layers") or [] if r["cells_changed"]), v)
            layer = row.get("layer", 0)
            key = tuple(slice(None) if d in grid.dims else
                        slice(layer, layer + 1) if d == v.get("layer_dim") else slice(0, 1) for d in dims)
            ra, rb = np.asarray(sa.read_raw(name, key)), np.asarray(sb.read_raw(name, key))
            fa, fb = unpack(ra, info.attrs), unpack(rb, sb.variables[name].attrs)
            order = [p for p in range(len(dims)) if dims[p] not in grid.dims] + [dims.index(d) for d in grid.dims]
            ra, rb, fa, fb = (np.transpose(x, order).reshape(grid.shape) for x in (ra, rb, fa, fb))
            same = (ra == rb) | (np.isnan(fa) & np.isnan(fb)) if ra.dtype.kind in "fc" else (ra == rb)
            changed = ~same
            label = name + (f" {v['layer_dim']}[{layer}]" if v.get("layer_dim") else "")
            fields[name] = (np.where(changed, fb - fa, 0.0), changed, label, v.get("units") or "", row["cells_changed"])
    finally:
        sa.close()
        sb.close()
    return grid, land, land_what, fields


def compare_report(result: dict, folder, layout=None) -> Path:
    """Write ``folder/compare.md`` and ``folder/report.html`` for a :func:`compare` result.

    Parameters
    ----------
    result : dict
        What :func:`compare` returned (its numbers are the page's numbers).
    folder : str or path-like
        Folder for the report (created if needed).
    layout : str, path-like or Document, optional
        The layout used to find the grid (else CF attributes).

    Returns
    -------
    pathlib.Path
        The path of ``report.html``.

    Notes
    -----
    The page names both files with their sha256, the verdict, per variable and layer the cells
    changed, the largest change and the mean over changed cells, and, where the files have a
    grid, per changed variable a map of the change b - a of its first changed layer on file
    a's own coastline and a histogram of that change weighted by cell area.
    """

    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"--report {folder}: exists and is not a folder; give a folder for the report")
    grid, land, land_what, fields = _compare_fields(result, layout)
    figs = []
    for name, (d, changed, label, units, n_changed) in fields.items():
        coast = f" Grey: sea (no land); thin line: coastline ({land_what} 0.5, from file a)." if land is not None \
            else ""
        png = _map_figure(grid, np.where(changed, d, 0.0), changed.astype(float), [],
                          f"Change b - a of {label}", f"change ({units})", cmap="RdBu_r", land=land,
                          land_what=land_what or "")
        figs.append((png, f"Change b - a of {label} on the grid of a, on a scale centred on zero." + coast))
        ok = changed & np.isfinite(d)
        if np.any(ok):
            div, unit = _area_units(grid)
            v, a = d[ok], np.broadcast_to(grid.area, d.shape)[ok] / div
            lo, hi = float(v.min()), float(v.max())
            if hi - lo <= 1e-9 * max(1.0, abs(hi)):
                figs.append((None, f"{label}: every one of the {n_changed} changed cells changed by {lo:.4g} {units}."))
                continue
            e = np.linspace(lo, hi, 41)
            png = histogram_figure([(label, e, np.histogram(v, bins=e, weights=a)[0], units)],
                                   f"Change b - a of {label} over the changed cells, weighted by cell area",
                                   area_units=unit.split(",")[0], area_what="cell area")
            figs.append((png, f"Histogram of the change b - a of {label} over the changed cells, weighted by cell "
                              f"area ({unit})."))
    page = compare_page(result, sha256_file(result["a"]), sha256_file(result["b"]), figs, __version__)
    folder.mkdir(parents=True, exist_ok=True)
    write_atomic_text(folder / "compare.md", compare_markdown(result))
    path = folder / "report.html"
    write_atomic_text(path, page)
    return path


# =============================================================================================
# verify
# =============================================================================================


def _locate(entry: dict | None, record_dir: Path) -> tuple[Path | None, str]:
    """A file named in a provenance record: beside the record (its relative path) first, then the
    recorded absolute path; (None, "") when neither is there."""
    rel = (entry or {}).get("relative_path")
    if rel:
        cand = record_dir / rel
        if cand.is_file():
            return cand, "beside the record"
    path = (entry or {}).get("path")
    if path and Path(path).is_file():
        return Path(path), "at its recorded path"
    return None, ""


def _load_document(entry: dict, kind: str, record_dir: Path, override=None, recipe_doc=None, rec=None):
    """The recipe or layout of a provenance record, and where it came from: the file given
    (``override``), the file beside the record or at its recorded path, or the text the record
    keeps (whose canonical sha256 the caller checks like a file's)."""

    loader = load_recipe if kind == "recipe" else load_layout
    if override is not None:
        return loader(override), f"{override} (given)"
    path = entry.get("path")
    recipe_entry = (rec or {}).get("recipe") or {}
    if kind == "layout" and recipe_doc is not None and path and path == recipe_entry.get("path"):
        doc = inline_layout(recipe_doc)  # the layout was written inside the recipe
        if doc is None:
            raise InputError(f"{path}: the recorded layout was inline in this recipe, which no longer has one")
        return doc, "inline in the recipe"
    found, how = _locate(entry, record_dir)
    if found is not None:
        return loader(found), f"{found} ({how})"
    if entry.get("text"):
        rel = entry.get("relative_path")
        home = record_dir / rel if rel else Path(path) if path else record_dir / f"{kind}.yaml"
        doc = document_from_text(entry["text"], kind, home, f"provenance record ({kind}.text)")
        return doc, f"the {kind} text stored in the record (its file {path} is gone; files it names are " \
                    f"looked for in {home.parent})"
    if not path:
        raise InputError(f"provenance record: the {kind} was not read from a file and its text is not stored; "
                         f"pass --{kind} with the {kind} file")
    raise InputError(f"{path}: the recorded {kind} file is missing and the record holds no text of it; "
                     f"pass --{kind} with its current path")


def _document_changed(kind: str, doc, entry: dict, rec: dict, from_record: bool = False) -> str:
    """Why a recipe or layout no longer has its recorded canonical sha256."""

    want = str(entry.get("sha256"))[:12]
    if from_record:
        return (f"the {kind} text stored in the record has canonical sha256 {doc.sha256[:12]}..., not the recorded "
                f"{want}...: the record was edited after apply; give the {kind} file with --{kind}")
    if entry.get("text") is not None and doc.text == entry["text"]:
        then = (rec.get("versions") or {}).get("initgen")
        return (f"the {kind} {entry.get('path')} is unchanged, but this initgen ({__version__}) reads it differently "
                f"from the one that applied it ({then}): canonical sha256 {doc.sha256[:12]}... is not the recorded "
                f"{want}...; verify with the initgen version of the record")
    return (f"the {kind} {entry.get('path')} has changed since apply (canonical sha256 {doc.sha256[:12]}... is not "
            f"the recorded {want}...); restore the recorded text (provenance record, {kind}.text)")


def verify(provenance_path, input=None, output=None, recipe=None, layout=None) -> dict:
    """Re-run a provenance record and check the recorded output against the re-run.

    Parameters
    ----------
    provenance_path : str or path-like
        The ``.provenance.json`` written by ``apply``.
    input : str or path-like, optional
        The original input (default: its path relative to the record, then the recorded
        absolute path).
    output : str or path-like, optional
        The file to check (default: the file the record sits beside, ``X`` for
        ``X.provenance.json``, then the recorded paths).
    recipe, layout : str or path-like, optional
        The recipe and layout files (default: beside the record as recorded, then the recorded
        absolute path, then the text stored in the record; the canonical sha256 is checked
        whichever is used).

    Returns
    -------
    dict
        ``ok`` (bool), ``message`` (one paragraph saying what was checked and what failed, naming
        the variables that differ), ``checks`` (name -> bool) and, when the re-run was made,
        ``compare`` (the :func:`compare` result of the re-run against the output).

    Raises
    ------
    InputError
        When the record, the input, the output, the recipe or the layout file cannot be read.
        The result's ``checked`` lists every file used and where it was found, so a moved
        submission folder never silently checks the original files instead of its copies.

    Notes
    -----
    The ``history`` line of a run holds its time, so a whole file is never bit-identical across
    runs. ``verify`` therefore checks that (1) the input's sha256 is the recorded one, (2) the
    recipe and layout files have the recorded canonical sha256, (3) the output's sha256 is the
    recorded one (the file was not altered after ``apply``), (4) the output differs from a
    re-run of the recorded recipe in nothing but the global ``history`` attribute, and (5) the
    re-run's ledger equals the recorded ledger (and, for an ensemble member, the member's
    scale, offset and seed). The re-run is written into a temporary folder (``TMPDIR``), which
    needs as much free space as the output, and removed afterwards.
    """

    record_path = Path(provenance_path)
    rec = prov.load(record_path)
    record_dir = record_path.resolve().parent
    try:
        recipe_entry, layout_entry = rec["recipe"], rec.get("layout")
        want_in, want_out = rec["input"]["sha256"], rec["output"]["sha256"]
        in_entry, out_entry = dict(rec["input"]), dict(rec["output"])
    except (KeyError, TypeError):
        raise InputError(f"{provenance_path}: the provenance record lacks input, output or recipe entries; "
                         "give the .provenance.json written by initgen apply") from None
    if record_path.name.endswith(".provenance.json"):  # a record sits beside its output
        out_entry["relative_path"] = record_path.name[: -len(".provenance.json")]
    checked = []
    paths = {}
    for what, entry, given in (("input", in_entry, input), ("output", out_entry, output)):
        if given is not None:
            paths[what], how = Path(given), "given"
        else:
            paths[what], how = _locate(entry, record_dir)
        if paths[what] is None or not paths[what].is_file():
            tried = [str(paths[what])] if paths[what] is not None else []
            if given is None and entry.get("relative_path"):
                tried.append(str(record_dir / entry["relative_path"]))
            if given is None and entry.get("path") and entry["path"] not in tried:
                tried.append(str(entry["path"]))
            raise InputError(f"{' nor '.join(tried) or what}: the {what} file is not there; pass --{what} with "
                             "its current path")
        checked.append(f"{what} {paths[what]} ({how})")
    in_path, out_path = paths["input"], paths["output"]
    member = rec.get("member") or None
    member_kw = {}
    if member:
        if "member" not in inspect.signature(api.apply).parameters:
            raise InputError(f"{provenance_path}: this record is of ensemble member {member.get('name')}, and this "
                             "initgen cannot apply one member; verify it with the initgen version of the record")
        member_kw["member"] = member.get("name")
    failures: list[str] = []
    checks: dict = {}

    checks["input_sha256"] = sha256_file(in_path) == want_in
    if not checks["input_sha256"]:
        failures.append(f"the input {in_path} differs from the one recorded (sha256 is not {want_in[:12]}...); "
                        "use the original input")
    recipe_doc, how = _load_document(recipe_entry, "recipe", record_dir, recipe)
    checked.append(f"recipe {how}")
    checks["recipe_sha256"] = recipe_doc.sha256 == recipe_entry.get("sha256")
    if not checks["recipe_sha256"]:
        failures.append(_document_changed("recipe", recipe_doc, recipe_entry, rec, how.startswith("the recipe text")))
    layout_doc = None
    if layout_entry:
        layout_doc, how = _load_document(layout_entry, "layout", record_dir, layout, recipe_doc, rec)
        checked.append(f"layout {how}")
        checks["layout_sha256"] = layout_doc.sha256 == layout_entry.get("sha256")
        if not checks["layout_sha256"]:
            failures.append(_document_changed("layout", layout_doc, layout_entry, rec, how.startswith("the layout text")))
    for key, f in (recipe_entry.get("files") or {}).items():
        # where the re-run will read it: beside the recipe in use, else where it was
        fpath = Path(f["path"])
        rel = f.get("relative_to_recipe")
        if rel and recipe_doc.path is not None and (recipe_doc.base_dir / rel).is_file():
            fpath = recipe_doc.base_dir / rel
        now = sha256_file(fpath) if fpath.is_file() else None
        checked.append(f"file {fpath} (recipe key {key})")
        checks[f"file {key}"] = now == f["sha256"]
        if now != f["sha256"]:
            failures.append(f"the file {fpath} (recipe key {key}) "
                            + ("is missing" if now is None else "has changed since the run")
                            + f"; the recorded sha256 is {f['sha256'][:12]}...")
    checks["output_sha256"] = sha256_file(out_path) == want_out
    if not checks["output_sha256"]:
        failures.append(f"the output {out_path} was altered after apply (its sha256 is not the recorded "
                        f"{want_out[:12]}...)")
    result: dict = {"ok": False, "checks": checks, "checked": checked}
    if not failures or set(k for k, v in checks.items() if not v) <= {"output_sha256"}:
        allow_outside = bool((rec.get("options") or {}).get("allow_outside_paths", False))
        with tempfile.TemporaryDirectory(prefix="initgen-verify-") as tmp:
            rerun = Path(tmp) / ("rerun-" + out_path.name)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                new = api.apply(recipe_doc, in_path, rerun, layout_doc, allow_outside_paths=allow_outside,
                                **member_kw)
            cmp_ = compare(rerun, out_path, allow=())
        result["compare"] = cmp_
        checks["same_as_rerun"] = bool(cmp_["ok"])
        if not cmp_["ok"]:
            names = [n for n, v in cmp_["variables"].items() if v.get("status") != "identical"]
            other = [d for d in cmp_["differences"] if not d.startswith("variable '")]
            what = []
            if names:
                what.append("variable(s) " + ", ".join(names))
            what += other
            failures.append(f"the output differs from a re-run of recipe '{recipe_doc.name}' in "
                            + "; ".join(what) + " (details: initgen compare)")
        led_new = json.loads(json.dumps(_py(new["ledger"])))
        led_old = json.loads(json.dumps(_py(rec.get("ledger"))))
        checks["ledger"] = led_new == led_old
        if not checks["ledger"]:
            keys = sorted(k for k in set(led_new) | set(led_old or {}) if led_new.get(k) != (led_old or {}).get(k))
            failures.append(f"the re-run's ledger differs from the recorded one in: {', '.join(keys)}")
        if member:
            checks["member"] = _py(new.get("member")) == _py(member)
            if not checks["member"]:
                failures.append(f"member {member.get('name')} of the recipe now means something else "
                                f"({_short(new.get('member'), 80)} vs the recorded {_short(member, 80)})")
        vnew, vold = new.get("versions") or {}, rec.get("versions") or {}
        changed_v = sorted(k for k in set(vnew) | set(vold) if vnew.get(k) != vold.get(k))
        if changed_v and failures:
            failures.append("library versions differ from the record (" + ", ".join(
                f"{k} {vold.get(k)} -> {vnew.get(k)}" for k in changed_v) + "), which may explain it")
    else:
        failures.append("not re-run: fix the above first")
    result["ok"] = not failures
    if result["ok"]:
        result["message"] = (f"verified: {out_path} is the recorded output (sha256 {want_out[:12]}...) and equals a "
                             f"re-run of recipe '{recipe_doc.name}' on {in_path} in everything but the history "
                             "line; the ledger is identical")
    else:
        result["message"] = f"NOT verified: {out_path}: " + "; ".join(failures)
    return _py(result)


# =============================================================================================
# Figures (drawn by initgen.reports.figures; this part gathers what they show from the plan and ledger)
# =============================================================================================


def _map_figure(grid, field, w, geoms, title: str, label: str, *, cmap=None, vmin=None, vmax=None, land=None,
                land_what="land fraction", taper_edge=None) -> bytes:
    """A map (see :func:`initgen.reports.figures.map_figure`); ``cmap='RdBu_r'`` asks for the diverging scale."""

    return map_figure(grid, field, w, geoms, title, label, land=land, land_what=land_what, taper_edge=taper_edge,
                      diverging=cmap == "RdBu_r", vmin=vmin, vmax=vmax)


def _region_geoms(rec, allow_outside: bool) -> list:
    """(block name, shapely geometry) per perturbation block; None where the outline cannot be rebuilt."""

    out = []
    for i, block in enumerate(rec.data["perturbations"]):
        try:
            geom = region_geometry(block["region"], rec, f"perturbations[{i}].region", allow_outside)
        except InputError:
            geom = None
        out.append((block["name"], geom))
    return out


def _land_for_map(model, store) -> tuple:
    """(land 0..1 on the whole grid, what it is) read from the file, for sea shading and the coastline.

    The land fraction, else the land mask (at the layout's threshold 0.5), else where the top
    soil temperature holds a valid value; (None, None) when the file has none of them.
    """

    full = model.grid.full_window()
    if model.role("land_fraction") is not None:
        return land_weight(fraction=plan_mod.land_fraction(model, full)), "land fraction"
    if model.role("land_mask") is not None:
        return land_weight(mask=plan_mod.read_window(model, model.role("land_mask"), full)), "land mask"
    soil = model.role("soil_temperature")
    if soil is not None:
        hkey = {d: slice(0, n) for d, n in zip(model.grid.dims, model.grid.shape)}
        t = np.asarray(soil.read(store, hkey), float).reshape((-1,) + tuple(model.grid.shape))[0]
        return np.isfinite(t).astype(float), "valid soil temperature"
    return None, None


def _taper_edge(plan, rec, geoms: list) -> np.ndarray | None:
    """1 where any block's taper weight (the plan's own function on the plan's window) is above 0."""

    edge = None
    for (name, geom), blk in zip(geoms, rec.data["perturbations"]):
        reg = blk["region"]
        if geom is None or reg["taper_km"] <= 0:
            continue
        t = regions.taper_weight(plan.lon, plan.lat, geom, reg["taper_km"], placement=reg["taper_placement"]) \
            >= MIN_WEIGHT
        edge = t if edge is None else edge | t
    return None if edge is None else plan.full(edge.astype(float))


def _imposed_profile(plan) -> np.ndarray | None:
    """The imposed soil-temperature change per layer, f(z) x A, as a mean over the region's land area.

    Taken from the plan: per block the layer factors f(z) times the area-weighted mean of
    w(x) A(x) (the member's anomaly: scaled, offset, with noise) over the region, summed over
    the blocks that target soil temperature (donor blends have no anomaly and are left out).
    """
    a = plan.area[plan.region]
    total = float(a.sum())
    out = None
    if total <= 0:
        return None
    for b in plan.blocks:
        if b.anomaly is None or b.factors is None or "soil_temperature" not in b.targets:
            continue
        eff = b.anomaly * plan.member_scale + plan.member_offset_K
        if plan.noise is not None:
            eff = eff + plan.noise
        wa = float(np.sum(np.where(b.weight > 0, b.weight * eff, 0.0)[plan.region] * a)) / total
        prof = np.asarray(b.factors, float) * wa
        out = prof if out is None else out + prof
    return out


class _ChangeCapture:
    """A read-only store wrapper that turns ``write_changed`` into what the report draws.

    Running the plan with ``write=True`` against this wrapper computes exactly what ``apply``
    would write (physics, limits and all) while writing nothing. Per ledger variable and layer
    it keeps a histogram of the change weighted by land area (the area the ledger uses), the
    smallest and largest change of a changed cell, and the change of the top layer on the grid.
    """

    def __init__(self, inner, model, ledger: dict, plan, bins: int = 240):
        self.inner = inner
        self.bytes_written = 0
        self.hist: dict = {}
        self.maps: dict = {}  # ledger name -> top layer's change on the plan's window
        self.grid = model.grid
        self.window = plan.window
        self.area = plan.area  # land area on the window, as the ledger weighs
        self._where: dict = {}  # variable -> (ledger name, layer axis or None, view index)
        for role in model.roles.values():
            label = role.variables[0] if len(role.variables) == 1 else "+".join(role.variables)
            for j, v in enumerate(role.views):
                axis = v.info.dims.index(v.layer_dim) if v.layer_dim else None
                self._where[v.info.name] = (label, axis, j if len(role.views) > 1 else None)
        for name, var in ledger.get("variables", {}).items():
            rows = var.get("layers") or [var.get("field")]
            edges = []
            for r in rows:
                lo, hi = (r or {}).get("min"), (r or {}).get("max")
                if lo is None or hi is None:
                    edges.append(None)
                    continue
                if hi - lo < 1e-9:
                    lo, hi = lo - 0.5, hi + 0.5
                edges.append(np.linspace(lo, hi, bins + 1))
            n = len(edges)
            self.hist[name] = {"edges": edges, "area": [None if e is None else np.zeros(bins) for e in edges],
                               "cells": np.zeros(n, np.int64), "area_sum": np.zeros(n),
                               "lo": np.full(n, np.inf), "hi": np.full(n, -np.inf), "units": var.get("units", "")}

    def __getattr__(self, name):
        return getattr(self.inner, name)

    def read(self, name, key=None):
        return self.inner.read(name, key)

    def read_raw(self, name, key=None):
        return self.inner.read_raw(name, key)

    def describe(self):
        return self.inner.describe()

    def write_changed(self, name, key, values, changed):
        n = int(np.count_nonzero(changed))
        if not n or name not in self._where:
            return n
        label, axis, view = self._where[name]
        h = self.hist.get(label)
        if h is None:
            return n
        info = self.inner.variables[name]
        dims = list(info.dims)
        key = tuple(key) if key is not None else tuple(slice(None) for _ in dims)
        old = self.inner.read(name, key)
        d = np.where(changed, np.asarray(values, float) - old, np.nan)
        hpos = [dims.index(g) for g in self.grid.dims]
        # file indices of the block -> positions in the plan's window (changes lie inside it)
        hsel = np.ix_(*[np.searchsorted(self.window[a], np.arange(info.shape[p])[key[p]])
                        for a, p in enumerate(hpos)])
        rest = [p for p in range(len(dims)) if p not in hpos and p != axis]
        order = ([axis] if axis is not None else []) + rest + hpos
        d = np.transpose(d, order)
        hshape = d.shape[d.ndim - len(hpos):]
        d = d.reshape(((d.shape[0],) if axis is not None else (1,)) + (-1,) + hshape)
        if axis is None:
            layers = [view if view is not None else 0]
        else:
            layers = list(range(info.shape[axis])[key[axis]])
        area = np.broadcast_to(self.area[hsel], d.shape[1:])
        for layer, arr in zip(layers, d):
            if layer >= len(h["edges"]) or h["edges"][layer] is None:
                continue
            ok = np.isfinite(arr)
            v, a = arr[ok], area[ok]
            if not v.size:
                continue
            e = h["edges"][layer]
            h["area"][layer] += np.histogram(np.clip(v, e[0], e[-1]), bins=e, weights=a)[0]
            h["cells"][layer] += v.size
            h["area_sum"][layer] += float(a.sum())
            h["lo"][layer] = min(h["lo"][layer], float(v.min()))
            h["hi"][layer] = max(h["hi"][layer], float(v.max()))
            if layer == 0:  # the top layer's change on the grid (first index of any other axis)
                m = self.maps.setdefault(label, np.zeros(self.area.shape))
                top = arr[0]
                sub = m[hsel]
                m[hsel] = np.where(np.isfinite(top), top, sub)
        return n


def _area_units(grid) -> tuple[float, str]:
    """(divisor, unit) for areas in the histograms: km2, or cells when the file has no cell areas."""
    if str(grid.area_source).startswith("equal"):
        return 1.0, "cells, equal weights: the file has no cell areas"
    return 1.0e6, "km2"


def _histogram_panels(capture: "_ChangeCapture", ledger: dict, roles: tuple, grid) -> tuple[list, list]:
    """(panels, sentences): a panel per layer with several values of change, a sentence per single-valued one."""

    div, unit = _area_units(grid)
    panels, sentences = [], []
    for name, var in ledger.get("variables", {}).items():
        if var.get("role") not in roles or name not in capture.hist:
            continue
        h = capture.hist[name]
        rows = var.get("layers") or [var.get("field")]
        layered = bool(var.get("layers"))
        for i, (e, a) in enumerate(zip(h["edges"], h["area"])):
            if a is None or h["cells"][i] == 0:
                continue
            depth = rows[i].get("node_depth_m") if i < len(rows) and rows[i] else None
            title = short_label(name) + (f" layer {i + 1}" if layered else "") + \
                (f" ({depth:.3g} m)" if depth is not None else "")
            lo, hi = h["lo"][i], h["hi"][i]
            if hi - lo <= 1e-9 * max(1.0, abs(hi)):
                sentences.append(f"{title}: every one of the {rows[i]['cells_changed']} changed cells (ledger) "
                                 f"changed by {lo:.4g} "
                                 f"{h['units']} ({h['area_sum'][i] / div:,.4g} {unit.split(',')[0]}).")
                continue
            e, a = _coarsen(e, a)
            panels.append((title, e, a / div, h["units"]))
    return panels, sentences


def _coarsen(edges: np.ndarray, area: np.ndarray, most: int = 40) -> tuple[np.ndarray, np.ndarray]:
    """The fine bins cut to the range that holds changes, merged into at most ``most`` bins.

    The capture bins the ledger's min..max over the region's cells, which includes the cells
    that did not change; the changed cells may fill only part of it.
    """
    nz = np.flatnonzero(area > 0)
    if nz.size == 0:
        return edges, area
    e, a = edges[nz[0]:nz[-1] + 2], area[nz[0]:nz[-1] + 1]
    k = -(-a.size // most)  # bins merged into one
    pad = (-a.size) % k
    a = np.concatenate([a, np.zeros(pad)]).reshape(-1, k).sum(axis=1)
    step = e[1] - e[0]
    e = e[0] + step * k * np.arange(a.size + 1)
    return e, a


def _profile_panels(ledger: dict, model, imposed) -> list:
    """Per layered soil variable of the ledger: layer extents, realised means and (for temperature) the target."""

    layers = model.layers
    if layers is None:
        return []
    out = []
    for name, var in ledger.get("variables", {}).items():
        rows = var.get("layers")
        if not rows or var.get("role") not in ("soil_temperature", "soil_liquid", "soil_ice") \
                or len(rows) != len(layers.top_m):
            continue
        imp = imposed if var["role"] == "soil_temperature" and imposed is not None \
            and len(imposed) == len(rows) else None
        out.append({"label": f"{short_label(name)} ({var['role']})", "units": var.get("units", ""),
                    "top_m": layers.top_m, "bottom_m": layers.bottom_m, "node_m": layers.node_m,
                    "realised": [r.get("area_weighted_mean") for r in rows],
                    "imposed": None if imp is None else list(imp)})
    return out


def _md_table(header: list, rows: list) -> list[str]:
    out = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(str(c) for c in r) + " |" for r in rows]
    return out


def _ledger_markdown(ledger: dict) -> list[str]:
    """The ledger tables, with the numbers formatted as ``api.ledger_text`` formats them."""

    out = []
    reg = ledger["region"]
    out.append(f"Region: {reg['cells_weight_above_0']} cells with weight > 0 ({reg['cells_full_weight']} at full "
               f"weight), " + (f"area {reg['area_m2'] / 1e6:,.0f} km2." if reg.get("area_m2") is not None
                             else f"area {reg.get('area_is', 'not known')}."))
    out.append("")
    for name, var in ledger["variables"].items():
        label = short_label(name)
        out.append(f"**{label}** ({var['role']}, change in {var['units']})" + (f"; variables {name}" if label != name
                                                                                 else ""))
        out.append("")
        rows = var.get("layers") or [var.get("field")]
        body = []
        for r in rows:
            depth = r.get("node_depth_m")
            am = r["area_weighted_mean"]
            body.append([r["layer"], f"{depth:.3f}" if depth is not None else "-", r["cells_changed"],
                         f"{am:.4g}" if am is not None else "-", _fmt(r["min"]), _fmt(r["max"])])
        out += _md_table(["layer", "depth_m", "changed", "mean over region", "min", "max"], body)
        out.append("")
    out += [MEAN_REGION + ".", ""]
    return out


def preview_report(recipe, input, layout, out_dir, ledger=None, allow_outside_paths=False, *,
                   member: str | None = None) -> Path:
    """Write ``out_dir/report.html``, ``out_dir/preview.md`` and its PNG figures: what ``apply`` would change.

    Parameters
    ----------
    recipe : str, path-like or Document
        The recipe.
    input : str or path-like
        The restart file (read only).
    layout : str, path-like, Document or None
        The layout (None: the recipe's inline layout, else CF attributes).
    out_dir : str or path-like
        Folder for the report (created if needed). Nothing is written anywhere else.
    ledger : dict, optional
        The ledger of :func:`initgen.api.preview` for the same inputs (computed when None).
    allow_outside_paths : bool, optional
        Let the recipe name files outside its own folder.
    member : str, optional
        One member of a recipe with a members section: figures and ledger are that member's
        (its scale, offset and noise), as ``initgen preview --member NAME`` computes them.

    Returns
    -------
    pathlib.Path
        The path of ``preview.md`` (``report.html`` is beside it).

    Notes
    -----
    ``report.html`` is one self-contained page (figures embedded, nothing loaded from
    elsewhere): the recipe and its sha256, the input and its sha256, the member, the ledger
    tables, clamps and flags with what each means, a place for the persistence estimate, and
    the figures. Figures (each :data:`FIG_PIXELS` pixels), on the model's own coastline:
    ``weights.png`` (the horizontal weight, region outline and the taper's outer edge),
    ``surface_anomaly.png`` (anomaly x weight x surface factor from the plan, summed over the
    blocks), ``change_<variable>.png`` (the top layer's change as ``apply`` would write it),
    ``profile.png`` (mean change over the region per layer from the ledger, drawn over each
    layer's extent, beside the imposed target f(z) x A from the plan) and
    ``histogram_soil.png`` / ``histogram_surface.png`` (per layer, the land area per bin of the
    change of the cells ``apply`` would change: the plan is run against a read-only wrapper of
    the input that records what would be written instead of writing it).
    """

    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{out_dir}: exists and is not a folder; give a folder for the report")
    rec = api._recipe(recipe)
    lay = api._layout(layout, rec)
    member_kw = {} if member is None else {"member": member}
    if ledger is None:
        ledger = api.preview(rec, input, lay, allow_outside_paths=allow_outside_paths, **member_kw)
    mem = api._member(rec, member)
    store = NetCDFStore(input)
    try:
        model = api._model(store, lay, rec)
        plan = plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths)
        if mem is not None:
            plan = configure(plan, mem)
        grid = model.grid
        w = plan.full(np.max([b.weight for b in plan.blocks], axis=0))
        capture = _ChangeCapture(store, model, ledger, plan)
        plan_mod.run(plan, capture, write=True)
        land, land_what = _land_for_map(model, store)
    finally:
        store.close()
    geoms = _region_geoms(rec, allow_outside_paths)
    edge = _taper_edge(plan, rec, geoms)
    surf = np.zeros(grid.shape)
    donors = []
    for b in plan.blocks:
        if b.anomaly is None:
            donors.append(b.name)
            continue
        a = b.anomaly * plan.member_scale + getattr(plan, "member_offset_K", 0.0)
        if getattr(plan, "noise", None) is not None:
            a = a + plan.noise
        surf += plan.full(a * b.weight * b.surface_factor)  # as plan.py applies it to skin and snow temperature
    who = f"recipe {rec.name}" + (f", member {member}" if member else "")
    coast = f" Grey: sea (no land); thin line: coastline ({land_what} 0.5, from the input)." if land is not None else ""
    mk = dict(land=land, land_what=land_what or "", taper_edge=edge)
    figures: dict[str, bytes] = {}
    captions: dict[str, str] = {}
    figures["weights.png"] = _map_figure(grid, w, w, geoms, f"Region weight w(x): {who}", "weight (1)",
                                         vmin=0.0, vmax=1.0, **mk)
    captions["weights.png"] = ("Horizontal weight w(x) (taper x elevation band x land weight) with the region "
                               "outline (black) and the outer edge of the taper (orange, dashed)." + coast)
    if len(donors) < len(plan.blocks):  # a donor blend imposes no anomaly field
        figures["surface_anomaly.png"] = _map_figure(
            grid, np.where(w > 0, surf, 0.0), w, geoms, f"Imposed surface anomaly: {who}", "K", cmap="RdBu_r", **mk)
        captions["surface_anomaly.png"] = ("Imposed surface anomaly: anomaly x weight x surface factor, summed over "
                                           "the blocks (from the plan), on a scale centred on zero." + coast)
    for name, var in ledger.get("variables", {}).items():
        field = capture.maps.get(name)
        if field is None:
            continue
        field = plan.full(field)
        fname = f"change_{short_label(name).replace('..', '-').replace('+', '_').replace(' ', '')}.png"
        top = " top layer" if var.get("layers") else ""
        figures[fname] = _map_figure(grid, np.where(w > 0, field, 0.0), w, geoms,
                                     f"Change of {short_label(name)}{top} ({var['role']}): {who}",
                                     f"change ({var.get('units', '')})", cmap="RdBu_r", **mk)
        captions[fname] = (f"Change of {short_label(name)}{top} ({var['role']}) as apply would write it (after physics and "
                           "limits), on a scale centred on zero." + coast)

    imposed = _imposed_profile(plan)
    prof = profile_figure(_profile_panels(ledger, model, imposed), f"Mean change over the region against depth: {who}")
    if prof is not None:
        figures["profile.png"] = prof
        captions["profile.png"] = (
            "Mean change over the region per layer (ledger), drawn over each layer's extent down to the deepest "
            "layer's bottom, " + ("beside the imposed target f(z) x A (the plan's layer factors times the region's "
                                  "area-weighted mean of w(x) A(x)). Where the two differ, physics (phase change) or "
                                  "limits took their share." if imposed is not None else
                                  "with no imposed target: the blocks blend toward a donor file."))
    sentences = []
    div_unit = _area_units(grid)[1]
    for fname, roles, what in (("histogram_soil.png", ("soil_temperature",), "soil temperature"),
                               ("histogram_surface.png", ("skin_temperature", "snow_temperature", "snow_mass"),
                                "skin and snow")):
        panels, said = _histogram_panels(capture, ledger, roles, grid)
        sentences += said
        png = histogram_figure(panels, f"Change of {what} per layer, weighted by land area: {who}",
                               area_units=div_unit)
        if png is not None:
            figures[fname] = png
            captions[fname] = (f"Histogram per layer of the change of {what} over the cells apply would change "
                               f"(after physics and limits), weighted by land area ({div_unit}).")

    input_sha = sha256_file(input)
    md = _preview_markdown(rec, lay, input, grid, ledger, figures, captions, donors, member, sentences, input_sha)
    blocks = []
    for b, blk in zip(ledger.get("blocks", []), rec.data["perturbations"]):
        an = b.get("anomaly_K") or {}
        factors = b.get("layer_factors")
        blocks.append([b["name"], ", ".join(b["targets"]), b["cells_weight_above_0"],
                       f"{blk['region']['taper_km']:g} km {blk['region']['taper_placement']}",
                       f"{_fmt(an.get('min'))}..{_fmt(an.get('max'))}" if an else "donor",
                       _fmt(b.get("surface_factor")),
                       ", ".join(f"{f:.3g}" for f in factors) if factors else "-"])
    page = preview_page(rec=rec, lay=lay, input=input, input_sha256=input_sha, grid=grid, ledger=ledger,
                        member=None if mem is None else mem.record(), blocks=blocks,
                        figures=[(png, captions.get(f, f)) for f, png in figures.items()], sentences=sentences,
                        caution=CAUTION + " This preview shows what initgen apply would write with the same recipe, "
                        "layout and input; the provenance record of apply holds the same ledger.",
                        version=__version__)
    out_dir.mkdir(parents=True, exist_ok=True)
    for fname, data in figures.items():
        write_atomic_bytes(out_dir / fname, data)
    write_atomic_text(out_dir / "report.html", page)
    path = out_dir / "preview.md"
    write_atomic_text(path, md)
    return path


def _preview_markdown(rec, lay, input, grid, ledger, figures, captions, donors, member=None, sentences=(),
                      input_sha256=None) -> str:

    L = [f"# initgen preview: {rec.name}" + (f", member {member}" if member else ""), ""]
    if rec.data.get("description"):
        L += [f"_{rec.data['description']}_", ""]
    L += ["## What", "",
          f"- recipe: `{rec.name}`, canonical sha256 `{rec.sha256}`" + (f" ({rec.path})" if rec.path else ""),
          "- layout: " + (f"`{lay.name}`, sha256 `{lay.sha256}`" if lay is not None else "none (roles from CF attributes)"),
          f"- input: {Path(input).resolve()} ({Path(input).stat().st_size:,} bytes)"
          + (f", sha256 `{input_sha256}`" if input_sha256 else ""),
          f"- member: {member}" if member else "- member: none (the recipe as written)",
          f"- grid: {grid.kind} {' x '.join(map(str, grid.shape))} on dims ({', '.join(grid.dims)}), "
          f"{grid.extent()}; cell area {grid.area_source}",
          f"- initgen {__version__}; this is a dry run: no netCDF file was written", ""]
    L += ["## Perturbation blocks", ""]
    body = []
    for b, blk in zip(ledger.get("blocks", []), rec.data["perturbations"]):
        an = b.get("anomaly_K") or {}
        factors = b.get("layer_factors")
        body.append([b["name"], ", ".join(b["targets"]), b["cells_weight_above_0"],
                     f"{blk['region']['taper_km']:g} km {blk['region']['taper_placement']}",
                     f"{_fmt(an.get('min'))}..{_fmt(an.get('max'))}" if an else "donor",
                     _fmt(b.get("surface_factor")),
                     ", ".join(f"{f:.3g}" for f in factors) if factors else "-"])
    L += _md_table(["block", "targets", "cells w>0", "taper", "anomaly K", "surface factor", "layer factors"], body)
    L += ["", "## What would change (the ledger)", ""]
    L += _ledger_markdown(ledger)
    L += ["## Clamps", ""]
    if ledger.get("clamps"):
        L += _md_table(["rule", "cells", "what it means"],
                       [[k, v, CLAMP_TEXT.get(k, "-")] for k, v in ledger["clamps"].items()])
    else:
        L.append("No value was clamped.")
    L += ["", "## Flags", ""]
    if ledger.get("flags"):
        L += _md_table(["rule", "cells", "what it means"],
                       [[k, v, FLAG_TEXT.get(k, "-")] for k, v in ledger["flags"].items()])
    else:
        L.append("No cell was flagged.")
    L += ["", "## Physics: energy and phase change", ""]
    phys = ledger.get("physics", {})
    L.append(f"Mode: `{phys.get('mode')}`.")
    totals = [(k, v) for k, v in phys.items() if k.endswith("_total_J") or k.endswith("_total_kg")]
    if totals:
        L += [""] + _md_table(["quantity (region total)", "value"], [[k, f"{v:.4g}"] for k, v in totals])
    per_layer = [(k, v) for k, v in phys.items() if "_per_layer_" in k and isinstance(v, list)]
    if per_layer:
        depths = None
        for var in ledger.get("variables", {}).values():
            if var.get("role") == "soil_temperature" and var.get("layers"):
                depths = [r.get("node_depth_m") for r in var["layers"]]
        n = max(len(v) for _, v in per_layer)
        rows = []
        for i in range(n):
            d = depths[i] if depths and i < len(depths) else None
            rows.append([i, f"{d:.3f}" if d is not None else "-"] +
                        [f"{v[i]:.4g}" if i < len(v) else "-" for _, v in per_layer])
        L += ["", "Per layer, per m2 of region:", ""]
        L += _md_table(["layer", "depth_m"] + [k for k, _ in per_layer], rows)
    if ledger.get("cells_not_in_phase_equilibrium_before"):
        L += ["", f"Note: {ledger['cells_not_in_phase_equilibrium_before']} region layer-cells were not in phase "
                  "equilibrium before the change."]
    L += ["", "## Persistence estimate", ""]
    est = ledger.get("persistence")
    if est is None:
        L.append("PERSISTENCE ESTIMATE: not in this ledger (no `persistence` key).")
    else:
        L.append(persistence_line(est) + ".")  # persistence.py words the estimate once
    L += ["", "## Figures", ""]
    for fname in figures:
        L += [f"![{captions.get(fname, fname)}]({fname})", "", captions.get(fname, ""), ""]
    for s in sentences:
        L += [f"- {s}"]
    if sentences:
        L.append("")
    L += ["The same report as one page with the figures embedded: `report.html`.", ""]
    if donors:
        L += [f"Blocks blended from a donor file ({', '.join(donors)}) have no anomaly field on the surface map.", ""]
    L += ["## Caution", "", CAUTION + " This preview shows what `initgen apply` would write with the same recipe, "
          "layout and input; the provenance record of `apply` holds the same ledger.", ""]
    return "\n".join(L)


# =============================================================================================
# mask
# =============================================================================================


def write_mask(recipe, input, layout, output, png=None, force=False, allow_outside_paths=False):
    """Write the horizontal weight field as a CF netCDF file on the model's grid (and optionally a PNG).

    Parameters
    ----------
    recipe : str, path-like or Document
        The recipe.
    input : str or path-like
        The restart file whose grid is used (read only; never the output).
    layout : str, path-like, Document or None
        The layout (None: the recipe's inline layout, else CF attributes).
    output : str or path-like
        The mask file to write (atomically). An existing file is replaced only with ``force``.
    png : str or path-like, optional
        Also draw a map of the weights with the region outline to this PNG file.
    force : bool, optional
        Replace existing outputs.
    allow_outside_paths : bool, optional
        Let the recipe name files outside its own folder.

    Returns
    -------
    pathlib.Path
        The path of the mask file.

    Notes
    -----
    The file holds ``lon`` and ``lat`` (CF units and standard names) on the grid's own
    dimensions, ``cell_area`` when the grid has true cell areas, and ``region_weight`` (units
    ``1``, ``valid_range`` [0, 1]): the largest weight of any perturbation block at each cell,
    exactly as ``apply`` uses it. Attributes name the recipe (name, sha256) and each block (name,
    taper width and placement, elevation band).
    """

    input = Path(input)
    output = Path(output)
    check_output_path(input, output, force)
    if png is not None:
        png = Path(png)
        if png.resolve() == output.resolve():
            raise InputError(f"{png}: the PNG path is the mask file's path; give the PNG another name")
        check_output_path(input, png, force)
    rec = api._recipe(recipe)
    lay = api._layout(layout, rec)
    w, grid, plan = api.weights(rec, input, lay, allow_outside_paths=allow_outside_paths)
    true_area = not str(grid.area_source).startswith("equal")
    lon_name, lat_name = "lon", "lat"
    if grid.kind != "regular" and ({"lon", "lat"} & set(grid.dims)):
        lon_name, lat_name = "longitude", "latitude"

    def build(ds):
        ds.Conventions = "CF-1.8"
        ds.title = f"initgen region weight of recipe '{rec.name}'"
        ds.source = f"initgen {__version__}"
        ds.history = (f"{prov.utc_now()}: initgen {__version__} mask of recipe '{rec.name}' (sha256 {rec.sha256}) "
                      f"on the grid of {input.name}")
        ds.initgen_recipe_name = rec.name
        ds.initgen_recipe_sha256 = rec.sha256
        ds.initgen_grid_file = input.name
        for d, n in zip(grid.dims, grid.shape):
            ds.createDimension(d, n)
        if grid.kind == "regular":
            lat_v = ds.createVariable(lat_name, "f8", (grid.dims[0],))
            lon_v = ds.createVariable(lon_name, "f8", (grid.dims[1],))
            lat_v[:], lon_v[:] = grid.lat1d, grid.lon1d
            lon_v.axis, lat_v.axis = "X", "Y"
        else:
            lat_v = ds.createVariable(lat_name, "f8", grid.dims)
            lon_v = ds.createVariable(lon_name, "f8", grid.dims)
            lat_v[:], lon_v[:] = grid.lat, grid.lon
        lon_v.units, lon_v.standard_name, lon_v.long_name = "degrees_east", "longitude", "longitude"
        lat_v.units, lat_v.standard_name, lat_v.long_name = "degrees_north", "latitude", "latitude"
        coord_vars = grid.kind == "regular" and grid.dims == (lat_name, lon_name)
        if true_area:
            a = ds.createVariable("cell_area", "f8", grid.dims, zlib=True, complevel=4)
            a.units, a.standard_name, a.long_name = "m2", "cell_area", "area of the grid cell"
            a.comment = f"as initgen uses it: {grid.area_source}"
            if not coord_vars:
                a.coordinates = f"{lat_name} {lon_name}"
            a[:] = grid.area
        v = ds.createVariable("region_weight", "f8", grid.dims, zlib=True, complevel=4)
        v.units = "1"
        v.long_name = "horizontal weight of the perturbation (0 outside the region, 1 at full strength)"
        v.valid_range = np.array([0.0, 1.0])
        v.comment = ("largest weight of any perturbation block at each cell: taper x elevation band x land "
                     "weight, as initgen apply uses it; block i is recipe key perturbations[i]")
        if not coord_vars:
            v.coordinates = f"{lat_name} {lon_name}"
        if true_area:
            v.cell_measures = "area: cell_area"
        v.initgen_recipe_name = rec.name
        v.initgen_recipe_sha256 = rec.sha256
        v.initgen_blocks = ", ".join(b["name"] for b in rec.data["perturbations"])
        for i, blk in enumerate(rec.data["perturbations"]):
            reg = blk["region"]
            v.setncattr(f"initgen_block{i}_name", blk["name"])
            v.setncattr(f"initgen_block{i}_taper_km", float(reg["taper_km"]))
            v.setncattr(f"initgen_block{i}_taper_placement", reg["taper_placement"])
            elev = reg.get("elevation")
            if elev:
                v.setncattr(f"initgen_block{i}_elevation_min_m", float(elev["min_m"]))
                v.setncattr(f"initgen_block{i}_elevation_ramp_m", float(elev["ramp_m"]))
                if elev.get("max_m") is not None:
                    v.setncattr(f"initgen_block{i}_elevation_max_m", float(elev["max_m"]))
        v[:] = np.clip(w, 0.0, 1.0)

    data = None
    if png is not None:  # draw first: a failure leaves no mask file behind
        store = NetCDFStore(input)
        try:
            land, land_what = _land_for_map(api._model(store, lay, rec), store)
        finally:
            store.close()
        geoms = _region_geoms(rec, allow_outside_paths)
        data = _map_figure(grid, w, w, geoms,
                           f"Region weight w(x): recipe {rec.name}", "weight (1)", vmin=0.0, vmax=1.0, land=land,
                           land_what=land_what or "", taper_edge=_taper_edge(plan, rec, geoms))
    create_netcdf(output, build, fmt="NETCDF4", force=force)
    if data is not None:
        write_atomic_bytes(png, data)
    return output


__all__ = ["compare", "compare_text", "compare_markdown", "verify", "preview_report", "write_mask",
           "BLOCK_ELEMENTS", "FIG_PIXELS"]
