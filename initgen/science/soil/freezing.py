"""The freezing curve (supercooled liquid water, Niu and Yang 2006), the equilibrium phase split,
the energy of a change, and the starting state's departure from the curve.
Conventions and references: :mod:`initgen.science.soil`.
"""

from __future__ import annotations

import numpy as np

from initgen.science.constants import GRAVITY, LATENT_HEAT_FUSION, T_FREEZE
from initgen.science.soil.properties import _LV, _f64, enthalpy


def _liq_max_below(T, phi, psi_abs, b, T_f=T_FREEZE, cap=None):
    """The Niu-Yang supercooled limit below freezing, the one place its formula is written.

    .. math:: \\theta_s \\left(\\frac{L_f\\,(T_f - T)}{g\\,T\\,|\\psi_s|}\\right)^{-1/b}

    No branch and no error state: meaningful for 0 < T < T_f only (NaN or inf elsewhere; the
    callers choose what applies there). :func:`supercooled_liquid_max` is the public form.

    Parameters
    ----------
    T : numpy.ndarray
        Temperature, K.
    phi : numpy.ndarray
        Porosity theta_s, m3 m-3.
    psi_abs : numpy.ndarray
        Saturated matric suction magnitude |psi_s|, m (already made positive).
    b : numpy.ndarray
        Clapp-Hornberger exponent.
    T_f : float
        Freezing point, K.
    cap : numpy.ndarray, optional
        Upper bound applied with ``numpy.minimum(cap, limit)`` (the porosity, or the water
        that may stay liquid); None for the bare formula.

    Returns
    -------
    numpy.ndarray
        theta_liq_max, m3 m-3.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    x = (LATENT_HEAT_FUSION / GRAVITY) * (T_f - T) / (T * psi_abs)
    lim = phi * np.exp(-np.log(x) / b)
    return lim if cap is None else np.minimum(cap, lim)


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
        lim = _liq_max_below(T, phi, np.abs(_f64(psi_sat_m)), _f64(b), T_f)
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


#: Tolerance below which a departure from the freezing curve is not reported, m3 m-3.
DISEQUILIBRIUM_TOL = 1e-4


def disequilibrium(T, liq, ice, porosity, psi_sat_m, b, tol=DISEQUILIBRIUM_TOL):
    """Cells whose starting state is not in phase equilibrium (for the ledger).

    A cell is flagged when (T > T_f and ice > tol), or (T < T_f and liq > theta_liq_max(T)
    + tol), or (T <= T_f and ice > tol and liq < theta_liq_max(T) - tol). A layer at exactly
    T_f holding ice with liq >= porosity (the latent plateau) is in equilibrium.

    This function only reports; :func:`equilibrium_shift` gives the amounts the pipeline counts.

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


def one_sided_consistent(T, liq, ice, porosity, psi_sat_m, b, tol=1e-9):
    """States a model with a one-sided phase rule holds: no liquid above the supercooled limit
    below T_f (Niu and Yang 2006, capped at the porosity) and no ice above T_f.

    Ice beside liquid below the curve, and both phases at T_f, are consistent. This is the
    consistency the change-driven rule keeps (:func:`~initgen.science.soil.modes.settle_one_sided`
    projects a state onto it).

    Parameters
    ----------
    T : array_like
        Temperature, K (NaN is treated as T_f: consistent).
    liq, ice : array_like
        Liquid and ice (liquid-equivalent) contents, m3 m-3.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).
    tol : float
        Tolerance, m3 m-3.

    Returns
    -------
    numpy.ndarray of bool

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    T, liq, ice = _f64(T), _f64(liq), _f64(ice)
    with np.errstate(invalid="ignore", divide="ignore"):
        lmax = supercooled_liquid_max(np.where(np.isfinite(T), T, T_FREEZE), porosity, psi_sat_m, b)
    return ~(((T < T_FREEZE) & (liq > lmax + tol)) | ((T > T_FREEZE) & (ice > tol)))
