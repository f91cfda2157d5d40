"""Fuzzing the recipe and layout readers: whatever a recipe holds, initgen accepts it or refuses it
with an InputError (exit 2 on the command line), never any other exception.

Hypothesis mutates valid recipes and layouts (deletes keys, adds unknown ones, renames them,
puts random values of random types in random places, wraps values in lists or mappings) and
also mutates the YAML text itself. Every mutant goes through ``load_recipe`` / ``load_layout``;
the gentler ones (leaf values replaced by nearby or boundary values) go on through
``initgen.api.check`` against a small file, and a few through ``initgen.api.apply``, where a
refusal must leave no output, no record and no temporary file, and the input unchanged.

About 1300 examples in all (``INITGEN_FUZZ_SCALE=20`` multiplies them for a long hunt);
``database=None`` so that nothing is written into the checkout.
"""

from __future__ import annotations

import copy
import json
import os
import warnings

import numpy as np
import pytest
import yaml
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from initgen import api
from initgen.errors import InputError
from initgen.config.recipe import LAYOUT, RECIPE, load_layout, load_recipe
from initgen.config.schema import walk_reference

from filemaker import regular
from clikit import sha

SCALE = float(os.environ.get("INITGEN_FUZZ_SCALE", "1"))  # e.g. 20 for a long hunt before a release


def fuzz(n: int) -> settings:
    return settings(max_examples=max(1, int(n * SCALE)), deadline=None, database=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])

# ---------------------------------------------------------------------------------------------
# Valid starting points
# ---------------------------------------------------------------------------------------------

BOX = {"box": {"lon": [20, 80], "lat": [10, 50]}}
BASE_RECIPES = [
    {"initgen_recipe": 1, "name": "box",
     "perturbations": [{"name": "a", "region": {"include": [BOX], "taper_km": 200},
                        "anomaly": {"constant_K": -2}, "profile": {"kind": "exponential", "efolding_m": 0.5}}]},
    {"initgen_recipe": 1, "name": "vertices", "seed": 3,
     "perturbations": [{"name": "v", "region": {"include": [{"vertices": [[10, 0], [60, 0], [60, 40], [10, 40]]}],
                                                 "exclude": [{"box": {"lon": [30, 40], "lat": [10, 20]}}],
                                                 "taper_km": 0, "taper_placement": "inside"},
                        "anomaly": {"constant_K": 1.5},
                        "profile": {"kind": "table", "table": [[0, 1], [0.5, 0.5], [2, 0]], "evaluate": "layer_mean"},
                        "targets": ["soil_temperature"]}],
     "physics": {"mode": "none", "soil_temperature_min_K": 200, "soil_temperature_max_K": 330}},
    {"initgen_recipe": 1, "name": "shape-and-field",
     "perturbations": [{"name": "g", "region": {"include": [{"geojson": "shape.geojson"}], "taper_km": 300,
                                                 "taper_placement": "centred", "use_land_fraction": True},
                        "anomaly": {"field": {"file": "anom.nc", "variable": "anom", "scale": 0.5}},
                        "profile": {"kind": "damping", "diffusivity_m2_s": 5e-7, "period_days": 365.25}},
                       {"name": "h", "region": {"include": [BOX], "land_threshold": 0.3},
                        "anomaly": {"constant_K": 2}, "profile": {"kind": "linear", "zero_at_m": 1.0,
                                                                  "max_depth_m": 0.8}}]},
    {"initgen_recipe": 1, "name": "inline-layout",
     "perturbations": [{"name": "a", "region": {"include": [BOX]}, "anomaly": {"constant_K": -1}}],
     "layout": {"initgen_layout": 1, "name": "inline",
                "roles": {"longitude": "lon", "latitude": "lat", "soil_temperature": "tsoil",
                          "land_fraction": "landfrac",
                          "layer_node_depth": {"values": [5, 15, 35, 75, 150], "units": "cm"}}}},
]

BASE_LAYOUTS = [
    {"initgen_layout": 1, "name": "plain",
     "roles": {"longitude": "lon", "latitude": "lat", "soil_temperature": "tsoil", "land_fraction": "landfrac",
               "layer_node_depth": {"values": [0.05, 0.15, 0.35, 0.75, 1.5], "units": "m"}}},
    {"initgen_layout": 1, "name": "from-file", "layer_dimension": "lev", "snow_layers": 0,
     "roles": {"soil_temperature": "tsoil", "layer_node_depth": "lev"},
     "units": {"soil_temperature": "K"}},
    {"initgen_layout": 1,
     "roles": {"longitude": "lon", "latitude": "lat", "soil_temperature": ["tsoil"],
               "layer_interface_depth": {"values": [0, 0.1, 0.2, 0.5, 1.0, 2.0], "units": "m", "positive": "down"}}},
]

# ---------------------------------------------------------------------------------------------
# Values and mutations
# ---------------------------------------------------------------------------------------------


def _names(node) -> list:
    return sorted({row[0].split(".")[-1].replace("[]", "") for row in walk_reference(node)})


KEYS = _names(RECIPE) + _names(LAYOUT)
WORDS = KEYS + ["uniform", "exponential", "linear", "table", "damping", "node", "layer_mean", "outside",
                "inside", "centred", "none", "temperature", "energy", "loam", "sand", "clay", "srex", "giorgi",
                "CEU", "TIB", "soil_temperature", "skin_temperature", "snow_temperature", "snow_mass", "lon",
                "lat", "lev", "tsoil", "landfrac", "other", "m", "cm", "mm", "K", "degC", "up", "down", "add",
                "multiply", "shape.geojson", "anom.nc", "anom", "../anom.nc", "/etc/passwd", "", " ", "\x00"]
BOUNDARY = [0, -0.0, 1, -1, 0.5, 1e-300, -1e-300, 1e300, -1e300, 59.9, 60, 60.1, -60.1, 90, 90.0001, -90.0001,
            180, 360, 360.0001, 5000, 5000.1, 1e-4, 1.0001e-4, 2**63, 2**63 - 1, -(2**63), 10**400, 0.1 + 0.2,
            float("nan"), float("inf"), float("-inf"), True, False, None]

leaf = st.one_of(
    st.none(), st.booleans(),
    st.integers(min_value=-10**6, max_value=10**6), st.integers(),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=12), st.sampled_from(WORDS), st.sampled_from(BOUNDARY),
)
value = st.recursive(leaf, lambda inner: st.lists(inner, max_size=4)
                     | st.dictionaries(st.one_of(st.sampled_from(KEYS), st.text(max_size=8)), inner, max_size=4),
                     max_leaves=8)


def positions(obj, out=None):
    """Every (container, key) slot of a nested dict/list document."""
    out = [] if out is None else out
    if isinstance(obj, dict):
        for k in list(obj):
            out.append((obj, k))
            positions(obj[k], out)
    elif isinstance(obj, list):
        for i in range(len(obj)):
            out.append((obj, i))
            positions(obj[i], out)
    return out


def containers(obj, out=None):
    out = [] if out is None else out
    if isinstance(obj, (dict, list)):
        out.append(obj)
        for v in (obj.values() if isinstance(obj, dict) else obj):
            containers(v, out)
    return out


def _times(value, factor):
    try:
        return value * factor
    except OverflowError:  # an integer of 400 digits times a float
        return value


def mutate(doc, data, *, wild=True, edge=False):
    """Apply one random mutation to ``doc`` in place (``wild=False``: leaf values only, near their
    type; ``edge``: leaf values only, replaced by boundary values and odd strings)."""
    slots = positions(doc)
    if edge:
        leaves = [(c, k) for c, k in slots if not isinstance(c[k], (dict, list))]
        c, k = data.draw(st.sampled_from(leaves))
        c[k] = data.draw(st.sampled_from(BOUNDARY) if isinstance(c[k], (int, float)) and data.draw(st.booleans())
                         else leaf)
        return
    if not wild:
        leaves = [(c, k) for c, k in slots if not isinstance(c[k], (dict, list))]
        if not leaves:
            return
        c, k = data.draw(st.sampled_from(leaves))
        old = c[k]
        if isinstance(old, bool):
            c[k] = data.draw(st.one_of(st.booleans(), leaf))
        elif isinstance(old, (int, float)):
            c[k] = data.draw(st.one_of(
                st.builds(lambda f: _times(old, f), st.sampled_from([0.5, 0.9, 1.1, 1.5, 2, 3])),
                st.builds(lambda f: _times(old, f), st.sampled_from([-1, 0, 10, 1000, 1e-6])),
                st.floats(min_value=-100, max_value=100, allow_nan=False),
                st.sampled_from(BOUNDARY)))
        else:
            c[k] = data.draw(st.one_of(st.sampled_from(WORDS), st.text(max_size=6)))
        return
    op = data.draw(st.sampled_from(["delete", "set", "add", "rename", "wrap", "set", "set"]))
    if op in ("set", "wrap", "delete") and slots:
        c, k = data.draw(st.sampled_from(slots))
        if op == "delete":
            del c[k]
        elif op == "wrap":
            c[k] = data.draw(st.sampled_from([[c[k]], {"x": c[k]}, [c[k], c[k]]]))
        else:
            c[k] = data.draw(value)
    elif op == "rename":
        dicts = [c for c in containers(doc) if isinstance(c, dict) and c]
        if dicts:
            c = data.draw(st.sampled_from(dicts))
            k = data.draw(st.sampled_from(list(c)))
            new = data.draw(st.one_of(st.sampled_from(KEYS), st.text(max_size=8),
                                      st.just(f"{k}s"), st.just(str(k).upper()), st.integers(), st.none()))
            c[new] = c.pop(k)
    else:
        dicts = [c for c in containers(doc) if isinstance(c, dict)] or [doc]
        c = data.draw(st.sampled_from(dicts))
        c[data.draw(st.one_of(st.sampled_from(KEYS), st.text(max_size=8)))] = data.draw(value)


def mutant(data, bases, wild=True, edge=False):
    doc = copy.deepcopy(data.draw(st.sampled_from(bases)))
    for _ in range(data.draw(st.integers(1, 4 if wild and not edge else 2))):
        mutate(doc, data, wild=wild, edge=edge)
    return doc


def accepted_or_refused(fn, *args, **kw):
    """Run ``fn``: return its result, or None if it refused with a proper InputError."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = fn(*args, **kw)
    except InputError as exc:
        msg = str(exc)
        assert msg.strip(), "an InputError without a message"
        event(f"{fn.__name__}: refused")
        return None
    event(f"{fn.__name__}: accepted")
    return result


# ---------------------------------------------------------------------------------------------
# Files the check subset runs against
# ---------------------------------------------------------------------------------------------


def _add_layer_bounds(path):
    """CF bounds on the layer axis: layer-mean profiles need interfaces, which initgen never guesses."""
    import netCDF4

    with netCDF4.Dataset(path, "a") as ds:
        ds.createDimension("nv2", 2)
        ds["lev"].bounds = "lev_bnds"
        ds.createVariable("lev_bnds", "f4", ("lev", "nv2"))[:] = [[0, 0.1], [0.1, 0.2], [0.2, 0.5], [0.5, 1.0],
                                                                   [1.0, 2.0]]


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("fuzz")
    regular(d / "in.nc")
    _add_layer_bounds(d / "in.nc")
    (d / "shape.geojson").write_text(json.dumps(
        {"type": "Polygon", "coordinates": [[[20, 10], [80, 10], [80, 50], [20, 50], [20, 10]]]}))
    import netCDF4

    with netCDF4.Dataset(d / "anom.nc", "w") as ds:
        ds.createDimension("lon", 36)
        ds.createDimension("lat", 18)
        ds.createVariable("lon", "f8", ("lon",))[:] = np.arange(0, 360, 10.0)
        ds["lon"].units = "degrees_east"
        ds.createVariable("lat", "f8", ("lat",))[:] = np.arange(-85, 90, 10.0)
        ds["lat"].units = "degrees_north"
        ds.createVariable("anom", "f4", ("lat", "lon"))[:] = np.full((18, 36), -1.0)
    return d


def dump(doc) -> str | None:
    """The mutant as YAML text, or None when it holds something YAML cannot write (then skip)."""
    try:
        return yaml.safe_dump(doc, sort_keys=False, allow_unicode=True)
    except yaml.YAMLError:
        return None


# ---------------------------------------------------------------------------------------------
# The fuzz tests
# ---------------------------------------------------------------------------------------------


def test_every_base_document_is_valid(folder):
    for doc in BASE_RECIPES:
        (folder / "base.yaml").write_text(yaml.safe_dump(doc))
        api.check(folder / "base.yaml", input=folder / "in.nc")
    for doc in BASE_LAYOUTS:
        api.check(BASE_RECIPES[0], layout=load_layout(doc), input=folder / "in.nc")


@fuzz(200)
@given(data=st.data())
def test_recipe_mutants_load_or_refuse(data):
    doc = mutant(data, BASE_RECIPES)
    accepted_or_refused(load_recipe, doc)


@fuzz(200)
@given(data=st.data())
def test_recipe_edge_values_load_or_refuse(data):
    doc = mutant(data, BASE_RECIPES, edge=True)
    accepted_or_refused(load_recipe, doc)


@fuzz(100)
@given(data=st.data())
def test_layout_edge_values_load_or_refuse(data):
    doc = mutant(data, BASE_LAYOUTS, edge=True)
    accepted_or_refused(load_layout, doc)


@fuzz(120)
@given(data=st.data())
def test_recipe_mutants_through_yaml_files(folder, data):
    doc = mutant(data, BASE_RECIPES)
    text = dump(doc)
    if text is None:
        return
    path = folder / "mutant.yaml"
    path.write_text(text, encoding="utf-8")
    accepted_or_refused(load_recipe, path)


YAML_NOISE = st.text(alphabet=":-[]{}!&*#'\"\n\t ,|>%@`?~.0123456789eE+_abcxyz\\\x00\u00e9", max_size=12)


@fuzz(120)
@given(data=st.data())
def test_recipe_text_mutants_load_or_refuse(folder, data):
    text = yaml.safe_dump(data.draw(st.sampled_from(BASE_RECIPES)), sort_keys=False)
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(text)))
        j = data.draw(st.integers(i, min(len(text), i + 20)))
        text = text[:i] + data.draw(YAML_NOISE) + text[j:]
    path = folder / "text-mutant.yaml"
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    accepted_or_refused(load_recipe, path)


@fuzz(100)
@given(data=st.data())
def test_layout_mutants_load_or_refuse(data):
    doc = mutant(data, BASE_LAYOUTS)
    accepted_or_refused(load_layout, doc)


@fuzz(200)
@given(data=st.data())
def test_recipe_mutants_checked_against_a_file(folder, data):
    doc = mutant(data, BASE_RECIPES, wild=data.draw(st.booleans()))
    text = dump(doc)
    if text is None:
        return
    path = folder / "check.yaml"
    path.write_text(text, encoding="utf-8")
    before = sha(folder / "in.nc")
    accepted_or_refused(api.check, path, input=folder / "in.nc")
    assert sha(folder / "in.nc") == before


@fuzz(100)
@given(data=st.data())
def test_layout_mutants_checked_against_a_file(folder, data):
    doc = mutant(data, BASE_LAYOUTS, wild=data.draw(st.booleans()))
    lay = accepted_or_refused(load_layout, doc)
    if lay is not None:
        accepted_or_refused(api.check, BASE_RECIPES[0], layout=lay, input=folder / "in.nc")


@fuzz(60)
@given(data=st.data())
def test_recipe_mutants_applied_leave_nothing_when_refused(folder, data):
    doc = mutant(data, BASE_RECIPES, wild=False)
    text = dump(doc)
    if text is None:
        return
    (folder / "apply.yaml").write_text(text, encoding="utf-8")
    out = folder / "out" / "o.nc"
    out.parent.mkdir(exist_ok=True)
    for p in out.parent.iterdir():
        p.unlink()
    before = sha(folder / "in.nc")
    rec = accepted_or_refused(api.apply, folder / "apply.yaml", folder / "in.nc", out)
    left = sorted(p.name for p in out.parent.iterdir())
    if rec is None:
        assert left == [], left
    else:
        assert left == ["o.nc", "o.nc.provenance.json"], left
        assert rec["output"]["sha256"] == sha(out)
    assert sha(folder / "in.nc") == before


@fuzz(120)
@given(data=st.data())
def test_cli_mutants_exit_0_or_2_with_one_line(folder, data, capsys):
    """Through the command line: exit 0, or exit 2 with exactly one 'initgen: error:' line."""
    from initgen.cli import main

    doc = mutant(data, BASE_RECIPES, wild=data.draw(st.booleans()))
    text = dump(doc)
    if text is None:
        return
    (folder / "cli.yaml").write_text(text, encoding="utf-8")
    command = data.draw(st.sampled_from(["check", "preview"]))
    capsys.readouterr()
    rc = main([command, str(folder / "cli.yaml"), "--input", str(folder / "in.nc")])
    err = capsys.readouterr().err.splitlines()
    event(f"cli {command}: exit {rc}")
    assert rc in (0, 2), err
    if rc == 2:
        assert len(err) == 1 and err[0].startswith("initgen: error: "), err
    else:
        assert all(line.startswith("initgen: warning: ") for line in err), err
