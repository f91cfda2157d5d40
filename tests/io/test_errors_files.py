"""The error catalogue, part two: model files and the files a recipe names, refused for what
they hold (io): unreadable, missing variables or dimensions, odd units, values out of range,
a layout that does not match the file, water conventions and packed variables.

Same rows and promise as ``config/test_errors_recipe.py`` (:func:`clikit.refused`).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import netCDF4
import numpy as np

from initgen.cli import main
from initgen.demo import write_demo_restart

from filemaker import NODES, curvilinear, field_file, points, regular
from clikit import sha
from clikit import CATALOGUE_RECIPE as RECIPE
from clikit import CATALOGUE_LAYOUT as LAYOUT
from clikit import apply_argv, field_recipe, geo_recipe, layout, recipe, refused, run, swap


def custom_file(path, *, lon=None, lat=None, lon_units="degrees_east", lat_units="degrees_north",
                lon_name="lon", lat_name="lat", t_units="K", t_fill=True, t_values=None, coords=True):
    """A small regular file (lat 6 x lon 12 x 5 layers) with whatever is wrong with it."""
    lon = np.arange(15.0, 360.0, 30.0) if lon is None else np.asarray(lon, float)
    lat = np.arange(-75.0, 90.0, 30.0) if lat is None else np.asarray(lat, float)
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("lon", lon.size)
        ds.createDimension("lat", lat.size)
        ds.createDimension("lev", NODES.size)
        if coords:
            v = ds.createVariable(lon_name, "f8", ("lon",))
            v.units = lon_units
            v[:] = lon
            v = ds.createVariable(lat_name, "f8", ("lat",))
            v.units = lat_units
            v[:] = lat
        v = ds.createVariable("lev", "f4", ("lev",))
        v.units, v.positive = "m", "down"
        v[:] = NODES
        kw = {"fill_value": np.float32(1e20)} if t_fill else {}
        v = ds.createVariable("tsoil", "f4", ("lev", "lat", "lon"), **kw)
        v.units, v.standard_name = t_units, "soil_temperature"
        v[:] = (np.full((NODES.size, lat.size, lon.size), 280.0) if t_values is None else t_values)
    return Path(path)


# =============================================================================================
# Files named in a recipe: what they hold
# =============================================================================================


def test_geojson_not_a_polygon(work, capsys):
    (work / "shape.geojson").write_text(json.dumps({"type": "Point", "coordinates": [40, 30]}))
    rec = geo_recipe(work)
    refused(capsys, apply_argv(work, rec), "shape.geojson", "Point", "Polygon", folder=work)


def test_geojson_line_feature(work, capsys):
    feat = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "LineString", "coordinates": [[0, 0], [1, 1]]}}]}
    (work / "shape.geojson").write_text(json.dumps(feat))
    rec = geo_recipe(work)
    refused(capsys, apply_argv(work, rec), "shape.geojson", "LineString", folder=work)


def test_geojson_not_json(work, capsys):
    (work / "shape.geojson").write_text("{ this is not json")
    rec = geo_recipe(work)
    refused(capsys, apply_argv(work, rec), "shape.geojson", "not valid JSON", folder=work)


def test_geojson_nested_absurdly_deep(work, capsys):
    (work / "shape.geojson").write_text("[" * 100_000)
    rec = geo_recipe(work)
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0]", "nested too deeply", folder=work)


def test_anomaly_file_without_the_variable(work, capsys):
    field_file(work / "anom.nc", np.arange(0, 360, 10.0), np.arange(-85, 90, 10.0))
    rec = field_recipe(work, variable="dT")
    refused(capsys, apply_argv(work, rec), "anom.nc", "'dT'", "perturbations[0].anomaly.field.variable",
            folder=work)


def test_anomaly_file_not_netcdf(work, capsys):
    (work / "anom.nc").write_text("just text\n")
    rec = field_recipe(work)
    refused(capsys, apply_argv(work, rec), "anom.nc", "not a readable netCDF file", folder=work)


def test_anomaly_file_covering_none_of_the_region(work, capsys):
    """Policy: a field that covers none of the region is an error (exit 2), since every region
    value would be extrapolated from far away; one that covers part of the region is accepted
    with a warning naming the key and the coverage (nearest values beyond its edge), see
    test_anomaly_file_covering_part_of_the_region_warns."""
    field_file(work / "anom.nc", np.arange(200.0, 260.0, 5.0), np.arange(-60.0, -20.0, 5.0))
    rec = field_recipe(work)
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.field", "covers none of the region",
            folder=work)


def test_anomaly_file_covering_part_of_the_region_warns(work, capsys):
    field_file(work / "anom.nc", np.arange(0.0, 52.0, 2.0), np.arange(-10.0, 62.0, 2.0))
    rec = field_recipe(work)
    src = sha(work / "in.nc")
    capsys.readouterr()
    rc, shown = run(apply_argv(work, rec))
    err = shown + capsys.readouterr().err.splitlines()
    assert rc == 0
    assert len(err) == 1 and err[0].startswith("initgen: warning: "), err
    assert "perturbations[0].anomaly.field" in err[0] and "covers only" in err[0]
    assert (work / "out.nc").exists() and sha(work / "in.nc") == src
    # -q: nothing on stdout, and the warning only as a count
    rc = main([str(a) for a in apply_argv(work, rec, "--quiet", "--force")])
    cap = capsys.readouterr()
    assert rc == 0 and cap.out == ""
    assert cap.err.splitlines() == ["initgen: 1 warning(s) held back by -q; run without -q to read them"]


def test_anomaly_file_all_missing_values(work, capsys):
    field_file(work / "anom.nc", np.arange(0, 360, 10.0), np.arange(-85, 90, 10.0),
               values=np.full((18, 36), np.nan))
    rec = field_recipe(work)
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.field", "no finite values", folder=work)


def test_anomaly_file_with_absurd_values(work, capsys):
    field_file(work / "anom.nc", np.arange(0, 360, 10.0), np.arange(-85, 90, 10.0),
               values=np.full((18, 36), 5000.0))
    rec = field_recipe(work)
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.field", "5000", folder=work)


def test_donor_on_another_grid(work, capsys):
    custom_file(work / "donor.nc")
    rec = recipe(work, swap("anomaly: {constant_K: -2}", "anomaly: {donor: {file: donor.nc}}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.donor.file", "same grid", folder=work)


# =============================================================================================
# Layouts against the model file
# =============================================================================================


def test_layout_names_a_missing_variable(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("soil_temperature: tsoil", "soil_temperature: TSL"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.soil_temperature", "'TSL'", "in.nc",
            folder=work)


def test_layout_names_a_missing_per_layer_variable(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("soil_temperature: tsoil", "soil_temperature: [tsoil, T2]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.soil_temperature", "'T2'", folder=work)


def test_variable_with_unexpected_dimensions(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("soil_temperature: tsoil", "soil_temperature: lev"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "'lev'", "soil_temperature", "horizontal dims",
            folder=work)


def test_variable_with_two_candidate_layer_axes(work, capsys):
    # neither extra axis has a coordinate with length units: initgen cannot tell which holds the layers
    with netCDF4.Dataset(work / "in.nc", "a") as ds:
        ds.createDimension("band", 3)
        ds.createDimension("k", 5)
        v = ds.createVariable("t4", "f4", ("band", "k", "lat", "lon"), fill_value=np.float32(1e20))
        v.units = "K"
        v[:] = 280.0
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("soil_temperature: tsoil", "soil_temperature: t4"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "'t4'", "layer_dimension", folder=work)


def test_layout_layer_dimension_not_on_the_variable(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT + "layer_dimension: levels\n")
    refused(capsys, apply_argv(work, rec, "--layout", lay), "layout.yaml", "layer_dimension 'levels'", "'tsoil'",
            "one of ('time', 'lev')", folder=work)


def test_layout_layer_dimension_is_horizontal(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT + "layer_dimension: lat\n")
    refused(capsys, apply_argv(work, rec, "--layout", lay), "layer_dimension 'lat'", "horizontal", folder=work)


def test_layer_depths_not_monotonic_in_the_file(work, capsys):
    with netCDF4.Dataset(work / "in.nc", "a") as ds:
        ds["lev"][:] = np.array([0.05, 0.35, 0.15, 0.75, 1.5])
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec), "lev", "strictly increasing", folder=work)


def test_depth_coordinate_holding_an_undeclared_fill_value(work, capsys):
    with netCDF4.Dataset(work / "in.nc", "a") as ds:
        ds["lev"][4] = 9.96921e36
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec), "in.nc", "lev", "fill value", folder=work)


def test_layer_depths_count_mismatch(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, 0.15, 0.35]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "5 layers", "3", folder=work)


# =============================================================================================
# Model files
# =============================================================================================


def test_missing_input_file(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "gone.nc", "--output", work / "out.nc"],
            "gone.nc", "not found", "check the path", folder=work)


def test_input_is_a_folder(work, capsys):
    (work / "dir.nc").mkdir()
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "dir.nc", "--output", work / "out.nc"],
            "dir.nc", "is a folder", folder=work)


def test_input_is_a_named_pipe(work, capsys):
    os.mkfifo(work / "pipe.nc")  # opening it would wait for a writer for ever
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "pipe.nc", "--output", work / "out.nc"],
            "pipe.nc", "not a regular file", folder=work)


def test_truncated_netcdf(work, capsys):
    data = (work / "in.nc").read_bytes()
    (work / "cut.nc").write_bytes(data[: len(data) // 2])
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "cut.nc", "--output", work / "out.nc"],
            "cut.nc", "NetCDF: HDF error", "truncated or corrupt", folder=work)


def test_truncated_netcdf3(work, capsys):
    regular(work / "c.nc", fmt="NETCDF3_64BIT_OFFSET")
    data = (work / "c.nc").read_bytes()
    (work / "c.nc").write_bytes(data[: int(len(data) * 0.6)])
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "c.nc", "--output", work / "out.nc"],
            "c.nc", "truncated netCDF file", "copy it again", folder=work)


def test_corrupt_netcdf_random_bytes(work, capsys):
    (work / "rnd.nc").write_bytes(np.random.default_rng(1).bytes(50_000))
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "rnd.nc", "--output", work / "out.nc"],
            "rnd.nc", "not a readable netCDF file (NetCDF: ", folder=work)


def test_corrupt_netcdf_header_right_body_garbage(work, capsys):
    data = bytearray((work / "in.nc").read_bytes())
    rng = np.random.default_rng(2)
    data[4096:] = rng.bytes(len(data) - 4096)
    (work / "bad.nc").write_bytes(bytes(data))
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "bad.nc", "--output", work / "out.nc"], "bad.nc",
            folder=work)


def test_empty_input_file(work, capsys):
    (work / "empty.nc").write_bytes(b"")
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "empty.nc", "--output", work / "out.nc"],
            "empty.nc", "not a readable netCDF file", folder=work)


def test_no_lon_lat_found(work, capsys):
    custom_file(work / "nolonlat.nc", coords=False)
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "nolonlat.nc", "--output", work / "out.nc"],
            "nolonlat.nc", "no longitude/latitude", "roles.longitude", folder=work)


def test_longitude_outside_its_range(work, capsys):
    custom_file(work / "proj.nc", lon=np.arange(12) * 1.0e5)
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "proj.nc", "--output", work / "out.nc"],
            "proj.nc", "longitude 'lon'", "-180..360", folder=work)


def test_latitude_outside_its_range(work, capsys):
    custom_file(work / "lat.nc", lat=np.linspace(-150.0, 150.0, 6))
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "lat.nc", "--output", work / "out.nc"],
            "lat.nc", "latitude 'lat'", "-90..90", folder=work)


def test_longitude_with_missing_values(work, capsys):
    lon = np.arange(15.0, 360.0, 30.0)
    lon[3] = np.nan
    custom_file(work / "nanlon.nc", lon=lon)
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "nanlon.nc", "--output", work / "out.nc"],
            "nanlon.nc", "missing values", folder=work)


def test_soil_temperature_in_furlongs(work, capsys):
    custom_file(work / "f.nc", t_units="furlongs")
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "f.nc", "--output", work / "out.nc"],
            "f.nc", "'tsoil'", "furlongs", "set its units to 'K'", folder=work)


def test_soil_water_in_furlongs_in_a_physics_mode(work, capsys):
    demo = write_demo_restart(work / "demo.nc")
    with netCDF4.Dataset(demo, "a") as ds:
        ds["wliq"].units = "furlongs"
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [170, 190], lat: [30, 45]")
                 + "physics: {mode: energy, texture: loam}\n")
    refused(capsys, ["apply", rec, "--input", demo, "--output", work / "o.nc"], "demo.nc", "'wliq'", "furlongs",
            "kg m-2", folder=work)


def test_soil_water_in_furlongs_is_ignored_without_physics(work, capsys):
    """Without a physics mode initgen never reads the water, so odd water units are no error."""
    demo = write_demo_restart(work / "demo.nc")
    with netCDF4.Dataset(demo, "a") as ds:
        ds["wliq"].units = "furlongs"
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [170, 190], lat: [30, 45]"))
    assert main([str(a) for a in ["apply", rec, "--input", demo, "--output", work / "o.nc", "-q"]]) == 0


def test_negative_soil_water_in_a_physics_mode(work, capsys):
    demo = write_demo_restart(work / "demo.nc")
    with netCDF4.Dataset(demo, "a") as ds:
        v = ds["wliq"]
        a = v[:]
        a[0, 2, 35:45, 55:65] = -1.0  # on the demo highland
        v[:] = a
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [170, 190], lat: [30, 45]")
                 + "physics: {mode: energy, texture: loam}\n")
    refused(capsys, ["apply", rec, "--input", demo, "--output", work / "o.nc"], "demo.nc", "'wliq'",
            "negative or missing", "fix the file", folder=work)


def test_region_with_no_grid_cell(work, capsys):
    demo = write_demo_restart(work / "demo.nc")
    rec = recipe(work, swap("taper_km: 200", "taper_km: 0"))  # box at 20..80 E; the demo grid is 150..210 E
    refused(capsys, ["apply", rec, "--input", demo, "--output", work / "o.nc"], "region 'blk'",
            "contains no grid point", "check the region", folder=work)


def test_region_all_ocean(work, capsys):
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [160, 190], lat: [-10, 10]").replace(
        "taper_km: 200", "taper_km: 0"))
    refused(capsys, apply_argv(work, rec), "region 'blk'", "no land grid cell", folder=work)


def test_role_the_recipe_targets_is_absent(work, capsys):
    rec = recipe(work, RECIPE + "    targets: [skin_temperature]\n")
    refused(capsys, apply_argv(work, rec), "in.nc", "skin_temperature", "layout", folder=work)


def test_nan_inside_region_without_fill_value(work, capsys):
    T = np.full((NODES.size, 6, 12), 280.0, dtype="f4")
    T[:, 3, 1] = np.nan  # lat 15 N, lon 45 E: inside the box
    custom_file(work / "gap.nc", t_fill=False, t_values=T)
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "gap.nc", "--output", work / "out.nc"],
            "'tsoil'", "NaN", "_FillValue", folder=work)


def test_fill_value_inside_region_without_fill_value_declared(work, capsys):
    """1e20 (the conventional netCDF fill) in a variable that declares no _FillValue."""
    T = np.full((NODES.size, 6, 12), 280.0, dtype="f4")
    T[:, 3, 1] = 9.96921e36
    custom_file(work / "gap.nc", t_fill=False, t_values=T)
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "gap.nc", "--output", work / "out.nc"],
            "'tsoil'", "_FillValue", folder=work)


def test_curvilinear_grid_with_region_outside(work, capsys):
    y, x = np.mgrid[0:8, 0:10]
    curvilinear(work / "c.nc", 100.0 + 2.0 * x + 0.3 * y, -40.0 + 2.0 * y)
    rec = recipe(work, swap("taper_km: 200", "taper_km: 0"))
    refused(capsys, ["apply", rec, "--input", work / "c.nc", "--output", work / "out.nc"],
            "region 'blk'", "contains no grid point", folder=work)


def test_points_grid_with_region_outside(work, capsys):
    points(work / "p.nc", np.linspace(100, 120, 15), np.linspace(-40, -30, 15))
    rec = recipe(work, swap("taper_km: 200", "taper_km: 0"))
    refused(capsys, ["apply", rec, "--input", work / "p.nc", "--output", work / "out.nc"],
            "region 'blk'", "contains no grid point", folder=work)


# =============================================================================================
# Water conventions, ice as stored and packed variables (files from filemaker's water block)
# =============================================================================================


WATER_RECIPE = RECIPE.replace("lon: [20, 80], lat: [10, 50]", "lon: [-25, 25], lat: [-15, 15]").replace(
    "taper_km: 200", "taper_km: 0") + "physics: {mode: energy, texture: loam}\n"


def _water_case(work, convention="total_and_liquid", units="kg m-2", **kw):
    from filemaker import water_file, water_layout

    f = water_file(work / "w.nc", convention, units, **{k: v for k, v in kw.items() if k != "ice_reading_key"})
    lay = water_layout(work / "w.yaml", convention, units, ice_reading=kw.get("ice_reading_key"))
    return f, lay, recipe(work, WATER_RECIPE)


def test_water_convention_whose_roles_the_layout_does_not_name(work, capsys):
    f, lay, rec = _water_case(work)
    lay.write_text(lay.read_text().replace("convention: total_and_liquid", "convention: total_and_frozen_fraction"))
    refused(capsys, ["apply", rec, "--input", f, "--output", work / "o.nc", "--layout", lay],
            "water.convention", "total_and_frozen_fraction", "soil_frozen_fraction", folder=work)


def test_water_convention_unknown(work, capsys):
    f, lay, rec = _water_case(work)
    lay.write_text(lay.read_text().replace("convention: total_and_liquid", "convention: liquid_plus_slush"))
    refused(capsys, ["apply", rec, "--input", f, "--output", work / "o.nc", "--layout", lay],
            "water.convention", "liquid_plus_slush", folder=work)


def test_volumetric_ice_reading_declared_for_ice_in_kg_m2(work, capsys):
    """kg m-2 is a mass: a declared volume reading contradicts the units."""
    f, lay, rec = _water_case(work, "liquid_and_ice", "kg m-2", ice_reading_key="true_ice_volume")
    refused(capsys, ["apply", rec, "--input", f, "--output", work / "o.nc", "--layout", lay],
            "water.volumetric_ice", "'water_ice'", "kg m-2", "remove the key", folder=work)


def test_true_ice_volume_total_without_any_split(work, capsys):
    f, lay, rec = _water_case(work, "total_only", "m3 m-3", ice_reading_key="true_ice_volume")
    refused(capsys, ["apply", rec, "--input", f, "--output", work / "o.nc", "--layout", lay],
            "water.volumetric_ice", "total_only", folder=work)


def test_soil_water_without_units_names_the_layout_key(work, capsys):
    f, lay, rec = _water_case(work, units_attr=False)
    refused(capsys, ["apply", rec, "--input", f, "--output", work / "o.nc", "--layout", lay],
            "w.nc", "'water_total'", "no units attribute", "units.soil_water_total", folder=work)


def test_phase_fraction_in_odd_units(work, capsys):
    f, lay, rec = _water_case(work, "total_and_frozen_fraction")
    with netCDF4.Dataset(f, "a") as ds:
        ds["frozen_frac"].units = "kg m-2"
    refused(capsys, ["apply", rec, "--input", f, "--output", work / "o.nc", "--layout", lay],
            "'frozen_frac'", "soil_frozen_fraction", "units.soil_frozen_fraction", folder=work)


def test_packed_variable_cannot_hold_the_change(work, capsys):
    from filemaker import packed_temperature_file

    f = packed_temperature_file(work / "p.nc", headroom_K=5.9)
    rec = recipe(work, WATER_RECIPE.replace("constant_K: -2", "constant_K: 10").replace(
        "physics: {mode: energy, texture: loam}\n", ""))
    for cmd in ("apply", "preview"):
        argv = [cmd, rec, "--input", f] + (["--output", work / "o.nc"] if cmd == "apply" else [])
        refused(capsys, argv, "p.nc", "'soil_temp'", "int16", "holds only", "cell(s) outside",
                "limits.packed_out_of_range: clip", folder=work)


def test_water_units_override_for_a_role_the_convention_does_not_read(work, capsys):
    f, lay, rec = _water_case(work)
    lay.write_text(lay.read_text() + "  units: {soil_ice: m3 m-3}\n")
    refused(capsys, ["apply", rec, "--input", f, "--output", work / "o.nc", "--layout", lay],
            "water.units.soil_ice", "total_and_liquid", "remove it", folder=work)

