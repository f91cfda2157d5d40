"""Soil properties: hydraulic parameters (Clapp and Hornberger 1978, Cosby et al. 1984), texture,
organic matter, the heat capacity of the solids and of the soil, and the enthalpy of a layer.
Conventions and references: :mod:`initgen.science.soil`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from initgen.errors import InputError
from initgen.science.constants import (CP_ICE, CV_CLAY_TEXTURE, CV_SAND_TEXTURE, CV_SOLID_DEFAULT, CV_WATER,
                                       LATENT_HEAT_FUSION, RHO_WATER, T_FREEZE)

#: Latent heat of fusion per unit volume of liquid water, J m-3 (RHO_WATER * L_f).
_LV = RHO_WATER * LATENT_HEAT_FUSION
#: Heat capacity of ice per unit liquid-water-equivalent volume, J m-3 K-1 (RHO_WATER * CP_ICE;
#: equals RHO_ICE * CP_ICE per unit of true ice volume).
_CV_ICE_WE = RHO_WATER * CP_ICE
#: Difference of the two above, J m-3 K-1.
_DCV = CV_WATER - _CV_ICE_WE


def _f64(x):
    return np.asarray(x, dtype=np.float64)


def _capacity(c_fixed, liq, ice):
    """Volumetric heat capacity ``c_fixed + rho_w c_w theta_liq + rho_w c_i theta_ice``, J m-3 K-1.

    The one home of the de Vries (1963) mixing sum (see :func:`heat_capacity`) on float64 arrays,
    used by :func:`heat_capacity` and by the mode steps of :mod:`initgen.science.soil.modes`.

    Parameters
    ----------
    c_fixed : numpy.ndarray
        Capacity of what is not soil water, J m-3 K-1: the solids ``(1 - phi) c_s``.
    liq, ice : numpy.ndarray
        Liquid and ice (liquid-equivalent) contents, m3 m-3.

    Returns
    -------
    numpy.ndarray
        C, J m-3 K-1.
    """
    return c_fixed + CV_WATER * liq + _CV_ICE_WE * ice


def _enthalpy_density(C, T, liq):
    """Enthalpy per unit volume, ``C (T - T_f) + rho_w L_f theta_liq``, J m-3.

    :func:`enthalpy` divided by the thickness: the mode steps work on it per cell and multiply by
    the thickness once at the end.

    Parameters
    ----------
    C : numpy.ndarray
        Volumetric heat capacity, J m-3 K-1 (:func:`_capacity`).
    T : numpy.ndarray
        Temperature, K.
    liq : numpy.ndarray
        Liquid content, m3 m-3.

    Returns
    -------
    numpy.ndarray
        H / dz, J m-3, relative to all water frozen at T_f.
    """
    return C * (T - T_FREEZE) + _LV * liq


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
#: a texture class the solids heat capacity of the texture formula; tests/science/test_phase_rules.py
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


def texture_key(name):
    """A texture class name as the tables of this module spell it.

    Parameters
    ----------
    name : str
        Texture class in any case, with blanks, underscores or hyphens between words.

    Returns
    -------
    str
        Lower case, words separated by single blanks.

    Examples
    --------
    >>> texture_key(' Silty_Clay-Loam ')
    'silty clay loam'
    """
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
    sand, clay = TEXTURE_CLASS_CENTROID_PCT[texture_key(name)]
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
        raise InputError("recipe key physics.organic_fraction: must lie in 0..1 (a fraction, not percent)", key="physics.organic_fraction")
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
    row = CLAPP_HORNBERGER_1978.get(texture_key(name))
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
    return _capacity((1.0 - phi) * cs, _f64(theta_liq), _f64(theta_ice))


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
       (:mod:`initgen.science.constants`).
    """
    liq = _f64(theta_liq)
    C = heat_capacity(liq, theta_ice, porosity, c_solid)
    dz = _f64(dz)
    return C * (_f64(T) - T_FREEZE) * dz + _LV * liq * dz
