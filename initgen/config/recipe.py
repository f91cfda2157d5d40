"""Recipe and layout: schema, safe loading, validation and the canonical hash.

A **recipe** says what to change and is model-agnostic; a **layout** says where one model keeps
each quantity (it maps roles to variable and dimension names). Both are YAML documents with a
version key (``initgen_recipe: 1`` / ``initgen_layout: 1``). Numbers that carry a unit carry it
in the key name (``taper_km``, ``constant_K``, ``period_days``), so the unit is never implicit.

YAML is loaded with ``yaml.safe_load`` only: language-specific tags are refused, nothing in a
recipe is ever evaluated, and file references resolve relative to the recipe's folder and may not
leave it unless the caller allows it.
"""

from __future__ import annotations

import copy
import hashlib
import json
import os
import re
from dataclasses import dataclass, replace
from functools import cached_property
from pathlib import Path
from typing import Any

import yaml

from initgen.config.members import expand_members
from initgen.config.schema import AnyOf, Bool, List, Num, Obj, Str
from initgen.config.views import RecipeView
from initgen.errors import InputError
from initgen.io.layout import DEPTH_ROLES
from initgen.io.layout import Layout as LayoutView
from initgen.science.soil.properties import hydraulics_from_texture, texture_key

RECIPE_VERSION = 1
LAYOUT_VERSION = 1

# ---------------------------------------------------------------------------------------------
# Recipe schema
# ---------------------------------------------------------------------------------------------

_LON = List(item=Num(minimum=-180.0, maximum=360.0, unit="degrees_east"), min_items=2, max_items=2,
            doc="[west, east] in degrees east; west > east crosses the 180 degree meridian")
_LAT = List(item=Num(minimum=-90.0, maximum=90.0, unit="degrees_north"), min_items=2, max_items=2,
            doc="[south, north] in degrees north")

SHAPE = Obj(
    doc="one shape: give exactly one of geojson, box, vertices, published",
    fields={
        "geojson": Str(default=None, doc="path of a GeoJSON file (Polygon or MultiPolygon), relative to the recipe"),
        "box": Obj(default=None, doc="a longitude/latitude box",
                   fields={"lon": _LON, "lat": _LAT}),
        "vertices": List(default=None, min_items=3,
                         item=List(item=Num(minimum=-360.0, maximum=720.0, unit="degrees"), min_items=2,
                                   max_items=2),
                         doc="polygon vertices as [lon, lat] pairs"),
        "published": Obj(default=None, doc="regions from a region set that regionmask ships",
                         fields={"set": Str(doc="region set: srex, giorgi or prudence"),
                                 "regions": List(item=Str(), min_items=1,
                                                 doc="region abbreviations, e.g. [TIB]")}),
    },
    one_of=(("geojson", "box", "vertices", "published"),),
)

REGION = Obj(
    doc="where the anomaly applies: the horizontal weight w(x) in [0, 1]",
    fields={
        "include": List(item=SHAPE, min_items=1, doc="shapes whose union is the region"),
        "exclude": List(item=SHAPE, default=[], doc="shapes cut out of the region"),
        "taper_km": Num(minimum=0.0, maximum=5000.0, unit="km", default=0.0,
                        doc="width of the raised-cosine taper in great-circle distance; 0 is a hard edge"),
        "taper_placement": Str(choices=("outside", "inside", "centred"), default="outside",
                               aliases={"centered": "centred"},
                               doc="where the taper lies relative to the region boundary ('centered' is read as "
                                   "'centred')"),
        "elevation": Obj(default=None, doc="keep only cells above an elevation, with a smooth ramp",
                         fields={
                             "min_m": Num(minimum=-500.0, maximum=9000.0, unit="m",
                                          doc="cells below this surface altitude get weight 0"),
                             "ramp_m": Num(minimum=0.0, maximum=5000.0, unit="m", default=0.0,
                                           doc="height over which the weight rises from 0 to 1 above min_m"),
                             "max_m": Num(minimum=-500.0, maximum=9000.0, unit="m", default=None,
                                          doc="optional upper limit"),
                             "max_ramp_m": Num(minimum=0.0, maximum=5000.0, unit="m", default=0.0,
                                               doc="height over which the weight falls to 0 below max_m"),
                         }),
        "land_threshold": Num(minimum=0.0, maximum=1.0, default=0.5, unit="1",
                              doc="when the layout has a land mask (not a fraction): cells with mask >= this are land"),
        "use_land_fraction": Bool(default=True,
                                  doc="multiply the weight by the land fraction where the layout has one"),
    },
)

ANOMALY = Obj(
    doc="the surface anomaly A(x): give exactly one of constant_K, field, bias, donor",
    fields={
        "constant_K": Num(minimum=-60.0, maximum=60.0, unit="K", default=None,
                          doc="a constant temperature change in kelvin",
                          doc_hint_over=" (this is a change, an anomaly, not an absolute temperature)"),
        "field": Obj(default=None, doc="an anomaly field from a netCDF file on any lon/lat grid",
                     fields={"file": Str(doc="netCDF file, relative to the recipe"),
                             "variable": Str(doc="variable name of the anomaly in K"),
                             "scale": Num(minimum=-10.0, maximum=10.0, default=1.0, unit="1",
                                          doc="factor applied to the field")}),
        "bias": Obj(default=None, doc="A = -scale * (model climatology - reference climatology)",
                    fields={"model_file": Str(doc="netCDF file of the model's climatology"),
                            "reference_file": Str(doc="netCDF file of the reference climatology"),
                            "variable": Str(doc="variable name in both files, in K"),
                            "reference_variable": Str(default=None, doc="variable name in the reference file if different"),
                            "scale": Num(minimum=-10.0, maximum=10.0, default=1.0, unit="1",
                                         doc="fraction of the bias to remove")}),
        "donor": Obj(default=None, doc="blend the targets toward another restart file of the same model and grid",
                     fields={"file": Str(doc="donor restart file, relative to the recipe")}),
    },
    one_of=(("constant_K", "field", "bias", "donor"),),
)

PROFILE = Obj(
    doc="the vertical factor f(z) by which the anomaly is scaled in each layer",
    fields={
        "kind": Str(choices=("uniform", "exponential", "linear", "table", "damping"), default="uniform",
                    doc="shape of f(z)"),
        "efolding_m": Num(exclusive_minimum=0.0, maximum=100.0, unit="m", default=None,
                          doc="e-folding depth (kind exponential)"),
        "zero_at_m": Num(exclusive_minimum=0.0, maximum=100.0, unit="m", default=None,
                         doc="depth where the factor reaches 0 (kind linear)"),
        "table": List(default=None, min_items=1,
                      item=List(item=Num(), min_items=2, max_items=2),
                      doc="[depth_m, factor] pairs, interpolated linearly (kind table)"),
        "diffusivity_m2_s": Num(exclusive_minimum=0.0, maximum=1e-4, unit="m2 s-1", default=None,
                                doc="soil thermal diffusivity (kind damping)"),
        "period_days": Num(exclusive_minimum=0.0, maximum=36525.0, unit="days", default=None,
                           doc="period of the surface forcing (kind damping)"),
        "evaluate": Str(choices=("node", "layer_mean"), default="node",
                        doc="evaluate f at the layer node depth or average it over the layer"),
        "max_depth_m": Num(exclusive_minimum=0.0, maximum=1000.0, unit="m", default=None,
                           doc="factor is 0 below this depth"),
    },
)

TARGETS = ("soil_temperature", "skin_temperature", "snow_temperature", "snow_mass")

BLOCK = Obj(
    doc="one perturbation: a region, an anomaly and a depth profile",
    fields={
        "name": Str(doc="a short name for this perturbation, used in reports"),
        "region": REGION,
        "anomaly": ANOMALY,
        "profile": replace(PROFILE, default={}),
        "targets": List(item=Str(choices=TARGETS), min_items=1, default=["soil_temperature"],
                        doc="which quantities this perturbation changes"),
        "snow_mass_mode": Str(choices=("add", "multiply"), default="add",
                              doc="how snow_mass_change is applied: add kg m-2, or multiply by (1 + change)"),
        "snow_mass_change": Num(minimum=-1000.0, maximum=1000.0, default=0.0, unit="kg m-2 or 1",
                                doc="snow_mass target: kg m-2 to add (mode add) or factor - 1 (mode multiply)"),
    },
)

PHYSICS = Obj(
    doc="how temperature changes interact with soil water and ice",
    fields={
        "mode": Str(choices=("none", "temperature", "energy"), default="none",
                    doc="none: add dT only; temperature: add dT exactly, water changes phase as the "
                        "phase rule requires; energy: impose the enthalpy change C*dT*dz and solve "
                        "temperature and phase"),
        "phase_rule": Str(choices=("change_driven", "equilibrium"), default="change_driven",
                          doc="change_driven: water changes phase only where the imposed change "
                              "requires it (freeze liquid above the freezing curve on cooling, melt "
                              "ice only above 273.15 K), for models with a one-sided rule; "
                              "equilibrium: the liquid/ice split is put on the freezing curve at the "
                              "new temperature, for models that diagnose it from temperature"),
        "soil_temperature_min_K": Num(minimum=100.0, maximum=273.15, default=180.0, unit="K",
                                      doc="lower bound for soil temperature (values below are clamped)"),
        "soil_temperature_max_K": Num(minimum=273.15, maximum=400.0, default=340.0, unit="K",
                                      doc="upper bound for soil temperature (values above are clamped)"),
        "texture": Str(default=None, doc="soil texture class of Clapp and Hornberger (1978) for the freezing curve"),
        "porosity": Num(exclusive_minimum=0.0, maximum=1.0, default=None, unit="m3 m-3",
                        doc="porosity (constant), if not from texture or the layout"),
        "psi_sat_m": Num(exclusive_minimum=0.0, maximum=10.0, default=None, unit="m",
                         doc="saturated matric suction magnitude (constant)"),
        "clapp_b": Num(exclusive_minimum=0.0, maximum=30.0, default=None, unit="1",
                       doc="Clapp-Hornberger exponent b (constant)"),
        "sand_pct": Num(minimum=0.0, maximum=100.0, default=None, unit="%",
                        doc="sand percentage for the Cosby et al. (1984) regressions"),
        "clay_pct": Num(minimum=0.0, maximum=100.0, default=None, unit="%",
                        doc="clay percentage for the Cosby et al. (1984) regressions"),
        "organic_fraction": Num(minimum=0.0, maximum=1.0, default=None, unit="1",
                                doc="organic-matter fraction of the soil solids: porosity, suction, b and solids "
                                    "heat capacity are blended linearly with the organic-soil values of Lawrence "
                                    "and Slater (2008)"),
    },
)

# Report-only: how long the anomaly lasts (persistence.py). It changes no byte of any output, so
# it is left out of the canonical hash (canonical_hash): two groups that chose different horizons
# or a conductivity constant for their estimate still ran the same experiment.
PERSISTENCE = Obj(
    doc="report only (not in the recipe hash): the idealised conduction estimate of how long the anomaly lasts",
    fields={
        "horizons_days": List(item=Num(exclusive_minimum=0.0, maximum=3650.0, unit="days"), min_items=1,
                              max_items=12, default=[7, 15, 30, 60],
                              doc="horizons at which the remaining heat fraction is reported, increasing"),
        "conductivity_W_m_K": Num(exclusive_minimum=0.0, maximum=10.0, default=None, unit="W m-1 K-1",
                                  doc="thermal conductivity for the estimate (default: Johansen 1975 from the state)"),
        "heat_capacity_J_m3_K": Num(minimum=1.0e5, maximum=5.0e6, default=None, unit="J m-3 K-1",
                                    doc="volumetric heat capacity for the estimate (default: from the state)"),
    },
)

# Ensemble members: an explicit list or a generated set (see config/members.expand_members for the names)

MEMBER = Obj(
    doc="one ensemble member: the change is w(x) f(z) (sign * scale * A(x) + offset_K + noise(x))",
    fields={
        "name": Str(doc="member name (letters, digits, '-', '_', '.', '+'); used in output names and the noise seed"),
        "scale": Num(minimum=0.0, maximum=100.0, default=1.0, unit="1", doc="factor applied to the anomaly A(x)"),
        "sign": Num(integer=True, minimum=-1, maximum=1, default=1, unit="1",
                    doc="+1 keeps the anomaly's direction, -1 reverses it"),
        "offset_K": Num(minimum=-60.0, maximum=60.0, default=0.0, unit="K",
                        doc="constant added to the (scaled) anomaly before the weight and depth factor"),
    },
)

MEMBERS = Obj(
    default=None,
    doc="ensemble members: give exactly one of list (explicit members) or scales (a generated set: one member "
        "per scale and sign, named '<direction>-x<scale>', direction warm/cold when every perturbation has a "
        "constant_K anomaly of one sign, else plus/minus for sign +1/-1, e.g. warm-x1.0, cold-x0.5)",
    fields={
        "list": List(item=MEMBER, min_items=1, unique_key="name", default=None, doc="explicit members"),
        "scales": List(item=Num(minimum=0.0, maximum=100.0, unit="1"), min_items=1, default=None,
                       doc="generated set: the anomaly scales"),
        "signs": List(item=Num(integer=True, minimum=-1, maximum=1, unit="1"), min_items=1, max_items=2, default=None,
                      doc="generated set: the signs, +1 and/or -1 (default [1, -1])"),
        "noise": Obj(default=None, doc="spatially correlated Gaussian noise added to A(x), seeded per member "
                                       "from the recipe seed and the member name",
                     fields={"sigma_K": Num(minimum=0.0, maximum=20.0, unit="K", doc="standard deviation"),
                             "length_km": Num(exclusive_minimum=0.0, maximum=20000.0, unit="km",
                                              doc="correlation length L: correlation exp(-d^2 / (2 L^2)), "
                                                  "d the great-circle distance")}),
        "output_template": Str(default="{member}/{input_stem}.nc",
                               doc="output file name inside the output folder; fields {member}, {input_stem} "
                                   "(input file name without .nc), {input_name}"),
    },
    one_of=(("list", "scales"),),
)

# ---------------------------------------------------------------------------------------------
# Layout schema
# ---------------------------------------------------------------------------------------------

# roles a layout may give as a list of 2-D per-layer variables (top first); which roles a file may
# hold with a layer axis is io.model.LAYERED_ROLES, a wider set (soil parameters too)
LIST_ROLES = ("soil_temperature", "soil_liquid", "soil_ice", "snow_temperature", "snow_layer_mass")
# soil water kept as a total with the liquid or a phase fraction (see WATER below)
WATER_ROLES = ("soil_water_total", "soil_frozen_fraction", "soil_unfrozen_fraction")
PLAIN_ROLES = ("longitude", "latitude", "land_fraction", "land_mask", "surface_altitude",
               "skin_temperature", "snow_mass", "snow_depth", "snow_layer_count", "snow_cover_fraction", "cell_area",
               "porosity", "psi_sat", "clapp_b", "sand", "clay")

_VARNAME = Str(doc="variable name in the file")
_LAYERED = AnyOf(options=(Str(), List(item=Str(), min_items=1)), default=None,
                 names=("a variable name", "a list of per-layer variable names (top first)"),
                 doc="one variable with a layer dimension, or one 2-D variable per layer (top first)")
_DEPTH = AnyOf(
    options=(Str(), Obj(fields={"values": List(item=Num(), min_items=1, doc="depth values, top first"),
                                "units": Str(default="m", doc="m, cm or mm"),
                                "positive": Str(choices=("down", "up"), default="down",
                                                doc="direction in which depth values increase")})),
    default=None, names=("a variable name", "a mapping with values and units"),
    doc="a variable in the file, or values given here",
)

WATER_CONVENTIONS = ("liquid_and_ice", "total_and_liquid", "total_and_frozen_fraction",
                     "total_and_unfrozen_fraction", "total_only")

WATER = Obj(
    default=None,
    doc="how the file keeps soil water; every amount in kg m-2, m3 m-3 or saturation_fraction (times the porosity)",
    fields={
        "convention": Str(choices=WATER_CONVENTIONS, default=None,
                          doc="liquid_and_ice: roles soil_liquid and soil_ice; total_and_liquid: soil_water_total and "
                              "soil_liquid (ice = total - liquid); total_and_frozen_fraction / "
                              "total_and_unfrozen_fraction: soil_water_total and soil_frozen_fraction / "
                              "soil_unfrozen_fraction (ice's or liquid's fraction of the water mass, 1); total_only: "
                              "soil_water_total, the liquid/ice split diagnosed from the soil temperature (the "
                              "equilibrium phase rule). Default: told by the roles the layout (or CF) names. The file "
                              "keeps its convention: in total_and_liquid the total stays and the liquid moves"),
        "units": Obj(default=None, doc="units of the water variables that override their units attributes (for "
                                       "a file that writes '1' for a fraction of saturation, say): role -> units",
                     fields={r: Str(default=None) for r in ("soil_liquid", "soil_ice") + WATER_ROLES}),
        "volumetric_ice": Str(choices=("liquid_equivalent", "true_ice_volume"), default=None,
                              doc="how an ice content (or a total that includes ice) given in m3 m-3 or "
                                  "saturation_fraction is stored: liquid_equivalent (the ice's mass / 1000 kg m-3) or "
                                  "true_ice_volume (its mass / 917 kg m-3). Not needed for kg m-2; when not given, "
                                  "liquid_equivalent is assumed and check and the ledger say so"),
    },
)

LAYOUT = Obj(
    doc="where one model keeps each quantity",
    fields={
        "initgen_layout": Num(integer=True, minimum=1, maximum=LAYOUT_VERSION, doc="layout format version",
                              doc_hint_over=f" (this initgen reads layout format {LAYOUT_VERSION}; a newer initgen wrote this "
                                            "layout: upgrade initgen)"),
        "name": Str(default=None, doc="a name for this layout (model or file kind)"),
        "roles": Obj(doc="role -> variable name(s)", fields={
            **{r: replace(_LAYERED) for r in LIST_ROLES + WATER_ROLES},
            **{r: Str(default=None, doc=f"variable holding {r.replace('_', ' ')}") for r in PLAIN_ROLES},
            **{r: replace(_DEPTH) for r in DEPTH_ROLES},
        }),
        "layer_dimension": Str(default=None, doc="name of the layer dimension (found automatically if omitted)"),
        "snow_layers": Num(integer=True, minimum=0, maximum=50, default=0, unit="1",
                           doc="number of snow layers stacked above the soil on a combined layer axis"),
        "snow_layer_count_active": Str(choices=("first", "last"), default=None,
                                       doc="with roles.snow_layer_count: whether the counted (active) snow layers "
                                           "are the first or the last along the snow layer axis as stored"),
        "units": Obj(default=None, doc="units to assume for variables without a units attribute: role -> units",
                     fields={r: Str(default=None) for r in LIST_ROLES + WATER_ROLES + PLAIN_ROLES}),
        "water": WATER,
        "interfaces": Str(choices=("as_given", "midpoints_between_nodes"), default="as_given",
                          doc="as_given: layer interfaces only from the file or the layout (never guessed); "
                              "midpoints_between_nodes: place them halfway between node depths when only nodes are known"),
        "grid_file": Obj(default=None, doc="a separate file holding the grid (for files that keep it apart)", fields={
            "path": Str(doc="the grid file, relative to the layout's folder; {tile} stands for the tile of a "
                            "restart split in tiles, taken from the restart's file name by tile_pattern"),
            "tile_pattern": Str(default=None, doc="regular expression with one group finding the tile in the "
                                                  "restart's file name (default tile(\\d+))"),
            "longitude": Str(default=None, doc="longitude variable in the grid file (found by CF attributes if omitted)"),
            "latitude": Str(default=None, doc="latitude variable in the grid file (found by CF attributes if omitted)"),
            "cell_area": Str(default=None, doc="cell-area variable in the grid file (m2 or km2), optional"),
        }),
    },
)

RECIPE = Obj(
    doc="an initgen experiment recipe",
    fields={
        "initgen_recipe": Num(integer=True, minimum=1, maximum=RECIPE_VERSION, doc="recipe format version",
                              doc_hint_over=f" (this initgen reads recipe format {RECIPE_VERSION}; a newer initgen wrote this "
                                            "recipe: upgrade initgen)"),
        "name": Str(doc="name of the experiment"),
        "description": Str(default=None, doc="free text"),
        "seed": Num(integer=True, minimum=0, maximum=2**63 - 1, default=0, unit="1",
                    doc="seed for member noise"),
        "perturbations": List(item=BLOCK, min_items=1, unique_key="name",
                              doc="perturbation blocks, applied in order (each adds its change to the result of the previous)"),
        "physics": replace(PHYSICS, default={}),
        "persistence": replace(PERSISTENCE, default={}),
        "members": MEMBERS,
        "limits": Obj(default={}, doc="what to do where a change cannot be stored as asked", fields={
            "packed_out_of_range": Str(choices=("refuse", "clip"), default="refuse",
                                       doc="a change that a variable stored as integers (packed with scale_factor/"
                                           "add_offset or not) or with valid_range/valid_min/valid_max cannot hold: "
                                           "refuse (exit 2, nothing written) or clip to the storable range "
                                           "(counted in the ledger's clamps as <variable>_outside_packed_range)"),
        }),
        "layout": replace(LAYOUT, default=None, doc="an inline layout (used when no --layout is given)"),
    },
)


# ---------------------------------------------------------------------------------------------
# Loading
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Document:
    """A validated recipe or layout."""

    data: dict
    text: str
    path: Path | None
    kind: str  # 'recipe' or 'layout'

    @property
    def base_dir(self) -> Path:
        return self.path.parent if self.path is not None else Path.cwd()

    @property
    def sha256(self) -> str:
        return canonical_hash(self.data)

    @property
    def name(self) -> str:
        return self.data.get("name") or (self.path.stem if self.path else self.kind)

    @cached_property
    def view(self) -> RecipeView | LayoutView:
        """The document as typed, frozen views, built once; ``data`` stays what is hashed. A recipe's
        is a :class:`RecipeView` (config/views.py), a layout's an :class:`initgen.io.layout.Layout`."""
        return LayoutView.of(self.data) if self.kind == "layout" else RecipeView.of(self.data)


Recipe = Document
Layout = Document


def canonical_hash(data: dict) -> str:
    """sha256 of the validated document as canonical JSON (sorted keys, no whitespace).

    Key order, comments, whitespace and explicitly written defaults do not change it.
    """
    data = {k: v for k, v in data.items() if k != "persistence"}  # report-only (see PERSISTENCE)
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode()).hexdigest()


class _SafeLoader(yaml.SafeLoader):
    """``yaml.SafeLoader`` (no language tags, nothing evaluated) with two fixes for recipes.

    Numbers such as ``1e9`` or ``5e-7`` are numbers (YAML 1.2; PyYAML's YAML 1.1 rules read
    them as strings), and a key given twice in one mapping is an error rather than the silent
    last-one-wins of PyYAML.
    """

    def construct_mapping(self, node, deep=False):
        seen = {}
        for key_node, _ in node.value:
            key = self.construct_object(key_node, deep=deep)
            try:
                if key in seen:
                    raise yaml.constructor.ConstructorError(
                        "while constructing a mapping", node.start_mark,
                        f"found duplicate key {key!r}", key_node.start_mark)
                seen[key] = True
            except TypeError:
                pass  # unhashable: the base class reports it
        return super().construct_mapping(node, deep=deep)


_SafeLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float", re.compile(r"^[-+]?(?:[0-9][0-9_]*(?:\.[0-9_]*)?|\.[0-9_]+)[eE][-+]?[0-9]+$"),
    list("-+.0123456789"))


def _parse_yaml(text: str, source: str) -> Any:
    try:
        return yaml.load(text, Loader=_SafeLoader)  # noqa: S506 - a SafeLoader subclass
    except RecursionError:
        raise InputError(f"{source}: the YAML is nested too deeply to be a recipe; fix the file") from None
    except yaml.constructor.ConstructorError as exc:
        problem = (getattr(exc, "problem", "") or "").strip()
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        if "constructor for the tag" not in problem:
            raise InputError(f"{source}: bad YAML{where}: {problem}; give each key once, as plain text") from None
        raise InputError(
            f"{source}: refused YAML tag{where} ({problem}); recipes may hold only plain data "
            "(mappings, lists, strings, numbers)"
        ) from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or "not valid YAML"
        raise InputError(f"{source}: malformed YAML{where}: {problem}; fix the syntax") from None


def _read_text(path: Path, what: str) -> str:
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a {what} file; give the path of a YAML file")
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{path}: {what} file not found; check the path") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read the {what} file ({exc.strerror})") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"{path}: the {what} file is not UTF-8 text; save it as UTF-8 YAML") from None


def _validate(raw: Any, node: Obj, kind: str, source: str, version_key: str, version: int) -> dict:
    if raw is None:
        raise InputError(f"{source}: the {kind} is empty; start from an example in recipes/ or `initgen schema`")
    if not isinstance(raw, dict):
        raise InputError(f"{source}: a {kind} must be a mapping of keys at the top level, got {type(raw).__name__}")
    if version_key not in raw:
        raise InputError(f"{source}: missing '{version_key}: {version}' at the top; add it to mark the {kind} format")
    try:
        return node.validate(copy.deepcopy(raw), "", kind)  # messages name a "recipe key" or a "layout key"
    except InputError as exc:
        raise InputError(f"{source}: {exc}", key=exc.key, file=str(source)) from None
    except RecursionError:
        raise InputError(f"{source}: the {kind} is nested too deeply; start from `initgen schema`") from None


def load_recipe(source: str | os.PathLike | dict, *, text: str | None = None) -> Document:
    """Load and validate a recipe from a YAML file path, or from an already-parsed mapping."""
    if isinstance(source, dict):
        data = _validate(source, RECIPE, "recipe", "recipe", "initgen_recipe", RECIPE_VERSION)
        _check_semantics(data, "recipe")
        return Document(data, text or yaml.safe_dump(data, sort_keys=False), None, "recipe")
    path = Path(source)
    text = _read_text(path, "recipe")
    raw = _parse_yaml(text, str(path))
    data = _validate(raw, RECIPE, "recipe", str(path), "initgen_recipe", RECIPE_VERSION)
    _check_semantics(data, str(path))
    return Document(data, text, path.resolve(), "recipe")


def load_layout(source: str | os.PathLike | dict) -> Document:
    """Load and validate a layout from a YAML file path, or from a parsed mapping."""
    if isinstance(source, dict):
        data = _validate(source, LAYOUT, "layout", "layout", "initgen_layout", LAYOUT_VERSION)
        return Document(data, yaml.safe_dump(data, sort_keys=False), None, "layout")
    path = Path(source)
    text = _read_text(path, "layout")
    raw = _parse_yaml(text, str(path))
    data = _validate(raw, LAYOUT, "layout", str(path), "initgen_layout", LAYOUT_VERSION)
    return Document(data, text, path.resolve(), "layout")


def document_from_text(text: str, kind: str, path: str | os.PathLike | None, source: str) -> Document:
    """Validate a recipe or layout from its text (e.g. the copy a provenance record keeps);
    ``path`` is where it counts as living (files it names resolve beside it), ``source`` names it
    in messages."""
    raw = _parse_yaml(text, source)
    if kind == "recipe":
        data = _validate(raw, RECIPE, "recipe", source, "initgen_recipe", RECIPE_VERSION)
        _check_semantics(data, source)
    else:
        data = _validate(raw, LAYOUT, "layout", source, "initgen_layout", LAYOUT_VERSION)
    return Document(data, text, None if path is None else Path(path).resolve(), kind)


def inline_layout(recipe: Document) -> Document | None:
    data = recipe.data.get("layout")
    if not data:
        return None
    return Document(data, yaml.safe_dump(data, sort_keys=False), recipe.path, "layout")


_PROFILE_NEEDS = {
    "exponential": ("efolding_m",),
    "linear": ("zero_at_m",),
    "table": ("table",),
    "damping": ("diffusivity_m2_s", "period_days"),
    "uniform": (),
}


def _check_semantics(data: dict, source: str) -> None:
    """Cross-key checks the per-key schema cannot express."""
    hz = (data.get("persistence") or {}).get("horizons_days") or []
    if any(b <= a for a, b in zip(hz, hz[1:])):
        raise InputError(f"{source}: recipe key persistence.horizons_days: must increase, got {list(hz)}")
    for i, block in enumerate(data["perturbations"]):
        prof = block["profile"]
        for key in _PROFILE_NEEDS[prof["kind"]]:
            if prof.get(key) is None:
                raise InputError(
                    f"{source}: recipe key perturbations[{i}].profile.{key}: is required for kind "
                    f"'{prof['kind']}'"
                )
        for key in sorted(set().union(*_PROFILE_NEEDS.values()) - set(_PROFILE_NEEDS[prof["kind"]])):
            if prof.get(key) is not None:
                raise InputError(
                    f"{source}: recipe key perturbations[{i}].profile.{key}: not used by kind '{prof['kind']}'; "
                    "remove it or change the kind"
                )
        if prof.get("table") is not None:
            _check_table(prof["table"], f"{source}: recipe key perturbations[{i}].profile.table")
        elev = block["region"].get("elevation")
        if elev and elev.get("max_m") is not None and elev["max_m"] <= elev["min_m"]:
            raise InputError(
                f"{source}: recipe key perturbations[{i}].region.elevation.max_m: must be above min_m "
                f"({elev['min_m']}), got {elev['max_m']}"
            )
        if "snow_mass" in block["targets"] and block["snow_mass_change"] == 0.0:
            raise InputError(
                f"{source}: recipe key perturbations[{i}].snow_mass_change: target snow_mass needs a "
                "non-zero change"
            )
    phys = data["physics"]
    if phys["soil_temperature_min_K"] >= phys["soil_temperature_max_K"]:
        raise InputError(f"{source}: recipe key physics.soil_temperature_min_K: must be below soil_temperature_max_K")
    given = [k for k, keys in (("texture", ("texture",)), ("sand_pct/clay_pct", ("sand_pct", "clay_pct")),
                               ("porosity/psi_sat_m/clapp_b", ("porosity", "psi_sat_m", "clapp_b")))
             if any(phys.get(x) is not None for x in keys)]
    if len(given) > 1:
        raise InputError(f"{source}: recipe key physics: give one source of soil parameters, not {' and '.join(given)}")
    if phys.get("sand_pct") is not None and phys.get("clay_pct") is not None and \
            phys["sand_pct"] + phys["clay_pct"] > 100.0:
        raise InputError(f"{source}: recipe key physics.clay_pct: sand_pct + clay_pct is "
                         f"{phys['sand_pct'] + phys['clay_pct']:g} %, more than 100 %")
    if (phys.get("sand_pct") is None) != (phys.get("clay_pct") is None):
        raise InputError(f"{source}: recipe key physics: give both sand_pct and clay_pct, or neither")
    if phys.get("texture"):
        # one spelling per class, so 'sandy_loam' and 'Sandy loam' hash the same
        phys["texture"] = texture_key(phys["texture"])
        try:  # a class the tables know: refused with the recipe's name, before any file is opened
            hydraulics_from_texture(phys["texture"])
        except InputError as exc:
            raise InputError(f"{source}: recipe key physics.texture: {exc}", key="physics.texture",
                             file=str(source)) from None
    if data.get("members"):
        try:
            expand_members(data)
        except InputError as exc:
            raise InputError(f"{source}: {exc}") from None


def _check_table(table: list, key: str) -> None:
    """[depth_m, factor] pairs: depths 0..1000 m, strictly increasing; factors within +-10."""
    for j, (depth, factor) in enumerate(table):
        if not 0.0 <= depth <= 1000.0:
            raise InputError(f"{key}[{j}][0]: depth must lie in 0..1000 m, got {depth}")
        if not -10.0 <= factor <= 10.0:
            raise InputError(f"{key}[{j}][1]: factor must lie in -10..10, got {factor}")
        if j and depth <= table[j - 1][0]:
            raise InputError(f"{key}[{j}][0]: depth {depth} m is not below the previous one ({table[j - 1][0]} m); "
                             "list the pairs with depths strictly increasing")


def check_semantics(recipe: Document) -> None:
    _check_semantics(recipe.data, str(recipe.path or "recipe"))


def resolve_path(doc: Document, rel: str, key: str, allow_outside: bool = False) -> Path:
    """Resolve a file named in a recipe, relative to the recipe's folder.

    A path that leaves the recipe's folder (absolute, or through ``..``) is refused unless
    ``allow_outside`` is true, so a recipe from another group cannot read arbitrary files.
    """
    base = doc.base_dir.resolve()
    path = Path(rel)
    full = (path if path.is_absolute() else base / path).resolve()
    if not allow_outside and base not in full.parents and full != base:
        raise InputError(
            f"recipe key {key}: path '{rel}' leaves the recipe's folder {base}; move the file beside "
            "the recipe or pass --allow-outside-paths", key=key)
    if not full.exists():
        raise InputError(f"recipe key {key}: file '{rel}' not found (looked for {full})", key=key)
    return full
