"""Soil physics for perturbing a soil temperature: heat capacity, enthalpy, freezing curve,
phase repartition and physical limits. Pure numpy, vectorised, float64, no file I/O.

Conventions (read these first)
------------------------------
Water contents
    Inside the physics every water content is **volumetric, m3 m-3**. Soil ice is expressed as
    its **liquid-water equivalent**: ``theta_ice`` = ice mass per unit soil volume / RHO_WATER.
    This is how most restart files store ice (kg m-2, or a volumetric total that includes ice
    as water), so :func:`water_to_volumetric` uses RHO_WATER for liquid and ice alike, and
    phase change conserves ``theta_liq + theta_ice`` exactly: the water mass of a layer is
    ``RHO_WATER * (theta_liq + theta_ice) * dz``. The true ice volume is
    ``theta_ice * RHO_WATER / RHO_ICE``; the heat capacity uses it (see :func:`heat_capacity`).
    The pore-space limit ``theta_liq + theta_ice <= porosity`` is applied to the
    water-equivalent contents; the 9 % expansion of freezing water is not modelled.
Temperatures
    Kelvin inside the physics.
Enthalpy reference state
    H = 0 for soil whose water is **all frozen at T_f = 273.15 K**:
    ``H = C(theta_liq, theta_ice) * (T - T_f) * dz + RHO_WATER * L_f * theta_liq * dz`` (J m-2).
    The solvers, :func:`energy_of_change` and the tests all use this one function.
Phase rules (``rule=`` of the two modes; recipe key ``physics.phase_rule``)
    ``change_driven`` (the default): water changes phase only where the imposed change requires
    it, as models with a one-sided rule do (freeze only liquid in excess of the supercooled
    curve, melt only above T_f, hold the temperature at T_f while latent heat is paid).
    Cooling freezes only liquid above the freezing curve at the new temperature; warming melts
    ice only where the temperature would rise above T_f; in energy mode a layer at T_f with both
    phases stays there until the latent heat is paid. A state such a model holds as stable
    (ice with liquid below the curve, both phases at T_f) is never re-balanced.
    ``equilibrium``: for models that diagnose the liquid/ice split from temperature at every
    step. The split at the starting temperature is first taken as such a model would diagnose
    it (:func:`equilibrate_phase`; no imposed energy is spent on it), then the change is
    imposed and the new state is put on the equilibrium curve: below T_f the liquid content
    equals ``min(total water, supercooled limit)`` (Niu and Yang 2006); above T_f there is no
    ice; at exactly T_f a layer whose water exceeds the porosity may hold ice.
Disequilibrium policy
    A starting state need not be in phase equilibrium for the soil parameters used (another
    model's freezing curve or parameters may leave liquid above the curve, or ice with liquid
    below it). :func:`equilibrium_shift` measures what the equilibrium rule would move, so that
    the caller can report it. The change-driven rule does not act on it: liquid above the
    starting temperature's curve is kept aside as liquid (only the curve's own drop freezes on
    cooling), and ice above T_f is left to the model. Cells with ``dT == 0`` are returned
    bit-identical, whatever their state, under both rules.
Invariants (tested as properties)
    Water (liquid + ice) is conserved exactly. The temperature change never has the sign
    opposite to the imposed one. Energy mode: ``|dT| <= |imposed dT|`` and the enthalpy change
    is ``C_0 * dT_imposed * dz``; the phase change is what that energy pays for. Temperature
    mode: ``dT`` is the imposed change exactly. From a state consistent with the rule (no liquid
    above the curve below T_f, no ice above T_f) the result is consistent again.
Missing values and invalid inputs
    The mode functions change only cells with ``dT != 0`` and finite T and dT; every other
    cell (including NaN or fill-valued ones) is returned bit-identical with zero ledger
    entries. A cell they change must have valid water (>= 0, finite) and parameters, else
    they raise :class:`~initgen.errors.InputError` naming the quantity and the cell count.
    The other functions are plain formulas: NaN propagates (clamps neither change nor count
    NaN).
Suggested order for a caller
    1. convert units (:func:`temperature_to_kelvin`, :func:`water_to_volumetric`);
    2. on the input, :func:`disequilibrium` and :func:`equilibrium_shift` (reported only);
    3. :func:`apply_energy_mode` or :func:`apply_temperature_mode` with the recipe's phase
       rule (water conserved exactly);
    4. on the output, :func:`clamp_soil_temperature` and :func:`clamp_snow_temperature`
       (counted: they change energy; the phase is not re-equilibrated after them); the
       pipeline (``plan.apply_block``) calls exactly these;
    5. convert back (:func:`kelvin_to_units`, :func:`volumetric_to_water`).
    Every clamp returns ``(values, count)`` for the ledger.

References
----------
.. [1] Clapp, R. B., and Hornberger, G. M. (1978). Empirical equations for some soil hydraulic
   properties. *Water Resources Research* 14(4), 601-604, Table 2.
.. [2] Cosby, B. J., Hornberger, G. M., Clapp, R. B., and Ginn, T. R. (1984). A statistical
   exploration of the relationships of soil moisture characteristics to the physical
   properties of soils. *Water Resources Research* 20(6), 682-690, Tables 4 and 5.
.. [3] Niu, G.-Y., and Yang, Z.-L. (2006). Effects of frozen soil on snowmelt runoff and soil
   water storage at a continental scale. *Journal of Hydrometeorology* 7, 937-952.
.. [4] de Vries, D. A. (1963). Thermal properties of soils. In W. R. van Wijk (Ed.),
   *Physics of Plant Environment*, North-Holland, 210-235.
.. [5] Moene, A. F., and van Dam, J. C. (2014). *Transport in the Atmosphere-Vegetation-Soil
   Continuum*. Cambridge University Press, Table 2.2.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from initgen.constants import (
    CP_ICE,
    CV_CLAY_TEXTURE,
    CV_SAND_TEXTURE,
    CV_SOLID_DEFAULT,
    CV_WATER,
    GRAVITY,
    LATENT_HEAT_FUSION,
    RHO_ICE,
    RHO_WATER,
    T_FREEZE,
)
from initgen.errors import InputError

__all__ = [
    "SATURATION_FRACTION",
    "ClappHornberger",
    "Hydraulics",
    "SoilChange",
    "CLAPP_HORNBERGER_1978",
    "temperature_to_kelvin",
    "kelvin_to_units",
    "water_to_volumetric",
    "volumetric_to_water",
    "ICE_READINGS",
    "water_units_are_mass",
    "ice_volume_to_water_equivalent",
    "water_equivalent_to_ice_volume",
    "phases_from_total",
    "total_from_phases",
    "frozen_fraction",
    "hydraulics_from_texture",
    "cosby_1984",
    "soil_solid_heat_capacity",
    "texture_solid_heat_capacity",
    "blend_organic",
    "TEXTURE_CLASS_CENTROID_PCT",
    "ORGANIC_LAWRENCE_SLATER_2008",
    "supercooled_liquid_max",
    "heat_capacity",
    "enthalpy",
    "equilibrate_phase",
    "energy_of_change",
    "solve_enthalpy",
    "apply_energy_mode",
    "apply_temperature_mode",
    "disequilibrium",
    "equilibrium_shift",
    "settle_one_sided",
    "PHASE_RULES",
    "clamp",
    "clamp_soil_temperature",
    "clamp_snow_temperature",
    "BLOCK_CELLS",
]

#: Latent heat of fusion per unit volume of liquid water, J m-3 (RHO_WATER * L_f).
_LV = RHO_WATER * LATENT_HEAT_FUSION
#: Heat capacity of ice per unit liquid-water-equivalent volume, J m-3 K-1 (RHO_WATER * CP_ICE;
#: equals RHO_ICE * CP_ICE per unit of true ice volume).
_CV_ICE_WE = RHO_WATER * CP_ICE
#: Difference of the two above, J m-3 K-1.
_DCV = CV_WATER - _CV_ICE_WE


def _f64(x):
    return np.asarray(x, dtype=np.float64)


# =============================================================================================
# Unit conversion
# =============================================================================================

def _temperature_units(units, name, key):
    from initgen.units import temperature_scale_offset

    so = temperature_scale_offset(units)
    if so is None:
        where = f"layout key {key}" if key else "layout"
        what = "no units" if units is None or not str(units).strip() else f"unknown temperature units {units!r}"
        raise InputError(f"variable '{name}': {what}; set its units to 'K' or 'degC' (file attribute or {where})")
    return so


def temperature_to_kelvin(values, units, name="temperature", key=None):
    """Convert temperatures to kelvin.

    Parameters
    ----------
    values : array_like
        Temperatures in ``units``.
    units : str
        Any UDUNITS temperature unit, parsed by :mod:`initgen.units` (cf-units): ``K``,
        ``kelvin``, ``degK``, ``degrees_K``; ``degC``, ``deg_C``, ``degree_Celsius``,
        ``Celsius``, ``°C``, ``C``; ``degF`` .... ``C`` is coulomb in UDUNITS; for a
        temperature it can only mean Celsius, so it is read as such.
    name : str
        Variable name, used in error messages.
    key : str, optional
        The layout key that sets the variable's units (``units.<role>``), named in errors.

    Returns
    -------
    numpy.ndarray
        float64 temperatures, K (T = t + 273.15 for Celsius input).

    Raises
    ------
    InputError
        If ``units`` is missing or not a temperature unit.

    References
    ----------
    UDUNITS-2 unit database (Unidata), through cf-units: K = degC + 273.15.
    """
    scale, offset = _temperature_units(units, name, key)
    v = _f64(values)
    if scale == 1.0 and offset == 0.0:
        return v.copy()
    return v * scale + offset if scale != 1.0 else v + offset


def kelvin_to_units(values, units, name="temperature", key=None):
    """Convert kelvin to ``units``, the inverse of :func:`temperature_to_kelvin`.

    Parameters
    ----------
    values : array_like
        Temperatures, K.
    units : str
        Target units, any spelling accepted by :func:`temperature_to_kelvin`.
    name : str
        Variable name, used in error messages.
    key : str, optional
        The layout key that sets the variable's units, named in errors.

    Returns
    -------
    numpy.ndarray
        float64 temperatures in ``units``.

    Raises
    ------
    InputError
        If ``units`` is not a temperature unit.
    """
    scale, offset = _temperature_units(units, name, key)
    v = _f64(values)
    if scale == 1.0 and offset == 0.0:
        return v.copy()
    return (v - offset) / scale if scale != 1.0 else v - offset


#: Dedicated units string for water content given as a fraction of saturation (of porosity):
#: theta = value * porosity. A file whose variable says ``1`` for such a quantity must be
#: described with this string in the layout, because ``1`` is read as m3 m-3.
SATURATION_FRACTION = "saturation_fraction"

_SATURATION = {"saturationfraction", "fractionofsaturation"}


def _water_units(units, name):
    """('mass', kg m-2 per unit) | ('volume', m3 m-3 per unit) | ('saturation', 1)."""
    from initgen.units import water_amount

    key = str(units).strip().lower().replace(" ", "").replace("_", "") if units is not None else ""
    if key in _SATURATION:
        return "saturation", 1.0
    got = water_amount(units)
    if got is None:
        raise InputError(
            f"variable '{name}': unknown water units {units!r}; use 'kg m-2' (or kg/m2, mm), "
            f"'m3 m-3' (or 1, m3/m3, fraction, %) or '{SATURATION_FRACTION}' in the layout"
        )
    return got


def _water_kind(units, name):
    return _water_units(units, name)[0]


def _check_thickness(thickness_m, name):
    dz = _f64(thickness_m)
    if not np.all(np.isfinite(dz) & (dz > 0)):
        raise InputError(f"variable '{name}': layer thickness must be finite and > 0 m; "
                         "check the layer geometry (interfaces or thicknesses) in the layout")
    return dz


def _check_porosity(porosity, name):
    if porosity is None:
        raise InputError(f"variable '{name}': units '{SATURATION_FRACTION}' need the porosity; "
                         "give a porosity (layout role 'porosity', recipe physics.porosity or texture)")
    phi = _f64(porosity)
    if not np.all((phi > 0) & (phi <= 1)):
        raise InputError(f"variable '{name}': porosity must lie in (0, 1] m3 m-3; "
                         "check the porosity variable or recipe value")
    return phi


def water_to_volumetric(values, units, thickness_m, porosity=None, name="soil water"):
    """Convert a soil water (liquid or ice) amount to volumetric content, m3 m-3.

    Ice is returned as its liquid-water equivalent (see the module conventions).

    Parameters
    ----------
    values : array_like
        Water amount in ``units``.
    units : str
        ``'kg m-2'`` (also ``kg/m2``, ``kg m**-2``, ``kg m^-2``, ``mm`` of water):
        theta = values / (RHO_WATER * thickness_m);
        ``'m3 m-3'`` (also ``1``, ``m3/m3``, ``fraction``): unchanged;
        ``'saturation_fraction'`` (:data:`SATURATION_FRACTION`): theta = values * porosity.
    thickness_m : array_like
        Layer thickness, m (> 0); used for mass units only.
    porosity : array_like, optional
        Porosity, m3 m-3; required for ``'saturation_fraction'``.
    name : str
        Variable name, used in error messages.

    Returns
    -------
    numpy.ndarray
        Volumetric water content, m3 m-3, float64.

    Raises
    ------
    InputError
        For unknown units, a non-positive thickness or a missing/invalid porosity.
    """
    kind, f = _water_units(units, name)
    v = _f64(values)
    if kind == "mass":
        return (v if f == 1.0 else v * f) / (RHO_WATER * _check_thickness(thickness_m, name))
    if kind == "saturation":
        return v * _check_porosity(porosity, name)
    return v.copy() if f == 1.0 else v * f


def volumetric_to_water(vol, units, thickness_m, porosity=None, name="soil water"):
    """Convert volumetric water content (m3 m-3) back to ``units``; inverse of
    :func:`water_to_volumetric`.

    Parameters
    ----------
    vol : array_like
        Volumetric content, m3 m-3 (ice as liquid-water equivalent).
    units : str
        Target units, as in :func:`water_to_volumetric`.
    thickness_m : array_like
        Layer thickness, m (> 0); used for mass units only.
    porosity : array_like, optional
        Porosity, m3 m-3; required for ``'saturation_fraction'``.
    name : str
        Variable name, used in error messages.

    Returns
    -------
    numpy.ndarray
        Water amount in ``units``: kg m-2 = theta * RHO_WATER * thickness_m; m3 m-3; or
        theta / porosity.
    """
    kind, f = _water_units(units, name)
    v = _f64(vol)
    if kind == "mass":
        m = v * (RHO_WATER * _check_thickness(thickness_m, name))
        return m if f == 1.0 else m / f
    if kind == "saturation":
        return v / _check_porosity(porosity, name)
    return v.copy() if f == 1.0 else v / f


# --- water conventions: ice as stored, totals and fractions -----------------------------------
#
# A model may keep soil water as liquid + ice, as a total + the liquid, as a total + the frozen
# (or unfrozen) fraction, or as a total only. These pure functions turn each into the physics'
# liquid and ice contents (m3 m-3, ice as liquid-water equivalent) and back.

#: How a *volumetric* ice content (m3 m-3 or fraction of saturation) is to be read: as the
#: volume the ice's mass would fill as liquid water (``liquid_equivalent``, the physics'
#: convention) or as the true volume of the ice (``true_ice_volume``, density RHO_ICE). Mass units
#: (kg m-2) are unambiguous and need neither.
ICE_READINGS = ("liquid_equivalent", "true_ice_volume")


def water_units_are_mass(units, name="soil water"):
    """True for mass units (kg m-2 and spellings), False for m3 m-3 or fraction of saturation.

    Raises
    ------
    InputError
        For units that are not a water amount (see :func:`water_to_volumetric`).
    """
    return _water_kind(units, name) == "mass"


def _ice_factor(reading):
    if reading == "liquid_equivalent":
        return 1.0
    if reading == "true_ice_volume":
        return RHO_ICE / RHO_WATER
    raise InputError(f"unknown ice reading {reading!r}; use one of {', '.join(ICE_READINGS)}")


def ice_volume_to_water_equivalent(theta_ice, reading):
    """A volumetric ice content as stored -> its liquid-water equivalent, m3 m-3.

    ``theta_we = theta_ice * RHO_ICE / RHO_WATER`` for a true ice volume (``reading =
    'true_ice_volume'``): the mass of the ice per unit soil volume divided by the density of liquid
    water; unchanged for ``'liquid_equivalent'``.

    Parameters
    ----------
    theta_ice : array_like
        Ice content as stored, m3 m-3.
    reading : {'liquid_equivalent', 'true_ice_volume'}
        What the stored volume is (see :data:`ICE_READINGS`).

    Returns
    -------
    numpy.ndarray
        Liquid-water-equivalent ice content, m3 m-3.

    References
    ----------
    Density of ice at 0 C, 917 kg m-3, and of liquid water, 1000 kg m-3: the constants set of
    :mod:`initgen.constants` (RHO_ICE, RHO_WATER), which names its source.
    """
    return _f64(theta_ice) * _ice_factor(reading)


def water_equivalent_to_ice_volume(theta_we, reading):
    """Inverse of :func:`ice_volume_to_water_equivalent`: ``theta_ice = theta_we * RHO_WATER / RHO_ICE``
    for ``'true_ice_volume'``, unchanged for ``'liquid_equivalent'``.

    References
    ----------
    As :func:`ice_volume_to_water_equivalent`.
    """
    return _f64(theta_we) / _ice_factor(reading)


def phases_from_total(total, other, kind, reading="liquid_equivalent"):
    """Split a total soil water content into liquid and ice, m3 m-3 (ice as liquid equivalent).

    Parameters
    ----------
    total : array_like
        Total water content, m3 m-3, as stored: with ``reading = 'true_ice_volume'`` it is the
        liquid volume plus the true ice volume, else liquid plus liquid-equivalent ice (a total
        read from kg m-2 is always the latter).
    other : array_like
        ``kind = 'liquid'``: the liquid content, m3 m-3 (ice = total - liquid);
        ``'frozen_fraction'``: the ice's fraction of the water mass, 1;
        ``'unfrozen_fraction'``: the liquid's fraction of the water mass, 1.
    kind : {'liquid', 'frozen_fraction', 'unfrozen_fraction'}
    reading : {'liquid_equivalent', 'true_ice_volume'}

    Returns
    -------
    (liquid, ice) : tuple of numpy.ndarray
        m3 m-3; ice as liquid-water equivalent. Water mass per unit volume is
        ``RHO_WATER * (liquid + ice)``.

    Notes
    -----
    With a frozen mass fraction ``f`` and a true-volume total ``V``, the water mass ``W``
    (as liquid-equivalent volume) solves ``V = (1 - f) W + f W RHO_WATER / RHO_ICE``.
    """
    t = _f64(total)
    o = _f64(other)
    k = _ice_factor(reading)
    if kind == "liquid":
        return o.copy(), (t - o) * k
    if kind in ("frozen_fraction", "unfrozen_fraction"):
        f = o if kind == "frozen_fraction" else 1.0 - o
        with np.errstate(divide="ignore", invalid="ignore"):
            w = t / ((1.0 - f) + f / k)
        dry = t == 0.0  # a layer without water: no split, whatever the fraction holds (often a fill value)
        return np.where(dry, 0.0, (1.0 - f) * w), np.where(dry, 0.0, f * w)
    raise InputError(f"unknown split {kind!r}; use liquid, frozen_fraction or unfrozen_fraction")


def total_from_phases(liq, ice_we, reading="liquid_equivalent"):
    """Total water content as a file keeps it, m3 m-3: ``liq + ice`` with the ice as stored
    (its true volume for ``reading = 'true_ice_volume'``). Inverse of :func:`phases_from_total`.

    References
    ----------
    As :func:`ice_volume_to_water_equivalent`.
    """
    return _f64(liq) + water_equivalent_to_ice_volume(ice_we, reading)


def frozen_fraction(liq, ice_we):
    """Ice's fraction of the water mass, ``ice / (liq + ice)`` (both liquid-equivalent), 1;
    NaN where the layer holds no water."""
    liq, ice = _f64(liq), _f64(ice_we)
    w = liq + ice
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(w > 0, ice / np.where(w > 0, w, 1.0), np.nan)


# =============================================================================================
# Hydraulic parameters
# =============================================================================================

class ClappHornberger(NamedTuple):
    """One row of Clapp and Hornberger (1978), Table 2, in the published units.

    Attributes
    ----------
    b : float
        Exponent of the water retention curve, dimensionless.
    psi_sat_cm : float
        Saturated matric suction magnitude, cm of water (positive).
    porosity : float
        Saturated volumetric water content theta_s, m3 m-3.
    k_sat_cm_min : float
        Saturated hydraulic conductivity, cm min-1.
    """

    b: float
    psi_sat_cm: float
    porosity: float
    k_sat_cm_min: float

    @property
    def psi_sat_m(self) -> float:
        """Saturated matric suction magnitude, m (= psi_sat_cm / 100)."""
        return self.psi_sat_cm / 100.0

    @property
    def k_sat_m_s(self) -> float:
        """Saturated hydraulic conductivity, m s-1 (= k_sat_cm_min / 100 / 60)."""
        return self.k_sat_cm_min / 6000.0


class Hydraulics(NamedTuple):
    """Parameters of the freezing curve (unpacks as ``porosity, psi_sat_m, b``).

    Attributes
    ----------
    porosity : float or numpy.ndarray
        Saturated volumetric water content theta_s, m3 m-3.
    psi_sat_m : float or numpy.ndarray
        Saturated matric suction as a positive magnitude, m of water.
    b : float or numpy.ndarray
        Clapp-Hornberger exponent, dimensionless.
    """

    porosity: object
    psi_sat_m: object
    b: object


#: Clapp and Hornberger (1978), Table 2: texture class -> (b, psi_s in cm, theta_s, K_s in
#: cm/min). Use ``.psi_sat_m`` and ``.k_sat_m_s`` for SI values.
CLAPP_HORNBERGER_1978 = {
    "sand": ClappHornberger(4.05, 12.1, 0.395, 1.056),
    "loamy sand": ClappHornberger(4.38, 9.0, 0.410, 0.938),
    "sandy loam": ClappHornberger(4.90, 21.8, 0.435, 0.208),
    "silt loam": ClappHornberger(5.30, 78.6, 0.485, 0.0432),
    "loam": ClappHornberger(5.39, 47.8, 0.451, 0.0417),
    "sandy clay loam": ClappHornberger(7.12, 29.9, 0.420, 0.0378),
    "silty clay loam": ClappHornberger(7.75, 35.6, 0.477, 0.0102),
    "clay loam": ClappHornberger(8.52, 63.0, 0.476, 0.0147),
    "sandy clay": ClappHornberger(10.4, 15.3, 0.426, 0.0130),
    "silty clay": ClappHornberger(10.4, 49.0, 0.492, 0.0062),
    "clay": ClappHornberger(11.4, 40.5, 0.482, 0.0077),
}


#: Centroid composition of each texture class of the USDA texture triangle, percent
#: ``(sand, clay)``: the mean over the class's area in the triangle, computed from the class
#: definitions of the Soil Survey Manual (Soil Science Division Staff 2017, USDA Handbook 18;
#: the class limits are a fact of the trade) on a 0.1 % grid and rounded to 0.1 %. Used to give
#: a texture class the solids heat capacity of the texture formula; tests/test_phase_rules.py
#: recomputes it from the definitions.
TEXTURE_CLASS_CENTROID_PCT = {
    "sand": (91.6, 3.3),
    "loamy sand": (81.6, 5.8),
    "sandy loam": (64.6, 10.4),
    "silt loam": (21.5, 13.2),
    "loam": (41.0, 18.3),
    "sandy clay loam": (59.8, 27.1),
    "silty clay loam": (10.0, 33.5),
    "clay loam": (32.5, 33.5),
    "sandy clay": (51.7, 41.6),
    "silty clay": (6.6, 46.7),
    "clay": (19.5, 62.9),
}

#: Organic soil (peat) parameters of Lawrence and Slater (2008): porosity 0.9, saturated
#: suction 10.3 mm, Clapp-Hornberger b 2.7 (after Letts et al. 2000) and solids heat capacity
#: 2.5e6 J m-3 K-1 (after Farouki 1986). Values confirmed in published model code implementing
#: that paper.
ORGANIC_LAWRENCE_SLATER_2008 = {"porosity": 0.9, "psi_sat_m": 0.0103, "b": 2.7, "c_solid": 2.5e6}


def _texture_key(name):
    return " ".join(str(name).strip().lower().replace("_", " ").replace("-", " ").split())


def texture_solid_heat_capacity(name):
    """Solids heat capacity of a texture class, J m-3 K-1: :func:`soil_solid_heat_capacity`
    at the class's centroid composition (:data:`TEXTURE_CLASS_CENTROID_PCT`).

    Parameters
    ----------
    name : str
        A Clapp and Hornberger (1978) texture class (spelling as :func:`hydraulics_from_texture`).

    Returns
    -------
    float
        c_s, J m-3 K-1.

    References
    ----------
    .. [1] de Vries (1963) values in the texture formula (see :func:`soil_solid_heat_capacity`).
    .. [2] Soil Science Division Staff (2017). *Soil Survey Manual*, USDA Handbook 18 (texture
       class definitions).
    """
    hydraulics_from_texture(name)                       # validates the name
    sand, clay = TEXTURE_CLASS_CENTROID_PCT[_texture_key(name)]
    return float(soil_solid_heat_capacity(sand, clay))


def blend_organic(hydraulics, c_solid, organic_fraction):
    r"""Blend mineral soil parameters with those of organic soil, linearly in the organic fraction.

    .. math:: x = (1 - f_{om})\,x_{mineral} + f_{om}\,x_{organic}

    for porosity, saturated suction |psi_s|, Clapp-Hornberger b and the solids heat capacity,
    with the organic values of Lawrence and Slater (2008) (:data:`ORGANIC_LAWRENCE_SLATER_2008`).

    Parameters
    ----------
    hydraulics : Hydraulics
        Mineral ``(porosity m3 m-3, psi_sat_m m, b)``.
    c_solid : array_like
        Mineral solids heat capacity, J m-3 K-1.
    organic_fraction : array_like
        f_om, 0..1.

    Returns
    -------
    tuple
        ``(Hydraulics, c_solid)`` blended.

    Raises
    ------
    InputError
        If the fraction lies outside 0..1.

    References
    ----------
    .. [1] Lawrence, D. M., and Slater, A. G. (2008). Incorporating organic soil into a global
       climate model. *Climate Dynamics* 30, 145-160.
    """
    f = _f64(organic_fraction)
    if not np.all((f >= 0) & (f <= 1)):
        raise InputError("recipe key physics.organic_fraction: must lie in 0..1 (a fraction, not percent)")
    om = ORGANIC_LAWRENCE_SLATER_2008
    por, psi, b = (_f64(x) for x in hydraulics)
    mix = (lambda mineral, organic: (1.0 - f) * mineral + f * organic)
    return (Hydraulics(mix(por, om["porosity"]), mix(np.abs(psi), om["psi_sat_m"]), mix(b, om["b"])),
            mix(_f64(c_solid), om["c_solid"]))


def hydraulics_from_texture(name):
    """Freezing-curve parameters of a Clapp and Hornberger (1978) texture class.

    Parameters
    ----------
    name : str
        Texture class, e.g. ``'loam'``, ``'silty clay loam'``; case, underscores and hyphens
        are ignored (``'Silty_Clay-Loam'`` works).

    Returns
    -------
    Hydraulics
        ``(porosity m3 m-3, psi_sat_m m, b)``, with psi_sat converted from cm to m.

    Raises
    ------
    InputError
        For an unknown texture class (the message lists the known ones).

    References
    ----------
    .. [1] Clapp, R. B., and Hornberger, G. M. (1978). *Water Resources Research* 14(4),
       601-604, Table 2.
    """
    key = " ".join(str(name).strip().lower().replace("_", " ").replace("-", " ").split())
    row = CLAPP_HORNBERGER_1978.get(key)
    if row is None:
        raise InputError(
            f"texture {name!r} is not a Clapp and Hornberger (1978) class; use one of: "
            + ", ".join(CLAPP_HORNBERGER_1978)
        )
    return Hydraulics(row.porosity, row.psi_sat_m, row.b)


def cosby_1984(sand_pct, clay_pct, silt_pct=None, table=5):
    """Freezing-curve parameters from soil texture by the regressions of Cosby et al. (1984).

    Table 5 (single-variable regressions, the form most land models use):

    .. math::

        \\theta_s = 0.489 - 0.00126\\,\\mathrm{sand}, \\qquad
        b = 2.91 + 0.159\\,\\mathrm{clay}, \\qquad
        |\\psi_s|\\,[\\mathrm{mm}] = 10 \\cdot 10^{1.88 - 0.0131\\,\\mathrm{sand}}

    Table 4 (multi-variable regressions):

    .. math::

        \\theta_s = 0.505 - 0.00142\\,\\mathrm{sand} - 0.00037\\,\\mathrm{clay}, \\quad
        b = 3.10 + 0.157\\,\\mathrm{clay} - 0.003\\,\\mathrm{sand}, \\quad
        |\\psi_s|\\,[\\mathrm{mm}] = 10 \\cdot 10^{1.54 - 0.0095\\,\\mathrm{sand}
        + 0.0063\\,\\mathrm{silt}}

    Parameters
    ----------
    sand_pct, clay_pct : array_like
        Sand and clay content, percent (0-100), sand + clay <= 100.
    silt_pct : array_like, optional
        Silt content, percent; default ``100 - sand - clay``. Used by Table 4 only.
    table : {5, 4}
        Which set of regressions.

    Returns
    -------
    Hydraulics
        ``(porosity m3 m-3, psi_sat_m m, b)``; psi_sat_m is a positive suction magnitude in
        metres (the published mm value divided by 1000).

    Raises
    ------
    InputError
        For percentages outside 0-100, sand + clay > 100, or a table other than 4 or 5.

    References
    ----------
    .. [1] Cosby, B. J., Hornberger, G. M., Clapp, R. B., and Ginn, T. R. (1984).
       *Water Resources Research* 20(6), 682-690, Tables 4 and 5.
    """
    sand = _f64(sand_pct)
    clay = _f64(clay_pct)
    for nm, v in (("sand_pct", sand), ("clay_pct", clay)):
        if not np.all((v >= 0) & (v <= 100)):
            raise InputError(f"{nm} must be a percentage in 0..100; check the texture input")
    if np.any(sand + clay > 100.0 + 1e-6):
        raise InputError("sand_pct + clay_pct exceeds 100 %; check the texture input")
    if table == 5:
        porosity = 0.489 - 0.00126 * sand
        b = 2.91 + 0.159 * clay
        psi_mm = 10.0 * 10.0 ** (1.88 - 0.0131 * sand)
    elif table == 4:
        silt = 100.0 - sand - clay if silt_pct is None else _f64(silt_pct)
        if not np.all((silt >= -1e-6) & (silt <= 100)):
            raise InputError("silt_pct must be a percentage in 0..100; check the texture input")
        porosity = 0.505 - 0.00142 * sand - 0.00037 * clay
        b = 3.10 + 0.157 * clay - 0.003 * sand
        psi_mm = 10.0 * 10.0 ** (1.54 - 0.0095 * sand + 0.0063 * silt)
    else:
        raise InputError(f"cosby_1984: table must be 4 or 5, got {table!r}")
    return Hydraulics(porosity, psi_mm / 1000.0, b)


# =============================================================================================
# Heat capacity, enthalpy, freezing curve
# =============================================================================================

def soil_solid_heat_capacity(sand_pct, clay_pct):
    """Volumetric heat capacity of soil solids from texture, J m-3 K-1.

    .. math:: c_s = \\frac{2.128\\,\\mathrm{sand} + 2.385\\,\\mathrm{clay}}
              {\\mathrm{sand} + \\mathrm{clay}} \\times 10^6

    Parameters
    ----------
    sand_pct, clay_pct : array_like
        Sand and clay content, percent; sand + clay must be > 0 (the formula is undefined for
        pure silt: give ``c_solid`` directly then).

    Returns
    -------
    numpy.ndarray
        c_s, J m-3 K-1.

    References
    ----------
    .. [1] de Vries, D. A. (1963). Thermal properties of soils. In *Physics of Plant
       Environment*, North-Holland, 210-235; the texture formula with these values is the one
       used by land models (REFERENCES.md).
    """
    sand = _f64(sand_pct)
    clay = _f64(clay_pct)
    if not np.all((sand >= 0) & (clay >= 0) & (sand + clay > 0)):
        raise InputError("sand_pct and clay_pct must be >= 0 with sand_pct + clay_pct > 0 for the "
                         "texture heat capacity; give c_solid directly for pure silt")
    return (CV_SAND_TEXTURE * sand + CV_CLAY_TEXTURE * clay) / (sand + clay)


def _solid_capacity(c_solid, sand_pct=None, clay_pct=None):
    if c_solid is not None:
        if sand_pct is not None or clay_pct is not None:
            raise InputError("heat capacity: give either c_solid or sand_pct and clay_pct, not both")
        return _f64(c_solid)
    if sand_pct is None and clay_pct is None:
        return np.float64(CV_SOLID_DEFAULT)
    if sand_pct is None or clay_pct is None:
        raise InputError("heat capacity: give both sand_pct and clay_pct (or c_solid)")
    return soil_solid_heat_capacity(sand_pct, clay_pct)


def heat_capacity(theta_liq, theta_ice, porosity, c_solid=None, sand_pct=None, clay_pct=None):
    """Volumetric heat capacity of moist soil, J m-3 K-1, by de Vries (1963) mixing.

    .. math:: C = (1 - \\phi)\\,c_s + \\theta_{liq}\\,\\rho_w c_w
              + \\theta_{ice}^{true}\\,\\rho_i c_i,
              \\qquad \\theta_{ice}^{true} = \\theta_{ice}\\,\\rho_w / \\rho_i

    so that, with the liquid-equivalent ``theta_ice`` used throughout initgen, the ice term is
    ``theta_ice * RHO_WATER * CP_ICE`` (mass of ice times its specific heat). The pore air is
    neglected (about 1.2e3 J m-3 K-1 per unit air volume).

    Parameters
    ----------
    theta_liq : array_like
        Liquid water content, m3 m-3.
    theta_ice : array_like
        Ice content as liquid-water equivalent, m3 m-3.
    porosity : array_like
        Porosity phi, m3 m-3.
    c_solid : array_like, optional
        Volumetric heat capacity of the soil solids c_s, J m-3 K-1.
    sand_pct, clay_pct : array_like, optional
        Texture, percent; used (with :func:`soil_solid_heat_capacity`) when ``c_solid`` is not
        given. With neither, c_s = ``CV_SOLID_DEFAULT`` = 2.2565e6 J m-3 K-1 (the texture
        formula at equal sand and clay, between quartz 2.13e6 and clay minerals 2.39e6).

    Returns
    -------
    numpy.ndarray
        C, J m-3 K-1.

    References
    ----------
    .. [1] de Vries, D. A. (1963). Thermal properties of soils. In *Physics of Plant
       Environment*, North-Holland, 210-235 (volume-weighted sum of constituent capacities).
    .. [2] Moene, A. F., and van Dam, J. C. (2014). *Transport in the
       Atmosphere-Vegetation-Soil Continuum*, Table 2.2.
    """
    cs = _solid_capacity(c_solid, sand_pct, clay_pct)
    phi = _f64(porosity)
    return (1.0 - phi) * cs + CV_WATER * _f64(theta_liq) + _CV_ICE_WE * _f64(theta_ice)


def enthalpy(T, theta_liq, theta_ice, dz, porosity, c_solid=None):
    """Enthalpy of a soil layer, J m-2, relative to the layer with all its water frozen at T_f.

    .. math:: H = C(\\theta_{liq}, \\theta_{ice})\\,(T - T_f)\\,\\Delta z
              + \\rho_w L_f\\,\\theta_{liq}\\,\\Delta z

    with C from :func:`heat_capacity` (liquid and ice parts included). This is the one energy
    function of initgen: :func:`solve_enthalpy`, :func:`apply_energy_mode` and
    :func:`energy_of_change` are consistent with it, so energy conservation can be tested.

    Parameters
    ----------
    T : array_like
        Temperature, K.
    theta_liq, theta_ice : array_like
        Liquid and ice (liquid-equivalent) contents, m3 m-3.
    dz : array_like
        Layer thickness, m.
    porosity : array_like
        Porosity, m3 m-3.
    c_solid : array_like, optional
        Heat capacity of the solids, J m-3 K-1 (default ``CV_SOLID_DEFAULT``).

    Returns
    -------
    numpy.ndarray
        H, J m-2.

    References
    ----------
    .. [1] de Vries (1963) for C; the latent term uses L_f of the CESM constant set
       (:mod:`initgen.constants`).
    """
    liq = _f64(theta_liq)
    C = heat_capacity(liq, theta_ice, porosity, c_solid)
    dz = _f64(dz)
    return C * (_f64(T) - T_FREEZE) * dz + _LV * liq * dz


def _liq_max_below(T, phi, psi_abs, b):
    """Niu-Yang limit for T < T_f (not capped, no branch), vectorised internal helper."""
    x = (LATENT_HEAT_FUSION / GRAVITY) * (T_FREEZE - T) / (T * psi_abs)
    return phi * np.exp(-np.log(x) / b)


def supercooled_liquid_max(T, porosity, psi_sat_m, b, T_f=T_FREEZE):
    """Largest liquid water content in equilibrium below freezing (supercooled soil water).

    .. math:: \\theta_{liq}^{max} = \\theta_s \\left(\\frac{L_f\\,(T_f - T)}
              {g\\,T\\,|\\psi_s|}\\right)^{-1/b} \\quad (T < T_f)

    capped at theta_s (the formula exceeds theta_s within a few mK of T_f), and
    theta_liq_max = theta_s for T >= T_f. Here theta_s is the porosity, |psi_s| the saturated
    matric suction magnitude in metres, g = 9.80616 m s-2 and L_f = 3.337e5 J kg-1.

    Parameters
    ----------
    T : array_like
        Temperature, K (> 0).
    porosity : array_like
        theta_s, m3 m-3.
    psi_sat_m : array_like
        Saturated matric potential, m; its magnitude is used, so suction (positive) and
        potential (negative) conventions both work.
    b : array_like
        Clapp-Hornberger exponent (> 0).
    T_f : float
        Freezing point, K (default 273.15 K, CESM set).

    Returns
    -------
    numpy.ndarray
        theta_liq_max, m3 m-3.

    Examples
    --------
    Clapp-Hornberger loam at 268.15 K (REFERENCES.md worked value 0.1188):

    >>> round(float(supercooled_liquid_max(268.15, 0.451, 0.478, 5.39)), 4)
    0.1188

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952
       (supercooled liquid water limit).
    .. [2] Koren, V., et al. (1999). *JGR* 104(D16), 19569-19585, Eq. 17 (implicit form that
       reduces to the above with its ice correction set to zero).
    """
    T = _f64(T)
    phi = _f64(porosity)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        x = (LATENT_HEAT_FUSION / GRAVITY) * (T_f - T) / (T * np.abs(_f64(psi_sat_m)))
        lim = phi * np.exp(-np.log(x) / _f64(b))
    below = T < T_f
    return np.where(below, np.minimum(lim, phi), np.where(T >= T_f, phi, np.nan))


def equilibrate_phase(T, theta_liq, theta_ice, porosity, psi_sat_m, b):
    """Repartition water between liquid and ice after a temperature has been imposed.

    .. math:: W = \\theta_{liq} + \\theta_{ice}, \\qquad
              \\theta_{liq}' = \\begin{cases} W & T > T_f \\\\
              \\min(W, \\theta_{liq}^{max}(T)) & T \\le T_f \\end{cases}, \\qquad
              \\theta_{ice}' = W - \\theta_{liq}'

    Above T_f all ice melts; below, liquid above the supercooled limit freezes and ice melts
    while liquid is below the limit and ice remains. Total water W is conserved.

    Parameters
    ----------
    T : array_like
        Imposed temperature, K.
    theta_liq, theta_ice : array_like
        Liquid and ice (liquid-equivalent) contents before, m3 m-3.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).

    Returns
    -------
    tuple of numpy.ndarray
        ``(theta_liq, theta_ice)`` after, m3 m-3.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    T = _f64(T)
    W = _f64(theta_liq) + _f64(theta_ice)
    lmax = supercooled_liquid_max(T, porosity, psi_sat_m, b)
    liq = np.where(T > T_FREEZE, W, np.minimum(W, lmax))
    return liq, W - liq


def energy_of_change(T0, liq0, ice0, T1, liq1, ice1, dz, porosity, c_solid=None):
    """Split the enthalpy change of a layer into sensible and latent parts, J m-2.

    .. math:: E_{lat} = \\rho_w L_f (\\theta_{liq,1} - \\theta_{liq,0})\\,\\Delta z, \\qquad
              E_{sens} = H_1 - H_0 - E_{lat}

    with H from :func:`enthalpy`. E_lat > 0 means energy went into melting ice; E_sens
    includes the change of heat capacity of the water that changed phase, measured from T_f.
    E_sens + E_lat = H_1 - H_0.

    Parameters
    ----------
    T0, liq0, ice0 : array_like
        State before: K, m3 m-3, m3 m-3.
    T1, liq1, ice1 : array_like
        State after.
    dz, porosity, c_solid : array_like
        Layer thickness (m), porosity (m3 m-3), heat capacity of solids (J m-3 K-1).

    Returns
    -------
    tuple of numpy.ndarray
        ``(sensible_J_m2, latent_J_m2)``.
    """
    H0 = enthalpy(T0, liq0, ice0, dz, porosity, c_solid)
    H1 = enthalpy(T1, liq1, ice1, dz, porosity, c_solid)
    latent = _LV * (_f64(liq1) - _f64(liq0)) * _f64(dz)
    return H1 - H0 - latent, latent


# =============================================================================================
# Energy mode: solve H(T, phase) = H_target
# =============================================================================================

#: Elements per block: the mode functions work through large arrays in blocks of about this
#: many cells so that temporaries stay in the CPU cache (results do not depend on it).
BLOCK_CELLS = 1 << 15


def _blocks(shape, target=None):
    """Index tuples that tile ``shape`` in blocks of about ``target`` (default
    ``BLOCK_CELLS``) elements, cut along the longest axis."""
    target = BLOCK_CELLS if target is None else target
    if len(shape) == 0:
        yield ()
        return
    ax = int(np.argmax(shape))
    n = shape[ax]
    other = int(np.prod(shape)) // max(n, 1)
    step = max(1, target // max(other, 1))
    for i in range(0, n, step):
        yield (slice(None),) * ax + (slice(i, min(i + step, n)),)


def _validate_params(dz, porosity, b, where, psi=None):
    if psi is not None and not np.all(np.isfinite(psi) & (psi != 0)):
        raise InputError(f"{where}: psi_sat_m must be finite and non-zero (a suction magnitude in m); "
                         "check psi_sat or the texture")
    if not np.all(np.isfinite(dz) & (dz > 0)):
        raise InputError(f"{where}: layer thickness dz must be finite and > 0 m; check the layer geometry")
    if not np.all((porosity > 0) & (porosity <= 1)):
        raise InputError(f"{where}: porosity must lie in (0, 1] m3 m-3; check the porosity or texture")
    if not np.all(b > 0):
        raise InputError(f"{where}: Clapp-Hornberger b must be > 0; check clapp_b or the texture")


def solve_enthalpy(H_target, total_water, dz, porosity, psi_sat_m, b, c_solid=None, *,
                   T_guess=None, max_iter=40):
    """Temperature and phase partition with a given enthalpy, on the freezing curve.

    Finds T and theta_liq = min(W, theta_liq_max(T)) (T <= T_f), theta_liq = W (T > T_f),
    theta_ice = W - theta_liq, such that :func:`enthalpy` equals ``H_target``. Along this
    curve H is continuous and strictly increasing in T (for T above T_f - L_f / (c_w - c_i)
    = 112 K), so the solution is unique. Writing h = H / dz (J m-3), C_liq = (1 - phi) c_s +
    rho_w c_w W and L = rho_w L_f, the branches from warm to cold are:

    1. h >= L W: all liquid, T = T_f + (h - L W) / C_liq (closed form).
    2. L min(W, phi) <= h < L W (only when W > phi): latent plateau, T = T_f,
       theta_liq = h / L.
    3. from the plateau down to the kink where theta_liq_max(T) = min(W, phi): no phase
       change, H linear in T (closed form).
    4. colder: on the Niu-Yang curve. With s = T_f - T and z = ln(s / (T_f - s)),
       theta_liq_max = phi exp(-(ln(L_f / (g |psi_s|)) + z) / b) is a pure exponential in z
       and s = T_f / (1 + e^-z); the residual

       .. math:: F(z) = \\theta_{liq}(z)\\,(L - \\rho_w (c_w - c_i)\\, s) - K s - h,
                 \\quad K = (1-\\phi) c_s + \\rho_w c_i W

       is solved by Halley's method (analytic first and second derivatives), safeguarded by
       bisection inside a bracket [z_lo, z_hi] with F(z_lo) > 0 > F(z_hi), until a Halley
       step is below 1e-6 (relative; the error after it is ~1e-18) or |F| is at round-off
       level; at most ``max_iter`` steps (typically 3).

    Parameters
    ----------
    H_target : array_like
        Enthalpy, J m-2, relative to all water frozen at T_f (see :func:`enthalpy`).
    total_water : array_like
        W = theta_liq + theta_ice, m3 m-3 (>= 0).
    dz : array_like
        Layer thickness, m.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).
    c_solid : array_like, optional
        Heat capacity of the solids, J m-3 K-1 (default ``CV_SOLID_DEFAULT``).
    T_guess : array_like, optional
        First guess of the temperature, K (e.g. the starting temperature); only speeds up
        branch 4.
    max_iter : int
        Iteration cap of branch 4.

    Returns
    -------
    tuple of numpy.ndarray
        ``(T K, theta_liq m3 m-3, theta_ice m3 m-3)``. In branch 4 the final T is moved to
        the nearest representable number on the warm side of the root and theta_liq is the
        content that gives exactly ``H_target`` there: the energy is exact to round-off of H
        and theta_liq never exceeds :func:`supercooled_liquid_max` (it lies below it by at
        most the effect of one float64 step of T, < 1e-9 m3 m-3). theta_ice = W - theta_liq.
        A NaN input gives NaN outputs. Targets that
        imply T below T_f / 2 = 136.6 K are outside the solver's range: T stops at 136.6 K
        and energy is not conserved there; the soil-temperature clamp (180 K) reports them.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    .. [2] de Vries, D. A. (1963), for the heat capacity (see :func:`heat_capacity`).
    """
    H = _f64(H_target)
    W = _f64(total_water)
    dz = _f64(dz)
    phi = _f64(porosity)
    psi = _f64(psi_sat_m)
    b = _f64(b)
    cs = _f64(CV_SOLID_DEFAULT if c_solid is None else c_solid)
    _validate_params(dz, phi, b, "solve_enthalpy", psi)
    if np.any(W < 0):
        raise InputError("solve_enthalpy: total_water has negative values; fix negative water in the input first")
    args = [H, W, dz, phi, psi, b, cs]
    if T_guess is not None:
        args.append(_f64(T_guess))
    shape = np.broadcast_shapes(*(a.shape for a in args))
    views = [np.broadcast_to(a, shape) for a in args]
    out = [np.empty(shape) for _ in range(3)]
    for sl, flat in _flat_blocks(shape, views):
        Hb, Wb, dzb, phib, psib, bb, csb = flat[:7]
        Tb, lb = _solve_block(Hb / dzb, Wb, phib, psib, bb, (1.0 - phib) * csb,
                              flat[7] if T_guess is not None else None, max_iter)
        bshape = out[0][sl].shape
        out[0][sl] = Tb.reshape(bshape)
        out[1][sl] = lb.reshape(bshape)
        out[2][sl] = (Wb - lb).reshape(bshape)
    return tuple(out)


def _flat_blocks(shape, views):
    """(index, [contiguous 1-D copies of each view's block]) for each block of ``shape``."""
    if shape == ():
        yield (), [np.reshape(np.array(v, dtype=np.float64), (1,)) for v in views]
        return
    for sl in _blocks(shape):
        yield sl, [np.ascontiguousarray(v[sl]).reshape(-1) for v in views]


def _solve_block(Hd, W, phi, psi, b, Cfix, T_guess, max_iter):
    """Solve one block of 1-D contiguous arrays (see :func:`solve_enthalpy`); Hd in J m-3.

    ``Cfix`` is the heat capacity of everything that does not change phase, J m-3 K-1: the
    solids ``(1 - phi) c_s``, plus (for the change-driven rule) ice already present and liquid
    that the rule leaves alone. ``W`` is the water that may change phase along the curve.

    Returns (T, liq)."""
    psi = np.abs(psi)
    K = Cfix + _CV_ICE_WE * W                     # capacity with all of W frozen, J m-3 K-1
    LW = _LV * W                                  # latent content of all the water, J m-3
    lk = np.minimum(W, phi)                       # liquid content at the kink
    Llk = _LV * lk
    Ck = K + _DCV * lk                            # capacity between the kink and T_f
    c1 = np.log((LATENT_HEAT_FUSION / GRAVITY) / psi)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        zk = -b * np.log(lk / phi) - c1           # z at the kink: x_k = (lk / phi)^-b >= 1
        sk = T_FREEZE / (1.0 + np.exp(-zk))       # depression at the kink, K
        # branches 1-3 without masks: 1 -> first term, 2 -> T_f, 3 -> second term
        T = (T_FREEZE + np.maximum(Hd - LW, 0.0) / (K + _DCV * W)
             + np.minimum(Hd - Llk, 0.0) / Ck)
        liq = np.minimum(np.maximum(Hd * (1.0 / _LV), lk), W)
        # keep branch-3 states exactly on the curve despite round-off at the kink (fmin: the
        # cap is NaN or inf at and above T_f, where it does not apply)
        x = (LATENT_HEAT_FUSION / GRAVITY) * (T_FREEZE - T) / (T * psi)
        liq = np.fmin(liq, phi * np.exp(-np.log(x) / b))
    idx = np.flatnonzero(Hd < Llk - Ck * sk)      # branch 4: colder than the kink
    if idx.size:
        phi4, psi4, b4, W4 = phi.take(idx), psi.take(idx), b.take(idx), W.take(idx)
        h4, K4 = Hd.take(idx), K.take(idx)
        T4 = _solve_curve(h4, W4, phi4, b4, K4, Llk.take(idx), c1.take(idx), zk.take(idx),
                          None if T_guess is None else T_guess.take(idx), max_iter)
        T[idx], liq[idx] = _settle_on_curve(T4, h4, W4, phi4, psi4, b4, K4)
    return T, liq


def _settle_on_curve(T, h, W, phi, psi, b, K):
    """Final (T, liq) of branch 4: exact energy without leaving the curve.

    Near T_f the liquid content is so sensitive to T that one float64 step of T (5.7e-14 K)
    can change H by more than the round-off of H. So T is moved, one representable number at
    a time, to the warm side of the root, where the liquid content that gives exactly h,
    l_e = (h + K s) / (rho_w L_f - dC s), lies at or below the curve value l_c(T); the state
    is then (T, l_e): energy exact to round-off, liquid never above the supercooled limit and
    below it by at most the effect of one step of T.
    """
    lk = np.minimum(W, phi)
    s = T_FREEZE - T
    lc = np.minimum(lk, _liq_max_below(T, phi, psi, b))
    le = (h + K * s) / (_LV - _DCV * s)
    i = np.flatnonzero(le > lc)                     # cells on the cold side of the root
    for _ in range(16):                             # (Halley leaves T within a few steps)
        if i.size == 0:
            break
        Ti = np.nextafter(T[i], np.inf)
        si = T_FREEZE - Ti
        lci = np.minimum(lk[i], _liq_max_below(Ti, phi[i], psi[i], b[i]))
        lei = (h[i] + K[i] * si) / (_LV - _DCV * si)
        T[i], lc[i], le[i] = Ti, lci, lei
        i = i[lei > lci]
    return T, np.maximum(np.minimum(le, lc), 0.0)


def _solve_curve(Hd, W, phi, b, K, Llk, c1, zk, T_guess, max_iter):
    """Safeguarded Halley iteration in z = ln(s / (T_f - s)) for branch 4 of solve_enthalpy.

    With e = exp(-z), s = T_f / (1 + e), q = ds/dz = s e / (1 + e), l = phi exp(-(c1 + z)/b),
    lat = L - dC s (L = rho_w L_f, dC = rho_w (c_w - c_i)):

        F   = l lat - K s - Hd
        F'  = -(K + dC l) q - l lat / b
        F'' = 2 dC l q / b - (K + dC l) q (1 - 2 s / T_f) + l lat / b^2

    Bracket: F(z_k) > 0 at the kink; since h <= -K s + L l_k on this branch,
    s_hi = (L l_k - Hd) / K (capped at T_f / 2) gives F(z_hi) <= 0.
    """
    Tf = T_FREEZE
    s_hi = np.minimum((Llk - Hd) / K, 0.5 * Tf)
    z_hi = np.log(s_hi / (Tf - s_hi))
    z_lo = zk
    if T_guess is not None:
        sg = Tf - T_guess
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.log(sg / (Tf - sg))
        z = np.where((z > z_lo) & (z < z_hi), z, z_lo)
    else:
        z = z_lo.copy()
    tolF = 1e-15 * (_LV * W + K * s_hi + np.abs(Hd))   # round-off level of h, J m-3
    out = np.empty_like(Hd)
    act = None                                         # indices of active cells (None: all)
    inv_b = 1.0 / b
    for _ in range(max_iter):
        e = np.exp(-z)
        r = 1.0 / (1.0 + e)
        s = Tf * r
        q = s * e * r
        l = phi * np.exp(-(c1 + z) * inv_b)
        lat = _LV - _DCV * s
        Kl = K + _DCV * l
        Klq = Kl * q
        llat = l * lat
        llat_b = llat * inv_b
        F = llat - K * s - Hd
        d1 = -Klq - llat_b
        d2 = (2.0 * _DCV) * l * q * inv_b - Klq * (1.0 - (2.0 / Tf) * s) + llat_b * inv_b
        pos = F > 0
        z_lo = np.where(pos, z, z_lo)
        z_hi = np.where(pos, z_hi, z)
        zn = z - 2.0 * F * d1 / (2.0 * d1 * d1 - F * d2)
        bad = ~((zn > z_lo) & (zn < z_hi))
        if bad.any():
            zn = np.where(bad, 0.5 * (z_lo + z_hi), zn)
        small = np.abs(F) <= tolF
        if small.any():
            zn = np.where(small, z, zn)
        # Halley converges cubically: after a Halley step of relative size <= 1e-6 the error
        # is ~1e-18, so that step is the last one (bisection steps never end the iteration).
        done = small | (~bad & (np.abs(zn - z) <= 1e-6 * np.maximum(1.0, np.abs(z))))
        z = zn
        ndone = np.count_nonzero(done)
        if ndone == done.size:
            break
        if 2 * ndone >= done.size:      # compact the active set when half of it is done
            keep = ~done
            sel = np.flatnonzero(done) if act is None else act[done]
            out[sel] = Tf - Tf / (1.0 + np.exp(-z[done]))
            act = np.flatnonzero(keep) if act is None else act[keep]
            z, z_lo, z_hi = z[keep], z_lo[keep], z_hi[keep]
            Hd, phi, inv_b, K, c1, tolF = (Hd[keep], phi[keep], inv_b[keep], K[keep],
                                           c1[keep], tolF[keep])
    Tz = Tf - Tf / (1.0 + np.exp(-z))
    if act is None:
        return Tz
    out[act] = Tz
    return out


# =============================================================================================
# The two modes
# =============================================================================================

class SoilChange(NamedTuple):
    """Result of :func:`apply_energy_mode` or :func:`apply_temperature_mode`, per layer cell.

    Attributes
    ----------
    T : numpy.ndarray
        New temperature, K.
    liq, ice : numpy.ndarray
        New liquid and ice (liquid-equivalent) contents, m3 m-3.
    frozen_kg_m2 : numpy.ndarray
        Liquid water that froze, kg m-2 (>= 0).
    melted_kg_m2 : numpy.ndarray
        Ice that melted, kg m-2 (>= 0).
    sensible_J_m2 : numpy.ndarray
        Sensible part of the enthalpy change, J m-2 (see :func:`energy_of_change`).
    latent_J_m2 : numpy.ndarray
        Latent part, J m-2; > 0 when ice melted.
    """

    T: np.ndarray
    liq: np.ndarray
    ice: np.ndarray
    frozen_kg_m2: np.ndarray
    melted_kg_m2: np.ndarray
    sensible_J_m2: np.ndarray
    latent_J_m2: np.ndarray


def _mode_inputs(T, liq, ice, dT, dz, porosity, psi_sat_m, b, c_solid):
    arrs = [_f64(a) for a in (T, liq, ice, dT, dz, porosity, psi_sat_m, b,
                              CV_SOLID_DEFAULT if c_solid is None else c_solid)]
    shape = np.broadcast_shapes(*(a.shape for a in arrs))
    return shape, [np.broadcast_to(a, shape) for a in arrs]


_CHECKS = (  # (argument index, test of validity, what is wrong, what to do)
    (0, lambda v: v > 0, "soil temperature <= 0 K", "check the temperature units"),
    (1, lambda v: (v >= 0) & (v < np.inf), "negative or missing liquid water",
     "fix negative water in the input, or check the fill value"),
    (2, lambda v: (v >= 0) & (v < np.inf), "negative or missing ice",
     "fix negative water in the input, or check the fill value"),
    (1, lambda v: v <= 1.0, "liquid water above 1 m3 m-3", "check the water units"),
    (2, lambda v: v <= 1.0, "ice above 1 m3 m-3", "check the water units"),
    (4, lambda v: (v > 0) & (v < np.inf), "layer thickness dz not finite and > 0 m",
     "check the layer geometry"),
    (5, lambda v: (v > 0) & (v <= 1), "porosity outside (0, 1] m3 m-3",
     "check the porosity variable or the texture"),
    (6, lambda v: np.isfinite(v) & (v != 0), "psi_sat_m zero or missing",
     "check psi_sat (a suction magnitude in m) or the texture"),
    (7, lambda v: (v > 0) & (v < np.inf), "Clapp-Hornberger b not finite and > 0",
     "check clapp_b or the texture"),
    (8, lambda v: (v >= 0) & (v < np.inf), "solid heat capacity c_solid negative or missing",
     "check c_solid or the texture"),
)


def _touched(args, where):
    """Cells a mode changes: dT != 0 with finite T and dT. Every such cell must have valid
    water and parameters (checked here, InputError otherwise); other cells are passed through."""
    T, dT = args[0], args[3]
    touched = (dT != 0) & np.isfinite(dT) & np.isfinite(T)
    ok = np.ones_like(touched)
    for i, test, _, _ in _CHECKS:
        ok &= test(args[i])
    bad = touched & ~ok
    if bad.any():
        for i, test, what, todo in _CHECKS:
            n = int(np.count_nonzero(touched & ~test(args[i])))
            if n:
                raise InputError(f"{where}: {n} cell(s) to perturb have {what}; {todo}")
    return touched


def _run_mode(block_fn, shape, views, where):
    out = [np.empty(shape) for _ in range(7)]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for sl, flat in _flat_blocks(shape, views):
            res = block_fn(*flat, _touched(flat, where))
            bshape = out[0][sl].shape
            for o, r in zip(out, res):
                o[sl] = r.reshape(bshape)
    return SoilChange(*out)


def _finish(T0, liq0, ice0, T1, liq1, ice1, touched, H0d, Csol, dz):
    """The seven outputs of one block; cells not touched keep their exact inputs."""
    if not touched.all():
        T1 = np.where(touched, T1, T0)
        liq1 = np.where(touched, liq1, liq0)
        ice1 = np.where(touched, ice1, ice0)
    H1d = (Csol + CV_WATER * liq1 + _CV_ICE_WE * ice1) * (T1 - T_FREEZE) + _LV * liq1
    dl = liq1 - liq0
    latent = _LV * dl * dz
    sensible = (H1d - H0d) * dz - latent
    if not touched.all():
        sensible = np.where(touched, sensible, 0.0)   # NaN-safe zero for untouched cells
        latent = np.where(touched, latent, 0.0)
        dl = np.where(touched, dl, 0.0)
    dmass = (RHO_WATER * dz) * dl
    return T1, liq1, ice1, np.maximum(-dmass, 0.0), np.maximum(dmass, 0.0), sensible, latent


def settle_one_sided(T, liq, ice, porosity, psi_sat_m, b):
    r"""Bring a state to the consistency the change-driven rule keeps, changing phase only where
    the state's own temperature requires it.

    .. math:: T < T_f:\ \theta_{liq}' = \min(\theta_{liq}, \theta_{liq}^{max}(T)); \qquad
              T > T_f:\ \theta_{ice}' = 0; \qquad T = T_f:\ \text{unchanged}

    (liquid above the supercooled limit of Niu and Yang 2006 freezes; ice above T_f melts;
    liquid below the curve with ice present is stable and kept). Total water is conserved.
    Used for a state that no imposed change produced, such as a blend of two files.

    Parameters
    ----------
    T : array_like
        Temperature, K.
    liq, ice : array_like
        Liquid and ice (liquid-equivalent) contents, m3 m-3.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).

    Returns
    -------
    tuple of numpy.ndarray
        ``(theta_liq, theta_ice)``, m3 m-3.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    T, liq, ice = _f64(T), _f64(liq), _f64(ice)
    below = T < T_FREEZE
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        phi = _f64(porosity)
        lmax = np.minimum(phi, _liq_max_below(np.where(below, T, T_FREEZE - 1.0), phi, np.abs(_f64(psi_sat_m)),
                                              _f64(b)))   # the curve is capped at the porosity
    stays = np.where(below, np.minimum(liq, lmax), liq)
    above = T > T_FREEZE
    liq1 = np.where(above, liq + ice, stays)
    ice1 = np.where(above, 0.0, ice + (liq - stays))
    return liq1, ice1


def _diagnosed_start(T, liq, ice, phi, psi, b, touched):
    """The equilibrium rule's starting state: the split a model that diagnoses the phase from
    temperature would see at the starting temperature (only where the cell is perturbed)."""
    le, ie = equilibrate_phase(np.where(touched, T, T_FREEZE), liq, ice, phi, psi, b)
    return np.where(touched, le, liq), np.where(touched, ie, ice)


def _below_resolution(T, liq, ice, dT, phi, cs):
    """Cells whose imposed enthalpy change is below the round-off of their enthalpy (a factor of
    1e-26 deep in a profile): the solver cannot resolve it, so the cell is left as it is rather
    than moved by one float64 step of T, possibly against the imposed sign."""
    C0 = (1.0 - phi) * cs + CV_WATER * liq + _CV_ICE_WE * ice
    scale = np.abs(C0 * (T - T_FREEZE)) + _LV * (liq + ice) + C0
    return np.abs(C0 * dT) <= 8.0 * np.finfo(np.float64).eps * scale


def _energy_block(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    touched = touched & ~_below_resolution(T, liq, ice, dT, phi, cs)
    liq, ice = _diagnosed_start(T, liq, ice, phi, psi, b, touched)
    W = liq + ice
    Csol = (1.0 - phi) * cs
    C0 = Csol + CV_WATER * liq + _CV_ICE_WE * ice
    H0d = C0 * (T - T_FREEZE) + _LV * liq                  # J m-3
    target = H0d + C0 * dT
    target[~touched] = np.nan                              # untouched cells are not solved
    T1, liq1 = _solve_block(target, W, phi, psi, b, Csol, T, 40)
    return _finish(T, liq, ice, T1, liq1, W - liq1, touched, H0d, Csol, dz)


def _temperature_block(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    liq, ice = _diagnosed_start(T, liq, ice, phi, psi, b, touched)
    Csol = (1.0 - phi) * cs
    H0d = (Csol + CV_WATER * liq + _CV_ICE_WE * ice) * (T - T_FREEZE) + _LV * liq
    T1 = T + dT
    liq1, ice1 = equilibrate_phase(T1, liq, ice, phi, psi, b)
    return _finish(T, liq, ice, T1, liq1, ice1, touched, H0d, Csol, dz)


def _freezable(T, liq, phi, psi, b):
    """Liquid the change-driven rule may freeze on cooling, and the liquid it leaves alone.

    At or above T_f all liquid may freeze (once the curve requires it). Below T_f only the
    liquid on or below the supercooled curve at the starting temperature takes part; liquid
    above that curve (a state these soil parameters call out of equilibrium) is input
    disequilibrium: it is reported by the caller and kept as it is, not acted on.
    Returns ``(W_eligible, kept)`` with ``W_eligible + kept == liq``.
    """
    lmax0 = np.where(T < T_FREEZE, np.minimum(phi, _liq_max_below(np.minimum(T, T_FREEZE), phi, psi, b)), np.inf)
    elig = np.where(T >= T_FREEZE, liq, np.minimum(liq, lmax0))
    return elig, liq - elig


def _energy_block_change_driven(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    touched = touched & ~_below_resolution(T, liq, ice, dT, phi, cs)
    Csol = (1.0 - phi) * cs
    C0 = Csol + CV_WATER * liq + _CV_ICE_WE * ice
    H0d = C0 * (T - T_FREEZE) + _LV * liq                  # J m-3
    e = C0 * dT                                            # imposed enthalpy change, J m-3
    T1 = T + dT
    liq1, ice1 = liq.copy(), ice.copy()
    # warming: sensible up to T_f; at T_f the energy melts ice (the temperature is held there
    # until the latent heat is paid); what is left warms the all-liquid layer. Below T_f no ice
    # melts, and a layer already above T_f (ice there is input disequilibrium) only warms.
    melt = touched & (dT > 0) & (T <= T_FREEZE) & (ice > 0) & (T1 > T_FREEZE)
    if melt.any():
        e2 = e - C0 * (T_FREEZE - T)                       # left at T_f, J m-3 (> 0)
        m = np.minimum(ice, e2 / _LV)
        e3 = np.maximum(e2 - _LV * m, 0.0)
        T1 = np.where(melt, T_FREEZE + e3 / (C0 + _DCV * m), T1)
        liq1 = np.where(melt, liq + m, liq1)
        ice1 = np.where(melt, ice - m, ice1)
    # cooling: along the freezing curve, freezing only the liquid that the curve at the new,
    # lower temperature cannot hold (ice present and liquid kept aside are fixed capacities)
    cool = touched & (dT < 0)
    if cool.any():
        elig, kept = _freezable(T, liq, phi, psi, b)
        Cfix = Csol + _CV_ICE_WE * ice + CV_WATER * kept
        target = np.where(cool, (Cfix + CV_WATER * elig) * (T - T_FREEZE) + _LV * elig + e, np.nan)
        Tc, lc = _solve_block(target, elig, phi, psi, b, Cfix, T, 40)
        T1 = np.where(cool, Tc, T1)
        liq1 = np.where(cool, lc + kept, liq1)
        ice1 = np.where(cool, ice + (elig - lc), ice1)
    return _finish(T, liq, ice, T1, liq1, ice1, touched, H0d, Csol, dz)


def _temperature_block_change_driven(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    Csol = (1.0 - phi) * cs
    H0d = (Csol + CV_WATER * liq + _CV_ICE_WE * ice) * (T - T_FREEZE) + _LV * liq
    T1 = T + dT
    W = liq + ice
    # warming melts ice only where the temperature rises from at or below T_f to above it
    melt = (dT > 0) & (T <= T_FREEZE) & (T1 > T_FREEZE)
    liq1 = np.where(melt, W, liq)
    ice1 = np.where(melt, 0.0, ice)
    # cooling freezes only liquid above the curve at the new temperature
    cool = (dT < 0) & (T1 < T_FREEZE)
    if cool.any():
        elig, kept = _freezable(T, liq, phi, psi, b)
        lmax1 = np.minimum(phi, _liq_max_below(np.where(cool, T1, T_FREEZE - 1.0), phi, psi, b))
        stays = np.minimum(elig, lmax1)
        liq1 = np.where(cool, stays + kept, liq1)
        ice1 = np.where(cool, ice + (elig - stays), ice1)
    return _finish(T, liq, ice, T1, liq1, ice1, touched, H0d, Csol, dz)


#: The phase rules a mode can follow (recipe key ``physics.phase_rule``).
PHASE_RULES = ("change_driven", "equilibrium")

_BLOCKS = {
    ("energy", "change_driven"): _energy_block_change_driven,
    ("energy", "equilibrium"): _energy_block,
    ("temperature", "change_driven"): _temperature_block_change_driven,
    ("temperature", "equilibrium"): _temperature_block,
}


def _block_fn(mode, rule):
    fn = _BLOCKS.get((mode, rule))
    if fn is None:
        raise InputError(f"physics.phase_rule: unknown phase rule {rule!r}; use one of {', '.join(PHASE_RULES)}")
    return fn


def apply_energy_mode(T, liq, ice, dT_target, dz, porosity, psi_sat_m, b, c_solid=None, rule="change_driven"):
    """Impose the enthalpy change of a temperature anomaly and solve temperature and phase.

    .. math:: \\Delta H = C_0\\,\\Delta T_{target}\\,\\Delta z, \\qquad
              H(T_1, \\theta_{liq,1}, \\theta_{ice,1}) = H(T_0, \\theta_{liq,0},
              \\theta_{ice,0}) + \\Delta H

    with C_0 = :func:`heat_capacity` of the starting state and H from :func:`enthalpy`. Water
    is conserved; latent heat can only damp the change (|dT| <= |dT_target|).

    ``rule='change_driven'`` (default): warming below T_f is sensible only; a layer reaching
    T_f with ice is held there while the energy melts ice (H = rho_w L_f theta_liq at T_f), and
    what is left warms the all-liquid layer. Cooling follows the freezing curve, freezing only
    the liquid the curve at the new temperature cannot hold (solved as :func:`solve_enthalpy`
    with the ice present and any liquid above the starting curve as fixed capacities).
    ``rule='equilibrium'``: the starting split is taken as diagnosed at T_0
    (:func:`equilibrate_phase`) and the new state lies on the equilibrium curve
    (:func:`solve_enthalpy`). Cells with ``dT_target == 0``, or a NaN temperature or anomaly,
    are returned unchanged under both rules.

    Parameters
    ----------
    T : array_like
        Starting temperature, K.
    liq, ice : array_like
        Starting liquid and ice (liquid-equivalent) contents, m3 m-3 (>= 0).
    dT_target : array_like
        Temperature anomaly defining the energy change, K.
    dz : array_like
        Layer thickness, m.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).
    c_solid : array_like, optional
        Heat capacity of the solids, J m-3 K-1 (default ``CV_SOLID_DEFAULT``).
    rule : {'change_driven', 'equilibrium'}
        Phase rule (see the module notes).

    Returns
    -------
    SoilChange
        ``(T, liq, ice, frozen_kg_m2, melted_kg_m2, sensible_J_m2, latent_J_m2)``, arrays of
        the broadcast shape; sensible + latent = Delta H within the solver tolerance.

    Raises
    ------
    InputError
        If a cell to be changed has negative or missing water, T <= 0 K, or an invalid
        parameter (the message names it and counts the cells).

    References
    ----------
    .. [1] de Vries (1963) for C; Niu and Yang (2006) for the freezing curve.
    """
    block = _block_fn("energy", rule)
    shape, views = _mode_inputs(T, liq, ice, dT_target, dz, porosity, psi_sat_m, b, c_solid)
    return _run_mode(block, shape, views, "apply_energy_mode")


def apply_temperature_mode(T, liq, ice, dT, dz, porosity, psi_sat_m, b, c_solid=None, rule="change_driven"):
    """Add a temperature anomaly exactly, and change the water phase as the rule requires.

    .. math:: T_1 = T_0 + \\Delta T

    ``rule='change_driven'`` (default): cooling to T_1 < T_f freezes only liquid above the
    supercooled limit at T_1 (Niu and Yang 2006); warming from T_0 <= T_f to T_1 > T_f melts
    all ice; nothing else changes phase. ``rule='equilibrium'``:
    ``(theta_liq, theta_ice) = equilibrate_phase(T_1, ...)``, the split a diagnosing model
    would see, measured from the split it diagnoses at T_0.
    The energy the change implies (sensible and latent, from :func:`enthalpy`) is reported.
    Cells with ``dT == 0``, or a NaN temperature or anomaly, are returned unchanged.

    Parameters
    ----------
    T, liq, ice : array_like
        Starting state: K, m3 m-3, m3 m-3.
    dT : array_like
        Temperature anomaly, K.
    dz, porosity, psi_sat_m, b, c_solid : array_like
        As in :func:`apply_energy_mode`.
    rule : {'change_driven', 'equilibrium'}
        Phase rule (see the module notes).

    Returns
    -------
    SoilChange
        ``(T, liq, ice, frozen_kg_m2, melted_kg_m2, sensible_J_m2, latent_J_m2)``.

    Raises
    ------
    InputError
        As :func:`apply_energy_mode`.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    block = _block_fn("temperature", rule)
    shape, views = _mode_inputs(T, liq, ice, dT, dz, porosity, psi_sat_m, b, c_solid)
    return _run_mode(block, shape, views, "apply_temperature_mode")


# =============================================================================================
# Starting-state checks and limits
# =============================================================================================

#: Tolerance below which a departure from the freezing curve is not reported, m3 m-3.
DISEQUILIBRIUM_TOL = 1e-4


def disequilibrium(T, liq, ice, porosity, psi_sat_m, b, tol=DISEQUILIBRIUM_TOL):
    """Cells whose starting state is not in phase equilibrium (for the ledger).

    A cell is flagged when (T > T_f and ice > tol), or (T < T_f and liq > theta_liq_max(T)
    + tol), or (T <= T_f and ice > tol and liq < theta_liq_max(T) - tol). A layer at exactly
    T_f holding ice with liq >= porosity (the latent plateau) is in equilibrium.

    initgen re-equilibrates only the cells it perturbs; this function only reports.

    Parameters
    ----------
    T : array_like
        Temperature, K.
    liq, ice : array_like
        Liquid and ice (liquid-equivalent) contents, m3 m-3.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters.
    tol : float
        Tolerance, m3 m-3 (default 1e-4: files store float32 and models use slightly
        different constants and freezing curves).

    Returns
    -------
    numpy.ndarray of bool
    """
    T, liq, ice = _f64(T), _f64(liq), _f64(ice)
    lmax = supercooled_liquid_max(T, porosity, psi_sat_m, b)
    return (((T > T_FREEZE) & (ice > tol))
            | ((T < T_FREEZE) & (liq > lmax + tol))
            | ((T <= T_FREEZE) & (ice > tol) & (liq < lmax - tol)))


def equilibrium_shift(T, liq, ice, porosity, psi_sat_m, b):
    r"""Water the equilibrium rule would move between phases in a state, at its own temperature.

    .. math:: \Delta\theta_{ice} = \theta_{ice}^{eq}(T) - \theta_{ice}

    with :math:`\theta^{eq}` from :func:`equilibrate_phase` (Niu and Yang 2006 curve). Positive
    values freeze liquid, negative ones melt ice. Used to report the input's disequilibrium
    (it is not acted on under the change-driven rule).

    Parameters
    ----------
    T : array_like
        Temperature, K.
    liq, ice : array_like
        Liquid and ice (liquid-equivalent) contents, m3 m-3.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters.

    Returns
    -------
    numpy.ndarray
        Ice that would form (> 0) or melt (< 0), m3 m-3 of liquid-water equivalent; NaN where
        T is NaN.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    T, liq, ice = _f64(T), _f64(liq), _f64(ice)
    with np.errstate(invalid="ignore"):
        _, ie = equilibrate_phase(T, liq, ice, porosity, psi_sat_m, b)
    return np.where(np.isfinite(T), ie - ice, np.nan)


def clamp(values, lower=None, upper=None):
    """Clip values to [lower, upper] and count how many were changed.

    Parameters
    ----------
    values : array_like
    lower, upper : array_like, optional
        Bounds (either may be None). NaN values are left as they are and not counted.

    Returns
    -------
    tuple
        ``(values float64 ndarray, count int)``.
    """
    v = _f64(values)
    changed = np.zeros(v.shape, dtype=bool)
    if lower is not None:
        changed |= v < lower
    if upper is not None:
        changed |= v > upper
    n = int(np.count_nonzero(changed))
    return (np.clip(v, lower, upper) if n else v.copy()), n


def clamp_soil_temperature(T, t_min=180.0, t_max=340.0):
    """Clamp soil temperature to [t_min, t_max] K (recipe defaults 180 K and 340 K).

    Returns
    -------
    tuple
        ``(T K, count clamped up to t_min, count clamped down to t_max)``.
    """
    v, n_low = clamp(T, t_min, None)
    v, n_high = clamp(v, None, t_max)
    return v, n_low, n_high


def clamp_snow_temperature(T, t_max=T_FREEZE):
    """Clamp snow temperature to at most T_f = 273.15 K (snow cannot be warmer than melting).

    Returns
    -------
    tuple
        ``(T K, count of clamped cells)``.
    """
    return clamp(T, None, t_max)
