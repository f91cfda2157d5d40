"""The error catalogue, part one: recipes and layouts refused for what they say (config).

Each row feeds one bad recipe or layout to the command line and checks the README's promise
with :func:`clikit.refused` (exit 2, one line naming the file, variable or key and what to do,
nothing written, the input unchanged). The test names read as the catalogue:
``test_<the bad input>``. The other parts: ``io/test_errors_files.py`` (model files and the
files a recipe names, as read), ``test_errors_cli.py`` (command line and output policy) and
``test_errors_geometry.py`` (layer geometry, CF roles, grid files).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from initgen.cli import main
from initgen.demo import write_demo_restart

from filemaker import field_file, regular
from clikit import CATALOGUE_RECIPE as RECIPE
from clikit import CATALOGUE_LAYOUT as LAYOUT
from clikit import apply_argv, field_recipe, geo_recipe, layout, recipe, refused, swap


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


# =============================================================================================
# Files named in a recipe: where they may be (untrusted recipes may not leave their folder)
# =============================================================================================


GEO_POLY = {"type": "Polygon", "coordinates": [[[20, 10], [80, 10], [80, 50], [20, 50], [20, 10]]]}


def test_geojson_missing(work, capsys):
    rec = geo_recipe(work, "nowhere.geojson")
    refused(capsys, apply_argv(work, rec), "perturbations[0].region.include[0].geojson", "nowhere.geojson",
            "not found", folder=work)


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


def test_anomaly_file_missing(work, capsys):
    rec = field_recipe(work, "nothing.nc")
    refused(capsys, apply_argv(work, rec), "perturbations[0].anomaly.field.file", "not found", folder=work)


# =============================================================================================
# Layouts: their keys and values
# =============================================================================================


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


def test_layer_depths_not_monotonic(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, 0.35, 0.15, 0.75, 1.5]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", "strictly increasing",
            folder=work)


def test_layer_depths_absurdly_deep(work, capsys):
    # once: accepted, then the infinite thickness reached the provenance record (ValueError, exit 1)
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, 0.15, 0.35, 0.75, 1.0e300]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", "index 4",
            "more than 1000 m", "check the units", folder=work)


def test_layer_depths_in_unknown_units(work, capsys):
    # any UDUNITS length converts (ft, even fathoms); units that are no length are refused
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("units: m}", "units: degrees}"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", "degrees", "'m'",
            folder=work)


def test_layer_depths_with_nan(work, capsys):
    rec = recipe(work)
    lay = layout(work, LAYOUT.replace("[0.05, 0.15, 0.35, 0.75, 1.5]", "[0.05, .nan, 0.35, 0.75, 1.5]"))
    refused(capsys, apply_argv(work, rec, "--layout", lay), "roles.layer_node_depth", folder=work)



def test_recipe_from_a_newer_format(work, capsys):
    rec = recipe(work, swap("initgen_recipe: 1", "initgen_recipe: 2"))
    refused(capsys, ["check", rec], "r.yaml", "recipe key initgen_recipe", "got 2", "reads recipe format 1",
            "upgrade initgen", folder=work)


def test_unknown_texture_refused_when_the_recipe_is_read(work, capsys):
    # no input file needed: the class is checked against Clapp and Hornberger (1978), Table 2, on load
    rec = recipe(work, RECIPE + "physics: {mode: energy, texture: lome}\n")
    refused(capsys, ["check", rec], "r.yaml", "recipe key physics.texture", "'lome'", "use one of", "silty clay loam",
            folder=work)
