"""Soil water and temperature as files store them, to and from the physics' own units (volumetric
m3 m-3, ice as liquid-water equivalent; kelvin), and the water conventions: ice as stored, totals
and fractions. Conventions and references: :mod:`initgen.science.soil`.
"""

from __future__ import annotations

import numpy as np

from initgen.errors import InputError
from initgen.science.constants import RHO_ICE, RHO_WATER
from initgen.science.soil.properties import _f64
from initgen.science.soil.solver import _valid_porosity, _valid_thickness
from initgen.science.units import temperature_scale_offset, water_amount


def _temperature_units(units, name, key):
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
        Any UDUNITS temperature unit, parsed by :mod:`initgen.science.units` (cf-units): ``K``,
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
    if not np.all(_valid_thickness(dz)):
        raise InputError(f"variable '{name}': layer thickness must be finite and > 0 m; "
                         "check the layer geometry (interfaces or thicknesses) in the layout")
    return dz


def _check_porosity(porosity, name):
    if porosity is None:
        raise InputError(f"variable '{name}': units '{SATURATION_FRACTION}' need the porosity; "
                         "give a porosity (layout role 'porosity', recipe physics.porosity or texture)")
    phi = _f64(porosity)
    if not np.all(_valid_porosity(phi)):
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
    :mod:`initgen.science.constants` (RHO_ICE, RHO_WATER), which names its source.
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
