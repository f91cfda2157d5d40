"""The error catalogue, continued: layer geometry, CF roles, records and grid files (issue 14).

Same promise as the rest of the catalogue (``config/test_errors_recipe.py``,
``io/test_errors_files.py``, ``test_errors_cli.py``), checked by the same ``clikit.refused``: exit
2, one line on stderr naming the file, variable or layout key and what to do, no traceback,
nothing written, the input unchanged.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import netCDF4

import filemaker as fm
from clikit import refused
from clikit import LAYOUTS

RECIPE = """initgen_recipe: 1
name: cat-geometry
perturbations:
  - name: blk
    region: {include: [{box: {lon: [-180, 180], lat: [-80, 80]}}], use_land_fraction: false}
    anomaly: {constant_K: -2}
    profile: {kind: exponential, efolding_m: 0.5, evaluate: EVAL}
    targets: [soil_temperature]
"""


def _rec(folder, evaluate="layer_mean"):
    p = Path(folder) / "r.yaml"
    p.write_text(RECIPE.replace("EVAL", evaluate))
    return p


def _argv(folder, src, *extra):
    return ["apply", _rec(folder), "--input", src, "--output", Path(folder) / "out.nc", *extra]


def test_node_outside_its_layer_by_thickness(tmp_path, capsys):
    src = fm.nodes_and_thickness(tmp_path / "in.nc", thickness=(0.1, 0.1, 0.6, 1.0))
    lay = shutil.copy(LAYOUTS / "node-depths-and-thickness.yaml", tmp_path / "layout.yaml")
    refused(capsys, _argv(tmp_path, src, "--layout", lay), "node of layer 1", "variable layer",
            "variable dz", "disagree", folder=tmp_path)


def test_thicknesses_not_summing_to_the_interfaces(tmp_path, capsys):
    src = fm.layered_with_records(tmp_path / "in.nc", 1)
    lay = tmp_path / "layout.yaml"
    lay.write_text("initgen_layout: 1\nroles: {layer_thickness: {values: [0.1, 0.3, 0.5, 1.0], units: m}}\n")
    refused(capsys, _argv(tmp_path, src, "--layout", lay), "roles.layer_thickness", "lev_bnds",
            "do not sum to the interfaces", folder=tmp_path)


def test_depth_in_name_disagrees_with_long_name(tmp_path, capsys):
    src = fm.per_layer_depths_in_names(tmp_path / "in.nc")
    with netCDF4.Dataset(src, "a") as ds:
        ds["soil_temperature_10_40cm"].long_name = "soil temperature 10-50 cm"
    refused(capsys, _argv(tmp_path, src), "layer 1", "name of soil_temperature_10_40cm",
            "long_name of soil_temperature_10_40cm", "disagree", folder=tmp_path)


def test_layer_mean_on_node_depths_only(tmp_path, capsys):
    src = fm.regular(tmp_path / "in.nc")
    refused(capsys, _argv(tmp_path, src), "evaluate: layer_mean", "only node depths",
            "midpoints_between_nodes", folder=tmp_path)


def test_two_candidates_for_one_role(tmp_path, capsys):
    src = fm.regular(tmp_path / "in.nc")
    with netCDF4.Dataset(src, "a") as ds:
        v = ds.createVariable("tsoil_copy", "f4", ("time", "lev", "lat", "lon"))
        v.units, v.standard_name = "K", "soil_temperature"
        v[:] = 280.0
    refused(capsys, _argv(tmp_path, src), "two candidates for role soil_temperature", "'tsoil'",
            "'tsoil_copy'", "roles.soil_temperature", folder=tmp_path)


def test_several_records(tmp_path, capsys):
    src = fm.layered_with_records(tmp_path / "in.nc", 2)
    refused(capsys, _argv(tmp_path, src), "'tsoil'", "2 records along 'time'", "one state at a time",
            folder=tmp_path)


def test_grid_file_missing(tmp_path, capsys):
    restart, grid = fm.separate_grid(tmp_path / "restart.nc", tmp_path / "g.nc")
    lay = shutil.copy(LAYOUTS / "separate-grid-file.yaml", tmp_path / "layout.yaml")
    refused(capsys, _argv(tmp_path, restart, "--layout", lay), "grid_file.path 'grid.nc' does not exist",
            folder=tmp_path)


def test_grid_file_of_another_shape(tmp_path, capsys):
    restart, _ = fm.separate_grid(tmp_path / "restart.nc", tmp_path / "other.nc")
    fm.separate_grid(tmp_path / "r2.nc", tmp_path / "grid.nc", nx=6)
    lay = shutil.copy(LAYOUTS / "separate-grid-file.yaml", tmp_path / "layout.yaml")
    refused(capsys, _argv(tmp_path, restart, "--layout", lay), "grid_file", "dimension 'x' of length 6",
            "length 7", folder=tmp_path)


def test_layer_attributes_without_units(tmp_path, capsys):
    src = fm.per_layer_depths_in_names(tmp_path / "in.nc")
    with netCDF4.Dataset(src, "a") as ds:
        ds["soil_temperature_0_10cm"].layer_top = 0.0
        ds["soil_temperature_0_10cm"].layer_bottom = 10.0
    refused(capsys, _argv(tmp_path, src), "soil_temperature_0_10cm", "layer_top/layer_bottom",
            "depth_units", folder=tmp_path)
