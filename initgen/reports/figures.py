"""Figures of the preview and compare reports: maps, change against depth, area-weighted histograms.

Every function takes arrays that the caller read from the ledger or the plan (never recomputes a
number of the ledger) and returns PNG bytes of :data:`FIG_PIXELS` pixels. matplotlib is imported
inside the functions that draw (it is heavy, and initgen must import without it); drawing uses
the object interface on an Agg canvas, so an interactive session's pyplot state is left alone.

Maps draw the model's own coastline (the 0.5 contour of the land fraction or land mask read from
the file, no outside data), the region outline, the outer edge of the taper, sea cells in grey,
and changes on a diverging colour scale centred on zero. Regular grids are drawn as cells,
curvilinear grids as cells in their own 2-D coordinates and point grids as points.
"""

from __future__ import annotations

import io
import re

import numpy as np
import shapely
from shapely import affinity

#: Size of every PNG figure in inches and its resolution: every figure is 1000 x 640 pixels.
FIG_SIZE_IN = (10.0, 6.4)
FIG_DPI = 100
FIG_PIXELS = (int(FIG_SIZE_IN[0] * FIG_DPI), int(FIG_SIZE_IN[1] * FIG_DPI))  # (width, height)

SEA_GREY = "0.78"
FONT = {"title": 13, "label": 12, "tick": 11, "legend": 10, "small": 10}


def short_label(name: str) -> str:
    """A short label for a per-layer variable set: ``T1+T2+T3+T4`` -> ``T1..4``.

    Names that are not a numbered series keep their first and last member (``a+...+z (3)``);
    single names are returned unchanged.
    """
    parts = str(name).split("+")
    if len(parts) == 1:
        return str(name)
    found = [re.fullmatch(r"(.*?)(\d+)", p) for p in parts]
    if all(found) and len({m.group(1) for m in found}) == 1:
        nums = [int(m.group(2)) for m in found]
        if nums == list(range(nums[0], nums[0] + len(nums))):
            return f"{found[0].group(1)}{found[0].group(2)}..{found[-1].group(2)}"
    return f"{parts[0]}+...+{parts[-1]} ({len(parts)})"


def figure(nrows: int = 1, ncols: int = 1):
    """A new Agg figure and its axes (always a 2-D array)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg  # heavy: matplotlib loads only when drawing
    from matplotlib.figure import Figure

    fig = Figure(figsize=FIG_SIZE_IN, dpi=FIG_DPI)
    FigureCanvasAgg(fig)
    return fig, fig.subplots(nrows, ncols, squeeze=False)


def png_bytes(fig) -> bytes:
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format="png", dpi=FIG_DPI)
        return buf.getvalue()
    finally:
        fig.clear()  # free the drawing at once


# ---------------------------------------------------------------------------------------------
# maps
# ---------------------------------------------------------------------------------------------


def frame_centre(grid, w: np.ndarray) -> float:
    """Centre longitude of the frame: the circular mean of the region, in the grid's convention."""
    lon = grid.lon[w > 0] if np.any(w > 0) else grid.lon.ravel()
    r = np.deg2rad(lon)
    c = float(np.rad2deg(np.arctan2(np.sin(r).mean(), np.cos(r).mean())))
    lo, hi = float(np.min(grid.lon)), float(np.max(grid.lon))
    for k in (0, 1, -1, 2):  # keep the grid's own longitudes where they already surround the region
        if lo <= c + 360.0 * k <= hi:
            return c + 360.0 * k
    return c


def to_frame(lon, centre: float):
    return centre + np.mod(np.asarray(lon, float) - centre + 180.0, 360.0) - 180.0


def _seam(x: np.ndarray) -> np.ndarray:
    """Cells of a curvilinear grid next to a jump of more than 180 degrees (the frame's seam)."""
    seam = np.zeros(x.shape, bool)
    jx = np.abs(np.diff(x, axis=1)) > 180.0
    jy = np.abs(np.diff(x, axis=0)) > 180.0
    seam[:, 1:] |= jx
    seam[:, :-1] |= jx
    seam[1:, :] |= jy
    seam[:-1, :] |= jy
    return seam


def draw_field(ax, grid, field: np.ndarray, centre: float, **kw):
    """Cells for regular and curvilinear grids, points for point grids; returns the artist."""
    f = np.ma.masked_invalid(np.asarray(field, float))
    if grid.kind == "regular":
        x = to_frame(grid.lon1d, centre)
        ix, iy = np.argsort(x), np.argsort(grid.lat1d)
        return ax.pcolormesh(x[ix], grid.lat1d[iy], f[np.ix_(iy, ix)], shading="nearest", **kw)
    x = to_frame(grid.lon, centre)
    if grid.kind == "curvilinear":
        return ax.pcolormesh(x, grid.lat, np.ma.masked_where(_seam(x), f), shading="nearest", **kw)
    size = max(6.0, min(60.0, 30000.0 / max(grid.size, 1)))
    ok = ~np.ma.getmaskarray(f)
    return ax.scatter(x[ok], grid.lat[ok], c=f[ok], s=size, marker="o", linewidths=0, **kw)


def contour_half(ax, grid, values: np.ndarray, centre: float, **kw) -> bool:
    """Draw the 0.5 contour of ``values`` (0..1 on the grid) in the grid's own coordinates.

    Regular grids use the cell centres, curvilinear grids their 2-D coordinates (cells at the
    frame's seam left out), point grids a Delaunay triangulation of the points. Returns False
    when there is no contour to draw.
    """
    v = np.asarray(values, float)
    if not np.any(np.isfinite(v)) or np.nanmin(v) >= 0.5 or np.nanmax(v) < 0.5:
        return False
    try:
        if grid.kind == "regular":
            x = to_frame(grid.lon1d, centre)
            ix, iy = np.argsort(x), np.argsort(grid.lat1d)
            ax.contour(x[ix], grid.lat1d[iy], np.nan_to_num(v[np.ix_(iy, ix)], nan=0.0), levels=[0.5], **kw)
        elif grid.kind == "curvilinear":
            x = to_frame(grid.lon, centre)
            ax.contour(x, grid.lat, np.ma.masked_where(_seam(x), np.nan_to_num(v, nan=0.0)), levels=[0.5], **kw)
        else:
            from matplotlib.tri import Triangulation  # heavy: matplotlib loads only when drawing

            x = to_frame(grid.lon, centre).ravel()
            tri = Triangulation(x, grid.lat.ravel())
            ax.tricontour(tri, np.nan_to_num(v.ravel(), nan=0.0), levels=[0.5], **kw)
    except (ValueError, RuntimeError):  # too few points or a degenerate triangulation: no line
        return False
    return True


def outline(ax, geoms: list, centre: float) -> None:
    """Draw region outlines (shapely geometries in degrees) in the frame, joined across 180 degrees."""

    styles = ["-", "--", ":", "-."]
    for i, (name, geom) in enumerate(geoms):
        if geom is None:
            continue
        parts = []
        for poly in getattr(geom, "geoms", [geom]):
            k = round((poly.centroid.x - centre) / 360.0)
            parts.append(affinity.translate(poly, xoff=-360.0 * k))
        merged = shapely.unary_union(parts)
        first = True
        for poly in getattr(merged, "geoms", [merged]):
            if not hasattr(poly, "exterior"):
                continue
            for ring in [poly.exterior, *poly.interiors]:
                xs, ys = np.asarray(ring.coords).T
                ax.plot(xs, ys, color="k", lw=2.0, ls=styles[i % len(styles)],
                        label=f"region: {name}" if first else None)
                first = False


def frame_bounds(grid, w: np.ndarray, centre: float) -> tuple[float, float, float, float]:
    """(x0, x1, y0, y1) of the map frame: the region's cells with a margin, within the grid's extent."""
    gx = to_frame(grid.lon, centre)
    gy = grid.lat
    inside = w > 0
    if not np.any(inside):
        return float(gx.min()), float(gx.max()), float(gy.min()), float(gy.max())
    x = to_frame(grid.lon[inside], centre)
    y = grid.lat[inside]
    mx = max(2.0, 0.25 * float(x.max() - x.min()))
    my = max(2.0, 0.25 * float(y.max() - y.min()))
    return (max(float(gx.min()), float(x.min()) - mx), min(float(gx.max()), float(x.max()) + mx),
            max(float(gy.min()), float(y.min()) - my), min(float(gy.max()), float(y.max()) + my))


class _View:
    """The part of a grid a map frame shows (what :func:`draw_field` and :func:`contour_half` need)."""

    def __init__(self, kind, lon, lat, lon1d=None, lat1d=None):
        self.kind, self.lon, self.lat, self.lon1d, self.lat1d = kind, lon, lat, lon1d, lat1d
        self.size = int(np.size(lon))


def crop(grid, centre: float, bounds: tuple, arrays: list) -> tuple:
    """The grid and the arrays (grid-shaped, or None) cut to the frame plus one cell, so that a large
    grid is drawn only where the map looks (the cut is for drawing only; every value is the file's)."""
    x0, x1, y0, y1 = bounds
    if grid.kind == "regular":
        x = to_frame(grid.lon1d, centre)
        dx = float(np.max(np.abs(np.diff(np.sort(x))))) if x.size > 1 else 1.0
        dy = float(np.max(np.abs(np.diff(np.sort(grid.lat1d))))) if grid.lat1d.size > 1 else 1.0
        ix = np.flatnonzero((x >= x0 - dx) & (x <= x1 + dx))
        iy = np.flatnonzero((grid.lat1d >= y0 - dy) & (grid.lat1d <= y1 + dy))
        lon, lat = np.meshgrid(grid.lon1d[ix], grid.lat1d[iy])
        view = _View("regular", lon, lat, grid.lon1d[ix], grid.lat1d[iy])
        return view, [None if a is None else np.asarray(a)[np.ix_(iy, ix)] for a in arrays]
    x = to_frame(grid.lon, centre)
    near = (x >= x0 - 1.0) & (x <= x1 + 1.0) & (grid.lat >= y0 - 1.0) & (grid.lat <= y1 + 1.0)
    if grid.kind == "curvilinear":
        if not np.any(near):
            return grid, arrays
        rows, cols = np.flatnonzero(near.any(axis=1)), np.flatnonzero(near.any(axis=0))
        sel = (slice(max(rows[0] - 1, 0), rows[-1] + 2), slice(max(cols[0] - 1, 0), cols[-1] + 2))
    else:
        sel = near
    view = _View(grid.kind, grid.lon[sel], grid.lat[sel])
    return view, [None if a is None else np.asarray(a)[sel] for a in arrays]


def map_figure(grid, field, w, geoms, title: str, label: str, *, land=None, land_what: str = "land fraction",
               taper_edge=None, diverging: bool = False, vmin=None, vmax=None) -> bytes:
    """One map of ``field`` on the model grid.

    Parameters
    ----------
    grid : initgen.io.model.Grid
        The model grid; the map is drawn from the part its frame shows (:func:`crop`).
    field : numpy.ndarray
        Values in the grid's horizontal shape (NaN: nothing to show).
    w : numpy.ndarray
        The region weight (frames the map on the region).
    geoms : list of (name, shapely geometry or None)
        Region outlines from the plan.
    land : numpy.ndarray, optional
        Land fraction 0..1 (or a 0/1 land indicator) from the file: cells with no land are
        drawn grey, and its 0.5 contour is the coastline.
    taper_edge : numpy.ndarray, optional
        1 where the taper weight is above 0 (before elevation and land), 0 elsewhere: its 0.5
        contour is drawn as the taper's outer edge.
    diverging : bool
        A red-blue scale centred on zero (for changes); else a sequential scale from 0.
    """
    from matplotlib.colors import ListedColormap  # heavy: matplotlib loads only when drawing
    from matplotlib.lines import Line2D
    from matplotlib.ticker import FuncFormatter

    east = float(np.nanmin(grid.lon)) >= 0.0  # longitudes 0..360 in the file, else -180..180

    def wrap(x):
        return round(x % 360.0, 6) if east else round((x + 180.0) % 360.0 - 180.0, 6)

    fig, axes = figure()
    ax = axes[0, 0]
    fig.subplots_adjust(left=0.08, right=0.99, bottom=0.17, top=0.93)
    centre = frame_centre(grid, w)
    bounds = frame_bounds(grid, w, centre)
    grid, (field, land, taper_edge) = crop(grid, centre, bounds, [np.asarray(field, float), land, taper_edge])
    handles = []
    sea = None
    if land is not None:
        sea = ~(np.nan_to_num(np.asarray(land, float), nan=0.0) > 0)
        if np.any(sea):
            draw_field(ax, grid, np.where(sea, 1.0, np.nan), centre, cmap=ListedColormap([SEA_GREY]),
                       vmin=0.0, vmax=1.0)
        field = np.where(sea, np.nan, field)
    if diverging:
        amax = float(np.nanmax(np.abs(field))) if np.any(np.isfinite(field)) else 0.0
        amax = amax or 1.0
        kw = dict(cmap="RdBu_r", vmin=-amax, vmax=amax)
    else:
        kw = dict(cmap="YlGnBu", vmin=vmin, vmax=vmax)
    art = draw_field(ax, grid, field, centre, **kw)
    cb = fig.colorbar(art, ax=ax, pad=0.02)
    cb.set_label(label, fontsize=FONT["label"])
    cb.ax.tick_params(labelsize=FONT["tick"])
    if land is not None and contour_half(ax, grid, land, centre, colors="0.15", linewidths=1.0):
        handles.append(Line2D([], [], color="0.15", lw=1.0, label=f"coastline ({land_what} 0.5)"))
    outline(ax, geoms, centre)
    if taper_edge is not None and contour_half(ax, grid, taper_edge, centre, colors="darkorange", linewidths=1.8,
                                               linestyles="--"):
        handles.append(Line2D([], [], color="darkorange", lw=1.8, ls="--", label="taper outer edge"))
    ax.set_xlim(bounds[0], bounds[1])
    ax.set_ylim(bounds[2], bounds[3])
    ax.xaxis.set_major_formatter(FuncFormatter(lambda x, _pos: f"{wrap(x):g}"))  # the file's own convention
    if sea is not None and np.any(sea):  # name the grey only where the frame shows some
        (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
        sx, sy = to_frame(grid.lon[sea], centre), grid.lat[sea]
        if np.any((sx >= x0) & (sx <= x1) & (sy >= y0) & (sy <= y1)):
            handles.insert(0, Line2D([], [], ls="", marker="s", ms=10, color=SEA_GREY, label="sea (no land)"))
    ax.set_xlabel("longitude (degrees east)", fontsize=FONT["label"])
    ax.set_ylabel("latitude (degrees north)", fontsize=FONT["label"])
    ax.tick_params(labelsize=FONT["tick"])
    ax.set_title(title, fontsize=FONT["title"])
    own, _ = ax.get_legend_handles_labels()
    if own or handles:
        items = own + handles  # below the map, so that it never hides a cell
        ax.legend(handles=items, loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=min(len(items), 4),
                  fontsize=FONT["legend"], frameon=False)
    return png_bytes(fig)


# ---------------------------------------------------------------------------------------------
# change against depth
# ---------------------------------------------------------------------------------------------


def profile_figure(panels: list, title: str) -> bytes | None:
    """Mean change against depth, one panel per variable, each layer drawn over its extent.

    ``panels``: dicts with ``label``, ``units``, ``top_m``, ``bottom_m`` (per layer),
    ``realised`` (per layer, None where the ledger has no value) and optionally ``imposed``
    (per layer: the target f(z) x A from the plan) and ``node_m``. A layer whose extent the file
    does not give (nodes only: top and bottom NaN) is drawn as a point at its node.
    """
    panels = [p for p in panels if any(v is not None for v in p["realised"])]
    if not panels:
        return None
    fig, axes = figure(1, len(panels))
    fig.subplots_adjust(left=0.08, right=0.98, bottom=0.11, top=0.82, wspace=0.32)
    for ax, p in zip(axes[0], panels):
        top, bot = np.asarray(p["top_m"], float), np.asarray(p["bottom_m"], float)
        node = np.asarray(p.get("node_m", 0.5 * (top + bot)), float)
        known = np.isfinite(top) & np.isfinite(bot)

        def draw(k, v, label, **kw):
            if known[k]:
                ax.plot([v, v], [top[k], bot[k]], label=label, **kw)
            else:      # extent not given by the file: a point at the node
                ax.plot([v], [node[k]], marker="o", ls="none", color=kw["color"], label=label)

        first = True
        for k, v in enumerate(p["realised"]):
            if v is None:
                continue
            draw(k, v, "realised (ledger, mean over region)" if first else None, color="C0", lw=4,
                 solid_capstyle="butt")
            first = False
        imp = p.get("imposed")
        if imp is not None:
            first = True
            for k, v in enumerate(imp):
                draw(k, v, "imposed target f(z) x A (plan)" if first else None, color="C1", lw=2, ls="--")
                first = False
        edges = np.concatenate([top[known], bot[known]])
        for z in np.unique(edges):
            ax.axhline(z, color="0.85", lw=0.6, zorder=0)
        ax.axvline(0.0, color="0.4", lw=0.8)
        deepest = float(np.nanmax(np.concatenate([bot[known], node * (1.1 if not known.all() else 1.0)])))
        ax.set_ylim(deepest, 0.0)  # depth increases downward, to the deepest layer's bottom
        vals = [v for v in list(p["realised"]) + list(imp if imp is not None else []) if v is not None]
        lo, hi = min(vals + [0.0]), max(vals + [0.0])
        pad = 0.08 * (hi - lo) or 0.5
        ax.set_xlim(lo - pad, hi + pad)
        ax.set_xlabel(f"mean change ({p['units']})", fontsize=FONT["label"])
        ax.set_ylabel("depth (m)", fontsize=FONT["label"])
        ax.tick_params(labelsize=FONT["tick"])
        ax.set_title(p["label"], fontsize=FONT["label"])
    handles = {}
    for ax in axes[0]:
        for h, lab in zip(*ax.get_legend_handles_labels()):
            handles.setdefault(lab, h)
    fig.legend(list(handles.values()), list(handles), loc="upper center", ncol=len(handles),
               bbox_to_anchor=(0.5, 0.93), fontsize=FONT["legend"], frameon=False)
    fig.suptitle(title, fontsize=FONT["title"])
    return png_bytes(fig)


# ---------------------------------------------------------------------------------------------
# area-weighted histograms
# ---------------------------------------------------------------------------------------------


def histogram_figure(panels: list, title: str, area_units: str = "km2", area_what: str = "land area") -> bytes | None:
    """Small multiples: per panel (layer) the area (``area_what`` in ``area_units``) per bin of the change.

    ``panels``: (title, bin edges, area per bin, units of the change).
    """
    if not panels:
        return None
    n = len(panels)
    ncols = min(3, n)
    nrows = -(-n // ncols)
    fig, axes = figure(nrows, ncols)
    fig.subplots_adjust(left=0.11, right=0.98, bottom=0.1, top=0.86, wspace=0.35, hspace=0.65)
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    small = FONT["small"] if nrows > 1 else FONT["tick"]
    for ax, (name, e, a, units) in zip(axes.ravel(), panels):
        ax.stairs(a, e, fill=True, color="C1", alpha=0.85)
        ax.set_title(name, fontsize=small + 1)
        ax.set_xlabel(f"change ({units})", fontsize=small)
        ax.tick_params(labelsize=small - 1)
        if e[0] <= 0.0 <= e[-1]:
            ax.axvline(0.0, color="0.4", lw=0.8)
    fig.supylabel(f"{area_what} ({area_units})", fontsize=FONT["label"])
    fig.suptitle(title, fontsize=FONT["title"])
    return png_bytes(fig)


__all__ = ["FIG_PIXELS", "short_label", "map_figure", "profile_figure", "histogram_figure"]
