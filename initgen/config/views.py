"""Typed, frozen views of a validated recipe: what the engine, the API and the outputs read.

A recipe is validated into a plain dict (:mod:`initgen.config.recipe`): that dict is what is
hashed (``canonical_hash``) and stored, and it stays as it is. The views here are built once from
it (``Document.view``) and read by attribute: ``view.physics.mode``, ``block.region.taper_km``,
``block.anomaly.kind``. Every attribute is named as its recipe key, and every default is already
filled by the schema, so a view never guesses one. Views are frozen and hold tuples instead of
lists: nothing downstream can change the experiment after it was hashed.

A member or any other override of the recipe makes a new validated dict and so a new view; a view
is never edited.

The base class, :class:`initgen.io.frozen.View`, is shared with the layout's views
(:mod:`initgen.io.layout`): io, a floor below the config, reads the layout and cannot import a
class from here. The recipe's inline layout is read as a layout document of its own
(:func:`initgen.config.recipe.inline_layout`), whose view is an :class:`initgen.io.layout.Layout`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

from initgen.io.frozen import View


# --- regions -----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Box(View):
    """A longitude/latitude box."""

    lon: tuple  # (west, east), degrees east
    lat: tuple  # (south, north), degrees north


@dataclass(frozen=True)
class Published(View):
    """Regions of a region set that regionmask ships, by abbreviation."""

    set: str
    regions: tuple


@dataclass(frozen=True)
class Shape(View):
    """One shape; exactly one form is given, the others are None."""

    NESTED: ClassVar[dict] = {"box": Box, "published": Published}
    geojson: str | None
    box: Box | None
    vertices: tuple | None  # ((lon, lat), ...)
    published: Published | None

    @property
    def kind(self) -> str:
        """The form given: 'geojson', 'box', 'vertices' or 'published'."""
        return next(k for k in ("geojson", "box", "vertices", "published") if getattr(self, k))


@dataclass(frozen=True)
class Elevation(View):
    """The elevation band: weight 0 below min_m (and above max_m), ramps of ramp_m and max_ramp_m."""

    min_m: float
    ramp_m: float
    max_m: float | None
    max_ramp_m: float


@dataclass(frozen=True)
class Region(View):
    NESTED: ClassVar[dict] = {"include": Shape, "exclude": Shape, "elevation": Elevation}
    include: tuple  # of Shape
    exclude: tuple  # of Shape
    taper_km: float
    taper_placement: str
    elevation: Elevation | None
    land_threshold: float
    use_land_fraction: bool


# --- anomaly and profile -----------------------------------------------------------------------


@dataclass(frozen=True)
class FieldAnomaly(View):
    """An anomaly field (K) from a netCDF file, times scale."""

    file: str
    variable: str
    scale: float


@dataclass(frozen=True)
class BiasAnomaly(View):
    """A = -scale * (model climatology - reference climatology)."""

    model_file: str
    reference_file: str
    variable: str
    reference_variable: str | None
    scale: float


@dataclass(frozen=True)
class Donor(View):
    """Blend the targets toward another restart file of the same model and grid."""

    file: str


ANOMALY_KINDS = ("constant_K", "field", "bias", "donor")


@dataclass(frozen=True)
class Anomaly(View):
    """The surface anomaly A(x); exactly one source is given, the others are None."""

    NESTED: ClassVar[dict] = {"field": FieldAnomaly, "bias": BiasAnomaly, "donor": Donor}
    constant_K: float | None
    field: FieldAnomaly | None
    bias: BiasAnomaly | None
    donor: Donor | None

    @property
    def kind(self) -> str:
        """The source given: 'constant_K', 'field', 'bias' or 'donor'."""
        return next(k for k in ANOMALY_KINDS if getattr(self, k) is not None)


@dataclass(frozen=True)
class Profile(View):
    """The vertical factor f(z); the parameters its kind does not use are None."""

    kind: str
    efolding_m: float | None
    zero_at_m: float | None
    table: tuple | None  # ((depth_m, factor), ...)
    diffusivity_m2_s: float | None
    period_days: float | None
    evaluate: str
    max_depth_m: float | None


@dataclass(frozen=True)
class Block(View):
    """One perturbation block: a region, an anomaly and a depth profile."""

    NESTED: ClassVar[dict] = {"region": Region, "anomaly": Anomaly, "profile": Profile}
    name: str
    region: Region
    anomaly: Anomaly
    profile: Profile
    targets: tuple
    snow_mass_mode: str
    snow_mass_change: float


# --- physics, persistence, limits, members -----------------------------------------------------


@dataclass(frozen=True)
class Physics(View):
    """How temperature changes interact with soil water and ice; soil parameters not given are None."""

    mode: str
    phase_rule: str
    soil_temperature_min_K: float
    soil_temperature_max_K: float
    texture: str | None
    porosity: float | None
    psi_sat_m: float | None
    clapp_b: float | None
    sand_pct: float | None
    clay_pct: float | None
    organic_fraction: float | None

    @property
    def active(self) -> bool:
        """A physics mode is on (soil water and ice follow the temperature)."""
        return self.mode != "none"


@dataclass(frozen=True)
class Persistence(View):
    """Report only (not hashed): the horizons and constants of the conduction estimate."""

    horizons_days: tuple
    conductivity_W_m_K: float | None
    heat_capacity_J_m3_K: float | None


@dataclass(frozen=True)
class Limits(View):
    """What to do where a change cannot be stored as asked."""

    packed_out_of_range: str


@dataclass(frozen=True)
class Noise(View):
    """Spatially correlated noise added to A(x) per member."""

    sigma_K: float
    length_km: float


@dataclass(frozen=True)
class MemberSpec(View):
    """One member of an explicit members list."""

    name: str
    scale: float
    sign: int
    offset_K: float


@dataclass(frozen=True)
class Members(View):
    """The members section as written; :func:`initgen.config.members.expand_members` lists the members."""

    NESTED: ClassVar[dict] = {"list": MemberSpec, "noise": Noise}
    list: tuple | None  # of MemberSpec
    scales: tuple | None
    signs: tuple | None
    noise: Noise | None
    output_template: str


# --- the recipe --------------------------------------------------------------------------------


@dataclass(frozen=True)
class RecipeView(View):
    """A whole validated recipe (all but its inline layout, which stays a dict: see the module notes)."""

    NESTED: ClassVar[dict] = {"perturbations": Block, "physics": Physics, "persistence": Persistence,
                              "members": Members, "limits": Limits}
    initgen_recipe: int
    name: str
    description: str | None
    seed: int
    perturbations: tuple  # of Block, applied in order
    physics: Physics
    persistence: Persistence
    members: Members | None
    limits: Limits

    @property
    def targets(self) -> tuple:
        """Every target some block changes, in sorted order."""
        return tuple(sorted({t for b in self.perturbations for t in b.targets}))


__all__ = ["View", "Box", "Published", "Shape", "Elevation", "Region", "FieldAnomaly", "BiasAnomaly", "Donor",
           "Anomaly", "Profile", "Block", "Physics", "Persistence", "Limits", "MemberSpec", "Noise", "Members",
           "RecipeView", "ANOMALY_KINDS"]
