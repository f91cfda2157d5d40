"""The preview report: Markdown, an HTML page and PNG figures of what ``apply`` would change
(``initgen preview --report``).

Every number comes from the ledger (the record ``apply`` writes into the provenance), so the
report, the terminal table and the provenance never disagree. Figures are drawn by
:mod:`initgen.reports.figures` (matplotlib's Agg backend, imported only when drawing); this module
gathers what they show from the plan and the ledger.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from initgen import api
from initgen._version import __version__
from initgen.engine import plan as plan_mod
from initgen.engine.ledger_view import SOIL_ROLES, LedgerView
from initgen.engine.persistence import line as persistence_line
from initgen.errors import InputError
from initgen.io.atomic import sha256_file, write_atomic_bytes, write_atomic_text
from initgen.reports.common import CAUTION
from initgen.reports.figures import histogram_figure, profile_figure, short_label
from initgen.reports.html_report import CLAMP_TEXT, FLAG_TEXT, MEAN_REGION, preview_page
from initgen.reports.maps import _area_units, _land_for_map, _map_figure, _region_geoms, _taper_edge
from initgen.text import value_or_dash


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
        eff = plan.effective_anomaly(b)
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

    def __init__(self, inner, model, ledger, plan, bins: int = 240):
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
        for name, var in LedgerView.from_dict(ledger).variables.items():
            edges = []
            for r in var.rows:
                lo, hi = r.min, r.max
                if lo is None or hi is None:
                    edges.append(None)
                    continue
                if hi - lo < 1e-9:
                    lo, hi = lo - 0.5, hi + 0.5
                edges.append(np.linspace(lo, hi, bins + 1))
            n = len(edges)
            self.hist[name] = {"edges": edges, "area": [None if e is None else np.zeros(bins) for e in edges],
                               "cells": np.zeros(n, np.int64), "area_sum": np.zeros(n),
                               "lo": np.full(n, np.inf), "hi": np.full(n, -np.inf), "units": var.units or ""}

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


def _histogram_panels(capture: "_ChangeCapture", ledger: LedgerView, roles: tuple, grid) -> tuple[list, list]:
    """(panels, sentences): a panel per layer with several values of change, a sentence per single-valued one."""

    div, unit = _area_units(grid)
    panels, sentences = [], []
    for name, var in ledger.variables.items():
        if var.role not in roles or name not in capture.hist:
            continue
        h = capture.hist[name]
        rows = var.rows
        layered = var.layered and bool(rows)
        for i, (e, a) in enumerate(zip(h["edges"], h["area"])):
            if a is None or h["cells"][i] == 0:
                continue
            depth = rows[i].node_depth_m if i < len(rows) else None
            title = short_label(name) + (f" layer {i + 1}" if layered else "") + \
                (f" ({depth:.3g} m)" if depth is not None else "")
            lo, hi = h["lo"][i], h["hi"][i]
            if hi - lo <= 1e-9 * max(1.0, abs(hi)):
                sentences.append(f"{title}: every one of the {rows[i].cells_changed} changed cells (ledger) "
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


def _profile_panels(ledger: LedgerView, model, imposed) -> list:
    """Per layered soil variable of the ledger: layer extents, realised means and (for temperature) the target."""

    layers = model.layers
    if layers is None:
        return []
    out = []
    for name, var in ledger.variables.items():
        rows = var.rows if var.layered else ()
        if not rows or var.role not in SOIL_ROLES or len(rows) != len(layers.top_m):
            continue
        imp = imposed if var.role == "soil_temperature" and imposed is not None \
            and len(imposed) == len(rows) else None
        out.append({"label": f"{short_label(name)} ({var.role})", "units": var.units or "",
                    "top_m": layers.top_m, "bottom_m": layers.bottom_m, "node_m": layers.node_m,
                    "realised": [r.area_weighted_mean for r in rows],
                    "imposed": None if imp is None else list(imp)})
    return out


def _md_table(header: list, rows: list) -> list[str]:
    out = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(str(c) for c in r) + " |" for r in rows]
    return out


def _ledger_markdown(ledger: LedgerView) -> list[str]:
    """The ledger tables, with the numbers formatted as ``api.ledger_text`` formats them."""

    out = []
    reg = ledger.region
    out.append(f"Region: {reg.cells_weight_above_0} cells with weight > 0 ({reg.cells_full_weight} at full "
               f"weight), " + (f"area {reg.area_m2 / 1e6:,.0f} km2." if reg.area_m2 is not None
                             else f"area {reg.area_is or 'not known'}."))
    out.append("")
    for name, var in ledger.variables.items():
        label = short_label(name)
        out.append(f"**{label}** ({var.role}, change in {var.units})" + (f"; variables {name}" if label != name
                                                                           else ""))
        out.append("")
        body = []
        for r in var.rows:
            depth, am = r.node_depth_m, r.area_weighted_mean
            body.append([r.layer, f"{depth:.3f}" if depth is not None else "-", r.cells_changed,
                         f"{am:.4g}" if am is not None else "-", value_or_dash(r.min), value_or_dash(r.max)])
        out += _md_table(["layer", "depth_m", "changed", "mean over region", "min", "max"], body)
        out.append("")
    out += [MEAN_REGION + ".", ""]
    return out


def _block_rows(ledger: LedgerView, rec) -> list:
    """One row per perturbation block (the ledger's numbers, the recipe's taper), for the Markdown
    and the HTML page alike."""
    rows = []
    for b, blk in zip(ledger.blocks, rec.data["perturbations"]):
        an = b.anomaly_K or {}
        factors = b.layer_factors
        rows.append([b.name, ", ".join(b.targets), b.cells_weight_above_0,
                     f"{blk['region']['taper_km']:g} km {blk['region']['taper_placement']}",
                     f"{value_or_dash(an.get('min'))}..{value_or_dash(an.get('max'))}" if an else "donor",
                     value_or_dash(b.surface_factor),
                     ", ".join(f"{f:.3g}" for f in factors) if factors else "-"])
    return rows


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
    if ledger is None:   # the same ledger apply would write (a run closes a donor file: its own plan)
        ledger = api.preview(recipe, input, layout, member=member, allow_outside_paths=allow_outside_paths)
    ledger = LedgerView.from_dict(ledger)
    with api.open_plan(recipe, input, layout, member=member, allow_outside_paths=allow_outside_paths) as p:
        rec, lay, store, model, plan, mem = p.recipe, p.layout, p.store, p.model, p.plan, p.member
        grid = model.grid
        w = plan.full(np.max([b.weight for b in plan.blocks], axis=0))
        capture = _ChangeCapture(store, model, ledger, plan)
        plan_mod.run(plan, capture, write=True)
        land, land_what = _land_for_map(model, store)
    geoms = _region_geoms(rec, allow_outside_paths)
    edge = _taper_edge(plan, rec, geoms)
    surf = np.zeros(grid.shape)
    donors = []
    for b in plan.blocks:
        if b.anomaly is None:
            donors.append(b.name)
            continue
        surf += plan.full(plan.effective_anomaly(b) * b.weight * b.surface_factor)  # as engine/plan.py applies it to skin and snow temperature
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
    for name, var in ledger.variables.items():
        field = capture.maps.get(name)
        if field is None:
            continue
        field = plan.full(field)
        fname = f"change_{short_label(name).replace('..', '-').replace('+', '_').replace(' ', '')}.png"
        top = " top layer" if var.layered and var.rows else ""
        figures[fname] = _map_figure(grid, np.where(w > 0, field, 0.0), w, geoms,
                                     f"Change of {short_label(name)}{top} ({var.role}): {who}",
                                     f"change ({var.units or ''})", cmap="RdBu_r", **mk)
        captions[fname] = (f"Change of {short_label(name)}{top} ({var.role}) as apply would write it (after physics and "
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
    blocks = _block_rows(ledger, rec)
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
    body = _block_rows(ledger, rec)
    L += _md_table(["block", "targets", "cells w>0", "taper", "anomaly K", "surface factor", "layer factors"], body)
    L += ["", "## What would change (the ledger)", ""]
    L += _ledger_markdown(ledger)
    L += ["## Clamps", ""]
    if ledger.clamps:
        L += _md_table(["rule", "cells", "what it means"],
                       [[k, v, CLAMP_TEXT.get(k, "-")] for k, v in ledger.clamps.items()])
    else:
        L.append("No value was clamped.")
    L += ["", "## Flags", ""]
    if ledger.flags:
        L += _md_table(["rule", "cells", "what it means"],
                       [[k, v, FLAG_TEXT.get(k, "-")] for k, v in ledger.flags.items()])
    else:
        L.append("No cell was flagged.")
    L += ["", "## Physics: energy and phase change", ""]
    phys = ledger.physics
    L.append(f"Mode: `{phys.mode}`.")
    totals, per_layer, depths = phys.totals, phys.per_layer(), ledger.soil_node_depths
    if totals:
        L += [""] + _md_table(["quantity (region total)", "value"], [[k, f"{v:.4g}"] for k, v in totals])
    if per_layer:
        n = max(len(v) for _, v in per_layer)
        rows = []
        for i in range(n):
            d = depths[i] if depths and i < len(depths) else None
            rows.append([i, f"{d:.3f}" if d is not None else "-"] +
                        [f"{v[i]:.4g}" if i < len(v) else "-" for _, v in per_layer])
        L += ["", "Per layer, per m2 of region:", ""]
        L += _md_table(["layer", "depth_m"] + [k for k, _ in per_layer], rows)
    if ledger.cells_not_in_phase_equilibrium_before:
        L += ["", f"Note: {ledger.cells_not_in_phase_equilibrium_before} region layer-cells were not in phase "
                  "equilibrium before the change."]
    if ledger.notes:  # every guess or inference, where the report is read (the HTML page has the same table)
        L += ["", "## What initgen inferred", ""]
        L += _md_table(["what", "how"], [[k.replace("_", " "), v] for k, v in ledger.notes.items()])
    L += ["", "## Persistence estimate", ""]
    est = ledger.persistence
    if est is None:
        L.append("PERSISTENCE ESTIMATE: not in this ledger (no `persistence` key).")
    else:
        L.append(persistence_line(est.to_dict()) + ".")  # persistence.py words the estimate once
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
