"""The layout as io reads it: typed, frozen views of a validated layout document.

A layout says where one model keeps each quantity: the variable(s) of each role, the layer axis,
snow layers stacked above the soil, units for variables without a units attribute, the water
convention, how layer interfaces are found and a separate grid file. ``config/recipe.py`` defines
its format (the schema ``LAYOUT``) and validates it into a dict, with every default filled; that
dict is what is hashed and stored. :meth:`Layout.of` builds the view once from it (a layout
``Document``'s ``view``), and io reads attributes, so the layout's keys are known here, in one
place: a new layout key needs its attribute (``tests/io/test_layout_view.py`` walks the schema).

The views live in io because io reads the layout and is a floor below config. A run with no
layout (roles found by CF attributes only) reads no view: io takes ``None``, and :data:`NO_ROLES`
stands for a layout that names no role.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import ClassVar

from initgen.io.frozen import View


class _ByRole:
    """A section keyed by role name (one attribute per role of the layout format)."""

    def get(self, role: str):
        """The entry of ``role``, or None where the layout gives none (or the format has no such key)."""
        return getattr(self, role) if role in self._names() else None

    def items(self) -> list:
        """(role, entry) for every role given, in the format's order."""
        return [(n, getattr(self, n)) for n in self._names() if getattr(self, n) is not None]

    @classmethod
    def _names(cls) -> tuple:
        return tuple(f.name for f in fields(cls))


@dataclass(frozen=True)
class DepthValues(View):
    """Layer depths written in the layout (``roles.layer_node_depth: {values: [...], units: m}``)."""

    values: tuple  # top first
    units: str  # m, cm or mm
    positive: str  # 'down' or 'up': the direction in which the values increase


# roles whose layout entry may be written as values rather than a variable name
DEPTH_ROLES = ("layer_node_depth", "layer_interface_depth", "layer_thickness")


@dataclass(frozen=True)
class _EachRole(_ByRole, View):
    """One attribute per role a variable holds, in the format's order; the sections keyed by role
    (``roles``, ``units``) build on it. None: the layout gives nothing for that role."""

    # layered: one variable with a layer axis, or (in roles) a tuple of 2-D variables, one per layer
    soil_temperature: str | tuple | None = None
    soil_liquid: str | tuple | None = None
    soil_ice: str | tuple | None = None
    snow_temperature: str | tuple | None = None
    snow_layer_mass: str | tuple | None = None
    # soil water kept as a total with a phase fraction (the layout's water section)
    soil_water_total: str | tuple | None = None
    soil_frozen_fraction: str | tuple | None = None
    soil_unfrozen_fraction: str | tuple | None = None
    # one variable each
    longitude: str | None = None
    latitude: str | None = None
    land_fraction: str | None = None
    land_mask: str | None = None
    surface_altitude: str | None = None
    skin_temperature: str | None = None
    snow_mass: str | None = None
    snow_depth: str | None = None
    snow_layer_count: str | None = None
    snow_cover_fraction: str | None = None
    cell_area: str | None = None
    porosity: str | None = None
    psi_sat: str | None = None
    clapp_b: str | None = None
    sand: str | None = None
    clay: str | None = None


@dataclass(frozen=True)
class Roles(_EachRole):
    """``roles``: role -> variable name; a layered role may be a tuple of per-layer 2-D variables
    (top first), a depth role a :class:`DepthValues`. None: the layout does not name it."""

    NESTED: ClassVar[dict] = {r: DepthValues for r in DEPTH_ROLES}
    # layer geometry: a variable or values
    layer_node_depth: str | DepthValues | None = None
    layer_interface_depth: str | DepthValues | None = None
    layer_thickness: str | DepthValues | None = None


#: the roles of a run without a layout: none named, every one found by CF attributes
NO_ROLES = Roles()


@dataclass(frozen=True)
class Units(_EachRole):
    """``units``: role -> units (a str) to assume where the role's variable has no units attribute."""


@dataclass(frozen=True)
class WaterUnits(_ByRole, View):
    """``water.units``: role -> units of a water variable, over its units attribute."""

    soil_liquid: str | None = None
    soil_ice: str | None = None
    soil_water_total: str | None = None
    soil_frozen_fraction: str | None = None
    soil_unfrozen_fraction: str | None = None


@dataclass(frozen=True)
class WaterSection(View):
    """``water``: how the file keeps soil water (io/water.py reads it)."""

    NESTED: ClassVar[dict] = {"units": WaterUnits}
    convention: str | None  # one of io/water.CONVENTIONS; None: told by the roles found
    units: WaterUnits | None
    volumetric_ice: str | None  # 'liquid_equivalent' | 'true_ice_volume'; None: not given


@dataclass(frozen=True)
class GridFile(View):
    """``grid_file``: a separate file holding the grid's longitude, latitude and cell areas."""

    path: str  # relative to the layout's folder; '{tile}' stands for the restart's tile
    tile_pattern: str | None  # a regular expression with one group finding the tile (None: tile(\d+))
    longitude: str | None
    latitude: str | None
    cell_area: str | None


@dataclass(frozen=True)
class Layout(View):
    """A whole validated layout."""

    NESTED: ClassVar[dict] = {"roles": Roles, "units": Units, "water": WaterSection, "grid_file": GridFile}
    initgen_layout: int
    name: str | None
    roles: Roles
    layer_dimension: str | None  # None: found from the role variables' dimensions
    snow_layers: int  # snow layers stacked above the soil on a combined layer axis (0: none)
    snow_layer_count_active: str | None  # 'first' | 'last': the snow layers roles.snow_layer_count counts
    units: Units | None
    water: WaterSection | None
    interfaces: str  # 'as_given' | 'midpoints_between_nodes'
    grid_file: GridFile | None

    def units_of(self, role: str) -> str:
        """The units the layout gives for ``role``'s variable ('' where it gives none)."""
        return (self.units.get(role) if self.units is not None else None) or ""


__all__ = ["Layout", "Roles", "NO_ROLES", "Units", "WaterSection", "WaterUnits", "GridFile", "DepthValues",
           "DEPTH_ROLES"]
