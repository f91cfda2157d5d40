"""The error catalogue: every bad input initgen can be given, one test each.

Each test feeds one bad input to the command line (``initgen.cli.main``) and checks the
promise of the README: exit status 2; exactly one line on stderr (warnings count as lines),
starting ``initgen: error:``, naming the file, variable or recipe key and saying what to do;
no traceback; no output file, no provenance record and no ``*.initgen-tmp`` temporary left
behind; and the input file (and every other file the test watches) byte-for-byte unchanged.

The test names read as the catalogue: ``test_<the bad input>``.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from initgen.cli import main
from initgen.demo import write_demo_restart

from filemaker import NODES, curvilinear, points, regular
from clikit import sha
from clikit import CATALOGUE_RECIPE as RECIPE
from clikit import listing, recipe, refused, run, swap

# The helpers (listing, run, refused, recipe, swap) are in filemaker.py, the ``work`` fixture (a
# folder with a small regular input ``in.nc``) in conftest.py: other test modules use them too.


def apply_argv(work, rec, *extra, output="out.nc"):
    return ["apply", rec, "--input", work / "in.nc", "--output", work / output, *extra]


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


def field_file(path, lon, lat, values=None, name="anom"):
    lon, lat = np.asarray(lon, float), np.asarray(lat, float)
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("lon", lon.size)
        ds.createDimension("lat", lat.size)
        v = ds.createVariable("lon", "f8", ("lon",))
        v.units = "degrees_east"
        v[:] = lon
        v = ds.createVariable("lat", "f8", ("lat",))
        v.units = "degrees_north"
        v[:] = lat
        v = ds.createVariable(name, "f4", ("lat", "lon"))
        v.units = "K"
        v[:] = np.full((lat.size, lon.size), -1.5) if values is None else values
    return Path(path)


def field_recipe(folder, file="anom.nc", variable="anom"):
    return recipe(folder, swap("anomaly: {constant_K: -2}",
                               f"anomaly: {{field: {{file: {file}, variable: {variable}}}}}"))


# =============================================================================================
# Recipe files
# =============================================================================================


def test_missing_recipe_file(work, capsys):
    refused(capsys, ["check", work / "nope.yaml"], "nope.yaml", "not found", "check the path", folder=work)


def test_recipe_is_a_folder(work, capsys):
    (work / "sub").mkdir()
    refused(capsys, ["check", work / "sub"], "sub", "is a folder", "YAML file", folder=work)


def test_recipe_not_utf8(work, capsys):
    p = work / "r.yaml"
    p.write_bytes(RECIPE.encode("utf-16"))
    refused(capsys, ["check", p], "r.yaml", "not UTF-8", "save it as UTF-8", folder=work)


def test_malformed_yaml(work, capsys):
    rec = recipe(work, RECIPE + "  - name: [unclosed\n")
    refused(capsys, apply_argv(work, rec), "r.yaml", "malformed YAML at line", "fix the syntax", folder=work)


def test_yaml_tab_indentation(work, capsys):
    rec = recipe(work, RECIPE.replace("    anomaly", "\tanomaly"))
    refused(capsys, apply_argv(work, rec), "r.yaml", "malformed YAML", folder=work)


def test_empty_recipe(work, capsys):
    rec = recipe(work, "# nothing but a comment\n")
    refused(capsys, apply_argv(work, rec), "r.yaml", "the recipe is empty", "initgen schema", folder=work)


def test_recipe_top_level_is_a_list(work, capsys):
    rec = recipe(work, "- initgen_recipe: 1\n- name: x\n")
    refused(capsys, apply_argv(work, rec), "r.yaml", "must be a mapping", folder=work)


def test_recipe_without_version_key(work, capsys):
    rec = recipe(work, RECIPE.replace("initgen_recipe: 1\n", ""))
    refused(capsys, apply_argv(work, rec), "r.yaml", "initgen_recipe: 1", "add it", folder=work)


def test_recipe_version_from_the_future(work, capsys):
    rec = recipe(work, swap("initgen_recipe: 1", "initgen_recipe: 99"))
    refused(capsys, apply_argv(work, rec), "recipe key initgen_recipe", "must be <= 1", folder=work)


def test_yaml_python_object_tag(work, capsys):
    marker = work / "pwned"
    rec = recipe(work, swap("name: cat", f"name: !!python/object/apply:os.system ['touch {marker}']"))
    refused(capsys, apply_argv(work, rec), "r.yaml", "refused YAML tag", "plain data", folder=work)
    assert not marker.exists()


def test_yaml_python_name_tag(work, capsys):
    rec = recipe(work, swap("anomaly: {constant_K: -2}", "anomaly:\n      constant_K: !!python/name:os.getcwd ''"))
    refused(capsys, apply_argv(work, rec), "r.yaml", "refused YAML tag", folder=work)


def test_yaml_custom_local_tag(work, capsys):
    rec = recipe(work, swap("constant_K: -2", "constant_K: !kelvin -2"))
    refused(capsys, apply_argv(work, rec), "r.yaml", "refused YAML tag", folder=work)


def test_yaml_key_that_is_not_a_string(work, capsys):
    rec = recipe(work, swap("    anomaly: {constant_K: -2}", "    anomaly: {constant_K: -2, 3: x}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly", "keys must be strings", folder=work)


def test_empty_optional_sections_are_the_same_as_absent(work, capsys):
    """Not an error: "physics:" with every line below commented out once crashed (KeyError)."""
    from initgen.config.recipe import load_recipe

    plain = load_recipe(recipe(work, RECIPE, "plain.yaml"))
    for extra in ("physics:\n", "physics: null\n", "physics: {}\n"):
        rec = recipe(work, RECIPE + extra, "empty.yaml")
        assert main(["check", str(rec), "--input", str(work / "in.nc")]) == 0
        assert load_recipe(rec).sha256 == plain.sha256
    rec = recipe(work, swap("    profile: {kind: exponential, efolding_m: 0.5}", "    profile:\n    targets:"),
                 "empty.yaml")
    assert load_recipe(rec).data["perturbations"][0]["profile"]["kind"] == "uniform"


def test_unknown_top_level_key(work, capsys):
    rec = recipe(work, RECIPE.replace("perturbations:", "perturbation:"))
    refused(capsys, apply_argv(work, rec), "recipe key perturbation", "did you mean 'perturbations'",
            folder=work)


def test_unknown_nested_key(work, capsys):
    rec = recipe(work, swap("taper_km: 200", "taper_kms: 200"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.taper_kms", "did you mean 'taper_km'",
            folder=work)


def test_wrong_type_string_for_number(work, capsys):
    rec = recipe(work, swap("taper_km: 200", "taper_km: wide"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.taper_km", "must be a number", folder=work)


def test_wrong_type_boolean_for_number(work, capsys):
    rec = recipe(work, swap("constant_K: -2", "constant_K: yes"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.constant_K", "must be a number",
            folder=work)


def test_wrong_type_string_for_list(work, capsys):
    rec = recipe(work, RECIPE + "    targets: soil_temperature\n")
    refused(capsys, apply_argv(work, rec), "perturbations[0].targets", "must be a list", folder=work)


def test_wrong_type_list_for_mapping(work, capsys):
    rec = recipe(work, swap("anomaly: {constant_K: -2}", "anomaly: [-2]"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly", "must be a mapping", folder=work)


def test_negative_taper(work, capsys):
    rec = recipe(work, swap("taper_km: 200", "taper_km: -50"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.taper_km", "must be >= 0", folder=work)


def test_absurd_taper(work, capsys):
    rec = recipe(work, swap("taper_km: 200", "taper_km: 1.0e9"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.taper_km", "must be <= 5000", folder=work)


def test_anomaly_of_thousands_of_kelvin(work, capsys):
    rec = recipe(work, swap("constant_K: -2", "constant_K: -3000"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.constant_K", "must be >= -60", folder=work)


def test_anomaly_not_a_number(work, capsys):
    rec = recipe(work, swap("constant_K: -2", "constant_K: .nan"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.constant_K", "finite", folder=work)


def test_anomaly_infinite(work, capsys):
    rec = recipe(work, swap("constant_K: -2", "constant_K: -.inf"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.constant_K", "finite", folder=work)


def test_negative_efolding_depth(work, capsys):
    rec = recipe(work, swap("efolding_m: 0.5", "efolding_m: -0.5"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].profile.efolding_m", "must be > 0", folder=work)


def test_absurd_max_depth(work, capsys):
    rec = recipe(work, swap("efolding_m: 0.5", "efolding_m: 0.5, max_depth_m: 1.0e7"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].profile.max_depth_m", "must be <= 1000",
            folder=work)


def test_profile_table_with_negative_depth(work, capsys):
    rec = recipe(work, swap("{kind: exponential, efolding_m: 0.5}", "{kind: table, table: [[-1, 1], [2, 0]]}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].profile.table", folder=work)


def test_profile_table_with_non_monotonic_depths(work, capsys):
    rec = recipe(work, swap("{kind: exponential, efolding_m: 0.5}",
                            "{kind: table, table: [[0, 1], [1.0, 0.5], [0.5, 0.2]]}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].profile.table", "increasing", folder=work)


def test_profile_missing_its_parameter(work, capsys):
    rec = recipe(work, swap("{kind: exponential, efolding_m: 0.5}", "{kind: damping, period_days: 365}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].profile.diffusivity_m2_s",
            "required for kind 'damping'", folder=work)


def test_unknown_profile_kind(work, capsys):
    rec = recipe(work, swap("kind: exponential", "kind: exponentail"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].profile.kind", "did you mean 'exponential'",
            folder=work)


def test_two_anomaly_kinds_at_once(work, capsys):
    rec = recipe(work, swap("anomaly: {constant_K: -2}", "anomaly: {constant_K: -2, donor: {file: x.nc}}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly", "give exactly one of", folder=work)


def test_anomaly_value_left_empty(work, capsys):
    # once: "constant_K:" with no value passed as the one anomaly kind, then crashed (TypeError)
    rec = recipe(work, swap("anomaly: {constant_K: -2}", "anomaly: {constant_K: }"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly", "give exactly one of", "(got none)",
            folder=work)


def test_duplicate_perturbation_names(work, capsys):
    body = RECIPE.split("perturbations:\n")[1]
    rec = recipe(work, RECIPE + body)
    refused(capsys, apply_argv(work, rec), "perturbations[1].name", "duplicate name", folder=work)


def test_unknown_target(work, capsys):
    rec = recipe(work, RECIPE + "    targets: [soil_moisture]\n")
    refused(capsys, apply_argv(work, rec), "perturbations[0].targets[0]", "must be one of", folder=work)


def test_box_south_above_north(work, capsys):
    rec = recipe(work, swap("lat: [10, 50]", "lat: [50, 10]"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0].box.lat", "below north",
            folder=work)


def test_box_latitude_beyond_the_pole(work, capsys):
    rec = recipe(work, swap("lat: [10, 50]", "lat: [10, 95]"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0].box.lat[1]", "<= 90",
            folder=work)


def test_vertices_beyond_the_pole(work, capsys):
    rec = recipe(work, swap("{box: {lon: [20, 80], lat: [10, 50]}}", "{vertices: [[20, 10], [80, 10], [50, 120]]}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0]", "latitude", folder=work)


def test_vertices_with_an_absurd_longitude(work, capsys):
    # once: wrapping this polygon onto -180..180 tried 2.8e9 copies of it (a hang, then out of memory)
    rec = recipe(work, swap("{box: {lon: [20, 80], lat: [10, 50]}}", "{vertices: [[10, 0], [1.0e12, 0], [60, 40]]}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0].vertices[1][0]", "<= 720",
            folder=work)


def test_geojson_with_an_absurd_longitude(work, capsys):
    (work / "shape.geojson").write_text(json.dumps(
        {"type": "Polygon", "coordinates": [[[10, 0], [1e12, 0], [60, 40], [10, 40], [10, 0]]]}))
    rec = geo_recipe(work)
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0].geojson", "shape.geojson",
            "EPSG:4326", folder=work)


def test_degenerate_vertices(work, capsys):
    rec = recipe(work, swap("{box: {lon: [20, 80], lat: [10, 50]}}", "{vertices: [[20, 10], [30, 20], [40, 30]]}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0]", folder=work)


def test_elevation_band_upside_down(work, capsys):
    rec = recipe(work, swap("taper_km: 200", "taper_km: 200\n      elevation: {min_m: 2000, max_m: 1000}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.elevation.max_m", "must be above min_m",
            folder=work)


def test_clamps_upside_down(work, capsys):
    rec = recipe(work, RECIPE + "physics: {soil_temperature_min_K: 273.15, soil_temperature_max_K: 273.15}\n")
    refused(capsys, apply_argv(work, rec), "physics.soil_temperature_min_K", "below soil_temperature_max_K",
            folder=work)


def test_unknown_soil_texture(work, capsys):
    demo = write_demo_restart(work / "demo.nc")
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [170, 190], lat: [30, 45]")
                 + "physics: {mode: energy, texture: moonrock}\n")
    refused(capsys, ["apply", rec, "--input", demo, "--output", work / "o.nc"], "physics.texture", "moonrock",
            folder=work)


def test_unknown_phase_rule(work, capsys):
    demo = write_demo_restart(work / "demo.nc")
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [170, 190], lat: [30, 45]")
                 + "physics: {mode: energy, texture: loam, phase_rule: nearest}\n")
    refused(capsys, ["apply", rec, "--input", demo, "--output", work / "o.nc"], "physics.phase_rule", "nearest",
            folder=work)


@pytest.mark.parametrize("value", ["1.5", "-0.1", "40"])
def test_organic_fraction_outside_0_to_1(work, capsys, value):
    demo = write_demo_restart(work / "demo.nc")
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [170, 190], lat: [30, 45]")
                 + f"physics: {{mode: energy, texture: loam, organic_fraction: {value}}}\n")
    refused(capsys, ["apply", rec, "--input", demo, "--output", work / "o.nc"], "physics.organic_fraction",
            folder=work)


def test_physics_mode_without_soil_parameters(work, capsys):
    demo = write_demo_restart(work / "demo.nc")
    rec = recipe(work, swap("lon: [20, 80], lat: [10, 50]", "lon: [170, 190], lat: [30, 45]")
                 + "physics: {mode: temperature}\n")
    refused(capsys, ["apply", rec, "--input", demo, "--output", work / "o.nc"], "physics",
            "texture", folder=work)


def test_snow_mass_target_without_a_change(work, capsys):
    rec = recipe(work, RECIPE + "    targets: [snow_mass]\n")
    refused(capsys, apply_argv(work, rec), "perturbations[0].snow_mass_change", "non-zero", folder=work)


def test_unknown_published_region_set(work, capsys):
    rec = recipe(work, swap("{box: {lon: [20, 80], lat: [10, 50]}}", "{published: {set: atlantis, regions: [X]}}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0]", "atlantis", folder=work)


# =============================================================================================
# Files named in a recipe (untrusted recipes may not leave their folder)
# =============================================================================================

GEO_POLY = {"type": "Polygon", "coordinates": [[[20, 10], [80, 10], [80, 50], [20, 50], [20, 10]]]}


def geo_recipe(folder, name="shape.geojson"):
    return recipe(folder, swap("{box: {lon: [20, 80], lat: [10, 50]}}", f"{{geojson: {name}}}"))


def test_geojson_missing(work, capsys):
    rec = geo_recipe(work, "nowhere.geojson")
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0].geojson", "nowhere.geojson",
            "not found", folder=work)


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


def test_geojson_leaving_the_recipe_folder(tmp_path, capsys):
    work = tmp_path / "w"
    work.mkdir()
    regular(work / "in.nc")
    (tmp_path / "outside.geojson").write_text(json.dumps(GEO_POLY))
    rec = geo_recipe(work, "../outside.geojson")
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0].geojson", "leaves the recipe's folder",
            "--allow-outside-paths", folder=work)
    # and it is accepted when the caller allows it
    assert main([str(a) for a in ["check", rec, "--input", work / "in.nc", "--allow-outside-paths"]]) == 0


def test_geojson_absolute_path_outside(tmp_path, capsys):
    work = tmp_path / "w"
    work.mkdir()
    regular(work / "in.nc")
    (tmp_path / "outside.geojson").write_text(json.dumps(GEO_POLY))
    rec = geo_recipe(work, str(tmp_path / "outside.geojson"))
    refused(capsys, apply_argv(work, rec), "leaves the recipe's folder", "--allow-outside-paths", folder=work)


def test_geojson_symlink_leaving_the_folder(tmp_path, capsys):
    work = tmp_path / "w"
    work.mkdir()
    regular(work / "in.nc")
    (tmp_path / "outside.geojson").write_text(json.dumps(GEO_POLY))
    (work / "inside.geojson").symlink_to(tmp_path / "outside.geojson")
    rec = geo_recipe(work, "inside.geojson")
    refused(capsys, apply_argv(work, rec), "leaves the recipe's folder", folder=work)


def test_anomaly_file_leaving_the_recipe_folder(tmp_path, capsys):
    work = tmp_path / "w"
    work.mkdir()
    regular(work / "in.nc")
    field_file(tmp_path / "anom.nc", np.arange(0, 360, 10.0), np.arange(-85, 90, 10.0))
    rec = field_recipe(work, "../anom.nc")
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.field.file", "leaves the recipe's folder",
            "--allow-outside-paths", folder=work, watch=[tmp_path / "anom.nc"])


def test_anomaly_file_outside_accepted_with_allow_outside_paths(tmp_path, capsys):
    work = tmp_path / "w"
    work.mkdir()
    regular(work / "in.nc")
    field_file(tmp_path / "anom.nc", np.arange(0, 360, 10.0), np.arange(-85, 90, 10.0))
    rec = field_recipe(work, "../anom.nc")
    assert main([str(a) for a in apply_argv(work, rec, "--allow-outside-paths", "-q")]) == 0
    record = json.loads((work / "out.nc.provenance.json").read_text())
    assert record["options"]["allow_outside_paths"] is True


def test_bias_file_leaving_the_recipe_folder(work, capsys):
    rec = recipe(work, swap("anomaly: {constant_K: -2}",
                            "anomaly: {bias: {model_file: ../m.nc, reference_file: r.nc, variable: t}}"))
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.bias.model_file", "leaves the recipe's folder",
            "--allow-outside-paths", folder=work)


def test_donor_file_leaving_the_recipe_folder(work, capsys):
    rec = recipe(work, swap("anomaly: {constant_K: -2}", f"anomaly: {{donor: {{file: {work / 'in.nc'}}}}}"))
    sub = work / "sub"
    sub.mkdir()
    rec = rec.rename(sub / "r.yaml")
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.donor.file", "leaves the recipe's folder",
            folder=work)


def test_geojson_in_a_subfolder_of_the_recipe_is_fine(work, capsys):
    (work / "shapes").mkdir()
    (work / "shapes" / "s.geojson").write_text(json.dumps(GEO_POLY))
    rec = geo_recipe(work, "shapes/s.geojson")
    assert main([str(a) for a in ["check", rec, "--input", work / "in.nc"]]) == 0


def test_geojson_path_is_a_folder(work, capsys):
    (work / "shapes").mkdir()
    rec = geo_recipe(work, "shapes")
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0]", "shapes", "cannot be read",
            folder=work)


def test_geojson_nested_absurdly_deep(work, capsys):
    (work / "shape.geojson").write_text("[" * 100_000)
    rec = geo_recipe(work)
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0]", "nested too deeply", folder=work)


def test_recipe_with_a_yaml_alias_bomb(work, capsys):
    bomb = "a: &a [x, x, x, x, x, x, x, x, x]\n" + "".join(
        f"{c}: &{c} [*{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}]\n" for p, c in zip("abcdefgh", "bcdefghi"))
    rec = recipe(work, bomb + RECIPE.replace("name: cat", "name: *i"))
    refused(capsys, apply_argv(work, rec), "recipe key", folder=work)


def test_recipe_with_a_key_given_twice(work, capsys):
    rec = recipe(work, swap("taper_km: 200", "taper_km: 200\n      taper_km: 0"))
    refused(capsys, apply_argv(work, rec), "r.yaml", "duplicate key 'taper_km'", "give each key once", folder=work)


def test_recipe_nested_absurdly_deep(work, capsys):
    rec = recipe(work, RECIPE + "description: " + "[" * 20_000 + "\n")
    refused(capsys, apply_argv(work, rec), "r.yaml", folder=work)


def test_anomaly_file_missing(work, capsys):
    rec = field_recipe(work, "nothing.nc")
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.field.file", "not found", folder=work)


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
# Layouts
# =============================================================================================

LAYOUT = """\
initgen_layout: 1
name: test-model
roles:
  longitude: lon
  latitude: lat
  soil_temperature: tsoil
  land_fraction: landfrac
  layer_node_depth: {values: [0.05, 0.15, 0.35, 0.75, 1.5], units: m}
"""


def layout(folder, text=LAYOUT):
    p = Path(folder) / "layout.yaml"
    p.write_text(text)
    return p


def test_layout_missing_file(work, capsys):
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec, "--layout", work / "nolayout.yaml"), "nolayout.yaml", "not found",
            folder=work)


def test_layout_without_version_key(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("initgen_layout: 1\n", ""))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "layout.yaml", "initgen_layout: 1", folder=work)


def test_layout_unknown_role(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT + "  soil_temprature: tsoil\n")
    refused(capsys, apply_argv(work, rec, "--layout", lay), "layout key roles.soil_temprature",
            "did you mean 'soil_temperature'", folder=work)


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


def test_layer_depths_not_monotonic(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, 0.35, 0.15, 0.75, 1.5]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", "strictly increasing",
            folder=work)


def test_layer_depths_not_monotonic_in_the_file(work, capsys):
    with netCDF4.Dataset(work / "in.nc", "a") as ds:
        ds["lev"][:] = np.array([0.05, 0.35, 0.15, 0.75, 1.5])
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec), "lev", "strictly increasing", folder=work)


def test_layer_depths_absurdly_deep(work, capsys):
    # once: accepted, then the infinite thickness reached the provenance record (ValueError, exit 1)
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, 0.15, 0.35, 0.75, 1.0e300]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", "index 4",
            "more than 1000 m", "check the units", folder=work)


def test_depth_coordinate_holding_an_undeclared_fill_value(work, capsys):
    with netCDF4.Dataset(work / "in.nc", "a") as ds:
        ds["lev"][4] = 9.96921e36
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec), "in.nc", "lev", "fill value", folder=work)


def test_layer_depths_count_mismatch(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, 0.15, 0.35]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "5 layers", "3", folder=work)


def test_layer_depths_in_unknown_units(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("units: m}", "units: fathoms}"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", "fathoms", "'m'",
            folder=work)


def test_layer_depths_with_nan(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, .nan, 0.35, 0.75, 1.5]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", folder=work)


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
# Output paths
# =============================================================================================


def test_output_equal_to_the_input(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "in.nc", "--force"],
            "in.nc", "output is the input", "choose another name", folder=work)


def test_output_equal_to_the_input_through_another_spelling(work, capsys):
    rec = recipe(work)
    (work / "sub").mkdir()
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "sub" / ".." / "in.nc"],
            "output is the input", folder=work)


def test_output_is_a_hard_link_to_the_input(work, capsys):
    rec = recipe(work)
    os.link(work / "in.nc", work / "link.nc")
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "link.nc", "--force"],
            "link.nc", "output is the input", folder=work)


def test_existing_output_without_force(work, capsys):
    rec = recipe(work)
    (work / "out.nc").write_bytes(b"precious")
    refused(capsys, apply_argv(work, rec), "out.nc", "exists", "pass --force", folder=work)
    assert (work / "out.nc").read_bytes() == b"precious"


def test_output_is_a_folder(work, capsys):
    rec = recipe(work)
    (work / "out.nc").mkdir()
    refused(capsys, apply_argv(work, rec, "--force"), "out.nc", "is a folder", folder=work)


def test_missing_output_folder(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "no" / "such" / "out.nc"],
            "does not exist", "create it first", folder=work)


def test_read_only_output_folder(work, capsys, monkeypatch):
    # tests run as root, which chmod does not stop: simulate a read-only folder through os.access
    ro = work / "ro"
    ro.mkdir()
    real_access = os.access
    monkeypatch.setattr(os, "access", lambda p, mode, *a, **k: False if Path(p) == ro and mode & os.W_OK
                        else real_access(p, mode, *a, **k))
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", ro / "out.nc"],
            "ro", "not writable", "choose another folder", folder=work)


def test_output_folder_refusing_writes(work, capsys, monkeypatch):
    """The folder looks writable but the file system refuses the copy (EROFS)."""
    import errno
    import shutil

    def refuse(src, dst, *a, **k):
        raise OSError(errno.EROFS, "Read-only file system", str(dst))

    monkeypatch.setattr(shutil, "copyfile", refuse)
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec), "out.nc", "Read-only file system", "choose another folder",
            folder=work)


def test_output_with_provenance_name_taken_by_a_folder(work, capsys):
    rec = recipe(work)
    (work / "out.nc.provenance.json").mkdir()
    refused(capsys, apply_argv(work, rec), "out.nc.provenance.json", "is a folder", "remove it", folder=work)


def test_unknown_subcommand_option(work, capsys):
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec, "--forse"), "--forse", folder=work)


def test_apply_without_output(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc"], "--output", folder=work)


def test_preview_json_into_missing_folder(work, capsys):
    rec = recipe(work)
    refused(capsys, ["preview", rec, "--input", work / "in.nc", "--json", work / "no" / "l.json"],
            "l.json", "does not exist", "create it first", folder=work)


def test_preview_json_onto_the_input(work, capsys):
    # once: the restart file was silently replaced by the ledger's JSON
    rec = recipe(work)
    refused(capsys, ["preview", rec, "--input", work / "in.nc", "--json", work / "in.nc"],
            "in.nc", "is also an input", "choose another name", folder=work)


def test_preview_json_onto_the_recipe(work, capsys):
    rec = recipe(work)
    refused(capsys, ["preview", rec, "--input", work / "in.nc", "--json", rec], "r.yaml", "is also an input",
            folder=work)


def test_apply_output_onto_the_recipe(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", rec, "--force"], "r.yaml",
            "is also an input", folder=work)


def test_compare_json_onto_a_compared_file(work, capsys):
    regular(work / "b.nc")
    refused(capsys, ["compare", work / "in.nc", work / "b.nc", "--json", work / "b.nc"], "b.nc",
            "is also an input", folder=work)


def test_output_inside_a_file_instead_of_a_folder(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "in.nc" / "out.nc"],
            "in.nc is not a folder", folder=work)


# =============================================================================================
# The real command line: one line on the real stderr, nothing else
# =============================================================================================


def test_real_process_prints_one_line_and_exit_2(work):
    rec = recipe(work, swap("taper_km: 200", "taper_km: -1"))
    before = listing(work)
    proc = subprocess.run([sys.executable, "-m", "initgen.cli", "apply", str(rec), "--input", str(work / "in.nc"),
                           "--output", str(work / "out.nc")], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert proc.stdout == ""
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("initgen: error: ") and "taper_km" in lines[0]
    assert listing(work) == before


def test_real_process_corrupt_file_prints_no_library_diagnostics(work):
    """The HDF5 library can print its own error stack to stderr; only initgen's line may appear."""
    data = (work / "in.nc").read_bytes()
    (work / "cut.nc").write_bytes(data[: len(data) // 2])
    rec = recipe(work)
    before = listing(work)
    proc = subprocess.run([sys.executable, "-m", "initgen.cli", "apply", str(rec), "--input", str(work / "cut.nc"),
                           "--output", str(work / "out.nc")], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("initgen: error: ") and "cut.nc" in lines[0], lines
    assert listing(work) == before


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


# =============================================================================================
# Reports and CLI habits (issue 18)
# =============================================================================================


def test_compare_with_one_file_after_allow(work, capsys):
    """``--allow`` may come before the files, but two files are still needed."""
    refused(capsys, ["compare", "--allow", "tsoil", work / "in.nc"], "compare needs two files", folder=work)


def test_compare_report_folder_is_a_file(work, capsys):
    (work / "rep").write_text("not a folder")
    refused(capsys, ["compare", work / "in.nc", work / "in.nc", "--report", work / "rep"], "rep",
            "is not a folder", folder=work)


# =============================================================================================
# The output policy: every target of every command, existing, in a missing or unwritable folder
# =============================================================================================

ENSEMBLE_RECIPE = RECIPE + "members:\n  scales: [1.0]\n  signs: [1, -1]\n"


@pytest.fixture
def sealed(tmp_path):
    """A folder nothing can be created in: mode 0555, and for root (whom modes do not stop) the
    immutable attribute (chattr +i); skipped where neither holds."""
    d = tmp_path / "sealed"
    d.mkdir()
    if os.geteuid() != 0:
        d.chmod(0o555)
    elif subprocess.run(["chattr", "+i", str(d)], capture_output=True).returncode != 0:
        pytest.skip("cannot make an unwritable folder here (root without chattr +i)")
    try:
        yield d
    finally:
        if os.geteuid() == 0:
            subprocess.run(["chattr", "-i", str(d)], capture_output=True)
        d.chmod(0o755)


# command line with {T} for the target; the target's kind: a file, or a folder written into
TARGETS = {
    "apply --output": (lambda w, r: ["apply", r, "--input", w / "in.nc", "--output", "{T}"], "file"),
    "apply ensemble --output": (lambda w, r: ["apply", recipe(w, ENSEMBLE_RECIPE, "e.yaml"), "--input",
                                              w / "in.nc", "--output", "{T}"], "ensemble"),
    "mask --output": (lambda w, r: ["mask", r, "--input", w / "in.nc", "--output", "{T}"], "file"),
    "mask --png": (lambda w, r: ["mask", r, "--input", w / "in.nc", "--output", w / "m.nc", "--png", "{T}"], "file"),
    "preview --json": (lambda w, r: ["preview", r, "--input", w / "in.nc", "--json", "{T}"], "file"),
    "preview --report": (lambda w, r: ["preview", r, "--input", w / "in.nc", "--json", w / "l.json",
                                       "--report", "{T}"], "report"),
    "compare --json": (lambda w, r: ["compare", w / "in.nc", w / "in.nc", "--json", "{T}"], "file"),
    "compare --report": (lambda w, r: ["compare", w / "in.nc", w / "in.nc", "--report", "{T}"], "report"),
    "demo --out": (lambda w, r: ["demo", "--out", "{T}"], "demo"),
    # the targets are checked before any record is read, so any file stands in for the record here
    "collate --out": (lambda w, r: ["collate", w / "in.nc", "--out", "{T}"], "collation"),
}


def _argv(work, target, path):
    make, _ = TARGETS[target]
    return [str(path) if a == "{T}" else a for a in make(work, recipe(work))]


@pytest.mark.parametrize("target", list(TARGETS))
def test_output_target_that_exists(work, capsys, target):
    kind = TARGETS[target][1]
    path = work / "taken"
    if kind == "file":
        path.write_text("someone's file\n")
        phrases = ("taken", "exists", "--force")
    else:
        path.mkdir()
        name = {"ensemble": "manifest.json", "report": "preview.md" if "preview" in target else "compare.md",
                "demo": "notes.txt", "collation": "collation.html"}[kind]
        (path / name).write_text("someone's file\n")
        phrases = ("taken", name if kind != "ensemble" else "holds an ensemble already", "--force")
    argv = _argv(work, target, path)
    refused(capsys, argv, *phrases, folder=work)


@pytest.mark.parametrize("target", list(TARGETS))
def test_output_target_in_a_missing_folder(work, capsys, target):
    path = work / "missing" / "t"
    refused(capsys, _argv(work, target, path), str(work / "missing"), "does not exist", "create it first",
            folder=work)


@pytest.mark.parametrize("target", list(TARGETS))
def test_output_target_in_an_unwritable_folder(work, sealed, capsys, target):
    path = sealed / "t"
    refused(capsys, _argv(work, target, path), str(sealed), "not writable", "choose another folder", folder=work)


def test_apply_output_whose_provenance_record_exists(work, capsys):
    (work / "out.nc.provenance.json").write_text("{}\n")  # an earlier record: replaced only with --force
    refused(capsys, apply_argv(work, recipe(work)), "out.nc.provenance.json", "exists", "--force", folder=work)


def test_resume_for_a_single_output_file(work, capsys):
    refused(capsys, apply_argv(work, recipe(work), "--resume"), "--resume", "ensemble", folder=work)
