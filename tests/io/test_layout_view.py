"""The typed layout view (io/layout.py) against the layout format it stands for.

The reference is the layout format as published to users: the schema nodes of
``config/recipe.LAYOUT`` and the JSON Schema that ``initgen schema --layout`` prints from them (its
``properties``, ``required`` and ``default`` entries). The checks walk that schema, so a layout key
added to the format without a view attribute (or with a default the view does not carry) fails
here; the shipped example layouts then go through the view and back to the dict that is hashed.
"""

from __future__ import annotations

import copy
import dataclasses

import pytest

from clikit import LAYOUTS
from initgen.config.recipe import LAYOUT, inline_layout, load_layout, load_recipe
from initgen.config.schema import AnyOf, List, Obj
from initgen.io import layout as layout_mod
from initgen.io.frozen import View

SHIPPED = sorted(LAYOUTS.glob("*.yaml"))
MINIMAL = {"initgen_layout": 1, "roles": {"soil_temperature": "tsoil"}}
# every optional section given with only its required keys (or one key), so that their defaults show
SECTIONS = {
    "initgen_layout": 1,
    "roles": {"soil_temperature": ["t1", "t2"], "layer_node_depth": {"values": [0.05, 0.2]},
              "layer_thickness": "dz"},
    "units": {"soil_temperature": "K"},
    "water": {"units": {"soil_liquid": "kg m-2"}},
    "grid_file": {"path": "grid.nc"},
}


def _objects(node):
    """The mapping nodes a key's value may be: itself, a list's item, an AnyOf's options."""
    node = node.item if isinstance(node, List) else node
    if isinstance(node, AnyOf):
        return [o for opt in node.options for o in _objects(opt)]
    return [node] if isinstance(node, Obj) else []


def _pairs(node, cls, path="layout"):
    """(path, schema node, view class) for every mapping of the layout format."""
    yield path, node, cls
    for key, sub in node.fields.items():
        for obj in _objects(sub):
            assert key in cls.NESTED, f"{path}.{key}: a mapping of the format without a view class in " \
                                      f"{cls.__name__}.NESTED"
            yield from _pairs(obj, cls.NESTED[key], f"{path}.{key}")


def test_every_layout_key_has_a_view_attribute_in_the_formats_order():
    walked = list(_pairs(LAYOUT, layout_mod.Layout))
    assert {cls for _, _, cls in walked} == {layout_mod.Layout, layout_mod.Roles, layout_mod.DepthValues,
                                             layout_mod.Units, layout_mod.WaterSection, layout_mod.WaterUnits,
                                             layout_mod.GridFile}
    for path, node, cls in walked:
        attrs = [f.name for f in dataclasses.fields(cls)]
        assert attrs == list(node.fields), f"{path}: {cls.__name__} attributes differ from the format's keys"


def _check_defaults(props: dict, required: list, raw: dict, view, path: str):
    """A key the input leaves out holds the printed schema's default (None where it documents
    none; an object default walked); a mapping given is walked in turn."""
    for key, prop in props.items():
        value, where = getattr(view, key), f"{path}.{key}"
        if key in raw:
            if isinstance(raw[key], dict) and "properties" in prop:
                _check_defaults(prop["properties"], prop.get("required", []), raw[key], value, where)
            continue
        assert key not in required, f"{where}: a required key the test input left out"
        if "default" not in prop:
            assert value is None, f"{where}: no default in the schema, so the view holds None, got {value!r}"
        else:
            assert value == prop["default"] and type(value) is type(prop["default"]), \
                f"{where}: {value!r}, schema default {prop['default']!r}"


@pytest.mark.parametrize("raw", [MINIMAL, SECTIONS], ids=["minimal", "sections"])
def test_defaults_are_filled_as_the_printed_schema_says(raw):
    schema = LAYOUT.json()
    view = load_layout(copy.deepcopy(raw)).view
    assert isinstance(view, layout_mod.Layout)
    _check_defaults(schema["properties"], schema["required"], raw, view, "layout")
    # spot checks, read off the schema's documentation of these keys
    assert view.snow_layers == 0 and view.interfaces == "as_given"


def test_written_depths_are_a_view_and_names_stay_names():
    view = load_layout(copy.deepcopy(SECTIONS)).view
    nodes = view.roles.layer_node_depth
    # the format's documented defaults of a written depth: units m, positive down
    assert nodes == layout_mod.DepthValues(values=(0.05, 0.2), units="m", positive="down")
    assert view.roles.layer_thickness == "dz" and view.roles.soil_temperature == ("t1", "t2")
    assert view.roles.get("soil_temperature") == ("t1", "t2") and view.roles.get("soil_liquid") is None
    assert view.units_of("soil_temperature") == "K" and view.units_of("soil_liquid") == ""
    assert view.water.units.items() == [("soil_liquid", "kg m-2")]


def _walk(value):
    yield value
    if isinstance(value, View):
        for f in dataclasses.fields(value):
            yield from _walk(getattr(value, f.name))
    elif isinstance(value, (tuple, list, dict)):
        for v in (value.values() if isinstance(value, dict) else value):
            yield from _walk(v)


@pytest.mark.parametrize("path", SHIPPED, ids=[p.stem for p in SHIPPED])
def test_each_shipped_layout_says_through_its_view_what_its_hashed_dict_says(path):
    doc = load_layout(path)
    sha = doc.sha256
    assert doc.view.as_dict() == doc.data
    assert doc.sha256 == sha and doc.view is doc.view  # built once; the hashed dict untouched
    assert not [v for v in _walk(doc.view) if isinstance(v, (list, dict, set))]
    with pytest.raises(dataclasses.FrozenInstanceError):
        doc.view.roles.soil_temperature = "other"


def test_a_recipes_inline_layout_reads_through_the_same_view():
    recipe = load_recipe({
        "initgen_recipe": 1, "name": "inline",
        "perturbations": [{"name": "a", "region": {"include": [{"box": {"lon": [0, 10], "lat": [0, 10]}}]},
                           "anomaly": {"constant_K": 1.0}}],
        "layout": copy.deepcopy(SECTIONS)})
    lay = inline_layout(recipe)
    assert isinstance(lay.view, layout_mod.Layout)
    assert lay.view.as_dict() == recipe.data["layout"] == load_layout(copy.deepcopy(SECTIONS)).data
    assert lay.view.grid_file.path == "grid.nc" and lay.view.grid_file.tile_pattern is None
