"""Compare two netCDF files: a structural and value diff read block by block (``initgen compare``).

:func:`compare` returns the diff; :func:`compare_text` words it as a table for an email,
:func:`compare_markdown` as Markdown, and :func:`compare_report` writes the report folder (Markdown,
HTML page, figures).
"""

from __future__ import annotations

import warnings
from contextlib import ExitStack, contextmanager
from pathlib import Path
from typing import Iterable, Iterator

import numpy as np

from initgen._version import __version__
from initgen.config.recipe import load_layout
from initgen.errors import InputError
from initgen.io.atomic import sha256_file, write_atomic_text
from initgen.io.coding import unpack
from initgen.io.grid import open_model
from initgen.io.stores import NetCDFStore
from initgen.reports.common import (HISTORY, _attr_diffs, _attr_equal, _encoding, _is_layout_path, _lon_arc,
                                    _py, _short)
from initgen.reports.figures import histogram_figure
from initgen.science import blocks
from initgen.reports.html_report import compare_page
from initgen.reports.maps import _area_units, _land_for_map, _map_figure
from initgen.text import value_or_dash


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


@contextmanager
def _both_open(a, b) -> Iterator[tuple[NetCDFStore, NetCDFStore]]:
    """The two files open read-only; both closed again, also when the second cannot be opened."""
    with ExitStack() as stack:
        sa = NetCDFStore(a)
        stack.callback(sa.close)
        sb = NetCDFStore(b)
        stack.callback(sb.close)
        yield sa, sb


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
    for key in blocks.slab_blocks(ia.shape, blocks.COMPARE_BLOCK_ELEMENTS):
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
    Values are read in blocks of at most :data:`initgen.science.blocks.COMPARE_BLOCK_ELEMENTS` elements per
    file.
    """
    allow = [str(v) for v in (allow or ())]
    with _both_open(a, b) as (sa, sb):
        return _compare(sa, sb, allow, layout)


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
            lines.append(f"{label:<22} {v['cells_changed']:>9} {v['cells']:>9} {value_or_dash(v['max_abs_change']):>11} "
                         f"{value_or_dash(v['area_weighted_mean_change']):>12} {(v.get('units') or '-'):<7} {lon:<15} {lat}")
            for row in v.get("layers") or []:
                if row["cells_changed"]:
                    lines.append(f"  {v['layer_dim']}[{row['layer']}]".ljust(22) +
                                 f" {row['cells_changed']:>9} {row['cells']:>9} {value_or_dash(row['max_abs_change']):>11} "
                                 f"{value_or_dash(row['area_weighted_mean_change']):>12}")
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

    fields: dict = {}
    with _both_open(result["a"], result["b"]) as (sa, sb):
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
