"""The mask file: the horizontal weight field as a CF netCDF file on the model grid (``initgen mask``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from initgen import api
from initgen._version import __version__
from initgen.errors import InputError
from initgen.io.atomic import check_output_path, create_netcdf, write_atomic_bytes
from initgen.outputs import provenance as prov
from initgen.reports.maps import _land_for_map, _map_figure, _region_geoms, _taper_edge


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
    with api.open_plan(recipe, input, layout, allow_outside_paths=allow_outside_paths) as p:
        rec, plan, grid = p.recipe, p.plan, p.model.grid
        w = plan.full(np.max([b.weight for b in plan.blocks], axis=0))
        land, land_what = _land_for_map(p.model, p.store) if png is not None else (None, None)
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
        v.initgen_blocks = ", ".join(b.name for b in rec.view.perturbations)
        for i, blk in enumerate(rec.view.perturbations):
            reg = blk.region
            v.setncattr(f"initgen_block{i}_name", blk.name)
            v.setncattr(f"initgen_block{i}_taper_km", float(reg.taper_km))
            v.setncattr(f"initgen_block{i}_taper_placement", reg.taper_placement)
            elev = reg.elevation
            if elev:
                v.setncattr(f"initgen_block{i}_elevation_min_m", float(elev.min_m))
                v.setncattr(f"initgen_block{i}_elevation_ramp_m", float(elev.ramp_m))
                if elev.max_m is not None:
                    v.setncattr(f"initgen_block{i}_elevation_max_m", float(elev.max_m))
        v[:] = np.clip(w, 0.0, 1.0)

    data = None
    if png is not None:  # draw first: a failure leaves no mask file behind
        geoms = _region_geoms(rec, allow_outside_paths)
        data = _map_figure(grid, w, w, geoms,
                           f"Region weight w(x): recipe {rec.name}", "weight (1)", vmin=0.0, vmax=1.0, land=land,
                           land_what=land_what or "", taper_edge=_taper_edge(plan, rec, geoms))
    create_netcdf(output, build, fmt="NETCDF4", force=force)
    if data is not None:
        write_atomic_bytes(png, data)
    return output
