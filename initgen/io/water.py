"""How a model file keeps its soil water: the water convention and the reading of stored ice.

Models keep soil water in one of five conventions (layout key ``water.convention``):

==============================  ==================================================  ==========================
convention                      roles                                               what initgen writes back
==============================  ==================================================  ==========================
``liquid_and_ice``              ``soil_liquid``, ``soil_ice``                       liquid and ice
``total_and_liquid``            ``soil_water_total``, ``soil_liquid``               the liquid (total stays)
``total_and_frozen_fraction``   ``soil_water_total``, ``soil_frozen_fraction``      the fraction (total stays)
``total_and_unfrozen_fraction`` ``soil_water_total``, ``soil_unfrozen_fraction``    the fraction (total stays)
``total_only``                  ``soil_water_total``                                nothing (split diagnosed)
==============================  ==================================================  ==========================

Every amount is in kg m-2, m3 m-3 or ``saturation_fraction`` (times the porosity); a fraction
is the ice's (or the liquid's) share of the water *mass*, as the CF names
``mass_fraction_of_unfrozen_water_in_soil_moisture`` define it. The physics works on
volumetric liquid and ice (m3 m-3, ice as liquid-water equivalent; see :mod:`initgen.science.soil`);
``engine.physics._read_water``/``_write_water`` convert with the functions of :mod:`initgen.science.soil.conversion`
(the unit conversions). With ``total_only`` the file holds no phase split: initgen diagnoses it
from the soil temperature, which is the equilibrium phase rule (:attr:`WaterSpec.phase_split_diagnosed`).

A volumetric ice content (or a volumetric total that includes ice) is ambiguous: the volume
its mass would fill as liquid water, or the true volume of the ice (917 kg m-3, 9 % more).
The layout says which (``water.volumetric_ice``); when it does not, initgen reads the
liquid-water equivalent, the physics' own convention, and ``check`` and the ledger say that it
assumed so. Mass units are unambiguous and need no reading.
"""

from __future__ import annotations

from dataclasses import dataclass

from initgen.errors import InputError
from initgen.io.layout import Layout, WaterSection
from initgen.science.soil import conversion as soil_conversion
from initgen.science.units import fraction_per

CONVENTIONS = {
    "liquid_and_ice": ("soil_liquid", "soil_ice"),
    "total_and_liquid": ("soil_water_total", "soil_liquid"),
    "total_and_frozen_fraction": ("soil_water_total", "soil_frozen_fraction"),
    "total_and_unfrozen_fraction": ("soil_water_total", "soil_unfrozen_fraction"),
    "total_only": ("soil_water_total",),
}
WATER_ROLES = ("soil_liquid", "soil_ice", "soil_water_total", "soil_frozen_fraction", "soil_unfrozen_fraction")
FRACTION_ROLES = ("soil_frozen_fraction", "soil_unfrozen_fraction")
#: units a phase fraction may carry, with the factor to a fraction of 1
_MASS_RATIOS = {"kg kg-1": 1.0, "kg/kg": 1.0, "kg kg**-1": 1.0, "kg kg^-1": 1.0, "g g-1": 1.0, "g/g": 1.0}


def fraction_factor(units: str) -> float | None:
    """Fraction of 1 per unit of a phase fraction (1, %, a mass ratio kg kg-1), or None."""

    key = str(units or "").strip().lower()
    return _MASS_RATIOS[key] if key in _MASS_RATIOS else fraction_per(units)


@dataclass
class WaterSpec:
    """The water convention of a model file, its roles and how its volumetric ice is read."""

    convention: str
    source: str  # where the convention came from
    roles: tuple  # the roles that hold the water, in CONVENTIONS order
    units: dict  # role -> units used
    ice_role: str | None  # the role whose values include ice (None for fractions-only reading)
    ice_reading: str  # 'liquid_equivalent' | 'true_ice_volume' | 'mass' (kg m-2: no reading needed)
    ice_reading_source: str  # 'layout key water.volumetric_ice', 'assumed (...)', 'kg m-2 is a mass'
    overridden: tuple = ()  # roles whose units the layout's water.units set over the file's attribute
    kept: tuple = ()  # other water variables the file holds, which initgen leaves as they are

    @property
    def phase_split_diagnosed(self) -> bool:
        """True when the file holds no liquid/ice split (``total_only``): the split is diagnosed
        from the temperature, which implies the equilibrium phase rule."""
        return self.convention == "total_only"

    @property
    def reading(self) -> str:
        """The ice reading for the soil conversion functions (mass units read as liquid equivalent)."""
        return "liquid_equivalent" if self.ice_reading == "mass" else self.ice_reading

    def describe(self) -> str:
        parts = ", ".join(f"{r} in '{self.units[r]}'" + (" (layout key water.units)" if r in self.overridden else "")
                          for r in self.roles)
        if self.ice_reading == "mass":
            ice = "ice given as a mass (kg m-2), no reading needed"
        else:
            ice = f"volumetric ice read as {self.ice_reading.replace('_', ' ')} ({self.ice_reading_source})"
        extra = "; liquid/ice split diagnosed from the soil temperature (equilibrium phase rule)" \
            if self.phase_split_diagnosed else ""
        if self.kept:
            extra += f"; {', '.join(self.kept)} left as they are (water mass is conserved)"
        return f"soil water: {self.convention} ({self.source}): {parts}; {ice}{extra}"

    def record(self) -> dict:
        """The ledger's ``water`` section."""
        return {"convention": self.convention, "convention_from": self.source,
                "units": dict(self.units), "volumetric_ice": self.ice_reading,
                "volumetric_ice_from": self.ice_reading_source,
                "phase_split_diagnosed": self.phase_split_diagnosed,
                "units_from_layout": list(self.overridden), "kept_as_they_are": list(self.kept)}


#: CF standard names whose definition makes a volumetric ice content a true ice volume ("the volume
#: of X divided by the volume of Y"; CF standard name table, version-68 update, checked)
TRUE_VOLUME_NAMES = ("volume_fraction_of_frozen_water_in_soil",)


def _standard_name(role) -> str:
    return str(role.views[0].info.attrs.get("standard_name", "")).strip()


def _units_of(role, rname: str, where: str, override: str | None = None) -> str:
    u = override or role.units
    if rname in FRACTION_ROLES:
        if fraction_factor(u) is None:
            raise InputError(f"{where}: variable '{role.variables[0]}' ({rname}) has units '{u}'; a phase fraction "
                             "is in 1 or % (set it with layout key units." + rname + ")")
        return u or "1"
    if not u:
        raise InputError(f"{where}: variable '{role.variables[0]}' ({rname}) has no units attribute; give it one, or "
                         f"set layout key units.{rname} (kg m-2, m3 m-3 or {soil_conversion.SATURATION_FRACTION})")
    try:
        soil_conversion.water_units_are_mass(u, role.variables[0])  # refuses units that are not a water amount
    except InputError as exc:
        raise InputError(f"{where}: {exc} (or set layout key units.{rname} if the file has no units)") from None
    return u


def resolve(roles: dict, layout: Layout | None, where: str, required: bool) -> WaterSpec | None:
    """The water convention of a file from its bound ``roles`` and the ``water`` section of its
    ``layout`` (None: no layout, CF attributes only).

    ``required``: a physics mode needs the water; without it, a file whose water initgen cannot
    read gives None (nothing reads it then), and a bad layout ``water`` section is still refused.
    """
    section = layout.water if layout is not None else None
    if not required and section is None:
        try:
            return _resolve(roles, section, where, required)
        except InputError:
            return None
    return _resolve(roles, section, where, required)


def _resolve(roles: dict, section: WaterSection | None, where: str, required: bool) -> WaterSpec | None:
    given = section.convention if section is not None else None
    if given:
        conv, source = given, "layout key water.convention"
        missing = [r for r in CONVENTIONS[conv] if r not in roles]
        if missing:
            raise InputError(f"{where}: layout key water.convention is {conv}, which needs role(s) "
                             f"{', '.join(CONVENTIONS[conv])}, but {', '.join(missing)} is not named under roles "
                             "(nor found by CF standard_name); name the variable(s) or change the convention")
    else:
        conv = next((c for c, need in CONVENTIONS.items() if all(r in roles for r in need)), None)
        source = "told by the roles found"
        if conv is None:
            if not required:
                return None
            raise InputError(f"{where}: a physics mode needs the soil water: roles soil_liquid and soil_ice, or "
                             "soil_water_total with soil_liquid, soil_frozen_fraction or soil_unfrozen_fraction, or "
                             "soil_water_total alone; name them under roles in the layout (and water.convention)")
    need = CONVENTIONS[conv]
    overrides = dict(section.units.items()) if section is not None and section.units is not None else {}
    stray = [r for r in overrides if r not in need]
    if stray:
        raise InputError(f"{where}: layout key water.units.{stray[0]} sets units for a role the convention {conv} "
                         f"does not read ({', '.join(need)}); remove it")
    units = {r: _units_of(roles[r], r, where, overrides.get(r)) for r in need}
    kept = tuple(f"{r} '{'+'.join(roles[r].variables)}'" for r in WATER_ROLES if r in roles and r not in need)
    ice_role = "soil_ice" if conv == "liquid_and_ice" else "soil_water_total"
    declared = section.volumetric_ice if section is not None else None
    if soil_conversion.water_units_are_mass(units[ice_role]):
        if declared:
            raise InputError(f"{where}: layout key water.volumetric_ice is {declared}, but the ice of this file "
                             f"('{roles[ice_role].variables[0]}', {ice_role}) is in '{units[ice_role]}', a mass, which "
                             "needs no reading; remove the key (or fix the variable's units)")
        reading, rsource = "mass", "kg m-2 is a mass"
    elif declared:
        reading, rsource = declared, "layout key water.volumetric_ice"
    elif _standard_name(roles[ice_role]) in TRUE_VOLUME_NAMES:
        # the CF definition of a volume fraction: the volume of the ice divided by the volume of the soil
        reading = "true_ice_volume"
        rsource = f"CF standard_name {_standard_name(roles[ice_role])} of '{roles[ice_role].variables[0]}'"
    else:
        reading, rsource = "liquid_equivalent", "assumed: layout key water.volumetric_ice not given"
    if conv == "total_only" and reading == "true_ice_volume":
        raise InputError(f"{where}: layout key water.volumetric_ice is true_ice_volume with water.convention "
                         "total_only; a true-volume total cannot be split without knowing the split; give the "
                         "total in kg m-2 or as liquid equivalent, or name the liquid or a phase fraction too")
    return WaterSpec(conv, source, need, units, ice_role, reading, rsource, tuple(overrides), kept)
