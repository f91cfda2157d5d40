"""Recipe and layout validation: every bad recipe gets a one-line message naming the key."""

from __future__ import annotations

import json

import pytest
import yaml

from initgen.cli import main
from initgen.errors import InputError
from initgen.config.recipe import LAYOUT, RECIPE, canonical_hash, load_layout, load_recipe

GOOD = """\
initgen_recipe: 1
name: ok
perturbations:
  - name: a
    region:
      include: [{box: {lon: [10, 20], lat: [0, 10]}}]
      taper_km: 100
    anomaly: {constant_K: -2}
    profile: {kind: exponential, efolding_m: 0.5}
"""


def load_text(tmp_path, text):
    p = tmp_path / "r.yaml"
    p.write_text(text)
    return load_recipe(p)


def test_good_recipe_and_defaults(tmp_path):
    r = load_text(tmp_path, GOOD)
    b = r.data["perturbations"][0]
    assert b["region"]["taper_placement"] == "outside"
    assert b["targets"] == ["soil_temperature"]
    assert r.data["physics"]["mode"] == "none"
    assert r.data["physics"]["soil_temperature_min_K"] == 180.0


BAD = [
    ("initgen_recipe: 1\nname: x\nperturbations: [\n", "malformed YAML at line"),
    ("", "the recipe is empty"),
    ("- a\n- b\n", "must be a mapping"),
    ("name: x\nperturbations: []\n", "missing 'initgen_recipe: 1'"),
    ("initgen_recipe: 7\nname: x\nperturbations: []\n", "initgen_recipe: must be <= 1"),
    (GOOD.replace("taper_km: 100", "taper_km: -5"), "perturbations[0].region.taper_km: must be >= 0.0 km, got -5"),
    (GOOD.replace("taper_km: 100", "tapr_km: 100"), "perturbations[0].region.tapr_km: unknown key; did you mean 'taper_km'?"),
    (GOOD.replace("constant_K: -2", "constant_K: -2000"), "perturbations[0].anomaly.constant_K: must be >= -60.0 K, got -2000"),
    (GOOD.replace("constant_K: -2", "constant_K: cold"), "perturbations[0].anomaly.constant_K: must be a number, got 'cold'"),
    (GOOD.replace("anomaly: {constant_K: -2}", "anomaly: {}"), "perturbations[0].anomaly: give exactly one of constant_K"),
    (GOOD.replace("kind: exponential, efolding_m: 0.5", "kind: exponential"), "perturbations[0].profile.efolding_m: is required for kind 'exponential'"),
    (GOOD.replace("kind: exponential", "kind: expo"), "profile.kind: must be one of uniform, exponential"),
    (GOOD.replace("efolding_m: 0.5", "efolding_m: -1"), "profile.efolding_m: must be > 0.0 m, got -1"),
    (GOOD.replace("lat: [0, 10]", "lat: [0, 100]"), "box.lat[1]: must be <= 90.0 degrees_north, got 100"),
    (GOOD.replace("include: [{box: {lon: [10, 20], lat: [0, 10]}}]", "include: []"), "region.include: needs at least 1 item(s)"),
    (GOOD + "  - name: a\n    region: {include: [{box: {lon: [1, 2], lat: [1, 2]}}]}\n    anomaly: {constant_K: 1}\n",
     "perturbations[1].name: duplicate name 'a'"),
    (GOOD.replace("name: ok", "name: !!python/object/apply:os.system ['echo hi']"), "refused YAML tag"),
    (GOOD + "physics: {mode: energetic}\n", "physics.mode: must be one of none, temperature, energy, got 'energetic' (did you mean 'energy'?)"),
    (GOOD + "physics: {soil_temperature_min_K: 273.15, soil_temperature_max_K: 273.15}\n", "physics.soil_temperature_min_K: must be below"),
    (GOOD.replace("name: ok\n", ""), "name: is required"),
    (GOOD.replace("include: [{box: {lon: [10, 20], lat: [0, 10]}}]",
                  "include: [{box: {lon: [10, 20], lat: [0, 10]}, vertices: [[0, 0], [1, 0], [1, 1]]}]"),
     "give exactly one of geojson, box, vertices, published (got box, vertices)"),
]


@pytest.mark.parametrize("text,message", BAD, ids=[m[:40] for _, m in BAD])
def test_bad_recipes_one_line_message(tmp_path, text, message, capsys):
    with pytest.raises(InputError) as exc:
        load_text(tmp_path, text)
    assert message in str(exc.value)
    assert str(tmp_path / "r.yaml") in str(exc.value)  # names the file
    assert main(["check", str(tmp_path / "r.yaml")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("initgen: error:") and "Traceback" not in err


def test_hash_ignores_order_comments_whitespace_and_defaults(tmp_path):
    a = load_text(tmp_path, GOOD)
    reordered = """\
# a comment
perturbations:
  - profile:   {efolding_m: 0.5, kind: exponential}
    anomaly: {constant_K: -2.0}
    name: a
    region:
      taper_km: 100.0
      taper_placement: outside
      include: [{box: {lat: [0, 10], lon: [10, 20]}}]
name: ok
initgen_recipe: 1
"""
    p = tmp_path / "r2.yaml"
    p.write_text(reordered)
    assert load_recipe(p).sha256 == a.sha256
    changed = GOOD.replace("constant_K: -2", "constant_K: -2.5")
    assert load_text(tmp_path, changed).sha256 != a.sha256
    assert canonical_hash({"b": 1, "a": [1, 2]}) == canonical_hash({"a": [1, 2], "b": 1})


def test_schema_is_valid_json_schema_and_agrees_with_validator(tmp_path, capsys):
    jsonschema = pytest.importorskip("jsonschema")
    assert main(["schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    jsonschema.Draft202012Validator.check_schema(schema)
    good = yaml.safe_load(GOOD)
    jsonschema.validate(good, schema)
    bad = yaml.safe_load(GOOD.replace("taper_km: 100", "taper_km: -5"))
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(bad, schema)
    assert main(["schema", "--layout"]) == 0
    lschema = json.loads(capsys.readouterr().out)
    jsonschema.validate({"initgen_layout": 1, "roles": {"soil_temperature": ["a", "b"]}}, lschema)
    assert RECIPE.json()["properties"]["perturbations"]["items"]["properties"]["region"]
    assert LAYOUT.json()["properties"]["roles"]


def test_layout_errors(tmp_path):
    p = tmp_path / "l.yaml"
    p.write_text("initgen_layout: 1\nroles: {soil_temprature: x}\n")
    with pytest.raises(InputError, match=r"roles.soil_temprature: unknown key; did you mean 'soil_temperature'"):
        load_layout(p)
    p.write_text("initgen_layout: 1\nroles: {layer_node_depth: {values: [1, 2], units: furlong, positive: sideways}}\n")
    with pytest.raises(InputError, match="positive: must be one of down, up"):
        load_layout(p)


def test_paths_may_not_leave_recipe_folder(tmp_path):
    from initgen.config.recipe import resolve_path

    sub = tmp_path / "exp"
    sub.mkdir()
    (tmp_path / "secret.nc").write_text("x")
    (sub / "near.nc").write_text("x")
    r = load_text(sub, GOOD)
    assert resolve_path(r, "near.nc", "k") == (sub / "near.nc").resolve()
    with pytest.raises(InputError, match="leaves the recipe's folder.*--allow-outside-paths"):
        resolve_path(r, "../secret.nc", "perturbations[0].anomaly.field.file")
    assert resolve_path(r, "../secret.nc", "k", allow_outside=True).name == "secret.nc"
    with pytest.raises(InputError, match="leaves the recipe's folder"):
        resolve_path(r, str(tmp_path / "secret.nc"), "k")


def test_shipped_mask_never_replaces_a_path_with_folders(tmp_path):
    """A GeoJSON reference with folders resolves only as written (regression: a '../x.geojson'
    that left the recipe folder was silently swapped for the shipped mask of the same name)."""
    from initgen.engine.fields import resolve_shape_file

    exp = tmp_path / "exp"
    exp.mkdir()
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "demo-highland.geojson").write_text("{}")
    r = load_text(exp, GOOD)
    with pytest.raises(InputError, match="leaves the recipe's folder"):
        resolve_shape_file(r, "../other/demo-highland.geojson", "k", False)
    assert resolve_shape_file(r, "demo-highland.geojson", "k", False).parent.name == "masks"
    (exp / "demo-highland.geojson").write_text("{}")
    assert resolve_shape_file(r, "demo-highland.geojson", "k", False) == (exp / "demo-highland.geojson").resolve()
    with pytest.raises(InputError, match="not found beside the recipe"):
        resolve_shape_file(r, "nothere.geojson", "k", False)


def test_texture_spellings_hash_the_same_and_one_parameter_source(tmp_path):
    a = load_text(tmp_path, GOOD + "physics: {mode: energy, texture: sandy_loam}\n")
    b = load_text(tmp_path, GOOD + "physics: {mode: energy, texture: ' Sandy loam'}\n")
    assert a.sha256 == b.sha256 and a.data["physics"]["texture"] == "sandy loam"
    with pytest.raises(InputError, match="physics: give one source of soil parameters, not texture and sand_pct/clay_pct"):
        load_text(tmp_path, GOOD + "physics: {mode: energy, texture: loam, sand_pct: 40, clay_pct: 20}\n")


def test_output_path_must_fit_the_recipe(tmp_path, capsys):
    from filemaker import regular

    src = regular(tmp_path / "in.nc")
    rec = tmp_path / "r.yaml"
    rec.write_text(GOOD)
    assert main(["apply", str(rec), "-i", str(src), "-o", str(tmp_path / "outdir") + "/"]) == 2
    assert "names a folder" in capsys.readouterr().err
    assert not (tmp_path / "outdir").exists()


def test_names_differing_only_in_case_are_duplicates(tmp_path):
    text = GOOD + "  - name: A\n    region: {include: [{box: {lon: [1, 2], lat: [1, 2]}}]}\n    anomaly: {constant_K: 1}\n"
    with pytest.raises(InputError, match="duplicate name 'A'"):
        load_text(tmp_path, text)
