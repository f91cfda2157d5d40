"""The typed recipe views (config/views.py) against the recipe format they stand for.

The reference is the recipe format as published to users: the schema nodes of config/recipe.py
and the JSON Schema that ``initgen schema`` prints from them (its ``properties``, ``required``
and ``default`` entries). The checks walk that schema, so a recipe key added to the format
without a view attribute (or with a default the view does not carry) fails here.
"""

from __future__ import annotations

import copy
import dataclasses

import pytest

from initgen.config import views
from initgen.config.recipe import BLOCK, PHYSICS, RECIPE, load_layout, load_recipe
from initgen.config.schema import AnyOf, List, Obj

# keys of the format that have no view attribute, and why
NOT_IN_VIEW = {"layout": "the inline layout is a layout document of its own (recipe.inline_layout), whose view "
                        "is io's Layout (tests/io/test_layout_view.py)"}

SHAPE_BOX = {"box": {"lon": [10, 20], "lat": [0, 10]}}
MINIMAL = {
    "initgen_recipe": 1,
    "name": "minimal",
    "perturbations": [{"name": "a", "region": {"include": [SHAPE_BOX]}, "anomaly": {"constant_K": -2}}],
}
# every optional section given with only its required keys, so that their defaults show
SECTIONS = {
    "initgen_recipe": 1,
    "name": "sections",
    "perturbations": [
        {"name": "a", "region": {"include": [SHAPE_BOX], "elevation": {"min_m": 100}},
         "anomaly": {"field": {"file": "anomaly.nc", "variable": "dT"}}},
        {"name": "b", "region": {"include": [{"vertices": [[0, 0], [1, 0], [1, 1]]}],
                                 "exclude": [{"published": {"set": "srex", "regions": ["TIB"]}}]},
         "anomaly": {"bias": {"model_file": "m.nc", "reference_file": "r.nc", "variable": "t"}},
         "profile": {"kind": "table", "table": [[0, 1], [1, 0.5]]}},
    ],
    "members": {"list": [{"name": "m1"}], "noise": {"sigma_K": 0.5, "length_km": 250}},
}


def _item(node):
    """The node of a value, or of each item of a list."""
    return node.item if isinstance(node, List) else node


def _pairs(node, cls, path="recipe"):
    """(path, schema node, view class) for every mapping of the schema that has a view."""
    yield path, node, cls
    for key, sub in node.fields.items():
        sub = _item(sub)
        if key in NOT_IN_VIEW or not isinstance(sub, Obj):
            continue
        assert key in cls.NESTED, f"{path}.{key}: a mapping of the schema without a view class in {cls.__name__}.NESTED"
        yield from _pairs(sub, cls.NESTED[key], f"{path}.{key}")


def test_every_schema_key_has_a_view_attribute_and_every_attribute_a_key():
    walked = list(_pairs(RECIPE, views.RecipeView))
    assert {cls for _, _, cls in walked} >= {views.Block, views.Physics, views.Region, views.Shape, views.Anomaly,
                                             views.Profile, views.Persistence, views.Members}
    for path, node, cls in walked:
        attrs = {f.name for f in dataclasses.fields(cls)}
        keys = set(node.fields) - set(NOT_IN_VIEW if cls is views.RecipeView else ())
        assert keys - attrs == set(), f"{path}: schema keys without a {cls.__name__} attribute"
        assert attrs - keys == set(), f"{path}: {cls.__name__} attributes that are no schema key"
        for key, sub in node.fields.items():
            # a view never hands out a raw mapping: every mapping below is a view class too
            assert not isinstance(_item(sub), AnyOf) or key in NOT_IN_VIEW, f"{path}.{key}"


@pytest.mark.parametrize("node,cls", [(BLOCK, views.Block), (PHYSICS, views.Physics)])
def test_block_and_physics_keys_are_view_attributes(node, cls):
    attrs = [f.name for f in dataclasses.fields(cls)]
    assert attrs == list(node.fields)  # the same keys, in the schema's order


def _check_defaults(props: dict, required: list, raw: dict, view, path: str):
    """Walk the JSON Schema of one mapping beside the raw input and its view: a key the input
    leaves out holds the schema's default (None where it documents none); a key given is walked."""
    for key, prop in props.items():
        if key in NOT_IN_VIEW:
            continue
        value = getattr(view, key)
        where = f"{path}.{key}"
        sub = prop.get("items", prop) if prop.get("type") == "array" else prop
        if key in raw:
            if sub.get("type") == "object":
                items = raw[key] if isinstance(raw[key], list) else [raw[key]]
                vals = value if isinstance(raw[key], list) else (value,)
                for i, (r, v) in enumerate(zip(items, vals)):
                    _check_defaults(sub["properties"], sub.get("required", []), r, v, f"{where}[{i}]")
            continue
        assert key not in required, f"{where}: a required key the test input left out"
        if "default" not in prop:
            assert value is None, f"{where}: no default in the schema, so the view holds None, got {value!r}"
        elif prop.get("type") == "object":
            assert isinstance(value, views.View), where
            _check_defaults(prop["properties"], prop.get("required", []), prop["default"], value, where)
        else:
            expect = tuple(prop["default"]) if isinstance(prop["default"], list) else prop["default"]
            assert value == expect and type(value) is type(expect) or \
                (isinstance(expect, float) and value == expect), f"{where}: {value!r}, schema default {expect!r}"


@pytest.mark.parametrize("raw", [MINIMAL, SECTIONS], ids=["minimal", "sections"])
def test_defaults_are_filled_as_the_printed_schema_says(raw):
    schema = RECIPE.json()
    view = load_recipe(copy.deepcopy(raw)).view
    _check_defaults(schema["properties"], schema["required"], raw, view, "recipe")
    # spot checks, read off the schema's documentation of these keys
    assert view.physics.mode == "none" and view.physics.phase_rule == "change_driven"
    assert view.perturbations[0].targets == ("soil_temperature",)
    assert view.persistence.horizons_days == (7, 15, 30, 60)
    assert view.limits.packed_out_of_range == "refuse"


def _walk(value):
    yield value
    if isinstance(value, views.View):
        for f in dataclasses.fields(value):
            yield from _walk(getattr(value, f.name))
    elif isinstance(value, (tuple, list, dict)):
        for v in (value.values() if isinstance(value, dict) else value):
            yield from _walk(v)


def test_a_view_is_frozen_and_holds_nothing_mutable():
    view = load_recipe(copy.deepcopy(SECTIONS)).view
    with pytest.raises(dataclasses.FrozenInstanceError):
        view.physics.mode = "energy"
    with pytest.raises(dataclasses.FrozenInstanceError):
        view.perturbations[0].region.taper_km = 1.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        view.seed = 1
    assert not [v for v in _walk(view) if isinstance(v, (list, dict, set))]


@pytest.mark.parametrize("raw", [MINIMAL, SECTIONS], ids=["minimal", "sections"])
def test_the_view_says_what_the_hashed_dict_says(raw):
    doc = load_recipe(copy.deepcopy(raw))
    data = {k: v for k, v in doc.data.items() if k not in NOT_IN_VIEW}
    assert doc.view.as_dict() == data
    sha = doc.sha256
    doc.view  # noqa: B018 - building the view changes neither the dict nor its hash
    assert doc.sha256 == sha and doc.view is doc.view


def test_views_name_the_form_given():
    view = load_recipe(copy.deepcopy(SECTIONS)).view
    a, b = view.perturbations
    assert (a.anomaly.kind, b.anomaly.kind) == ("field", "bias")
    assert a.region.include[0].kind == "box" and b.region.exclude[0].kind == "published"
    assert b.region.include[0].vertices == ((0.0, 0.0), (1.0, 0.0), (1.0, 1.0))
    assert load_recipe(copy.deepcopy(MINIMAL)).view.perturbations[0].anomaly.kind == "constant_K"


def test_a_layout_has_its_own_view():
    # a layout's view is io's (tests/io/test_layout_view.py walks its format), never a recipe's
    lay = load_layout({"initgen_layout": 1, "roles": {"soil_temperature": "t"}})
    assert not isinstance(lay.view, views.RecipeView) and lay.view.roles.soil_temperature == "t"
