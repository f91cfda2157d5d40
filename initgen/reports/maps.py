"""What the report maps show, gathered from the plan and the file: the regions' shapes, the land
that frames them, the taper's outer edge and the unit of cell areas. Drawn by :mod:`initgen.reports.figures`.
"""

from __future__ import annotations

import numpy as np

from initgen.engine import fields
from initgen.engine.fields import MIN_WEIGHT, region_geometry
from initgen.errors import InputError
from initgen.reports.figures import map_figure
from initgen.science.regions import mask as regions_mask
from initgen.science.regions.factors import land_weight


def _map_figure(grid, field, w, geoms, title: str, label: str, *, cmap=None, vmin=None, vmax=None, land=None,
                land_what="land fraction", taper_edge=None) -> bytes:
    """A map (see :func:`initgen.reports.figures.map_figure`); ``cmap='RdBu_r'`` asks for the diverging scale."""

    return map_figure(grid, field, w, geoms, title, label, land=land, land_what=land_what, taper_edge=taper_edge,
                      diverging=cmap == "RdBu_r", vmin=vmin, vmax=vmax)


def _region_geoms(rec, allow_outside: bool) -> list:
    """(block name, shapely geometry) per perturbation block; None where the outline cannot be rebuilt."""

    out = []
    for i, block in enumerate(rec.view.perturbations):
        try:
            geom = region_geometry(block.region, rec, f"perturbations[{i}].region", allow_outside)
        except InputError:
            geom = None
        out.append((block.name, geom))
    return out


def _land_for_map(model, store) -> tuple:
    """(land 0..1 on the whole grid, what it is) read from the file, for sea shading and the coastline.

    The land fraction, else the land mask (at the layout's threshold 0.5), else where the top
    soil temperature holds a valid value; (None, None) when the file has none of them.
    """

    full = model.grid.full_window()
    if model.role("land_fraction") is not None:
        return land_weight(fraction=fields.land_fraction(model, full)), "land fraction"
    if model.role("land_mask") is not None:
        return land_weight(mask=fields.read_window(model, model.role("land_mask"), full)), "land mask"
    soil = model.role("soil_temperature")
    if soil is not None:
        hkey = {d: slice(0, n) for d, n in zip(model.grid.dims, model.grid.shape)}
        t = np.asarray(soil.read(store, hkey), float).reshape((-1,) + tuple(model.grid.shape))[0]
        return np.isfinite(t).astype(float), "valid soil temperature"
    return None, None


def _taper_edge(plan, rec, geoms: list) -> np.ndarray | None:
    """1 where any block's taper weight (the plan's own function on the plan's window) is above 0."""

    edge = None
    for (name, geom), blk in zip(geoms, rec.view.perturbations):
        reg = blk.region
        if geom is None or reg.taper_km <= 0:
            continue
        t = regions_mask.taper_weight(plan.lon, plan.lat, geom, reg.taper_km, placement=reg.taper_placement) \
            >= MIN_WEIGHT
        edge = t if edge is None else edge | t
    return None if edge is None else plan.full(edge.astype(float))


def _area_units(grid) -> tuple[float, str]:
    """(divisor, unit) for areas in the histograms: km2, or cells when the file has no cell areas."""
    if str(grid.area_source).startswith("equal"):
        return 1.0, "cells, equal weights: the file has no cell areas"
    return 1.0e6, "km2"
