"""Physical constants used by initgen, each with its published source.

One consistent set
------------------
The water and ice properties, gravity and the freezing point are the **CESM shared constant
set** (module ``shr_const_mod.F90`` of the Community Earth System Model shared code, the set
used by the Community Land Model, CLM). Its values were confirmed against published copies of
that module. Land models differ slightly in these constants (freezing point 273.15 K or
273.16 K, latent heat 3.336e5 or 3.337e5 J kg-1); initgen uses this one set everywhere, and
tests state their tolerances against it. We call it ``CONSTANT_SET`` below.

The volumetric heat capacities of soil constituents are those of de Vries (1963), as
tabulated by Moene and van Dam (2014, Table 2.2), and the texture formula for the heat
capacity of soil solids is the de Vries-based regression used by land models (see
``soil_solid_heat_capacity`` in :mod:`initgen.science.soil`).

All values are SI: K, kg, m, s, J.

References
----------
.. [1] CESM shared code, ``shr_const_mod.F90`` (constants ``SHR_CONST_LATICE``,
   ``SHR_CONST_RHOFW``, ``SHR_CONST_RHOICE``, ``SHR_CONST_CPFW``, ``SHR_CONST_CPICE``,
   ``SHR_CONST_G``, ``SHR_CONST_TKFRZ``), National Center for Atmospheric Research.
.. [2] de Vries, D. A. (1963). Thermal properties of soils. In W. R. van Wijk (Ed.),
   *Physics of Plant Environment* (pp. 210-235). North-Holland, Amsterdam.
.. [3] Moene, A. F., and van Dam, J. C. (2014). *Transport in the Atmosphere-Vegetation-Soil
   Continuum*. Cambridge University Press, Table 2.2.
.. [4] IUGG mean Earth radius R1 of the Geodetic Reference System 1980 (Moritz, H., 2000,
   *Journal of Geodesy* 74, 128-133), rounded to 6371.0 km as listed in REFERENCES.md
   (R1 = 6371.0088 km recalled from memory, not re-read).
.. [5] Lee, R. (1978). *Forest Microclimatology*. Columbia University Press (cited by [3],
   Table 2.2, for ice and snow).
"""

from __future__ import annotations

__all__ = [
    "CONSTANT_SET",
    "LATENT_HEAT_FUSION",
    "RHO_WATER",
    "RHO_ICE",
    "CP_WATER",
    "CP_ICE",
    "GRAVITY",
    "T_FREEZE",
    "CV_WATER",
    "CV_ICE",
    "CV_QUARTZ_DE_VRIES",
    "CV_CLAY_MINERALS_DE_VRIES",
    "CV_ORGANIC_DE_VRIES",
    "CV_WATER_DE_VRIES",
    "CV_ICE_TABLE",
    "CV_SAND_TEXTURE",
    "CV_CLAY_TEXTURE",
    "CV_ORGANIC_TEXTURE",
    "CV_SOLID_DEFAULT",
    "EARTH_RADIUS_M",
]

#: Name of the constant set (recorded in provenance so that a reviewer knows which set was used).
CONSTANT_SET = "CESM shr_const_mod (CLM) water/ice/gravity/freezing point; de Vries (1963) soil solids"

# --- CESM shared constant set [1] -----------------------------------------------------------

#: Latent heat of fusion of water, J kg-1. Source: CESM ``SHR_CONST_LATICE`` [1].
LATENT_HEAT_FUSION = 3.337e5

#: Density of liquid fresh water, kg m-3. Source: CESM ``SHR_CONST_RHOFW`` [1].
RHO_WATER = 1.000e3

#: Density of ice, kg m-3. Source: CESM ``SHR_CONST_RHOICE`` [1].
RHO_ICE = 0.917e3

#: Specific heat of liquid fresh water, J kg-1 K-1. Source: CESM ``SHR_CONST_CPFW`` [1].
CP_WATER = 4.188e3

#: Specific heat of fresh ice, J kg-1 K-1. Source: CESM ``SHR_CONST_CPICE`` [1].
CP_ICE = 2.11727e3

#: Acceleration due to gravity, m s-2. Source: CESM ``SHR_CONST_G`` [1].
GRAVITY = 9.80616

#: Freezing temperature of fresh water, K. Source: CESM ``SHR_CONST_TKFRZ`` [1].
T_FREEZE = 273.15

#: Volumetric heat capacity of liquid water, J m-3 K-1 = RHO_WATER * CP_WATER (derived from [1]).
CV_WATER = RHO_WATER * CP_WATER

#: Volumetric heat capacity of ice, J m-3 K-1 = RHO_ICE * CP_ICE (derived from [1]).
CV_ICE = RHO_ICE * CP_ICE

# --- de Vries (1963) constituents, as tabulated by Moene and van Dam (2014, Table 2.2) [2, 3] --

#: Volumetric heat capacity of quartz, J m-3 K-1. Source: de Vries (1963) [2] via [3] Table 2.2.
CV_QUARTZ_DE_VRIES = 2.13e6

#: Volumetric heat capacity of clay minerals, J m-3 K-1. Source: de Vries (1963) [2] via [3].
CV_CLAY_MINERALS_DE_VRIES = 2.39e6

#: Volumetric heat capacity of organic matter, J m-3 K-1. Source: de Vries (1963) [2] via [3].
CV_ORGANIC_DE_VRIES = 2.47e6

#: Volumetric heat capacity of water, J m-3 K-1. Source: de Vries (1963) [2] via [3]. For
#: reference only: the physics uses ``CV_WATER`` of the CESM set.
CV_WATER_DE_VRIES = 4.18e6

#: Volumetric heat capacity of ice, J m-3 K-1. Source: Lee (1978) [5], as tabulated in [3]
#: Table 2.2 (the table credits its "other materials", ice among them, to Lee, not to de Vries).
#: For reference only: the physics uses ``CV_ICE`` of the CESM set.
CV_ICE_TABLE = 1.88e6

# --- texture formula for soil solids (de Vries values as used by land models) ---------------

#: Sand end member of the texture formula c_s = (2.128 sand + 2.385 clay) / (sand + clay) * 1e6,
#: J m-3 K-1. Source: de Vries (1963) values as used by land models (REFERENCES.md; CLM).
CV_SAND_TEXTURE = 2.128e6

#: Clay end member of the texture formula, J m-3 K-1. Source: de Vries (1963) values as used by
#: land models (REFERENCES.md; CLM), as for ``CV_SAND_TEXTURE``.
CV_CLAY_TEXTURE = 2.385e6

#: Organic matter in the texture-based formula, J m-3 K-1. Source: de Vries (1963) values as
#: used by land models (REFERENCES.md; CLM), as for ``CV_SAND_TEXTURE``.
CV_ORGANIC_TEXTURE = 2.5e6

#: Default volumetric heat capacity of soil solids when neither ``c_solid`` nor a texture is
#: given, J m-3 K-1: the texture formula at equal sand and clay fractions,
#: (2.128e6 + 2.385e6) / 2 = 2.2565e6, i.e. midway between the quartz-like and clay-like end
#: members (a choice of initgen, documented here).
CV_SOLID_DEFAULT = 0.5 * (CV_SAND_TEXTURE + CV_CLAY_TEXTURE)

# --- geometry ----------------------------------------------------------------------------

#: Mean Earth radius, m (IUGG mean radius R1, rounded to 6371.0 km) [4].
EARTH_RADIUS_M = 6.3710e6
