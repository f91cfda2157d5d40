"""The schema names the kind of document it validates: a layout's keys are "layout key ...", a
recipe's "recipe key ...", every node type alike, composed from the key and the kind (never by
rewriting a message's text afterwards). The promise checked is the README's: a bad input gets one
line naming the recipe or layout key concerned."""

from __future__ import annotations

import pytest

from initgen.config.recipe import LAYOUT, RECIPE, load_layout, load_recipe
from initgen.errors import InputError

LAYOUT_OK = {"initgen_layout": 1, "roles": {"soil_temperature": "tsoil"}}

# (a bad layout, the key its message must name): one per node type of the schema
BAD_LAYOUTS = [
    ({**LAYOUT_OK, "snow_layers": "two"}, "snow_layers", "must be an integer"),                    # Num
    ({**LAYOUT_OK, "snow_layers": 99}, "snow_layers", "must be <= 50"),                            # Num bound
    ({**LAYOUT_OK, "interfaces": "guess"}, "interfaces", "must be one of as_given"),               # Str choices
    ({**LAYOUT_OK, "name": 7}, "name", "must be a non-empty string"),                              # Str
    ({**LAYOUT_OK, "roles": {"soil_temperature": []}}, "roles.soil_temperature", "needs at least 1"),  # AnyOf/List
    ({**LAYOUT_OK, "roles": {"soil_temprature": "t"}}, "roles.soil_temprature", "did you mean"),   # Obj unknown key
    ({**LAYOUT_OK, "roles": ["soil_temperature"]}, "roles", "must be a mapping of keys"),          # Obj type
    ({**LAYOUT_OK, "grid_file": {"longitude": "lon"}}, "grid_file.path", "is required"),           # Obj required
]


@pytest.mark.parametrize("doc,key,what", BAD_LAYOUTS)
def test_a_layout_error_names_a_layout_key(doc, key, what):
    with pytest.raises(InputError) as err:
        load_layout(doc)
    msg = str(err.value)
    assert f"layout key {key}:" in msg and what in msg, msg
    assert "recipe key" not in msg, msg
    assert err.value.key == key


@pytest.mark.parametrize("doc,key,what", BAD_LAYOUTS)
def test_the_schema_words_the_kind_it_is_given(doc, key, what):
    # the same node, asked for either kind, words the key as that kind's, with the key as a field
    for kind in ("layout", "recipe"):
        with pytest.raises(InputError) as err:
            LAYOUT.validate(doc, "", kind)
        assert str(err.value).startswith(f"{kind} key {key}:"), str(err.value)
        assert err.value.key == key


def test_an_inline_layout_is_part_of_the_recipe():
    # keys of a layout written inside a recipe are recipe keys (layout.roles...), as before
    rec = {"initgen_recipe": 1, "name": "x", "layout": {"initgen_layout": 1, "roles": {"soil_temprature": "t"}},
           "perturbations": [{"name": "a", "region": {"include": [{"box": {"lon": [0, 1], "lat": [0, 1]}}]},
                              "anomaly": {"constant_K": 1}}]}
    with pytest.raises(InputError) as err:
        load_recipe(rec)
    assert "recipe key layout.roles.soil_temprature: unknown key" in str(err.value)
    assert err.value.key == "layout.roles.soil_temprature"
    with pytest.raises(InputError) as err:
        RECIPE.validate({**rec, "seed": -1}, "", "recipe")
    assert str(err.value) == "recipe key seed: must be >= 0 1, got -1"
